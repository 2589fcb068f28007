"""A whole store copied to a new one on either backend (GeoPackage <-> PostGIS), losing nothing.

Every table of :mod:`hydroatlas.store.schema` is copied row by row with its ``fid``: the records with their
provenance (``attrs``, ``source_file``, ``source_row``) and retirement, the record history (its JSON text as it
is), the import log, the product registry, and every row of the settings table. Geometries keep their
coordinates exactly (WKB). Keeping ``fid`` keeps the order of the rows, the link between a record's versions,
and the table digests of the product registry (:mod:`hydroatlas.products`): products recorded in the source
are as fresh in the copy.

The copy is written in one transaction into a store created for it; the destination must not hold a store yet.
If the copy fails, the new store is removed again (the file, or the tables made in the database).

What is not copied is what each backend makes for itself: a GeoPackage's system tables (``gpkg_contents``,
spatial indexes; the layer extents are computed for the copy) and PostGIS's catalogue.
"""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path
from typing import Callable, Iterator

import numpy as np
import shapely

from .base import Store
from .geopackage import q
from .schema import TABLES, Table

#: rows read and written at a time (memory stays bounded whatever the size of the store)
CHUNK_ROWS = 50_000
SETTINGS_TABLE = "hydroatlas_settings"


def _columns(spec: Table) -> list[str]:
    return list(spec.column_names) + list(spec.lifecycle)


def _is_postgis(store: Store) -> bool:
    from .postgis import PostGISStore

    return isinstance(store, PostGISStore)


# -- reading --------------------------------------------------------------------------------------------------------
def iter_rows(store: Store, table: str, *, chunk: int = CHUNK_ROWS) -> Iterator[list[tuple]]:
    """Every row of ``table`` in fid order, in chunks: (fid, geometry WKB or None (feature tables only),
    the table's columns, then ``retired_at`` and ``retired_reason``); retired records included."""
    spec = TABLES[table]
    cols = ", ".join(q(c) for c in _columns(spec))
    if _is_postgis(store):
        geom = "ST_AsBinary(geom, 'NDR'), " if spec.geometry else ""
        with _reading(store), store._pg.cursor(name=f"hydroatlas_copy_{table}") as cur:  # server side: streamed
            cur.itersize = chunk
            cur.execute(f"SELECT fid, {geom}{cols} FROM {q(table)} ORDER BY fid")
            while True:
                rows = cur.fetchmany(chunk)
                if not rows:
                    return
                if spec.geometry:
                    rows = [(r[0], None if r[1] is None else bytes(r[1]), *r[2:]) for r in rows]
                yield rows
    else:
        from .geopackage import decode_geometries

        geom = "geom, " if spec.geometry else ""
        cur = store._conn.execute(f"SELECT fid, {geom}{cols} FROM {q(table)} ORDER BY fid")
        while True:
            rows = cur.fetchmany(chunk)
            if not rows:
                return
            if spec.geometry:
                geoms = decode_geometries([r[1] for r in rows])
                wkbs = shapely.to_wkb(np.asarray(geoms, dtype=object), byte_order=1, output_dimension=2)
                rows = [(r[0], w, *r[2:]) for r, w in zip(rows, wkbs)]
            yield rows


@contextmanager
def _reading(store: Store):
    """One read-only snapshot of the whole store (a consistent copy while others write); nests in an open one."""
    if _is_postgis(store):
        from psycopg.pq import TransactionStatus

        if store._pg.info.transaction_status != TransactionStatus.IDLE:
            yield
            return
        store._pg.execute("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY")
        try:
            yield
        finally:
            store._pg.execute("COMMIT")
    else:
        if store._conn.in_transaction:
            yield
            return
        store._conn.execute("BEGIN")
        try:
            yield
        finally:
            store._conn.execute("COMMIT")


def settings_rows(store: Store) -> list[tuple[str, str]]:
    """Every row (key, value) of the store's settings table, by key."""
    if _is_postgis(store):
        return store.settings_rows()
    return [tuple(r) for r in store._conn.execute(f"SELECT key, value FROM {SETTINGS_TABLE} ORDER BY key")]


def dump_table(store: Store, table: str) -> list[tuple]:
    """Every row of ``table`` as :func:`iter_rows` gives it, in one list (for comparing stores in tests)."""
    return [row for rows in iter_rows(store, table) for row in rows]


