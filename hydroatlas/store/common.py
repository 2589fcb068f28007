"""What the two SQL backends share: the rules for which records are active, record lookups by key, the record
history as versions, retiring and restoring, the import log and the messages of all these.

:class:`SQLStore` holds that logic once; :class:`~hydroatlas.store.geopackage.GeoPackageStore` (SQLite) and
:class:`~hydroatlas.store.postgis.PostGISStore` (PostgreSQL) give it only what differs between them: how a query
runs (:meth:`SQLStore._fetch`, :meth:`SQLStore._execute`), the placeholder of a bound value, the SQL text of a
record's key, how the current version of a record is read, and what a write touches besides the table (the
GeoPackage's ``gpkg_contents.last_change``).
"""

from __future__ import annotations

import json
from abc import abstractmethod
from datetime import datetime, timezone

import numpy as np
import pandas as pd

from ..errors import ParameterError, StoreError
from .base import Store, WriteResult
from .schema import HISTORY_TABLE, TABLES, Table

#: columns of :meth:`SQLStore.retired`
RETIRED_COLUMNS = ["table", "record", "retired_at", "reason"]
#: columns of a geometry check of a point table (:func:`mismatch_frame`), after ``fid`` and the natural key
MISMATCH_COLUMNS = ["x", "y", "geom_x", "geom_y", "problem"]


def q(name: str) -> str:
    """Quote an SQL identifier (some columns, like ``end``, are keywords)."""
    return '"' + name.replace('"', '""') + '"'


