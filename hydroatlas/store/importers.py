"""Validated imports: one input file becomes rows in the store, whole or not at all.

Each ``_prepare_<kind>`` function reads one file, checks every cell and every
reference against what the store already holds, and returns the rows to
write. Only when the whole file has passed does :func:`import_file` open a
transaction and upsert; a failure midway rolls the whole file back.
"""

from __future__ import annotations

import contextvars
import hashlib
import itertools
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd
import shapely
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError

from ..errors import ImportDataError, ParameterError, UnitError
from ..quantities import K_UNITS, RATE_UNITS, normalize_unit
from . import schema
from .base import Store, WriteResult
from .columns import INPUTS
from .tables import CHUNK_ROWS, Cells, iter_csv_chunks, read_csv_table

# The input columns of every kind are declared once (hydroatlas.store.columns, from the table declarations in
# hydroatlas.store.schema); what follows is made from that declaration.
KINDS = tuple(INPUTS)
#: the store table of each kind (the same name unless listed)
TABLE_OF = {k: spec.table for k, spec in INPUTS.items() if spec.table != k}
#: the columns the header of each kind must have (wells and springs also need one pair of COORDINATE_COLUMNS)
REQUIRED = {k: spec.required for k, spec in INPUTS.items()}
#: the columns the header of each kind may have
OPTIONAL = {k: spec.optional for k, spec in INPUTS.items()}
# Head given together with ref_elev - depth_to_water must agree to this, in the store's length unit.
HEAD_CONSISTENCY_TOL = 0.01
#: optional input columns that are not kept-when-absent values (keys, or values always written together)
_ALWAYS_WRITTEN = {"heads": {"head", "depth_to_water", "ref_elev"}, "ktests": {"test_id"}, "pumping": {"zone_id"},
                   "wells": {"x", "y"}, "springs": {"x", "y"}}