# -- writing --------------------------------------------------------------------------------------------------------
def _write_gpkg(store, table: str, rows: list[tuple]) -> None:
    from .geopackage import encode_geometries

    spec = TABLES[table]
    cols = ["fid"] + (["geom"] if spec.geometry else []) + _columns(spec)
    if spec.geometry:
        geoms = shapely.from_wkb([r[1] for r in rows])
        blobs = encode_geometries(geoms, store.srs_id)
        rows = [(r[0], b, *r[2:]) for r, b in zip(rows, blobs)]
    store._conn.executemany(f"INSERT INTO {q(table)} ({', '.join(map(q, cols))}) VALUES ({', '.join('?' * len(cols))})",
                            rows)


def _write_postgis(store, table: str, rows: list[tuple]) -> None:
    spec = TABLES[table]
    cols = ["fid"] + (["geom"] if spec.geometry else []) + _columns(spec)
    if spec.geometry:  # EWKB with the SRID: COPY fills the typed geometry column directly
        geoms = shapely.set_srid(shapely.from_wkb([r[1] for r in rows]), int(store.srid))
        ewkb = shapely.to_wkb(geoms, hex=True, byte_order=1, output_dimension=2, include_srid=True)
        rows = [(r[0], e, *r[2:]) for r, e in zip(rows, ewkb)]
    with store._pg.cursor() as cur:
        store._copy_rows(cur, q(table), cols, rows)


def _finish_postgis(store) -> None:
    for table in TABLES:
        store._pg.execute(f"SELECT setval(pg_get_serial_sequence(%s, 'fid'), max(fid)) FROM {q(table)} "
                          "HAVING max(fid) IS NOT NULL", (q(table),))


def _finish_gpkg(store) -> None:
    from .geopackage import _now

    for table, spec in TABLES.items():
        if spec.geometry and store.count(table):
            store._refresh_extent(table)
        else:
            store._conn.execute("UPDATE gpkg_contents SET last_change=? WHERE table_name=?", (_now(), table))


def _write_settings(store, rows: list[tuple[str, str]]) -> None:
    if _is_postgis(store):
        store._pg.execute(f"DELETE FROM {SETTINGS_TABLE}")
        with store._pg.cursor() as cur:
            cur.executemany(f"INSERT INTO {SETTINGS_TABLE} (key, value) VALUES (%s, %s)", rows)
    else:
        store._conn.execute(f"DELETE FROM {SETTINGS_TABLE}")
        store._conn.executemany(f"INSERT INTO {SETTINGS_TABLE} (key, value) VALUES (?, ?)", rows)


def _remove(location, store) -> None:
    """Remove a store made for a copy that failed."""
    try:
        if _is_postgis(store):
            store._rollback()
            names = ", ".join(q(t) for t in reversed(list(TABLES))) + f", {SETTINGS_TABLE}"
            store._pg.execute(f"DROP TABLE IF EXISTS {names} CASCADE")
            store.close()
        else:
            store.close()
            for suffix in ("", "-wal", "-shm", "-journal"):
                Path(str(location) + suffix).unlink(missing_ok=True)
    except Exception:  # noqa: BLE001 - the copy's own error is the one to report
        pass


def copy_store(src, dst, *, progress: Callable[[str, int], None] | None = None) -> dict[str, int]:
    """Copy the whole store at ``src`` into a new store at ``dst`` (paths or ``postgresql://`` URLs).

    Parameters
    ----------
    src : path or URL
        An existing store of this schema version.
    dst : path or URL
        A new GeoPackage file, or a PostgreSQL database that holds no store yet (PostGIS is added when missing).
    progress : callable, optional
        Called with (table, rows written) after each chunk.

    Returns
    -------
    dict
        Rows copied per table (and ``hydroatlas_settings``).

    Raises
    ------
    StoreError
        ``dst`` holds a store already (a store cannot be copied onto itself); nothing is written then.
    """
    from . import create_store, open_store

    counts: dict[str, int] = {}
    with open_store(src) as source, _reading(source):
        s = source.settings
        target = create_store(dst, crs=s.crs, length_unit=s.length_unit, vertical_datum=s.vertical_datum)
        try:
            writer = _write_postgis if _is_postgis(target) else _write_gpkg
            with target.transaction():
                if not _is_postgis(target):  # a sub-unit may come before its parent in fid order
                    target._conn.execute("PRAGMA defer_foreign_keys = ON")
                for table in TABLES:
                    counts[table] = 0
                    for rows in iter_rows(source, table):
                        writer(target, table, rows)
                        counts[table] += len(rows)
                        if progress:
                            progress(table, len(rows))
                settings = settings_rows(source)
                _write_settings(target, settings)
                counts[SETTINGS_TABLE] = len(settings)
                (_finish_postgis if _is_postgis(target) else _finish_gpkg)(target)
        except BaseException:
            _remove(dst, target)
            raise
        target.close()
    return counts
