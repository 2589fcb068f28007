"""The SQLite side of the GeoPackage store: SQL functions, spatial index, connection settings and errors.

Three things a GeoPackage needs from every connection that writes to it, which
plain ``sqlite3`` does not give:

* the SQL functions that GeoPackage triggers call (``ST_IsEmpty``, ``ST_MinX``,
  ``ST_MaxX``, ``ST_MinY``, ``ST_MaxY`` of the R-tree triggers, OGC 12-128r19
  Annex F.3; ``ST_GeometryType``, ``ST_SRID`` and ``GPKG_IsAssignable`` of the
  older geometry-type and SRS-id trigger extensions). A desktop GIS or GDAL that
  adds a spatial index leaves triggers behind that call them on every later
  insert; without them each import fails with ``no such function``;
* the R-tree spatial index itself (Annex F.3, the 1.4 trigger set), created at
  ``init`` so that a GIS finds it and need not add its own;
* settings and error messages for several processes sharing one file: WAL
  journal (readers go on during an import), a busy timeout (a second writer
  waits instead of failing) and one-line messages that tell a locked store from
  a read-only one and from a file that is not a store at all.

Everything here takes a ``sqlite3.Connection`` or a path; nothing imports the
store class.
"""

from __future__ import annotations

import math
import os
import re
import sqlite3
import struct
from pathlib import Path

import numpy as np
import pandas as pd
import shapely

from ..errors import NotAStoreError, ParameterError, StoreError
from .schema import TABLES

#: seconds a connection waits for another writer's lock before giving up
DEFAULT_BUSY_TIMEOUT_S = 30.0
BUSY_TIMEOUT_ENV = "HYDROATLAS_BUSY_TIMEOUT"

RTREE_EXTENSION = "gpkg_rtree_index"
RTREE_DEFINITION = "http://www.geopackage.org/spec140/#extension_rtree"

# GeoPackageBinary flags byte (clause 2.1.3.1.1): bit 0 byte order, bits 1-3 envelope code, bit 4 empty
FLAG_LITTLE_ENDIAN = 0b0000_0001
FLAG_EMPTY = 0b0001_0000
ENVELOPE_DOUBLES = {0: 0, 1: 4, 2: 6, 3: 6, 4: 8}

# WKB type codes (ISO 13249-3 / OGC 06-103r4), modulo 1000 for Z, M and ZM
WKB_TYPE_NAMES = {
    0: "GEOMETRY", 1: "POINT", 2: "LINESTRING", 3: "POLYGON", 4: "MULTIPOINT", 5: "MULTILINESTRING",
    6: "MULTIPOLYGON", 7: "GEOMETRYCOLLECTION", 8: "CIRCULARSTRING", 9: "COMPOUNDCURVE",
    10: "CURVEPOLYGON", 11: "MULTICURVE", 12: "MULTISURFACE", 13: "CURVE", 14: "SURFACE",
}

# Direct supertypes of each geometry type (Annex E, figure "Core Geometry Model" and extension types)
_SUPERTYPES = {
    "POINT": ("GEOMETRY",),
    "CURVE": ("GEOMETRY",),
    "SURFACE": ("GEOMETRY",),
    "GEOMETRYCOLLECTION": ("GEOMETRY",),
    "LINESTRING": ("CURVE",),
    "CIRCULARSTRING": ("CURVE",),
    "COMPOUNDCURVE": ("CURVE",),
    "CURVEPOLYGON": ("SURFACE",),
    "POLYGON": ("CURVEPOLYGON",),
    "MULTIPOINT": ("GEOMETRYCOLLECTION",),
    "MULTICURVE": ("GEOMETRYCOLLECTION",),
    "MULTISURFACE": ("GEOMETRYCOLLECTION",),
    "MULTILINESTRING": ("MULTICURVE",),
    "MULTIPOLYGON": ("MULTISURFACE",),
}


def _ident(name: str) -> str:
    """An identifier as the spec's templates write it: bare when it can be, double-quoted otherwise."""
    if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", name):
        return name
    return '"' + name.replace('"', '""') + '"'


# -- GeoPackageBinary header ------------------------------------------------------