#: the coordinate columns a point file (wells, springs) may have, one pair of them: x, y in the store CRS (or
#: --input-crs); lon, lat or longitude, latitude in degrees, WGS 84 (EPSG:4326) unless --input-crs says otherwise
COORDINATE_COLUMNS = (("x", "y"), ("lon", "lat"), ("longitude", "latitude"))
GEOGRAPHIC_INPUT = "EPSG:4326"
#: a unit code: letters, digits, '-', '_' and '.', not starting with '.' (codes name output files)
UNIT_CODE = re.compile(r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$")
MAX_RANK = int(INPUTS["units"].column("rank").maximum)
#: kinds whose files are read, checked and written piece by piece (:func:`import_file`, ``chunk_rows``)
STREAMED_KINDS = ("heads", "ktests", "discharge", "slugtests")


@dataclass
class _Job:
    """Options and findings of the import under way (one per call of :func:`import_file`)."""

    clear_empty: bool = False
    header: set = field(default_factory=set)
    notes: list = field(default_factory=list)
    #: a streamed import: the keys of the rows of earlier pieces (by the names of the key columns) and the
    #: store tables read once for the whole file; None when the file is checked whole
    keys: dict | None = None
    cache: dict | None = None


_JOB: contextvars.ContextVar[_Job] = contextvars.ContextVar("hydroatlas_import_job", default=_Job())


@dataclass(frozen=True)
class ImportReport:
    kind: str
    file: str
    rows: int
    inserted: int
    updated: int
    notes: tuple[str, ...] = ()

    @property
    def unchanged(self) -> int:
        return self.rows - self.inserted - self.updated

    def summary(self) -> str:
        return (f"{self.kind}: {self.rows} rows from {self.file}: {self.inserted} new, "
                f"{self.updated} updated, {self.unchanged} unchanged")


def import_file(store: Store, kind: str, path: str | Path, *, input_crs=None,
                progress: Callable[[int], None] | None = None, clear_empty: bool = False,
                chunk_rows: int | None = None) -> ImportReport:
    """Validate ``path`` as input of ``kind`` and write it to ``store`` in one transaction.

    Parameters
    ----------
    store : Store
    kind : str
        One of :data:`KINDS`.
    path : path-like
        CSV file (GeoJSON or GeoPackage for ``areas``).
    input_crs : CRS-like, optional
        CRS of the file's coordinates when it differs from the store CRS.
    progress : callable, optional
        Called with the number of rows written after each chunk; if it has a ``total`` attribute, that is set
        to the number of rows to write first.
    clear_empty : bool
        An empty cell of an optional column clears the stored value. By default it keeps it, and an optional
        column left out of the file keeps every stored value of that column; the values a re-import changes
        go to the history table first.
    chunk_rows : int, optional
        Files of :data:`STREAMED_KINDS` are read, checked and written in pieces of this many data rows
        (default :data:`hydroatlas.store.tables.CHUNK_ROWS`) inside one transaction, so memory stays bounded
        by the piece, not the file; 0 reads and checks the whole file first. Other kinds are read whole.

    Raises
    ------
    ImportDataError
        With file, row and column of the first problem; the store is unchanged. A streamed file reports the
        first problem of the first piece that has one; its "(N more rows like this)" counts that piece.
    """
    if kind not in KINDS:
        raise ParameterError(f"unknown kind {kind!r}; expected one of {', '.join(KINDS)}")
    path = Path(path)
    label = path.name
    crs_in = _parse_crs(input_crs, label) if input_crs is not None else None
    if kind in STREAMED_KINDS and chunk_rows != 0:
        return _import_streamed(store, kind, path, crs_in, progress=progress, clear_empty=clear_empty,
                                chunk_rows=CHUNK_ROWS if chunk_rows is None else chunk_rows)
    prepare = _PREPARERS[kind]
    job = _Job(clear_empty=clear_empty)
    token = _JOB.set(job)
    try:
        frame, geometry = prepare(store, path, label, crs_in)
    finally:
        _JOB.reset(token)
    table = TABLE_OF.get(kind, kind)
    table_columns = set(schema.TABLES[table].column_names)
    optional = [c for c in OPTIONAL[kind] if c in table_columns and c not in _ALWAYS_WRITTEN.get(kind, set())]
    absent = [c for c in optional if c not in job.header]
    frame = frame.drop(columns=absent)
    keep = () if clear_empty else tuple(c for c in optional if c in job.header)
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    frame["source_file"] = label
    if progress is not None and hasattr(progress, "total"):  # a progress bar learns the whole job's size
        progress.total = len(frame)
    with store.transaction():
        result = store.upsert(table, frame, geometry=geometry, progress=progress, keep_when_null=keep)
        store.log_import(kind, label, digest, result)
    return ImportReport(kind, label, result.rows, result.inserted, result.updated, tuple(job.notes))


def _import_streamed(store: Store, kind: str, path: Path, crs_in, *, progress, clear_empty: bool,
                     chunk_rows: int) -> ImportReport:
    """:func:`import_file` piece by piece: each piece is checked as a whole file would be (keys across
    pieces included) and written into the one open transaction; a refused piece rolls back every piece."""
    label = path.name
    table = TABLE_OF.get(kind, kind)
    table_columns = set(schema.TABLES[table].column_names)
    job = _Job(clear_empty=clear_empty, keys={}, cache={})
    token = _JOB.set(job)
    try:
        pieces = iter_csv_chunks(path, required=REQUIRED[kind], label=label, chunk_rows=chunk_rows)
        first = next(pieces)  # the header is checked before the store is locked
        digest = _file_sha256(path, label)
        if progress is not None and hasattr(progress, "total"):
            progress.total = _count_data_lines(path)  # lines, not rows: a quoted value may span lines
        optional = [c for c in OPTIONAL[kind] if c in table_columns and c not in _ALWAYS_WRITTEN.get(kind, set())]
        written = {"keep": ()}

        def frames():
            for raw in itertools.chain([first], pieces):
                job.header.update(c for c in raw.columns if c != "source_row")
                frame = _CHECKERS[kind](store, Cells(raw, label))
                del raw
                frame = frame.drop(columns=[c for c in optional if c not in job.header])
                written["keep"] = () if clear_empty else tuple(c for c in optional if c in job.header)
                frame["source_file"] = label
                yield frame

        with store.transaction():
            result = write_pieces(store, table, frames(), progress=progress, keep_when_null=written)
            store.log_import(kind, label, digest, result)
    finally:
        _JOB.reset(token)
    return ImportReport(kind, label, result.rows, result.inserted, result.updated, tuple(job.notes))


def write_pieces(store: Store, table: str, frames, *, progress=None, keep_when_null: dict) -> WriteResult:
    """Upsert each frame of ``frames`` (an iterator: each is made after the one before is written) into
    ``table`` inside the open transaction; ``keep_when_null['keep']`` is read once the first frame is made.

    A store with an ``upsert_pieces`` method (PostGIS: every piece goes to one staging table by COPY, and is
    merged once at the end) takes the iterator; any other store upserts each piece.
    """
    whole = getattr(store, "upsert_pieces", None)
    if whole is not None:
        return whole(table, frames, progress=progress, keep_when_null=keep_when_null)
    rows = inserted = updated = 0
    for frame in frames:
        got = store.upsert(table, frame, progress=progress, keep_when_null=keep_when_null["keep"])
        rows, inserted, updated = rows + got.rows, inserted + got.inserted, updated + got.updated
    return WriteResult(rows, inserted, updated)


def _file_sha256(path: Path, label: str) -> str:
    try:
        with path.open("rb") as fh:
            return hashlib.file_digest(fh, "sha256").hexdigest()
    except OSError as exc:
        raise ImportDataError(f"cannot read the file ({exc.strerror})", file=label) from None


def _count_data_lines(path: Path) -> int:
    """Lines after the header, counted block by block (for a progress bar: blank lines and line breaks
    inside quoted values count too)."""
    n, last = 0, b"\n"
    with path.open("rb") as fh:
        for block in iter(lambda: fh.read(1 << 22), b""):
            n += block.count(b"\n")
            last = block[-1:]
    return max(n - (last == b"\n"), 0)


def _store_table(store: Store, table: str, columns: list[str]) -> pd.DataFrame:
    """``store.read(table, columns)``, read once per streamed import."""
    cache = _JOB.get().cache
    if cache is None:
        return store.read(table, columns)
    key = (table, tuple(columns))
    if key not in cache:
        cache[key] = store.read(table, columns)
    return cache[key]


def _parse_crs(value, label) -> CRS:
    try:
        return CRS.from_user_input(value)
    except CRSError:
        raise ImportDataError(f"input_crs= {value!r} is not a CRS pyproj knows (try EPSG:NNNN)", file=label,
                              param="input_crs") from None


def _read(path, label, kind) -> Cells:
    frame = read_csv_table(path, required=REQUIRED[kind], label=label)
    _JOB.get().header.update(c for c in frame.columns if c != "source_row")
    return Cells(frame, label)


def _attrs(cells: Cells, kind: str) -> pd.Series:
    return cells.attrs(_known(kind), clear_empty=_JOB.get().clear_empty)


def _known(kind) -> set[str]:
    return set(REQUIRED[kind]) | set(OPTIONAL[kind])


def _value(cells: Cells, kind: str, name: str):
    """One input column read and checked as declared (:data:`hydroatlas.store.columns.INPUTS`).

    A required column (or a ``filled`` optional one that the header has) needs a value in every row; the
    cell is read by the column's form (text, number, whole number, date, date-time, instant, choice of the
    allowed values and their aliases, K or rate unit) and its range checked. An empty optional cell gives
    the column's default (None, or NaN for numbers). Raises ImportDataError naming file, row and column.
    """
    col = INPUTS[kind].column(name)
    need = col.input == schema.REQUIRED or col.filled
    form = col.value_form
    if form == "text":
        return cells.text(name, required=need, default=col.input_default)
    if form == "choice":
        return cells.choice(name, col.allowed, required=need, default=col.input_default,
                            aliases=dict(col.aliases) or None)
    if form in ("date", "date-time"):
        return cells.timestamp(name, required=need, date_only=form == "date")
    if form == "instant":
        return _instants(cells, name, required=need)
    if form == "K unit":
        return _unit_labels(cells, name, K_UNITS, "hydraulic conductivity")
    if form == "rate unit":
        return _unit_labels(cells, name, RATE_UNITS, "rate")
    general = col.minimum == 0 and not col.message  # Cells.number says it: 'must be greater than zero' etc.
    values = cells.number(name, required=need, positive=general and col.above,
                          nonnegative=general and not col.above)
    finite = np.isfinite(values)
    if form == "whole number":
        hint = f" ({col.hint})" if col.hint else ""
        cells.fail(finite & (values != np.round(values)), name, f"{name} must be a whole number{hint}")
        if col.minimum is not None:
            low = values <= col.minimum if col.above else values < col.minimum
            bound = f"more than {col.minimum:g}" if col.above else f"{col.minimum:g} or more"
            cells.fail(finite & low, name, f"{name} must be {bound}{hint}")
        if col.maximum is not None:
            cells.fail(finite & (values > col.maximum), name, f"{name} must be at most {col.maximum:g}{hint}")
        return values
    if col.minimum is not None and not general:
        low = values <= col.minimum if col.above else values < col.minimum
        cells.fail(finite & low, name, col.message or f"the value must be {col.range_text}")
    if col.maximum is not None:
        cells.fail(finite & (values > col.maximum), name, col.message or f"the value must be {col.range_text}")
    return values


def _unique(cells: Cells, keys: list[pd.Series], names: tuple[str, ...], hint: str = ""):
    key = pd.DataFrame({n: k.to_numpy() for n, k in zip(names, keys)})
    dup = key.duplicated(keep="first").to_numpy()
    seen = _JOB.get().keys
    log = None
    if seen is not None:  # a streamed file: keys of earlier pieces count too
        log = seen.setdefault(names, _KeyLog())
        prior = log.find(key)
        dup = dup | (prior > 0)
    if dup.any():
        first = int(np.flatnonzero(dup)[0])
        value = ", ".join(f"{n}={key.iloc[first][n]}" for n in names)
        if log is not None and prior[first] > 0:
            earlier_row = int(prior[first])
        else:
            earlier_row = cells.rows[key.index[(key == key.iloc[first]).all(axis=1)][0]]
        cells.fail(dup, names[-1], f"duplicate key ({value}); it already appears in row {earlier_row}{hint}")
    if log is not None:
        log.add(key, cells.rows)


class _KeyLog:
    """The keys of the rows of a streamed file read so far, as two 64-bit hashes per key (sorted by the
    first) and the row each key came from: 24 bytes a row, whatever the keys hold. Two different keys are
    taken for one only if both hashes agree (odds about 2**-128 per pair of rows)."""

    def __init__(self):
        self.h1 = np.empty(0, np.uint64)
        self.h2 = np.empty(0, np.uint64)
        self.rows = np.empty(0, np.int64)

    @staticmethod
    def _hashes(key: pd.DataFrame):
        h1 = pd.util.hash_pandas_object(key, index=False).to_numpy(np.uint64)
        h2 = pd.util.hash_pandas_object(key, index=False, hash_key="hydroatlas-keys2").to_numpy(np.uint64)
        return h1, h2

    def find(self, key: pd.DataFrame) -> np.ndarray:
        """The earlier row of each key (0 where the key is new)."""
        out = np.zeros(len(key), np.int64)
        if not len(self.h1) or not len(key):
            return out
        h1, h2 = self._hashes(key)
        lo = np.searchsorted(self.h1, h1, side="left")
        hi = np.searchsorted(self.h1, h1, side="right")
        for i in np.flatnonzero(hi > lo):
            for j in range(lo[i], hi[i]):
                if self.h2[j] == h2[i]:
                    out[i] = self.rows[j]
                    break
        return out

    def add(self, key: pd.DataFrame, rows) -> None:
        h1, h2 = self._hashes(key)
        order = np.argsort(h1, kind="stable")
        h1, h2, rows = h1[order], h2[order], np.asarray(rows, np.int64)[order]
        at = np.searchsorted(self.h1, h1)
        self.h1, self.h2 = np.insert(self.h1, at, h1), np.insert(self.h2, at, h2)
        self.rows = np.insert(self.rows, at, rows)


def _exists(cells: Cells, values: pd.DataFrame, known: pd.DataFrame, column: str, what: str, hint: str):
    """Fail where a tuple of ``values`` is not among the rows of ``known``."""
    if known.empty:
        present = np.zeros(len(values), dtype=bool)
    else:
        cache = _JOB.get().cache
        held = cache.get(("index", id(known))) if cache is not None else None
        idx = held[1] if held is not None and held[0] is known else None
        if idx is None:
            idx = pd.MultiIndex.from_frame(known.astype(str))
            if cache is not None:  # keeps ``known`` alive with its index, so its id names it
                cache[("index", id(known))] = (known, idx)
        present = pd.MultiIndex.from_frame(values.astype(str)).isin(idx)
    missing = ~present
    if missing.any():
        first = int(np.flatnonzero(missing)[0])
        shown = ", ".join(f"{c}={values.iloc[first][c]}" for c in values.columns)
        cells.fail(missing, column, f"{what} ({shown}) is not in the store; {hint}")


# -- coordinates ---------------------------------------------------------------
def _coordinate_columns(cells: Cells) -> tuple[str, str]:
    """The one pair of :data:`COORDINATE_COLUMNS` the file has; ImportDataError for none, both or half a pair."""
    found = [pair for pair in COORDINATE_COLUMNS if cells.has(pair[0]) or cells.has(pair[1])]
    if not found:
        raise ImportDataError("missing coordinate columns: give x and y (store CRS, or input_crs=), or lon and "
                              "lat (or longitude and latitude, in degrees, WGS 84)", file=cells.file, row=0,
                              column="x", param="input_crs")
    if len(found) > 1:
        names = " and ".join("/".join(p) for p in found)
        raise ImportDataError(f"the header has two sets of coordinates ({names}); keep one pair of columns",
                              file=cells.file, row=0, column=found[1][0])
    pair = found[0]
    for have, other in (pair, pair[::-1]):
        if not cells.has(other):
            raise ImportDataError(f"missing column {other} (column {have} needs it)", file=cells.file, row=0,
                                  column=other)
    return pair


def _coordinates(cells: Cells, store: Store, crs_in: CRS | None):
    """x, y in the store CRS, plus the input values when they were reprojected.

    The columns are x, y (store CRS, or ``crs_in``), or lon, lat / longitude, latitude (WGS 84 degrees
    unless ``crs_in`` is given).
    """
    cx, cy = _coordinate_columns(cells)
    x = cells.number(cx)
    y = cells.number(cy)
    crs_store = store.settings.crs
    if crs_in is None and cx != "x":
        crs_in = CRS.from_user_input(GEOGRAPHIC_INPUT)
    source = crs_in or crs_store
    _check_not_degrees(cells, x, y, source, column=cx)
    _check_in_crs(cells, x, y, source, column=cx)
    if crs_in is None or crs_in == crs_store:
        return x, y, None
    xs, ys = _transform(cells, x, y, crs_in, crs_store, column=cx)
    _check_in_crs(cells, xs, ys, crs_store, after=crs_in, column=cx)
    return xs, ys, (x, y, crs_in.to_string())


def _transform(cells: Cells, x, y, crs_in: CRS, crs_out: CRS, *, column: str = "x"):
    tr = Transformer.from_crs(crs_in, crs_out, always_xy=True)
    xs, ys = tr.transform(x, y)
    xs, ys = np.asarray(xs, float), np.asarray(ys, float)
    cells.fail(~np.isfinite(xs) | ~np.isfinite(ys), column,
               f"the point cannot be transformed from {crs_in.name} to the store CRS {crs_out.name}")
    return xs, ys


def _check_not_degrees(cells: Cells, x, y, crs: CRS, *, column: str = "x"):
    """A projected CRS with every point within +-180, +-90 is almost surely longitude/latitude given as metres."""
    if crs.is_geographic or len(x) == 0:
        return
    if np.all(np.abs(x) <= 180) and np.all(np.abs(y) <= 90):
        cells.fail(np.ones(len(x), bool), column,
                   f"x and y look like longitude/latitude in degrees, but {crs.name} is in "
                   f"{crs.axis_info[0].unit_name}s; give input_crs=EPSG:4326 (x = longitude, y = latitude), "
                   "or name the columns lon and lat", param="input_crs")


def _check_in_crs(cells: Cells, x, y, crs: CRS, *, after: CRS | None = None, column: str = "x"):
    """Refuse coordinates that are not finite or fall outside the CRS's area of use (no slack)."""
    if crs.is_geographic:
        lon, lat = x, y
    else:
        tr = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
        lon, lat = tr.transform(x, y)
        lon, lat = np.asarray(lon, float), np.asarray(lat, float)
    with np.errstate(invalid="ignore"):
        bad = ~np.isfinite(lon) | ~np.isfinite(lat) | (np.abs(lat) > 90) | (np.abs(lon) > 180)
        aou = crs.area_of_use
        if aou is not None:
            bad |= (lat < aou.south) | (lat > aou.north)
            if aou.west <= aou.east:
                bad |= (lon < aou.west) | (lon > aou.east)
            else:  # an area across the antimeridian: outside means between east and west
                bad |= (lon > aou.east) & (lon < aou.west)
    if not crs.is_geographic and not bad.all():
        back = Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
        with np.errstate(invalid="ignore"):
            bx, by = back.transform(np.where(bad, 0, lon), np.where(bad, 0, lat))
            bad |= ~(np.hypot(np.asarray(bx) - x, np.asarray(by) - y) < 1.0)
    area = (f" (its area of use is longitude {aou.west:g} to {aou.east:g}, latitude {aou.south:g} to {aou.north:g})"
            if aou else "")
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        where = (f"after transforming from {after.name}, the point ({x[i]:.6g}, {y[i]:.6g}) falls outside the store "
                 f"CRS {crs.name}{area}; check x and y (swapped? wrong input_crs=?)" if after is not None else
                 f"coordinates ({x[i]:.6g}, {y[i]:.6g}) are not valid in {crs.name}{area}; "
                 "check x and y (swapped?) or give input_crs=")
        cells.fail(bad, column, where, param="input_crs")


# -- kinds ---------------------------------------------------------------------
def _prepare_units(store, path, label, crs_in):
    cells = _read(path, label, "units")
    code = _value(cells, "units", "code")
    bad_code = ~code.astype(str).str.match(UNIT_CODE).to_numpy()
    if bad_code.any():
        first = code.iloc[int(np.flatnonzero(bad_code)[0])]
        cells.fail(bad_code, "code", f"unit code {first!r} is not allowed: use 1 to 64 letters, digits, '-', '_' "
                   "or '.', not starting with '.' (codes name output files)")
    name = _value(cells, "units", "name")
    rank_f = _value(cells, "units", "rank")  # a whole number from 1 to MAX_RANK
    role = _value(cells, "units", "role")
    parent = _value(cells, "units", "parent")
    _unique(cells, [code], ("code",))
    existing = store.read("units", ["code", "rank", "parent"])
    known = set(existing["code"]) | set(code)
    bad_parent = parent.notna().to_numpy() & ~parent.isin(known).to_numpy()
    cells.fail(bad_parent, "parent", "parent unit is neither in this file nor in the store")
    cells.fail((parent == code).to_numpy(), "parent", "a unit cannot be its own parent")
    # final state: store units not in this file, plus this file
    others = existing[~existing["code"].isin(set(code))]
    clash = pd.Series(rank_f.astype(int)).isin(others["rank"].astype(int)).to_numpy() | \
        pd.Series(rank_f.astype(int)).duplicated(keep="first").to_numpy()
    cells.fail(clash, "rank", "another unit already has this rank; ranks order the units top to bottom")
    parents = dict(zip(others["code"], others["parent"]))
    parents.update(zip(code, parent))
    for i, start in enumerate(code):
        seen, node = set(), start
        while node is not None and isinstance(node, str):
            if node in seen:
                cells.fail(np.arange(len(code)) == i, "parent", f"parent links of unit {start} form a cycle")
            seen.add(node)
            node = parents.get(node)
    frame = pd.DataFrame({"code": code, "name": name, "rank": rank_f.astype(int), "role": role,
                          "parent": parent, "attrs": _attrs(cells, "units"),
                          "source_row": cells.rows})
    return frame, None


def _prepare_wells(store, path, label, crs_in):
    cells = _read(path, label, "wells")
    well_id = _value(cells, "wells", "well_id")
    ground = _value(cells, "wells", "ground_elev")
    total = _value(cells, "wells", "total_depth")
    kind = _value(cells, "wells", "kind")
    name = _value(cells, "wells", "name")
    _unique(cells, [well_id], ("well_id",))
    x, y, original = _coordinates(cells, store, crs_in)
    zones = store.read("zones", ["well_id", "zone_id", "bottom_depth"])
    if not zones.empty:
        deepest = zones.groupby("well_id")["bottom_depth"].max()
        limit = well_id.map(deepest).to_numpy(dtype=float)
        cells.fail(np.isfinite(total) & (limit > total), "total_depth",
                   "total_depth is shallower than a zone already stored for this well")
    frame = pd.DataFrame({"well_id": well_id, "x": x, "y": y, "ground_elev": ground, "total_depth": total,
                          "kind": kind, "name": name, "attrs": _attrs(cells, "wells"),
                          "source_row": cells.rows})
    if original is not None:
        frame["x_input"], frame["y_input"], frame["input_crs"] = original
    else:
        frame["x_input"], frame["y_input"], frame["input_crs"] = np.nan, np.nan, None
    return frame, shapely.points(x, y)


def _depth_pair(cells: Cells, kind: str):
    top = _value(cells, kind, "top_depth")
    bottom = _value(cells, kind, "bottom_depth")
    cells.fail(bottom <= top, "bottom_depth", "bottom_depth must be greater than top_depth (depths grow downward)")
    return top, bottom


def _prepare_picks(store, path, label, crs_in):
    cells = _read(path, label, "picks")
    well_id = _value(cells, "picks", "well_id")
    unit = _value(cells, "picks", "unit")
    top, bottom = _depth_pair(cells, "picks")
    _unique(cells, [well_id, unit], ("well_id", "unit"))
    _exists(cells, pd.DataFrame({"well_id": well_id}), store.read("wells", ["well_id"]), "well_id",
            "well", "import it in a wells file first")
    _exists(cells, pd.DataFrame({"unit": unit}), store.read("units", ["code"]).rename(columns={"code": "unit"}),
            "unit", "unit", "import it in a units file first")
    frame = pd.DataFrame({"well_id": well_id, "unit": unit, "top_depth": top, "bottom_depth": bottom,
                          "attrs": _attrs(cells, "picks"), "source_row": cells.rows})
    return frame, None


def _prepare_zones(store, path, label, crs_in):
    cells = _read(path, label, "zones")
    well_id = _value(cells, "zones", "well_id")
    zone_id = _value(cells, "zones", "zone_id")
    top, bottom = _depth_pair(cells, "zones")
    kind = _value(cells, "zones", "kind")
    unit = _value(cells, "zones", "unit")
    _unique(cells, [well_id, zone_id], ("well_id", "zone_id"))
    wells = store.read("wells", ["well_id", "total_depth"])
    _exists(cells, pd.DataFrame({"well_id": well_id}), wells[["well_id"]], "well_id", "well",
            "import it in a wells file first")
    units = store.read("units", ["code"])
    has_unit = unit.notna().to_numpy()
    cells.fail(has_unit & ~unit.isin(set(units["code"])).to_numpy(), "unit",
               "override unit is not in the store; import it in a units file first")
    total = well_id.map(wells.set_index("well_id")["total_depth"]).to_numpy(dtype=float)
    cells.fail(np.isfinite(total) & (bottom > total), "bottom_depth",
               "the zone reaches below the well's total_depth")
    frame = pd.DataFrame({"well_id": well_id, "zone_id": zone_id, "top_depth": top, "bottom_depth": bottom,
                          "kind": kind, "unit": unit, "attrs": _attrs(cells, "zones"),
                          "source_row": cells.rows})
    return frame, None


def _zone_refs(cells: Cells, store, well_id, zone_id):
    wells = _store_table(store, "wells", ["well_id"])
    _exists(cells, pd.DataFrame({"well_id": well_id}), wells, "well_id", "well", "import it in a wells file first")
    _exists(cells, pd.DataFrame({"well_id": well_id, "zone_id": zone_id}),
            _store_table(store, "zones", ["well_id", "zone_id"]), "zone_id", "zone", "import it in a zones file first")


def _unit_labels(cells: Cells, column: str, table: dict, quantity: str) -> pd.Series:
    raw = cells.text(column)
    out = {}
    for value in pd.unique(raw):
        try:
            out[value] = normalize_unit(value, quantity)
        except UnitError:
            cells.fail((raw == value).to_numpy(), column,
                       f"unknown {quantity} unit {value!r}; expected one of {', '.join(table)}")
    return raw.map(out)


def _prepare_ktests(store, path, label, crs_in):
    return _check_ktests(store, _read(path, label, "ktests")), None


def _check_ktests(store, cells: Cells) -> pd.DataFrame:
    well_id = _value(cells, "ktests", "well_id")
    zone_id = _value(cells, "ktests", "zone_id")
    tested_on = _value(cells, "ktests", "tested_on")
    method = _value(cells, "ktests", "method")
    k = _value(cells, "ktests", "k")
    k_unit = _value(cells, "ktests", "k_unit")
    quality = _value(cells, "ktests", "quality")
    source = _value(cells, "ktests", "source")
    # K along the layers (default, also for an empty cell) or across them (a test of vertical K)
    orientation = _value(cells, "ktests", "orientation")
    if cells.has("test_id"):
        test_id = _value(cells, "ktests", "test_id")
    else:
        # No test_id: a test is known by (well, zone, date, method), whatever the way its value is written,
        # so a re-import with a corrected k updates the test (keeping the old value in the history).
        test_id = method.astype(str) + "@" + tested_on.astype(str)
    _unique(cells, [well_id, zone_id, test_id], ("well_id", "zone_id", "test_id"),
            hint="" if cells.has("test_id") else
            "; two tests of one zone by one method on one day need a test_id column to tell them apart")
    _zone_refs(cells, store, well_id, zone_id)
    factors = k_unit.map(K_UNITS).to_numpy(dtype=float)
    frame = pd.DataFrame({"well_id": well_id, "zone_id": zone_id, "test_id": test_id, "tested_on": tested_on,
                          "method": method, "k": k, "k_unit": k_unit, "k_ms": k * factors,
                          "quality": quality, "source": source, "orientation": orientation,
                          "attrs": _attrs(cells, "ktests"),
                          "source_row": cells.rows})
    return frame


def _prepare_heads(store, path, label, crs_in):
    return _check_heads(store, _read(path, label, "heads")), None


def _check_heads(store, cells: Cells) -> pd.DataFrame:
    if not cells.has("head") and not (cells.has("depth_to_water") and cells.has("ref_elev")):
        raise ImportDataError("missing column head (or both depth_to_water and ref_elev)",
                              file=cells.file, row=0, column="head")
    well_id = _value(cells, "heads", "well_id")
    zone_id = _value(cells, "heads", "zone_id")
    measured_at = _value(cells, "heads", "measured_at")
    head = _value(cells, "heads", "head")
    dtw = _value(cells, "heads", "depth_to_water")
    ref = _value(cells, "heads", "ref_elev")
    derived = ref - dtw
    no_head = np.isnan(head)
    cells.fail(no_head & np.isnan(dtw), "head" if cells.has("head") else "depth_to_water",
               "no head: give head, or depth_to_water with ref_elev")
    cells.fail(no_head & np.isnan(ref), "ref_elev", "depth_to_water needs ref_elev to give a head")
    both = ~no_head & np.isfinite(derived)
    cells.fail(both & (np.abs(head - derived) > HEAD_CONSISTENCY_TOL), "head",
               "head disagrees with ref_elev - depth_to_water")
    head = np.where(no_head, derived, head)
    quality = _value(cells, "heads", "quality")
    _unique(cells, [well_id, zone_id, measured_at], ("well_id", "zone_id", "measured_at"))
    _zone_refs(cells, store, well_id, zone_id)
    frame = pd.DataFrame({"well_id": well_id, "zone_id": zone_id, "measured_at": measured_at, "head": head,
                          "depth_to_water": dtw, "ref_elev": ref, "quality": quality,
                          "attrs": _attrs(cells, "heads"), "source_row": cells.rows})
    return frame


def _prepare_pumping(store, path, label, crs_in):
    cells = _read(path, label, "pumping")
    well_id = _value(cells, "pumping", "well_id")
    zone_id = _value(cells, "pumping", "zone_id")  # empty: the whole well
    rate = _value(cells, "pumping", "rate")
    rate_unit = _value(cells, "pumping", "rate_unit")
    start = _value(cells, "pumping", "start")
    end = _value(cells, "pumping", "end")
    later = end.notna().to_numpy()
    cells.fail(later & (end.astype(str) < start.astype(str)).to_numpy(), "end", "end is before start")
    _unique(cells, [well_id, zone_id, start], ("well_id", "zone_id", "start"))
    _exists(cells, pd.DataFrame({"well_id": well_id}), store.read("wells", ["well_id"]), "well_id", "well",
            "import it in a wells file first")
    with_zone = (zone_id != "").to_numpy()
    if with_zone.any():
        zones = store.read("zones", ["well_id", "zone_id"])
        pairs = pd.MultiIndex.from_arrays([well_id, zone_id])
        ok = pairs.isin(pd.MultiIndex.from_frame(zones)) if not zones.empty else np.zeros(len(pairs), bool)
        cells.fail(with_zone & ~ok, "zone_id", "zone is not in the store; import it in a zones file first")
    frame = pd.DataFrame({"well_id": well_id, "zone_id": zone_id, "start": start, "end": end, "rate": rate,
                          "rate_unit": rate_unit, "rate_m3d": rate * rate_unit.map(RATE_UNITS).to_numpy(float),
                          "attrs": _attrs(cells, "pumping"), "source_row": cells.rows})
    return frame, None


def _prepare_springs(store, path, label, crs_in):
    cells = _read(path, label, "springs")
    spring_id = _value(cells, "springs", "spring_id")
    elev = _value(cells, "springs", "elev")
    name = _value(cells, "springs", "name")
    unit = _value(cells, "springs", "unit")
    _unique(cells, [spring_id], ("spring_id",))
    units = set(store.read("units", ["code"])["code"])
    cells.fail(unit.notna().to_numpy() & ~unit.isin(units).to_numpy(), "unit",
               "unit is not in the store; import it in a units file first")
    x, y, original = _coordinates(cells, store, crs_in)
    frame = pd.DataFrame({"spring_id": spring_id, "x": x, "y": y, "elev": elev, "name": name, "unit": unit,
                          "attrs": _attrs(cells, "springs"), "source_row": cells.rows})
    if original is not None:
        frame["x_input"], frame["y_input"], frame["input_crs"] = original
    else:
        frame["x_input"], frame["y_input"], frame["input_crs"] = np.nan, np.nan, None
    return frame, shapely.points(x, y)


def _prepare_discharge(store, path, label, crs_in):
    return _check_discharge(store, _read(path, label, "discharge")), None


def _check_discharge(store, cells: Cells) -> pd.DataFrame:
    spring_id = _value(cells, "discharge", "spring_id")
    measured_at = _value(cells, "discharge", "measured_at")
    q = _value(cells, "discharge", "discharge")
    unit = _value(cells, "discharge", "rate_unit")
    _unique(cells, [spring_id, measured_at], ("spring_id", "measured_at"))
    _exists(cells, pd.DataFrame({"spring_id": spring_id}), _store_table(store, "springs", ["spring_id"]), "spring_id",
            "spring", "import it in a springs file first")
    frame = pd.DataFrame({"spring_id": spring_id, "measured_at": measured_at, "discharge": q, "rate_unit": unit,
                          "discharge_m3d": q * unit.map(RATE_UNITS).to_numpy(float),
                          "attrs": _attrs(cells, "discharge"), "source_row": cells.rows})
    return frame


def _prepare_areas(store, path, label, crs_in):
    import json

    import pyogrio

    if not path.is_file():
        raise ImportDataError("file not found", file=label)
    if path.stat().st_size == 0:
        raise ImportDataError("the file is empty; a GeoJSON or GeoPackage polygon file is expected", file=label)
    try:
        gdf = pyogrio.read_dataframe(path)
    except Exception as exc:  # pyogrio raises several GDAL error classes
        raise ImportDataError(f"cannot read polygons ({str(exc).splitlines()[0]}); a GeoJSON or GeoPackage "
                              "polygon file is expected", file=label) from None
    if gdf.empty:
        raise ImportDataError("the file has no features", file=label)
    _JOB.get().header.update(c for c in gdf.columns if c != "geometry")
    missing = [c for c in REQUIRED["areas"] if c not in gdf.columns]
    if missing:
        raise ImportDataError(f"missing required field(s) {', '.join(missing)}", file=label, row=0,
                              column=missing[0])
    text = pd.DataFrame({c: gdf[c].map(lambda v: "" if v is None or (isinstance(v, float) and np.isnan(v))
                                       else str(v)).str.strip()
                         for c in gdf.columns if c != "geometry"})
    text["source_row"] = np.arange(1, len(gdf) + 1)
    cells = Cells(text, label)
    area_id = _value(cells, "areas", "area_id")
    kind = _value(cells, "areas", "kind")
    unit = _value(cells, "areas", "unit")
    _unique(cells, [area_id], ("area_id",))
    units = set(store.read("units", ["code"])["code"])
    cells.fail(unit.notna().to_numpy() & ~unit.isin(units).to_numpy(), "unit",
               "unit is not in the store; import it in a units file first")
    geoms = np.asarray(gdf.geometry.values, dtype=object)
    missing_geom = np.array([g is None for g in geoms])
    cells.fail(missing_geom, "geometry", "the feature has no geometry")
    types = shapely.get_type_id(geoms)
    cells.fail(~np.isin(types, [3, 6]), "geometry", "the feature is not a polygon or multipolygon")
    cells.fail(shapely.is_empty(geoms) | ~(shapely.area(geoms) > 0), "geometry",
               "the polygon is empty or has no area")
    cells.fail(~shapely.is_valid(geoms), "geometry", "the polygon is not valid (self-intersecting or degenerate)")
    file_crs = gdf.crs
    source = crs_in or (CRS.from_user_input(file_crs) if file_crs is not None else None)
    if source is None:
        raise ImportDataError("the file has no CRS; give input_crs=", file=label, param="input_crs")
    coords = shapely.get_coordinates(geoms)
    owner = np.repeat(np.arange(len(geoms)), shapely.get_num_coordinates(geoms))
    probe = Cells(pd.DataFrame({"source_row": cells.rows[owner]}), label)
    _check_not_degrees(probe, coords[:, 0], coords[:, 1], source)
    _check_in_crs(probe, coords[:, 0], coords[:, 1], source)  # raises naming the feature row
    if source != store.settings.crs:
        tr = Transformer.from_crs(source, store.settings.crs, always_xy=True)
        geoms = shapely.transform(geoms, lambda xy: np.column_stack(tr.transform(xy[:, 0], xy[:, 1])))
        moved = shapely.get_coordinates(geoms)
        _check_in_crs(probe, moved[:, 0], moved[:, 1], store.settings.crs, after=source)
        cells.fail(~(shapely.area(geoms) > 0) | ~shapely.is_valid(geoms), "geometry",
                   "the polygon has no area or is not valid once transformed to the store CRS")
    _note_domain_changes(store, area_id, kind)
    geoms = np.array([g if shapely.get_type_id(g) == 6 else shapely.multipolygons([g]) for g in geoms], dtype=object)
    extra = [c for c in gdf.columns if c not in _known("areas") and c != "geometry"]
    clear = _JOB.get().clear_empty
    attrs = []
    for i in range(len(gdf)):
        obj = {c: (text.iloc[i][c] or None) for c in extra if text.iloc[i][c] != "" or clear}
        attrs.append(json.dumps(obj, ensure_ascii=False) if obj else None)
    frame = pd.DataFrame({"area_id": area_id, "kind": kind, "unit": unit, "attrs": attrs, "source_row": cells.rows})
    return frame, geoms


def _note_domain_changes(store, area_id: pd.Series, kind: pd.Series) -> None:
    """Say when an import replaces a stored domain polygon or adds a second domain."""
    stored = store.read("areas", ["area_id", "kind"])
    stored_domains = set(stored.loc[stored["kind"] == "domain", "area_id"])
    new_domains = [a for a, k in zip(area_id, kind) if k == "domain"]
    job = _JOB.get()
    for a in new_domains:
        if a in stored_domains:
            job.notes.append(f"domain {a} replaces the stored polygon of that id (the old one is kept in the "
                             "record history: 'hydroatlas history STORE areas " + a + "')")
    others = stored_domains - set(new_domains)
    if new_domains and others:
        job.notes.append(f"the store now holds {len(others) + len(new_domains)} domain polygons "
                         f"({', '.join(sorted(others | set(new_domains)))}); computations use their union; "
                         "retire the ones you do not want ('hydroatlas retire STORE areas ID --reason ...')")


def _prepare_slugtests(store, path, label, crs_in):
    return _check_slugtests(store, _read(path, label, "slugtests")), None


def _check_slugtests(store, cells: Cells) -> pd.DataFrame:
    well_id, zone_id, test_id = (_value(cells, "slugtests", c) for c in ("well_id", "zone_id", "test_id"))
    t_s = _value(cells, "slugtests", "t_s")
    disp = _value(cells, "slugtests", "displacement")
    t_text = pd.Series(t_s).map(repr)
    _unique(cells, [well_id, zone_id, test_id, t_text], ("well_id", "zone_id", "test_id", "t_s"))
    _zone_refs(cells, store, well_id, zone_id)
    frame = pd.DataFrame({"well_id": well_id, "zone_id": zone_id, "test_id": test_id, "t_s": t_s,
                          "displacement": disp, "attrs": _attrs(cells, "slugtests"), "source_row": cells.rows})
    return frame


#: optional sluggeometry columns kept (checked and typed) in the row's attrs: the slug_geometry table has no
#: column for them
SLUG_GEOMETRY_EXTRA = ("screen_top_depth", "confined", "geometry_kind")
SLUG_GEOMETRY_KINDS = INPUTS["sluggeometry"].column("geometry_kind").allowed
#: tolerance (store length unit) when checking that a screen lies inside its zone
SCREEN_IN_ZONE_TOL = 0.01


def _merge_attrs(base: pd.Series, typed: dict[str, list]) -> pd.Series:
    """``base`` attrs (JSON text or None) with the typed values of ``typed`` (None: left out) written over them."""
    import json

    out = []
    for i, text in enumerate(base):
        obj = json.loads(text) if isinstance(text, str) else {}
        for name, values in typed.items():
            obj.pop(name, None)
            if values[i] is not None:
                obj[name] = values[i]
        out.append(json.dumps(obj, ensure_ascii=False) if obj else None)
    return pd.Series(out, index=base.index, dtype=object)


def _prepare_sluggeometry(store, path, label, crs_in):
    cells = _read(path, label, "sluggeometry")
    well_id, zone_id, test_id = (_value(cells, "sluggeometry", c) for c in ("well_id", "zone_id", "test_id"))
    rc = _value(cells, "sluggeometry", "casing_radius")
    rw = _value(cells, "sluggeometry", "well_radius")
    le = _value(cells, "sluggeometry", "screen_length")
    b = _value(cells, "sluggeometry", "aquifer_thickness")
    sd = _value(cells, "sluggeometry", "static_depth")
    tested_on = _value(cells, "sluggeometry", "tested_on")
    # optional: where the screen starts, whether the interval is confined, and the kind of open interval
    top = _value(cells, "sluggeometry", "screen_top_depth")
    confined = _value(cells, "sluggeometry", "confined")
    gkind = _value(cells, "sluggeometry", "geometry_kind")
    _unique(cells, [well_id, zone_id, test_id], ("well_id", "zone_id", "test_id"))
    _zone_refs(cells, store, well_id, zone_id)
    if np.isfinite(top).any():
        zones = store.read("zones", ["well_id", "zone_id", "top_depth", "bottom_depth"])
        z = pd.DataFrame({"well_id": well_id, "zone_id": zone_id}).merge(zones, on=["well_id", "zone_id"],
                                                                        how="left")
        ztop, zbot = z["top_depth"].to_numpy(float), z["bottom_depth"].to_numpy(float)
        with np.errstate(invalid="ignore"):
            outside = np.isfinite(top) & ((top < ztop - SCREEN_IN_ZONE_TOL) |
                                          (top + le > zbot + SCREEN_IN_ZONE_TOL))
        cells.fail(outside, "screen_top_depth", "the screen (screen_top_depth to screen_top_depth + screen_length) "
                   "does not lie inside its zone's top_depth to bottom_depth")
    attrs = _merge_attrs(_attrs(cells, "sluggeometry"), {
        "screen_top_depth": [float(v) if np.isfinite(v) else None for v in top],
        "confined": [None if v is None or (isinstance(v, float) and np.isnan(v)) else v == "true"
                     for v in confined],
        "geometry_kind": [v if isinstance(v, str) else None for v in gkind]})
    frame = pd.DataFrame({"well_id": well_id, "zone_id": zone_id, "test_id": test_id, "casing_radius": rc,
                          "well_radius": rw, "screen_length": le, "aquifer_thickness": b, "static_depth": sd,
                          "tested_on": tested_on, "attrs": attrs, "source_row": cells.rows})
    return frame, None


#: metres of water per unit of a transducer reading. psi: 1 psi = 6894.757 Pa over water of density
#: 1000 kg/m3 under g = 9.80665 m/s2 (standard gravity); kPa likewise; m and ft of water are lengths
#: (1 ft = 0.3048 m exactly)
WATER_DENSITY = 1000.0
STANDARD_GRAVITY = 9.80665
PSI_PA = 6894.757
TRANSDUCER_UNITS = {"psi": PSI_PA / (WATER_DENSITY * STANDARD_GRAVITY),
                    "kpa": 1000.0 / (WATER_DENSITY * STANDARD_GRAVITY),
                    "m": 1.0, "ft": 0.3048}


def _instants(cells: Cells, column: str, *, required: bool = True) -> pd.Series:
    """Date-and-time cells as UTC timestamps (offsets applied), keeping fractions of a second (NaT where empty)."""
    values = cells.text(column, required=required)
    present = values.notna().to_numpy()
    parsed = pd.Series(pd.NaT, index=values.index, dtype="datetime64[ns]")
    if present.any():
        sub = values[present].astype(str)
        got = pd.to_datetime(sub, format="ISO8601", errors="coerce", utc=True)
        bad = got.isna().to_numpy() | (sub.str.len().to_numpy() < 16) | (sub.str.slice(4, 5) != "-").to_numpy()
        mask = np.zeros(len(values), dtype=bool)
        mask[np.flatnonzero(present)[bad]] = True
        first = sub.iloc[int(np.flatnonzero(bad)[0])] if bad.any() else ""
        cells.fail(mask, column, f"{first!r} is not an ISO 8601 date and time (YYYY-MM-DDTHH:MM[:SS[.fff]])")
        parsed[present] = got.dt.tz_convert(None).to_numpy()  # UTC, without the zone
    return parsed


def _prepare_transducer(store, path, label, crs_in):
    """A pressure-transducer export: readings of one or more slug tests -> slug_records rows.

    Each reading (``value`` in psi, kPa, m or ft of water) becomes a water level in the store's length unit.
    The test starts at ``test_start`` when the file gives it, else at the reading with the largest change
    from the reading before it (the slug going in or out). The static level is the median of the readings
    before the start; ``t_s`` is the time since the start in seconds and ``displacement`` the level minus the
    static level. Readings before the start give the static level only; each stored row keeps its raw reading
    in ``attrs`` (timestamp, value, value_unit), with the start, how it was found and the static level.
    """
    import json

    from ..quantities import LENGTH_UNITS

    cells = _read(path, label, "transducer")
    well_id, zone_id, test_id = (_value(cells, "transducer", c) for c in ("well_id", "zone_id", "test_id"))
    stamp = _value(cells, "transducer", "timestamp")
    value = _value(cells, "transducer", "value")
    unit = _value(cells, "transducer", "value_unit")  # one of TRANSDUCER_UNITS
    start_given = _value(cells, "transducer", "test_start")
    stamp_text = pd.Series(stamp.dt.strftime("%Y-%m-%dT%H:%M:%S.%f").to_numpy(), index=stamp.index)
    _unique(cells, [well_id, zone_id, test_id, stamp_text], ("well_id", "zone_id", "test_id", "timestamp"))
    _zone_refs(cells, store, well_id, zone_id)
    level = value * unit.map(TRANSDUCER_UNITS).to_numpy(float) / LENGTH_UNITS[store.settings.length_unit]
    raw_value = cells.frame["value"].to_numpy()
    raw_stamp = cells.frame["timestamp"].to_numpy()
    base_attrs = _attrs(cells, "transducer")
    key = pd.DataFrame({"w": well_id.to_numpy(), "z": zone_id.to_numpy(), "t": test_id.to_numpy()})
    parts = []
    for _, idx in key.groupby(["w", "z", "t"], sort=False).indices.items():
        idx = idx[np.argsort(stamp.to_numpy()[idx], kind="stable")]
        ts = stamp.iloc[idx]
        given = start_given.iloc[idx].dropna().unique()
        one = np.zeros(len(cells.rows), dtype=bool)
        one[idx] = True
        if len(given) > 1:
            cells.fail(one & start_given.notna().to_numpy(), "test_start",
                       f"test {test_id.iloc[idx[0]]} has more than one test_start; give one per test")
        if len(given) == 1:
            start = pd.Timestamp(given[0])
            i0 = int(np.searchsorted(ts.to_numpy(), start.to_datetime64()))
            found = "given (test_start)"
        else:
            if len(idx) < 2:
                cells.fail(one, "timestamp", "a test needs readings before and after its start")
            i0 = int(np.argmax(np.abs(np.diff(level[idx])))) + 1
            start = ts.iloc[i0]
            found = "from the data: the reading with the largest change from the reading before it"
        if i0 == 0:
            cells.fail(one, "test_start", f"test {test_id.iloc[idx[0]]} has no reading before its start, so the "
                       "static level is unknown; keep a few readings of the static level before the test")
        if len(idx) - i0 < 3:
            cells.fail(one, "timestamp", f"test {test_id.iloc[idx[0]]} has fewer than 3 readings after its start")
        static = float(np.median(level[idx[:i0]]))
        after = idx[i0:]
        t_s = (ts.iloc[i0:] - start).dt.total_seconds().to_numpy()
        start_text = start.strftime("%Y-%m-%dT%H:%M:%S" + (".%f" if start.microsecond else ""))
        attrs = []
        for n, row in enumerate(after):
            obj = json.loads(base_attrs.iloc[row]) if isinstance(base_attrs.iloc[row], str) else {}
            obj.update({"timestamp": raw_stamp[row], "value": raw_value[row], "value_unit": unit.iloc[row],
                        "test_start": start_text, "start_from": found, "static_level": static,
                        "static_readings": int(i0)})
            if n == 0:
                obj["readings_before_start"] = [[raw_stamp[r], raw_value[r], unit.iloc[r]] for r in idx[:i0]]
            attrs.append(json.dumps(obj, ensure_ascii=False))
        parts.append(pd.DataFrame({"well_id": well_id.iloc[after].to_numpy(), "zone_id": zone_id.iloc[after].to_numpy(),
                                   "test_id": test_id.iloc[after].to_numpy(), "t_s": t_s,
                                   "displacement": level[after] - static, "attrs": attrs,
                                   "source_row": cells.rows[after]}))
    return pd.concat(parts, ignore_index=True), None


_PREPARERS = {kind: globals()[f"_prepare_{kind}"] for kind in KINDS}
_CHECKERS = {kind: globals()[f"_check_{kind}"] for kind in STREAMED_KINDS}
