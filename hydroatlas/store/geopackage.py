"""The default backend: one GeoPackage file (OGC 12-128r18, version 1.4).

Why sqlite3 by hand and not GDAL/pyogrio for writing: an import must be one
transaction over feature layers and attribute tables together, with foreign
keys, CHECK constraints and ON CONFLICT upserts on natural keys; GDAL's writer
offers none of that. The GeoPackage parts written here are the required
system tables, the feature-table registration and the geometry blob header
(spec clause 2.1.3); the WKB inside comes from shapely. GDAL-based tools read
the result as ordinary GeoPackage layers.
"""

from __future__ import annotations

import os
import sqlite3
import struct
from contextlib import contextmanager
from pathlib import Path
from typing import Callable, Iterator

import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from ..errors import NotAStoreError, ParameterError, StoreError
from . import gpkg_sql
from .base import StoreSettings, WriteResult
from .common import SQLStore, now_text as _now, q, settings_rows, version_columns
from .schema import HISTORY_TABLE, TABLES, Table

GPKG_APPLICATION_ID = 0x47504B47  # "GPKG"
GPKG_USER_VERSION = 10400          # GeoPackage 1.4
SETTINGS_TABLE = "hydroatlas_settings"
CUSTOM_SRS_ID = 100000
CHUNK_ROWS = 50_000

_ENVELOPE_BYTES = {0: 0, 1: 32, 2: 48, 3: 48, 4: 64}


def encode_geometries(geoms, srs_id: int) -> list[bytes | None]:
    """GeoPackage binary blobs (little-endian header, xy envelope except for points).

    An empty geometry gets the empty flag (bit 4) and no envelope, one of the two
    encodings requirement 149 allows (the one GDAL writes); an empty point's WKB
    holds NaN coordinates as the spec asks. None stays None (SQL NULL).
    """
    geoms = np.asarray(geoms, dtype=object)
    wkbs = shapely.to_wkb(geoms, byte_order=1, output_dimension=2)
    type_ids = shapely.get_type_id(geoms)
    empty = shapely.is_empty(geoms)
    bounds = shapely.bounds(geoms)
    blobs = []
    for wkb, type_id, is_empty, (minx, miny, maxx, maxy) in zip(wkbs, type_ids, empty, bounds):
        if wkb is None:
            blobs.append(None)
        elif is_empty:
            blobs.append(b"GP\x00\x11" + struct.pack("<i", srs_id) + wkb)
        elif type_id == 0:  # point: no envelope
            blobs.append(b"GP\x00\x01" + struct.pack("<i", srs_id) + wkb)
        else:
            blobs.append(b"GP\x00\x03" + struct.pack("<i4d", srs_id, minx, maxx, miny, maxy) + wkb)
    return blobs


def decode_geometries(blobs) -> np.ndarray:
    """Shapely geometries from GeoPackage binary blobs; NULL gives None, the empty flag an empty geometry."""
    wkbs, empty = [], []
    for blob in blobs:
        if blob is None:
            wkbs.append(None)
            empty.append(False)
            continue
        flags = blob[3]
        start = 8 + _ENVELOPE_BYTES[(flags >> 1) & 0b111]
        wkbs.append(bytes(blob[start:]))
        empty.append(bool(flags & 0b1_0000))
    geoms = shapely.from_wkb(wkbs)
    for i in np.flatnonzero(np.asarray(empty, dtype=bool)):
        if not geoms[i].is_empty:  # the flag wins over a writer that left coordinates behind
            geoms[i] = shapely.from_wkt(f"{geoms[i].geom_type.upper()} EMPTY")
    return geoms


def _column_sql(col) -> str:
    parts = [q(col.name), col.sql_type]
    if col.not_null:
        parts.append("NOT NULL")
    if col.default is not None:
        parts.append(f"DEFAULT {col.default}")
    return " ".join(parts)


def table_ddl(spec: Table) -> list[str]:
    """CREATE statements for one table and its natural-key index."""
    cols = ["fid INTEGER PRIMARY KEY AUTOINCREMENT"]
    if spec.geometry:
        cols.append(f"geom {spec.geometry}")
    cols += [_column_sql(c) for c in spec.columns]
    if spec.provenance:
        cols += ["attrs TEXT", "source_file TEXT NOT NULL", "source_row INTEGER NOT NULL"]
        cols += [f"{q(c)} TEXT" for c in spec.lifecycle]
    for check in spec.checks:
        cols.append(f"CHECK ({check})")
    for local, parent, remote in spec.foreign_keys:
        cols.append(f"FOREIGN KEY ({', '.join(map(q, local))}) REFERENCES {q(parent)} "
                    f"({', '.join(map(q, remote))})")
    stmts = [f"CREATE TABLE {q(spec.name)} (\n  " + ",\n  ".join(cols) + "\n)"]
    if spec.key:
        stmts.append(f"CREATE UNIQUE INDEX {q(spec.name + '_key')} ON {q(spec.name)} "
                     f"({', '.join(map(q, spec.key))})")
    return stmts + history_triggers(spec)