def read_header(blob) -> tuple[int, int, tuple[float, ...] | None, int] | None:
    """Flags, srs_id, envelope (minx, maxx, miny, maxy, ...) or None, and the WKB offset of a blob.

    None when ``blob`` is not a GeoPackageBinary (too short, no 'GP' magic, or a bad envelope code).
    """
    if not isinstance(blob, (bytes, bytearray, memoryview)) or len(blob) < 8:
        return None
    blob = bytes(blob[:8 + 64])
    if blob[:2] != b"GP":
        return None
    flags = blob[3]
    code = (flags >> 1) & 0b111
    if code not in ENVELOPE_DOUBLES:
        return None
    order = "<" if flags & FLAG_LITTLE_ENDIAN else ">"
    srs_id = struct.unpack(order + "i", blob[4:8])[0]
    n = ENVELOPE_DOUBLES[code]
    envelope = None
    if n:
        if len(blob) < 8 + 8 * n:
            return None
        envelope = struct.unpack(f"{order}{n}d", blob[8:8 + 8 * n])
    return flags, srs_id, envelope, 8 + 8 * n


def _wkb_type(blob, offset: int) -> int | None:
    if len(blob) < offset + 5:
        return None
    order = "<" if blob[offset] == 1 else ">"
    return struct.unpack(order + "I", bytes(blob[offset + 1:offset + 5]))[0]


def _xy_bounds(blob) -> tuple[float, float, float, float] | None:
    """(minx, maxx, miny, maxy) of a GeoPackageBinary; None for NULL, empty or unreadable geometry."""
    head = read_header(blob)
    if head is None:
        return None
    flags, _, envelope, offset = head
    if flags & FLAG_EMPTY:
        return None
    if envelope is not None:
        minx, maxx, miny, maxy = envelope[:4]
        if any(math.isnan(v) for v in (minx, maxx, miny, maxy)):
            return None
        return minx, maxx, miny, maxy
    wkb_type = _wkb_type(blob, offset)
    if wkb_type is None:
        return None
    if wkb_type % 1000 == 1 and len(blob) >= offset + 21:  # a point: read x, y directly
        order = "<" if blob[offset] == 1 else ">"
        x, y = struct.unpack(order + "2d", bytes(blob[offset + 5:offset + 21]))
        if math.isnan(x) or math.isnan(y):
            return None
        return x, x, y, y
    try:
        geom = shapely.from_wkb(bytes(blob[offset:]))
    except Exception:  # noqa: BLE001 - a bad blob gives NULL, as SQL functions should
        return None
    if geom is None or geom.is_empty:
        return None
    minx, miny, maxx, maxy = geom.bounds
    return minx, maxx, miny, maxy


# -- SQL functions ----------------------------------------------------------------

def st_is_empty(blob):
    """1 if the geometry is empty, 0 if not, NULL for NULL (or a blob that is no GeoPackage geometry)."""
    if blob is None:
        return None
    head = read_header(blob)
    if head is None:
        return None
    flags, _, envelope, offset = head
    if flags & FLAG_EMPTY:
        return 1
    if envelope is not None:
        return int(any(math.isnan(v) for v in envelope[:4]))
    if _wkb_type(blob, offset) is None:
        return None
    return int(_xy_bounds(blob) is None)


def _bound(index: int):
    def st_bound(blob):
        if blob is None:
            return None
        bounds = _xy_bounds(blob)
        return None if bounds is None else bounds[index]
    return st_bound


st_minx, st_maxx, st_miny, st_maxy = (_bound(i) for i in range(4))


def st_geometry_type(blob):
    """Upper-case geometry type name ('POINT', 'MULTIPOLYGON', ...) of a GeoPackage geometry."""
    head = read_header(blob) if blob is not None else None
    if head is None:
        return None
    wkb_type = _wkb_type(blob, head[3])
    return None if wkb_type is None else WKB_TYPE_NAMES.get(wkb_type % 1000)


def st_srid(blob):
    """srs_id from the header of a GeoPackage geometry."""
    head = read_header(blob) if blob is not None else None
    return None if head is None else head[1]


def gpkg_is_assignable(expected, actual):
    """1 if a geometry of type ``actual`` may be stored in a column of type ``expected`` (clause 2.1.6)."""
    if expected is None or actual is None:
        return None
    expected, actual = str(expected).upper(), str(actual).upper()
    todo = [actual]
    while todo:
        name = todo.pop()
        if name == expected:
            return 1
        todo.extend(_SUPERTYPES.get(name, ()))
    return 0


