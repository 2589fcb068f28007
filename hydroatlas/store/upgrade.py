"""Schema versions: refuse a store of another version, and migrate older ones in one transaction.

Version 1: the first release. Version 2 adds retirement (``retired_at``,
``retired_reason`` on every record table), the record history table with its
triggers, and K-test keys that do not depend on how the value was written
(``method@date`` instead of ``date|method|k|unit`` when the file gave no test_id). Version 3 adds the
``orientation`` of K tests (``horizontal``, the default given to every existing test, or ``vertical``).
Version 4 adds the ``products`` table, the registry of derived products (:mod:`hydroatlas.products`); it
starts empty: files made by an older release are not known to the store, so make them again.

An upgrade adds every column the current schema has and the store lacks (with its default and its CHECK
constraint), creates the tables without provenance columns when missing (the history table, the product
registry), and drops and recreates the history triggers of every table, since they list every column.
"""

from __future__ import annotations

import re
import sqlite3
from pathlib import Path

from ..errors import StoreError
from .schema import HISTORY_TABLE, SCHEMA_VERSION, TABLES, UPGRADABLE_VERSIONS

SETTINGS_TABLE = "hydroatlas_settings"
#: the index behind the product registry's table digests (the latest history entry of each table, without a scan);
#: made by an upgrade and by the first product recorded in a store
HISTORY_INDEX_SQL = (f"CREATE INDEX IF NOT EXISTS {HISTORY_TABLE}_by_table ON {HISTORY_TABLE} (table_name, fid)")


def read_version(conn: sqlite3.Connection) -> str:
    row = conn.execute(f"SELECT value FROM {SETTINGS_TABLE} WHERE key = 'schema_version'").fetchone()
    return row[0] if row else "1"


def version_problem(version: str, location) -> StoreError | None:
    """The error to raise for a store of ``version``, or None when this release reads it."""
    if version == SCHEMA_VERSION:
        return None
    if version in UPGRADABLE_VERSIONS:
        return StoreError(f"{location} has store schema version {version}, older than this hydroatlas "
                          f"(version {SCHEMA_VERSION}); migrate it with 'hydroatlas upgrade {location}' "
                          "(one transaction; keep a copy first)")
    return StoreError(f"{location} has store schema version {version}, which this hydroatlas (schema "
                      f"{SCHEMA_VERSION}) does not know; it was probably made by a newer release: upgrade "
                      "hydroatlas rather than write to it with this one")


_OLD_KTEST_ID = re.compile(r"^(\d{4}-\d{2}-\d{2})\|([a-z_]+)\|.*\|.*$")


def upgrade_geopackage(path) -> tuple[str, str]:
    """Migrate the GeoPackage store at ``path`` to :data:`SCHEMA_VERSION`; returns (old, new) versions."""
    from . import gpkg_sql
    from .geopackage import GeoPackageStore, _column_sql, _now, history_triggers, q, table_ddl

    path = Path(path)
    conn = GeoPackageStore._connect(path)
    try:
        version = read_version(conn)
        if version == SCHEMA_VERSION:
            return version, version
        if version not in UPGRADABLE_VERSIONS:
            raise version_problem(version, path)
        gpkg_sql.begin_write(conn, path)
        try:
            tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            for spec in TABLES.values():
                if not spec.provenance:  # the history table, the imports log, the product registry
                    if spec.name not in tables:
                        for stmt in table_ddl(spec):
                            conn.execute(stmt)
                        conn.execute("INSERT INTO gpkg_contents (table_name, data_type, identifier, description, "
                                     "last_change) VALUES (?, 'attributes', ?, ?, ?)",
                                     (spec.name, spec.name, spec.description, _now()))
                    continue
                present = {r[1] for r in conn.execute(f"PRAGMA table_info({q(spec.name)})")}
                for col in spec.columns:
                    if col.name not in present:  # with its default and the CHECK constraints on it alone
                        checks = [c for c in spec.checks if re.search(rf"\b{col.name}\b", c)
                                  and not any(re.search(rf"\b{o.name}\b", c) for o in spec.columns if o is not col)]
                        conn.execute(f"ALTER TABLE {q(spec.name)} ADD COLUMN {_column_sql(col)}"
                                     + "".join(f" CHECK ({c})" for c in checks))
                for col in spec.lifecycle:
                    if col not in present:
                        conn.execute(f"ALTER TABLE {q(spec.name)} ADD COLUMN {q(col)} TEXT")
            conn.execute(HISTORY_INDEX_SQL)
            # the history triggers list every column: drop them and make them again for the new columns
            for spec in TABLES.values():
                for suffix in ("_keep_history_update", "_keep_history_delete"):
                    conn.execute(f"DROP TRIGGER IF EXISTS {q(spec.name + suffix)}")
                for stmt in history_triggers(spec):
                    conn.execute(stmt)
            # K tests keyed by their written value (version 1) get the key of version 2, where it is unique in the
            # zone; the trigger keeps the old key in the history
            rows = conn.execute("SELECT fid, well_id, zone_id, test_id FROM ktests").fetchall() if version == "1" \
                else []
            taken = {(w, z, t) for _, w, z, t in rows}
            for fid, w, z, t in rows:
                m = _OLD_KTEST_ID.match(t or "")
                if not m:
                    continue
                new = f"{m.group(2)}@{m.group(1)}"
                if (w, z, new) in taken:
                    continue
                conn.execute("UPDATE ktests SET test_id = ? WHERE fid = ?", (new, fid))
                # the trigger filed the old version under the old key: file it under the record's key now
                conn.execute(f"UPDATE {HISTORY_TABLE} SET record_key = json_array(?, ?, ?) "
                             f"WHERE fid = (SELECT max(fid) FROM {HISTORY_TABLE})", (w, z, new))
                taken.discard((w, z, t))
                taken.add((w, z, new))
            conn.execute(f"INSERT OR REPLACE INTO {SETTINGS_TABLE} VALUES ('schema_version', ?)", (SCHEMA_VERSION,))
            conn.execute(f"INSERT OR REPLACE INTO {SETTINGS_TABLE} VALUES ('upgraded_at', ?)", (_now(),))
            for spec in TABLES.values():
                if spec.geometry:
                    gpkg_sql.add_spatial_index(conn, spec.name)
            gpkg_sql.commit_write(conn, path)
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        return version, SCHEMA_VERSION
    finally:
        conn.close()