def history_triggers(spec: Table) -> list[str]:
    """Triggers that copy a record's previous version into the history table before it changes or goes.

    Triggers (not Python) so that every writer is covered: an import, retire and
    restore, and a desktop GIS editing the GeoPackage directly.
    """
    if not spec.provenance or not spec.key:
        return []
    cols = version_columns(spec, geometry=True)
    old = ", ".join(f"'{c}', " + (f"hex(OLD.{q(c)})" if c == "geom" else f"OLD.{q(c)}") for c in cols)
    key = ", ".join(f"OLD.{q(c)}" for c in spec.key)
    differs = " OR ".join(f"OLD.{q(c)} IS NOT NEW.{q(c)}" for c in cols)
    action = ("CASE WHEN OLD.retired_at IS NULL AND NEW.retired_at IS NOT NULL THEN 'retire' "
              "WHEN OLD.retired_at IS NOT NULL AND NEW.retired_at IS NULL THEN 'restore' ELSE 'update' END")
    insert = (f"INSERT INTO {q(HISTORY_TABLE)} (table_name, record_key, action, changed_at, old_version, "
              "new_source_file, reason) VALUES ")
    now = "strftime('%Y-%m-%dT%H:%M:%fZ','now')"
    name = spec.name
    return [
        f"CREATE TRIGGER {q(name + '_keep_history_update')} BEFORE UPDATE ON {q(name)} WHEN {differs} BEGIN "
        f"{insert}('{name}', json_array({key}), {action}, {now}, json_object({old}), "
        "CASE WHEN OLD.retired_at IS NOT NEW.retired_at THEN NULL ELSE NEW.source_file END, "
        f"CASE WHEN NEW.retired_at IS NOT NULL THEN NEW.retired_reason END); END",
        f"CREATE TRIGGER {q(name + '_keep_history_delete')} BEFORE DELETE ON {q(name)} BEGIN "
        f"{insert}('{name}', json_array({key}), 'delete', {now}, json_object({old}), NULL, NULL); END",
    ]


_GPKG_SYSTEM_DDL = [
    """CREATE TABLE gpkg_spatial_ref_sys (
      srs_name TEXT NOT NULL, srs_id INTEGER PRIMARY KEY, organization TEXT NOT NULL,
      organization_coordsys_id INTEGER NOT NULL, definition TEXT NOT NULL, description TEXT)""",
    """CREATE TABLE gpkg_contents (
      table_name TEXT NOT NULL PRIMARY KEY, data_type TEXT NOT NULL, identifier TEXT UNIQUE,
      description TEXT DEFAULT '',
      last_change DATETIME NOT NULL DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now')),
      min_x DOUBLE, min_y DOUBLE, max_x DOUBLE, max_y DOUBLE, srs_id INTEGER,
      CONSTRAINT fk_gc_r_srs_id FOREIGN KEY (srs_id) REFERENCES gpkg_spatial_ref_sys(srs_id))""",
    """CREATE TABLE gpkg_geometry_columns (
      table_name TEXT NOT NULL, column_name TEXT NOT NULL, geometry_type_name TEXT NOT NULL,
      srs_id INTEGER NOT NULL, z TINYINT NOT NULL, m TINYINT NOT NULL,
      CONSTRAINT pk_geom_cols PRIMARY KEY (table_name, column_name),
      CONSTRAINT uk_gc_table_name UNIQUE (table_name),
      CONSTRAINT fk_gc_tn FOREIGN KEY (table_name) REFERENCES gpkg_contents(table_name),
      CONSTRAINT fk_gc_srs FOREIGN KEY (srs_id) REFERENCES gpkg_spatial_ref_sys (srs_id))""",
]

_WGS84_WKT = CRS.from_epsg(4326).to_wkt("WKT1_GDAL")


def _srs_row(crs: CRS) -> tuple:
    epsg = crs.to_epsg(min_confidence=90)
    wkt = crs.to_wkt("WKT1_GDAL") or crs.to_wkt()
    if epsg:
        return (crs.name, epsg, "EPSG", epsg, wkt, crs.name)
    return (crs.name, CUSTOM_SRS_ID, "NONE", CUSTOM_SRS_ID, wkt, crs.name)