SQL_FUNCTIONS = {
    "ST_IsEmpty": (1, st_is_empty),
    "ST_MinX": (1, st_minx),
    "ST_MaxX": (1, st_maxx),
    "ST_MinY": (1, st_miny),
    "ST_MaxY": (1, st_maxy),
    "ST_GeometryType": (1, st_geometry_type),
    "ST_SRID": (1, st_srid),
    "GPKG_IsAssignable": (2, gpkg_is_assignable),
}


def register_functions(conn: sqlite3.Connection) -> None:
    """Register the GeoPackage SQL functions (see :data:`SQL_FUNCTIONS`) on ``conn``."""
    for name, (nargs, func) in SQL_FUNCTIONS.items():
        conn.create_function(name, nargs, func, deterministic=True)


# -- R-tree spatial index (Annex F.3) ------------------------------------------------

EXTENSIONS_DDL = """CREATE TABLE IF NOT EXISTS gpkg_extensions (
  table_name TEXT,
  column_name TEXT,
  extension_name TEXT NOT NULL,
  definition TEXT NOT NULL,
  scope TEXT NOT NULL,
  CONSTRAINT ge_tce UNIQUE (table_name, column_name, extension_name)
)"""


def rtree_name(table: str, column: str = "geom") -> str:
    return f"rtree_{table}_{column}"


def rtree_ddl(table: str, column: str = "geom", pk: str = "fid") -> list[str]:
    """The virtual table and the seven triggers of a spatial index, GeoPackage 1.4 Annex F.3.

    1.4 replaced the ``update1`` trigger by ``update6`` and ``update7`` (an UPSERT
    no longer deletes and re-inserts the R-tree entry) and renamed ``update3``
    to ``update5``.
    """
    t, c, i = _ident(table), _ident(column), _ident(pk)
    r = _ident(rtree_name(table, column))
    name = rtree_name(table, column)
    values = f"NEW.{i}, ST_MinX(NEW.{c}), ST_MaxX(NEW.{c}), ST_MinY(NEW.{c}), ST_MaxY(NEW.{c})"
    new_ok = f"(NEW.{c} NOTNULL AND NOT ST_IsEmpty(NEW.{c}))"
    new_none = f"(NEW.{c} ISNULL OR ST_IsEmpty(NEW.{c}))"
    old_ok = f"(OLD.{c} NOTNULL AND NOT ST_IsEmpty(OLD.{c}))"
    old_none = f"(OLD.{c} ISNULL OR ST_IsEmpty(OLD.{c}))"

    def trig(suffix, event, when, body):
        return f"CREATE TRIGGER {_ident(name + '_' + suffix)} {event} ON {t} WHEN {when} BEGIN {body} END"

    return [
        f"CREATE VIRTUAL TABLE {r} USING rtree(id, minx, maxx, miny, maxy)",
        trig("insert", "AFTER INSERT", f"(new.{c} NOT NULL AND NOT ST_IsEmpty(NEW.{c}))",
             f"INSERT OR REPLACE INTO {r} VALUES ({values});"),
        trig("update6", f"AFTER UPDATE OF {c}", f"OLD.{i} = NEW.{i} AND {new_ok} AND {old_ok}",
             f"UPDATE {r} SET minx = ST_MinX(NEW.{c}), maxx = ST_MaxX(NEW.{c}), "
             f"miny = ST_MinY(NEW.{c}), maxy = ST_MaxY(NEW.{c}) WHERE id = NEW.{i};"),
        trig("update7", f"AFTER UPDATE OF {c}", f"OLD.{i} = NEW.{i} AND {new_ok} AND {old_none}",
             f"INSERT INTO {r} VALUES ({values});"),
        trig("update2", f"AFTER UPDATE OF {c}", f"OLD.{i} = NEW.{i} AND {new_none}",
             f"DELETE FROM {r} WHERE id = OLD.{i};"),
        trig("update5", "AFTER UPDATE", f"OLD.{i} != NEW.{i} AND {new_ok}",
             f"DELETE FROM {r} WHERE id = OLD.{i}; INSERT OR REPLACE INTO {r} VALUES ({values});"),
        trig("update4", "AFTER UPDATE", f"OLD.{i} != NEW.{i} AND {new_none}",
             f"DELETE FROM {r} WHERE id IN (OLD.{i}, NEW.{i});"),
        trig("delete", "AFTER DELETE", f"old.{c} NOT NULL", f"DELETE FROM {r} WHERE id = OLD.{i};"),
    ]