def now_text() -> str:
    """The current UTC time as the store writes it: ISO 8601 with milliseconds and 'Z'."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"


def table_spec(table: str) -> Table:
    """The schema entry of ``table``; ParameterError naming the tables for an unknown name."""
    try:
        return TABLES[table]
    except KeyError:
        raise ParameterError(f"unknown table {table!r}; expected one of {sorted(TABLES)}") from None


def settings_rows(settings) -> list[tuple[str, str]]:
    """The rows (key, value) of a new store's settings table: schema version, CRS (WKT 2), length unit, vertical
    datum and the time of creation."""
    from .schema import SCHEMA_VERSION

    return [("schema_version", SCHEMA_VERSION), ("crs", settings.crs.to_wkt()), ("length_unit", settings.length_unit),
            ("vertical_datum", settings.vertical_datum), ("created_at", now_text())]


def version_columns(spec: Table, *, geometry: bool = False) -> list[str]:
    """The columns one version of a record holds (what the history keeps), ``geom`` last when asked for."""
    cols = list(spec.column_names) + list(spec.lifecycle)
    if geometry and spec.geometry:
        cols.append("geom")
    return cols


def mismatch_frame(rows: list[tuple], key: list[str]) -> pd.DataFrame:
    """The frame of a geometry check of a point table: fid, the natural key, x, y, geom_x, geom_y (float; NaN
    when the geometry has no coordinates) and problem, one row per mismatch."""
    frame = pd.DataFrame(rows, columns=["fid", *key, *MISMATCH_COLUMNS])
    for c in ("x", "y", "geom_x", "geom_y"):
        frame[c] = pd.to_numeric(frame[c]).astype(float) if len(frame) else np.array([], dtype=float)
    return frame


class SQLStore(Store):
    """The backend-neutral part of a store kept in an SQL database (see the module docstring).

    A subclass sets :attr:`_param` and ``_in_txn`` and implements :meth:`_fetch`, :meth:`_execute`,
    :meth:`_key_text_sql` and :meth:`_current_version`.
    """

    #: the placeholder of one bound value in this backend's SQL
    _param = "?"
    _in_txn = False

    # -- what a backend gives ------------------------------------------------------------------------------------
    @abstractmethod
    def _fetch(self, sql: str, params=()) -> list[tuple]:
        """Every row of a query (placeholders :attr:`_param`)."""

    @abstractmethod
    def _execute(self, sql: str, params=()) -> int:
        """Run one writing statement; returns the number of rows it changed."""

    @abstractmethod
    def _key_text_sql(self, spec: Table, alias: str) -> str:
        """SQL of a record's id as the commands take it: its natural-key values as text joined by '/'."""

    @abstractmethod
    def _current_version(self, spec: Table, fid: int) -> tuple[dict, str]:
        """The current values of record ``fid`` (:func:`version_columns`) and its key as the history's
        ``record_key`` holds it (compact JSON array)."""

    def _touched(self, table: str) -> None:
        """Note that a write changed ``table`` (the GeoPackage keeps ``gpkg_contents.last_change``)."""

    def _require_transaction(self, what: str) -> None:
        if not self._in_txn:
            raise StoreError(f"{what} must run inside store.transaction()")

    # -- reading -------------------------------------------------------------------------------------------------
    def _spec(self, table: str) -> Table:
        return table_spec(table)

    def read(self, table: str, columns: list[str] | None = None, *, include_retired: bool = False) -> pd.DataFrame:
        """Rows of ``table`` in import order; retired records (and rows of retired wells, zones or springs)
        are left out unless ``include_retired``."""
        spec = self._spec(table)
        cols = list(columns) if columns else list(spec.column_names)
        bad = set(cols) - set(spec.column_names) - set(spec.lifecycle)
        if bad:
            raise ParameterError(f"table {table} has no column(s) {sorted(bad)}")
        where = "" if include_retired else self._active_where(spec, "t")
        sql = f"SELECT {', '.join('t.' + q(c) for c in cols)} FROM {q(table)} AS t{where} ORDER BY t.fid"
        frame = pd.DataFrame.from_records(self._fetch(sql), columns=cols)
        for c in spec.columns:
            if c.name in frame and c.sql_type == "REAL":
                frame[c.name] = pd.to_numeric(frame[c.name]).astype(float)
        return frame

    def _has_retired(self, spec: Table) -> bool:
        """True when this table or a parent it cascades from holds a retired row."""
        if spec.provenance and self._fetch(f"SELECT 1 FROM {q(spec.name)} WHERE retired_at IS NOT NULL LIMIT 1"):
            return True
        return any(self._has_retired(TABLES[parent]) for _, parent, _ in spec.cascade_parents)

    def _active_where(self, spec: Table, alias: str) -> str:
        conds = self._active_conditions(spec, alias)
        return (" WHERE " + " AND ".join(conds)) if conds else ""

    def _active_conditions(self, spec: Table, alias: str) -> list[str]:
        """SQL conditions on the rows of ``spec`` (as ``alias``) that keep the active ones: not retired, and no
        parent they cascade from retired (none at all while the tables hold no retired row)."""
        if not spec.provenance or not self._has_retired(spec):
            return []
        conds = [f"{alias}.retired_at IS NULL"]
        for i, (local, parent, remote) in enumerate(spec.cascade_parents):
            pspec = TABLES[parent]
            if not self._has_retired(pspec):
                continue
            pa = f"{alias}_{i}"
            join = " AND ".join(f"{pa}.{q(r)} = {alias}.{q(lc)}" for lc, r in zip(local, remote))
            inner = " AND ".join([join] + self._active_conditions(pspec, pa))
            conds.append(f"EXISTS (SELECT 1 FROM {q(parent)} AS {pa} WHERE {inner})")
        return conds

    @abstractmethod
    def _geometries(self, table: str, where: str) -> list:
        """The shapely geometries of ``table``'s rows that pass ``where``, in fid order (backend SQL)."""

    def read_geometries(self, table: str):
        """A GeoDataFrame of a feature table's active rows in the store CRS."""
        import geopandas as gpd

        spec = self._spec(table)
        if not spec.geometry:
            raise ParameterError(f"table {table} has no geometry")
        frame = self.read(table)
        geoms = self._geometries(table, self._active_where(spec, "t"))
        return gpd.GeoDataFrame(frame, geometry=geoms, crs=self.settings.crs)

    def count(self, table: str) -> int:
        self._spec(table)
        return self._fetch(f"SELECT count(*) FROM {q(table)}")[0][0]

    # -- record lifecycle ----------------------------------------------------------------------------------------
    def find_records(self, table: str, ids: list[str]) -> dict[str, int]:
        """fid of each record named by ``ids`` (its natural-key values joined by '/').

        Raises ParameterError naming the ids that match no record.
        """
        spec = self._spec(table)
        if not spec.key or not spec.provenance:
            raise ParameterError(f"records of {table} have no key to name them by")
        sql = (f"SELECT fid FROM {q(table)} AS t WHERE {self._key_text_sql(spec, 't')} = {self._param} "
               "ORDER BY fid LIMIT 1")
        found, missing = {}, []
        for ident in ids:
            rows = self._fetch(sql, (ident,))
            if rows:
                found[ident] = rows[0][0]
            else:
                missing.append(ident)
        if missing:
            raise ParameterError(f"no {table} record {', '.join(map(repr, missing))}; name a record by its key "
                                 f"({'/'.join(spec.key)})")
        return found

    def set_retired(self, table: str, ids: list[str], *, reason: str | None) -> int:
        """Retire (``reason`` given) or restore (``reason`` None) records; returns how many changed."""
        self._require_transaction("set_retired")
        spec = self._spec(table)
        changed = sum(self._set_retired_row(table, ident, fid, reason)
                      for ident, fid in self.find_records(table, ids).items())
        self._touched(spec.name)
        return changed

    def _set_retired_row(self, table: str, ident: str, fid: int, reason: str | None) -> int:
        p = self._param
        if reason is None:
            return self._execute(f"UPDATE {q(table)} SET retired_at = NULL, retired_reason = NULL "
                                 f"WHERE fid = {p} AND retired_at IS NOT NULL", (fid,))
        return self._execute(f"UPDATE {q(table)} SET retired_at = {p}, retired_reason = {p} "
                             f"WHERE fid = {p} AND retired_at IS NULL", (now_text(), reason, fid))

    def retired(self) -> pd.DataFrame:
        """Every retired record: table, key, when and why."""
        rows = []
        for spec in TABLES.values():
            if not spec.provenance or not spec.key:
                continue
            for key, at, reason in self._fetch(
                    f"SELECT {self._key_text_sql(spec, 't')}, retired_at, retired_reason FROM {q(spec.name)} AS t "
                    "WHERE retired_at IS NOT NULL ORDER BY fid"):
                rows.append({"table": spec.name, "record": key, "retired_at": at, "reason": reason})
        return pd.DataFrame(rows, columns=RETIRED_COLUMNS)

    def record_versions(self, table: str, ident: str) -> list[dict]:
        """Every version of one record, oldest first; the last is the current one."""
        spec = self._spec(table)
        fid = self.find_records(table, [ident])[ident]
        current, key = self._current_version(spec, fid)
        p = self._param
        out = []
        for action, at, old, new_file, reason in self._fetch(
                f"SELECT action, changed_at, old_version, new_source_file, reason FROM {q(HISTORY_TABLE)} "
                f"WHERE table_name = {p} AND record_key = {p} ORDER BY fid", (table, key)):
            version = json.loads(old)
            version.pop("geom", None)
            out.append({"version": len(out) + 1, "replaced_at": at, "replaced_by": action,
                        "replaced_by_file": new_file, "reason": reason, **version})
        out.append({"version": len(out) + 1, "replaced_at": None, "replaced_by": None, "replaced_by_file": None,
                    "reason": None, **current})
        return out

    def log_import(self, kind: str, file: str, sha256: str, result: WriteResult) -> None:
        self._require_transaction("log_import")
        self._execute("INSERT INTO imports (kind, file, sha256, rows, inserted, updated, imported_at) VALUES ("
                      + ", ".join([self._param] * 7) + ")",
                      (kind, file, sha256, result.rows, result.inserted, result.updated, now_text()))
        self._touched("imports")

    # -- change markers ------------------------------------------------------------------------------------------
    def change_marker(self, table: str) -> str:
        """Text that changes whenever a row of ``table`` is inserted, changed, retired, restored or deleted, read
        without scanning the table (:func:`hydroatlas.products.table_digests` hashes it).

        This default: the table's row count and largest ``fid``, and the ``fid`` of its latest record-history
        entry (every update, retirement, restoration and deletion of a record adds one, by the history
        triggers).
        """
        self._spec(table)
        rows, last = self._fetch(f"SELECT count(*), max(fid) FROM {q(table)}")[0]
        return f"{table}|rows={rows}|last_fid={last or 0}|last_history_fid={self._last_history_fid(table)}"

    def _last_history_fid(self, table: str) -> int:
        # through the index record_history_by_table (table_name, fid): one index probe
        changed = self._fetch(f"SELECT max(fid) FROM {q(HISTORY_TABLE)} WHERE table_name = {self._param}",
                              (table,))[0][0]
        return changed or 0