class GeoPackageStore(SQLStore):
    """A store in one GeoPackage file; open with :func:`hydroatlas.open_store`."""

    def __init__(self, path: str | os.PathLike, conn: sqlite3.Connection, settings: StoreSettings,
                 srs_id: int):
        self.location = str(path)
        self._conn = conn
        self.settings = settings
        self.srs_id = srs_id
        self._in_txn = False

    # -- creation and opening -------------------------------------------------
    @classmethod
    def create(cls, path, settings: StoreSettings) -> "GeoPackageStore":
        path = Path(path)
        if path.exists():
            raise StoreError(f"{path} already exists; choose a new file name for the store")
        if not path.parent.exists():
            raise StoreError(f"folder {path.parent} does not exist")
        try:
            conn = cls._connect(path)
        except sqlite3.Error as exc:
            path.unlink(missing_ok=True)
            raise (gpkg_sql.friendly_sqlite_error(exc, path) or exc) from None
        try:
            gpkg_sql.use_wal(conn)  # readers go on while an import writes
            conn.execute("BEGIN")
            conn.execute(f"PRAGMA application_id = {GPKG_APPLICATION_ID}")
            conn.execute(f"PRAGMA user_version = {GPKG_USER_VERSION}")
            for stmt in _GPKG_SYSTEM_DDL:
                conn.execute(stmt)
            srs = [
                ("Undefined cartesian SRS", -1, "NONE", -1, "undefined", "undefined cartesian coordinate reference system"),
                ("Undefined geographic SRS", 0, "NONE", 0, "undefined", "undefined geographic coordinate reference system"),
                ("WGS 84 geodetic", 4326, "EPSG", 4326, _WGS84_WKT, "longitude/latitude coordinates in decimal degrees on the WGS 84 spheroid"),
            ]
            row = _srs_row(settings.crs)
            if row[1] != 4326:
                srs.append(row)
            conn.executemany("INSERT INTO gpkg_spatial_ref_sys VALUES (?,?,?,?,?,?)", srs)
            srs_id = row[1]
            conn.execute(f"CREATE TABLE {SETTINGS_TABLE} (key TEXT PRIMARY KEY, value TEXT NOT NULL)")
            conn.executemany(f"INSERT INTO {SETTINGS_TABLE} VALUES (?, ?)", settings_rows(settings))
            for spec in TABLES.values():
                for stmt in table_ddl(spec):
                    conn.execute(stmt)
                conn.execute(
                    "INSERT INTO gpkg_contents (table_name, data_type, identifier, description, last_change, srs_id)"
                    " VALUES (?, ?, ?, ?, ?, ?)",
                    (spec.name, "features" if spec.geometry else "attributes", spec.name,
                     spec.description, _now(), srs_id if spec.geometry else None))
                if spec.geometry:
                    conn.execute("INSERT INTO gpkg_geometry_columns VALUES (?, 'geom', ?, ?, 0, 0)",
                                 (spec.name, spec.geometry, srs_id))
                    gpkg_sql.add_spatial_index(conn, spec.name, "geom")
            conn.execute("COMMIT")
        except BaseException as exc:
            conn.close()
            path.unlink(missing_ok=True)
            if isinstance(exc, sqlite3.Error) and gpkg_sql.friendly_sqlite_error(exc, path):
                raise gpkg_sql.friendly_sqlite_error(exc, path) from None
            raise
        return cls(path, conn, settings, srs_id)

    @classmethod
    def open(cls, path) -> "GeoPackageStore":
        path = Path(path)
        if not path.is_file():
            raise NotAStoreError(f"{path} does not exist; create a store with 'hydroatlas init {path} --crs EPSG:NNNN'")
        gpkg_sql.check_sqlite_file(path)
        conn = None
        try:
            conn = cls._connect(path, read_only=not gpkg_sql.is_writable(path))
            gpkg_sql.use_wal(conn)  # a store made before WAL, or rewritten by another tool
            app_id = conn.execute("PRAGMA application_id").fetchone()[0]
            has_settings = conn.execute(
                "SELECT count(*) FROM sqlite_master WHERE type='table' AND name=?", (SETTINGS_TABLE,)).fetchone()[0]
            if app_id != GPKG_APPLICATION_ID or not has_settings:
                conn.close()
                raise NotAStoreError(f"{path} is not a hydroatlas store (a GeoPackage made by "
                                     "'hydroatlas init' is expected)")
            values = dict(conn.execute(f"SELECT key, value FROM {SETTINGS_TABLE}").fetchall())
            srs_id = conn.execute("SELECT srs_id FROM gpkg_geometry_columns WHERE table_name='wells'").fetchone()[0]
        except sqlite3.Error as exc:
            if conn is not None:
                conn.close()
            friendly = gpkg_sql.friendly_sqlite_error(exc, path)
            raise (friendly or NotAStoreError(f"{path} is not a hydroatlas store (not a GeoPackage/SQLite file)")
                   ) from None
        settings = StoreSettings(CRS.from_wkt(values["crs"]), values["length_unit"], values["vertical_datum"])
        return cls(path, conn, settings, srs_id)

    @staticmethod
    def _connect(path, *, read_only: bool = False) -> sqlite3.Connection:
        # GeoPackage SQL functions (for R-tree triggers, ours or a GIS's) and the busy timeout
        conn = gpkg_sql.connect(path, read_only=read_only)
        conn.execute("PRAGMA foreign_keys = ON")
        conn.execute("PRAGMA synchronous = NORMAL")
        conn.execute("PRAGMA cache_size = -262144")  # 256 MiB page cache for large imports
        return conn

    @property
    def schema_version(self) -> str:
        from .upgrade import read_version

        return read_version(self._conn)

    # -- reading --------------------------------------------------------------
    def _fetch(self, sql: str, params=()) -> list[tuple]:
        return self._conn.execute(sql, params).fetchall()

    def _execute(self, sql: str, params=()) -> int:
        return self._conn.execute(sql, params).rowcount

    def _key_text_sql(self, spec: Table, alias: str) -> str:
        return " || '/' || ".join(f"CAST({alias}.{q(c)} AS TEXT)" for c in spec.key)

    def _current_version(self, spec: Table, fid: int) -> tuple[dict, str]:
        import json

        cols = version_columns(spec)
        current = dict(zip(cols, self._conn.execute(
            f"SELECT {', '.join(map(q, cols))} FROM {q(spec.name)} WHERE fid = ?", (fid,)).fetchone()))
        # the text SQLite's json_array() gives the history triggers' record_key
        return current, json.dumps([current[c] for c in spec.key], ensure_ascii=False, separators=(",", ":"))

    def _touched(self, table: str) -> None:
        self._conn.execute("UPDATE gpkg_contents SET last_change=? WHERE table_name=?", (_now(), table))

    def _geometries(self, table: str, where: str) -> list:
        blobs = [r[0] for r in self._conn.execute(f"SELECT t.geom FROM {q(table)} AS t{where} ORDER BY t.fid")]
        return list(decode_geometries(blobs)) if blobs else []

    def snapshot(self) -> dict[str, list[tuple]]:
        """Every row of every table, for tests that prove nothing changed."""
        out = {}
        for name in TABLES:
            out[name] = self._conn.execute(f"SELECT * FROM {q(name)} ORDER BY fid").fetchall()
        out["gpkg_contents"] = self._conn.execute("SELECT * FROM gpkg_contents ORDER BY table_name").fetchall()
        return out

    # -- writing --------------------------------------------------------------
    @contextmanager
    def transaction(self) -> Iterator["GeoPackageStore"]:
        if self._in_txn:
            raise StoreError("nested transactions are not supported")
        gpkg_sql.begin_write(self._conn, self.location)  # BEGIN IMMEDIATE; a lock or read-only store: StoreError
        self._in_txn = True
        try:
            yield self
        except sqlite3.Error as exc:
            self._rollback()
            friendly = gpkg_sql.friendly_sqlite_error(exc, self.location)
            if friendly is None:
                raise
            raise friendly from exc
        except BaseException:
            self._rollback()
            raise
        else:
            gpkg_sql.commit_write(self._conn, self.location)
        finally:
            self._in_txn = False

    def _rollback(self) -> None:
        try:
            self._conn.execute("ROLLBACK")
        except sqlite3.Error:
            pass  # SQLite has already rolled back (a full disk or an I/O error can end the transaction itself)

    def _execute_chunk(self, sql: str, rows: list[tuple]) -> None:
        self._conn.executemany(sql, rows)

    def upsert(self, table: str, frame: pd.DataFrame, *, geometry=None,
               progress: Callable[[int], None] | None = None, keep_when_null: tuple[str, ...] = (),
               merge_attrs: bool = True) -> WriteResult:
        if not self._in_txn:
            raise StoreError("upsert must run inside store.transaction()")
        spec = self._spec(table)
        cols = [c for c in spec.column_names if c in frame.columns]
        missing = [c.name for c in spec.columns if c.not_null and c.name not in cols and c.default is None]
        if missing:
            raise ParameterError(f"rows for {table} lack column(s) {missing}")
        arrays = [_sql_values(frame[c]) for c in cols]
        if spec.geometry:
            if geometry is None:
                raise ParameterError(f"rows for {table} need geometries")
            cols = ["geom"] + cols
            arrays = [encode_geometries(geometry, self.srs_id)] + arrays
        # Columns holding one value in every row are written as SQL literals: binding
        # them per row is most of the cost of a large insert.
        slots, bound = [], []
        for name, values in zip(cols, arrays):
            literal = _constant_literal(values)
            slots.append(literal if literal is not None else "?")
            if literal is None:
                bound.append(values)
        arrays = bound
        sql = f"INSERT INTO {q(table)} ({', '.join(map(q, cols))}) VALUES ({', '.join(slots)})"
        if spec.key:
            changeable = [c for c in cols if c not in spec.key and c not in ("source_file", "source_row")]
            tq = q(table)
            new_value = {}
            for c in changeable:
                if c == "attrs" and merge_attrs:
                    new_value[c] = (f"CASE WHEN excluded.attrs IS NULL THEN {tq}.attrs WHEN {tq}.attrs IS NULL "
                                    f"THEN excluded.attrs ELSE json_patch({tq}.attrs, excluded.attrs) END")
                elif c in keep_when_null:
                    new_value[c] = f"COALESCE(excluded.{q(c)}, {tq}.{q(c)})"
                else:
                    new_value[c] = f"excluded.{q(c)}"
            sets = [f"{q(c)} = {new_value[c]}" for c in changeable]
            sets += [f"{q(c)} = excluded.{q(c)}" for c in ("source_file", "source_row") if c in cols]
            differs = " OR ".join(f"{tq}.{q(c)} IS NOT ({new_value[c]})" for c in changeable) or "0"
            sql += (f" ON CONFLICT ({', '.join(map(q, spec.key))}) DO UPDATE SET {', '.join(sets)}"
                    f" WHERE {differs}")
        before = self.count(table)
        history_before = self.count(HISTORY_TABLE)
        rows = list(zip(*arrays)) if arrays else []
        for start in range(0, len(rows), CHUNK_ROWS):
            chunk = rows[start:start + CHUNK_ROWS]
            self._execute_chunk(sql, chunk)
            if progress:
                progress(len(chunk))
        inserted = self.count(table) - before
        # every real update leaves exactly one earlier version in the history table
        updated = self.count(HISTORY_TABLE) - history_before
        if spec.geometry and rows:
            self._refresh_extent(table)
        return WriteResult(len(rows), inserted, updated)

    def _refresh_extent(self, table: str) -> None:
        blobs = [r[0] for r in self._conn.execute(f"SELECT geom FROM {q(table)}")]
        # NULL and empty geometries have no extent; none at all leaves the extent NULL
        minx, miny, maxx, maxy = (None if np.isnan(v) else float(v)
                                  for v in shapely.total_bounds(decode_geometries(blobs)))
        self._conn.execute(
            "UPDATE gpkg_contents SET min_x=?, min_y=?, max_x=?, max_y=?, last_change=? WHERE table_name=?",
            (minx, miny, maxx, maxy, _now(), table))

    def close(self) -> None:
        if self._conn is not None:
            self._conn.close()
            self._conn = None