def has_spatial_index(conn: sqlite3.Connection, table: str, column: str = "geom") -> bool:
    return conn.execute("SELECT 1 FROM sqlite_master WHERE name = ?",
                        (rtree_name(table, column),)).fetchone() is not None


def add_spatial_index(conn: sqlite3.Connection, table: str, column: str = "geom", pk: str = "fid") -> bool:
    """Create, fill and register the R-tree index of ``table.column`` unless it exists; True if created.

    Runs inside the caller's transaction, if any. Also brings a store made before
    spatial indexes were created at ``init`` up to date.
    """
    conn.execute(EXTENSIONS_DDL)
    created = False
    if not has_spatial_index(conn, table, column):
        for stmt in rtree_ddl(table, column, pk):
            conn.execute(stmt)
        t, c, i = _ident(table), _ident(column), _ident(pk)
        conn.execute(f"INSERT OR REPLACE INTO {_ident(rtree_name(table, column))} "
                     f"SELECT {i}, ST_MinX({c}), ST_MaxX({c}), ST_MinY({c}), ST_MaxY({c}) FROM {t} "
                     f"WHERE {c} NOT NULL AND NOT ST_IsEmpty({c})")
        created = True
    conn.execute("INSERT OR IGNORE INTO gpkg_extensions (table_name, column_name, extension_name, definition, "
                 "scope) VALUES (?, ?, ?, ?, 'write-only')", (table, column, RTREE_EXTENSION, RTREE_DEFINITION))
    return created


# -- connections ------------------------------------------------------------------

def busy_timeout_s() -> float:
    """Seconds to wait for another writer: :envvar:`HYDROATLAS_BUSY_TIMEOUT` or 30."""
    raw = os.environ.get(BUSY_TIMEOUT_ENV)
    if raw is None or raw.strip() == "":
        return DEFAULT_BUSY_TIMEOUT_S
    try:
        value = float(raw)
    except ValueError:
        value = -1.0
    if not value >= 0 or math.isinf(value):
        raise ParameterError(f"{BUSY_TIMEOUT_ENV} must be a number of seconds >= 0; got {raw!r}")
    return value


def is_writable(path) -> bool:
    """False when this process may not write the store file (permissions or a read-only mount)."""
    return os.access(path, os.W_OK)


def connect(path, *, read_only: bool = False) -> sqlite3.Connection:
    """An autocommit connection to ``path`` with the GeoPackage functions and the busy timeout set.

    ``read_only`` opens with the SQLite URI ``mode=ro``: reading works, every write
    fails with SQLITE_READONLY (turned into a clear :class:`StoreError` by
    :func:`friendly_sqlite_error`).
    """
    timeout = busy_timeout_s()
    if read_only:
        uri = Path(path).resolve().as_uri()
        conn = sqlite3.connect(uri + "?mode=ro", uri=True, isolation_level=None, timeout=timeout)
        try:
            conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
        except sqlite3.OperationalError as exc:
            if not _error_name(exc).startswith("SQLITE_READONLY"):
                raise
            # A WAL store in a folder we may not write: SQLite cannot make the shared-memory file
            # it reads through. Nobody can then have written a WAL beside it, so the file alone is the
            # store: read it as immutable (no locks, no WAL).
            conn.close()
            conn = sqlite3.connect(uri + "?immutable=1", uri=True, isolation_level=None, timeout=timeout)
    else:
        conn = sqlite3.connect(str(path), isolation_level=None, timeout=timeout)
    conn.execute(f"PRAGMA busy_timeout = {int(timeout * 1000)}")
    register_functions(conn)
    return conn


def use_wal(conn: sqlite3.Connection) -> bool:
    """Switch the database to WAL journal mode if it is not already; True when it is WAL afterwards.

    WAL lets readers (another command, a GIS) go on while an import writes, and
    an import waits for no reader. The switch needs a moment with nobody else in
    the file; when that cannot be had at once (another process is in it, or the
    file is read-only) the store simply stays in its journal mode.
    """
    try:
        if conn.execute("PRAGMA journal_mode").fetchone()[0].lower() == "wal":
            return True
    except sqlite3.Error:
        return False
    timeout_ms = conn.execute("PRAGMA busy_timeout").fetchone()[0]
    conn.execute("PRAGMA busy_timeout = 0")
    try:
        return conn.execute("PRAGMA journal_mode = WAL").fetchone()[0].lower() == "wal"
    except sqlite3.Error:
        return False
    finally:
        conn.execute(f"PRAGMA busy_timeout = {int(timeout_ms)}")


_SQLITE_MAGIC = b"SQLite format 3\x00"


def check_sqlite_file(path) -> None:
    """Refuse a file that is not an SQLite database, or one cut short, before SQLite reads it.

    A zero-length file passes (SQLite sees an empty database; the caller reports it
    is no store). The length test reads the database size in the header (valid when
    the change counter matches "version-valid-for", SQLite file format clause 1.3)
    and is skipped while a WAL or rollback journal is present, since pages may then
    live there.
    """
    path = Path(path)
    size = path.stat().st_size
    if size == 0:
        return
    with open(path, "rb") as fh:
        head = fh.read(100)
    if len(head) < 100 or head[:16] != _SQLITE_MAGIC:
        raise NotAStoreError(f"{path} is not a hydroatlas store: not a GeoPackage/SQLite file or "
                             "corrupted (no SQLite header); a store is made by 'hydroatlas init'")
    page_size = struct.unpack(">H", head[16:18])[0]
    page_size = 65536 if page_size == 1 else page_size
    change_counter, pages = struct.unpack(">II", head[24:32])
    valid_for = struct.unpack(">I", head[92:96])[0]
    journals = [Path(str(path) + s) for s in ("-wal", "-journal")]
    if any(j.exists() and j.stat().st_size > 0 for j in journals):
        return
    if pages and change_counter == valid_for and size < pages * page_size:
        raise NotAStoreError(f"{path} is not a hydroatlas store: not a GeoPackage/SQLite file or corrupted "
                             f"(it holds {size} bytes "
                             f"where its header says {pages * page_size}: a truncated copy?)")


def _error_name(exc: sqlite3.Error) -> str:
    name = getattr(exc, "sqlite_errorname", None)  # Python >= 3.11
    if name:
        return name
    msg = str(exc).lower()
    for needle, code in (("locked", "SQLITE_BUSY"), ("busy", "SQLITE_BUSY"),
                         ("readonly", "SQLITE_READONLY"), ("read-only", "SQLITE_READONLY"),
                         ("not a database", "SQLITE_NOTADB"), ("malformed", "SQLITE_CORRUPT"),
                         ("unable to open", "SQLITE_CANTOPEN"), ("disk is full", "SQLITE_FULL"),
                         ("disk i/o error", "SQLITE_IOERR")):
        if needle in msg:
            return code
    return ""


def friendly_sqlite_error(exc: sqlite3.Error, path) -> StoreError | None:
    """The one-line :class:`StoreError` for an SQLite failure a user can act on, or None for any other.

    Locked or busy (another writer kept the lock past the busy timeout), read-only,
    not a database or corrupted (:class:`NotAStoreError`), cannot open, disk full,
    disk I/O error. Anything else (None) is a bug and should surface as one.
    """
    name = _error_name(exc)
    if name.startswith(("SQLITE_BUSY", "SQLITE_LOCKED")):
        return StoreError(f"{path}: the store is locked by another writer (an import or a GIS); try again when it "
                          f"finishes (waited {busy_timeout_s():g} s; {BUSY_TIMEOUT_ENV}=SECONDS waits longer)")
    if name.startswith("SQLITE_READONLY"):
        return StoreError(f"{path}: the store is read-only (permissions); nothing was written. Ask for write "
                          "access to the file and its folder, or work on a copy")
    if name.startswith(("SQLITE_NOTADB", "SQLITE_CORRUPT")):
        return NotAStoreError(f"{path} is not a hydroatlas store: not a GeoPackage/SQLite file or corrupted ({exc})")
    if name.startswith(("SQLITE_CANTOPEN", "SQLITE_PERM", "SQLITE_AUTH")):
        return StoreError(f"cannot open the store {path} ({exc}); check the path and the permissions of the "
                          "file and its folder")
    if name.startswith("SQLITE_FULL"):
        return StoreError(f"{path}: the disk is full; nothing of this write was kept")
    if name.startswith("SQLITE_IOERR"):
        return StoreError(f"{path}: disk I/O error ({exc}); nothing of this write was kept")
    return None