def _constant_literal(values: list) -> str | None:
    """SQL literal of a column whose values are all equal (None, int, float or str), else None."""
    if len(values) < 2:
        return None
    first = values[0]
    if first is not None and not isinstance(first, (str, int, float)) or isinstance(first, bool):
        return None
    if isinstance(first, float) and first != first:
        return None
    try:
        if values.count(first) != len(values):
            return None
    except TypeError:
        return None
    if first is None:
        return "NULL"
    if isinstance(first, str):
        return "'" + first.replace("'", "''") + "'"
    if type(first) is int or (isinstance(first, float) and np.isfinite(first)):
        return repr(first)
    return None


def _sql_values(series: pd.Series) -> list:
    """Python values for sqlite3: NaN and missing become None, numpy scalars become builtins."""
    if pd.api.types.is_float_dtype(series.dtype):
        values = series.to_numpy(dtype=float)
        out = values.tolist()
        if np.isnan(values).any():
            out = [None if v != v else v for v in out]
        return out
    if pd.api.types.is_integer_dtype(series.dtype) and not series.isna().any():
        return series.to_numpy().tolist()
    if pd.api.types.is_bool_dtype(series.dtype):
        return series.astype(int).tolist()
    obj = series.astype(object)
    return obj.where(series.notna(), None).tolist()