def begin_write(conn: sqlite3.Connection, path) -> None:
    """``BEGIN IMMEDIATE`` (waiting up to the busy timeout for another writer) and a write probe.

    SQLite grants BEGIN IMMEDIATE on a read-only connection and only refuses the
    first write; the probe (an UPDATE that matches no row) moves that refusal here,
    before any work is done.
    """
    try:
        conn.execute("BEGIN IMMEDIATE")
    except sqlite3.OperationalError as exc:
        raise (friendly_sqlite_error(exc, path) or exc) from None
    try:
        conn.execute("UPDATE gpkg_contents SET table_name = table_name WHERE 0")
    except sqlite3.Error as exc:
        conn.execute("ROLLBACK")
        raise (friendly_sqlite_error(exc, path) or exc) from None


def commit_write(conn: sqlite3.Connection, path) -> None:
    """``COMMIT``; if it fails (lock kept by a reader in rollback-journal mode, disk full) roll back and say why."""
    try:
        conn.execute("COMMIT")
    except sqlite3.OperationalError as exc:
        try:
            conn.execute("ROLLBACK")
        except sqlite3.Error:
            pass
        raise (friendly_sqlite_error(exc, path) or exc) from None


# -- checks -----------------------------------------------------------------------

def geometry_mismatches(conn_or_store, table: str, *, tolerance: float = 1e-6) -> pd.DataFrame:
    """Rows of a point table whose geometry and ``x``/``y`` columns disagree.

    A GIS that moves a well changes its geometry; computations read ``x`` and
    ``y``. This lists the rows where the two differ by more than ``tolerance``
    (in the store's length unit) in x or in y, and the rows whose geometry is
    NULL, empty or not a point.

    Parameters
    ----------
    conn_or_store : sqlite3.Connection or GeoPackageStore
    table : str
        A feature table with ``x`` and ``y`` columns (``wells``, ``springs``).
    tolerance : float
        Largest accepted difference, in the store's length unit.

    Returns
    -------
    pandas.DataFrame
        Columns ``fid``, the natural key (``well_id`` or ``spring_id``), ``x``,
        ``y``, ``geom_x``, ``geom_y`` (NaN when the geometry has no coordinates)
        and ``problem`` ('moved', 'no geometry', 'empty geometry' or 'not a
        point'); one row per mismatch, in fid order.
    """
    conn = getattr(conn_or_store, "_conn", conn_or_store)
    cols = {r[1] for r in conn.execute(f"PRAGMA table_info({_ident(table)})")}
    if not {"fid", "geom", "x", "y"} <= cols:
        raise ParameterError(f"table {table} has no point geometry with x and y columns (try wells or springs)")
    key = [c for c in (TABLES[table].key if table in TABLES else ()) if c in cols]
    select = ", ".join(_ident(c) for c in ["fid", *key, "x", "y", "geom"])
    rows = conn.execute(f"SELECT {select} FROM {_ident(table)} ORDER BY fid").fetchall()
    out = []
    for fid, *keys, x, y, blob in rows:
        gx = gy = math.nan
        problem = None
        head = read_header(blob) if blob is not None else None
        if blob is None:
            problem = "no geometry"
        elif head is None or st_geometry_type(blob) is None:
            problem = "not a point"
        elif st_geometry_type(blob) != "POINT":
            problem = "not a point"
        elif st_is_empty(blob):
            problem = "empty geometry"
        else:
            gx, _, gy, _ = _xy_bounds(blob)
            if x is None or y is None or not (abs(gx - x) <= tolerance and abs(gy - y) <= tolerance):
                problem = "moved"
        if problem:
            out.append((fid, *keys, x, y, gx, gy, problem))
    frame = pd.DataFrame(out, columns=["fid", *key, "x", "y", "geom_x", "geom_y", "problem"])
    for c in ("x", "y", "geom_x", "geom_y"):
        frame[c] = pd.to_numeric(frame[c]).astype(float) if len(frame) else np.array([], dtype=float)
    return frame
