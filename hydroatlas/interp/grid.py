"""Regular grids, masks and tile-by-tile prediction under a memory budget.

A :class:`GridSpec` is a frozen value object: north-up, origin at the upper-left
corner of the upper-left cell, square cells. Prediction runs tile by tile
through :func:`predict_tile`, a pure function of (model, grid, window) that a
process pool (or a Dask cluster) can run unchanged.
"""

from __future__ import annotations

import math
import multiprocessing
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass

import numpy as np

from ..errors import ParameterError

#: default ceiling on the number of cells of one grid
MAX_CELLS = 50_000_000
#: smallest cell size relative to the size of the coordinates (keeps cell edges distinct in float64)
MIN_CELL_RELATIVE = 1e-9


@dataclass(frozen=True)
class GridSpec:
    """A north-up regular grid.

    Parameters
    ----------
    x0, y0 : float
        Upper-left corner (west edge, north edge) in CRS units.
    cell : float
        Cell size (> 0), in CRS units.
    nrows, ncols : int
    crs : str or None
        CRS as WKT or user string (carried to the writers).
    """

    x0: float
    y0: float
    cell: float
    nrows: int
    ncols: int
    crs: str | None = None

    def __post_init__(self):
        if not (math.isfinite(self.cell) and self.cell > 0):
            raise ParameterError(f"grid cell size must be a finite number > 0; got {self.cell}")
        if not (math.isfinite(self.x0) and math.isfinite(self.y0)):
            raise ParameterError(f"grid origin must be finite; got ({self.x0}, {self.y0})")
        for name in ("nrows", "ncols"):
            n = getattr(self, name)
            try:
                whole = not isinstance(n, bool) and float(n).is_integer()
            except (TypeError, ValueError):
                whole = False
            if not whole:
                raise ParameterError(f"grid {name} must be a whole number; got {n!r}")
        if int(self.nrows) < 1 or int(self.ncols) < 1:
            raise ParameterError(f"grid shape must be at least 1 x 1; got {self.nrows} x {self.ncols}")
        object.__setattr__(self, "nrows", int(self.nrows))
        object.__setattr__(self, "ncols", int(self.ncols))

    @classmethod
    def from_bounds(cls, xmin, ymin, xmax, ymax, cell, *, crs=None, max_cells: int = MAX_CELLS) -> "GridSpec":
        """Smallest grid of ``cell``-sized cells covering the bounds, its edges on whole multiples of ``cell``.

        The edges come from :func:`snapped_extent`, so grids of one cell size line up
        cell for cell whatever bounds they were made from.
        """
        bounds = (xmin, ymin, xmax, ymax)
        if not all(isinstance(v, (int, float, np.number)) and math.isfinite(v) for v in bounds):
            raise ParameterError(f"grid bounds must be finite numbers; got {bounds}")
        if xmax < xmin or ymax < ymin:
            raise ParameterError(f"grid bounds must run from minimum to maximum; got {bounds}")
        if not (isinstance(cell, (int, float, np.number)) and math.isfinite(cell) and cell > 0):
            raise ParameterError(f"cell size must be a finite number > 0; got {cell}")
        magnitude = max(1.0, *(abs(float(v)) for v in bounds))
        if cell < MIN_CELL_RELATIVE * magnitude:
            raise ParameterError(f"a cell size of {cell:g} is too small to be told apart at coordinates of "
                                 f"{magnitude:g}; choose a larger cell size")
        if isinstance(max_cells, bool) or not isinstance(max_cells, (int, np.integer)) or max_cells < 1:
            raise ParameterError(f"max_cells must be a whole number >= 1; got {max_cells!r}")
        ix0, iy0, ix1, iy1 = _edge_multiples(bounds, cell)
        x0, _, _, y1 = snapped_extent(bounds, cell)
        ncols, nrows = ix1 - ix0, iy1 - iy0
        if ncols * nrows > max_cells:
            raise ParameterError(f"a cell size of {cell:g} gives {nrows} x {ncols} = {nrows * ncols:,} cells, "
                                 f"more than the maximum of {max_cells:,}; choose a larger cell size")
        return cls(float(x0), float(y1), float(cell), nrows, ncols, crs)

    @property
    def shape(self) -> tuple[int, int]:
        return (self.nrows, self.ncols)

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        return (self.x0, self.y0 - self.nrows * self.cell, self.x0 + self.ncols * self.cell, self.y0)

    @property
    def transform(self):
        from rasterio.transform import from_origin

        return from_origin(self.x0, self.y0, self.cell, self.cell)

    def x_centers(self) -> np.ndarray:
        return self.x0 + (np.arange(self.ncols) + 0.5) * self.cell

    def y_centers(self) -> np.ndarray:
        return self.y0 - (np.arange(self.nrows) + 0.5) * self.cell

    def centers(self, row0: int = 0, row1: int | None = None) -> np.ndarray:
        """Cell centres of rows [row0, row1) in row-major order, shape (rows * ncols, 2)."""
        row1 = self.nrows if row1 is None else row1
        xs = self.x_centers()
        ys = self.y_centers()[row0:row1]
        return np.column_stack([np.tile(xs, len(ys)), np.repeat(ys, len(xs))])

    def cell_of(self, xy) -> tuple[np.ndarray, np.ndarray]:
        """Row and column of points (may fall outside the grid)."""
        xy = np.asarray(xy, float)
        col = np.floor((xy[:, 0] - self.x0) / self.cell).astype(int)
        row = np.floor((self.y0 - xy[:, 1]) / self.cell).astype(int)
        return row, col

    def to_dict(self) -> dict:
        return {"x0": self.x0, "y0": self.y0, "cell": self.cell, "nrows": self.nrows, "ncols": self.ncols}


#: cells along the longer side of an automatic grid
AUTO_CELLS_ACROSS = 200
#: relative size below which the spread of points across their main direction counts as none (points on a line)
FLAT_TOLERANCE = 1e-6


def spread_rank(xy) -> int:
    """How many directions the points spread in: 0 (one location), 1 (on one line) or 2 (over an area).

    The spread across the main direction counts only above ``FLAT_TOLERANCE`` times the spread along it.
    """
    pts = np.unique(np.asarray(xy, float).reshape(-1, 2), axis=0)
    if len(pts) < 2:
        return 0
    sv = np.linalg.svd(pts - pts.mean(axis=0), compute_uv=False)
    if not sv[0] > 0:
        return 0
    return 2 if len(sv) > 1 and sv[1] > FLAT_TOLERANCE * sv[0] else 1


#: mantissas of a readable cell size (times a power of ten)
READABLE_STEPS = (1.0, 2.0, 2.5, 5.0)
#: relative slack for floating-point noise when a value already lies on a step or a cell edge
_SNAP_SLACK = 1e-9


def readable_cell(extent_span: float, cells_across: int = AUTO_CELLS_ACROSS) -> float:
    """The largest readable cell size (1, 2, 2.5 or 5 times a power of ten) not above ``extent_span / cells_across``.

    Rounding down keeps the grid at least as fine as asked: ``cells_across`` or more cells, and fewer
    than twice as many, along a side of length ``extent_span`` (the steps grow by at most a factor of 2).
    Units are those of ``extent_span`` (the CRS unit of a surface grid).

    Examples
    --------
    >>> readable_cell(2400.0)
    10.0
    >>> readable_cell(37_000.0)
    100.0
    >>> readable_cell(0.6)
    0.0025
    """
    span = float(extent_span)
    if isinstance(cells_across, bool) or not isinstance(cells_across, (int, np.integer)) or cells_across < 1:
        raise ParameterError(f"cells_across must be a whole number >= 1; got {cells_across!r}")
    if not (math.isfinite(span) and span > 0):
        raise ParameterError(f"extent_span must be a finite number > 0; got {extent_span!r}")
    raw = span / int(cells_across)
    exponent = math.floor(math.log10(raw))
    best = None
    for k in (exponent - 1, exponent, exponent + 1):  # log10 may round across a power of ten
        for step in READABLE_STEPS:
            value = float(f"{step:g}e{k}")  # the double nearest the decimal value, e.g. 0.0025
            if value <= raw * (1.0 + _SNAP_SLACK) and (best is None or value > best):
                best = value
    return best


def snapped_extent(bounds, cell: float) -> tuple[float, float, float, float]:
    """``bounds`` (xmin, ymin, xmax, ymax) widened outward to whole multiples of ``cell``.

    Every edge becomes ``i * cell`` for a whole number i, so grids of one cell size made
    from different bounds (other runs, other units, other rasters on the same rule) share
    their cell edges. The result contains ``bounds`` (an edge within 1e-9 cell of a
    multiple counts as on it) and is at least one cell wide and tall. The edges are
    computed in decimal arithmetic, so a cell of 0.1 gives an edge at 12.3, not
    12.300000000000001.
    """
    from decimal import Decimal

    ix0, iy0, ix1, iy1 = _edge_multiples(bounds, cell)
    step = Decimal(repr(float(cell)))
    return tuple(float(Decimal(i) * step) for i in (ix0, iy0, ix1, iy1))


def _edge_multiples(bounds, cell: float) -> tuple[int, int, int, int]:
    """Whole numbers (ix0, iy0, ix1, iy1) with ``ix0 * cell <= xmin`` ... of :func:`snapped_extent`."""
    xmin, ymin, xmax, ymax = (float(v) for v in bounds)
    if not all(math.isfinite(v) for v in (xmin, ymin, xmax, ymax)):
        raise ParameterError(f"grid bounds must be finite numbers; got {tuple(bounds)}")
    if xmax < xmin or ymax < ymin:
        raise ParameterError(f"grid bounds must run from minimum to maximum; got {tuple(bounds)}")
    if not (isinstance(cell, (int, float, np.number)) and math.isfinite(cell) and cell > 0):
        raise ParameterError(f"cell size must be a finite number > 0; got {cell}")
    out = []
    for lo, hi in ((xmin, xmax), (ymin, ymax)):
        i0 = math.floor(lo / cell + _SNAP_SLACK)
        i1 = max(math.ceil(hi / cell - _SNAP_SLACK), i0 + 1)
        out.append((i0, i1))
    (ix0, ix1), (iy0, iy1) = out
    return ix0, iy0, ix1, iy1


def auto_cell(xmin, ymin, xmax, ymax, *, cells_across: int = AUTO_CELLS_ACROSS) -> float:
    """Default cell size of a surface grid: :func:`readable_cell` of the longer side of the bounds.

    Raises ParameterError when the bounds have no extent (one point), where any
    cell size would be arbitrary: give one explicitly.
    """
    span = max(xmax - xmin, ymax - ymin)
    if not (math.isfinite(span) and span > 0):
        raise ParameterError(f"the area ({xmin:g}, {ymin:g}) - ({xmax:g}, {ymax:g}) has no extent; "
                             "give a cell size")
    return readable_cell(span, cells_across)


def mask_from_polygons(grid: GridSpec, geometries) -> np.ndarray:
    """True where the cell centre lies inside any of the polygons (store CRS)."""
    from rasterio.features import geometry_mask

    geoms = [g for g in geometries if g is not None and not g.is_empty]
    if not geoms:
        raise ParameterError("the domain holds no polygon")
    return geometry_mask(geoms, out_shape=grid.shape, transform=grid.transform, invert=True, all_touched=False)


def mask_from_buffer(grid: GridSpec, xy, distance: float, *, rows_per_tile: int = 256) -> np.ndarray:
    """True where the cell centre lies within ``distance`` of a data point."""
    from scipy.spatial import cKDTree

    if not (math.isfinite(distance) and distance > 0):
        raise ParameterError(f"buffer distance must be a finite number > 0; got {distance}")
    tree = cKDTree(np.asarray(xy, float))
    out = np.zeros(grid.shape, dtype=bool)
    for r0 in range(0, grid.nrows, rows_per_tile):
        r1 = min(grid.nrows, r0 + rows_per_tile)
        d, _ = tree.query(grid.centers(r0, r1), k=1, distance_upper_bound=distance, workers=-1)
        out[r0:r1] = np.isfinite(d).reshape(r1 - r0, grid.ncols)
    return out


def predict_tile(model, grid: GridSpec, row0: int, row1: int, mask=None, return_std: bool = True):
    """Pure tile function: estimate (and std) for rows [row0, row1) of ``grid``; NaN outside ``mask``."""
    shape = (row1 - row0, grid.ncols)
    est = np.full(shape, np.nan)
    std = np.full(shape, np.nan) if return_std else None
    pts = grid.centers(row0, row1)
    keep = np.ones(len(pts), bool) if mask is None else np.asarray(mask, bool).ravel()
    if keep.any():
        if return_std:
            e, s = model.predict(pts[keep], return_std=True)
            std.ravel()[keep] = s
        else:
            e = model.predict(pts[keep])
        est.ravel()[keep] = e
    return est, std


#: default memory budget of one tile's working arrays, bytes
TILE_BUDGET = 256 * 2**20


def rows_per_tile(grid: GridSpec, budget_bytes: int = TILE_BUDGET, bytes_per_cell: int = 400) -> int:
    """Rows per tile so that one tile's working arrays stay within ``budget_bytes``."""
    return max(1, min(grid.nrows, budget_bytes // max(1, bytes_per_cell * grid.ncols)))


def tile_rows(grid: GridSpec, budget_bytes: int = TILE_BUDGET) -> list[tuple[int, int]]:
    """The tiles of a grid as (row0, row1) pairs, north to south, each within ``budget_bytes``."""
    rows = rows_per_tile(grid, budget_bytes)
    return [(r0, min(grid.nrows, r0 + rows)) for r0 in range(0, grid.nrows, rows)]


def wants_std(model, return_std: bool = True) -> bool:
    """Whether prediction gives a std band: asked for and the model has one (``model.has_std``)."""
    return bool(return_std and getattr(model, "has_std", False))


def iter_tiles(model, grid: GridSpec, *, mask_fn=None, return_std: bool = True, workers: int = 1, scheduler=None,
               budget_bytes: int = TILE_BUDGET, in_flight: int | None = None):
    """Predict a grid tile by tile, yielding ``(row0, row1, estimate, std)`` as each tile is done.

    Parameters
    ----------
    model : fitted interpolator
    grid : GridSpec
    mask_fn : callable, optional
        ``mask_fn(row0, row1)`` gives the bool mask of rows [row0, row1), shape (row1 - row0, ncols); cells
        outside it are NaN and not predicted. It runs in this process, once per tile, just before the tile is
        handed out, so it may hold data that does not travel (an open store, a large polygon).
    return_std : bool
        Also the standard deviation, where the model has one (:func:`wants_std`); otherwise std is None.
    workers : int
        Local processes (> 1: a pool of spawned processes, each sent the model once).
    scheduler : str or distributed.Client, optional
        Run the tiles on this Dask cluster instead (:mod:`hydroatlas.interp.dask_tiles`): an address such as
        ``tcp://host:8786``, a scheduler file, or a connected client. Give either ``workers`` or ``scheduler``.
    budget_bytes : int
        Memory budget of one tile's working arrays (:func:`rows_per_tile`).
    in_flight : int, optional
        Most tiles handed out and not yet yielded (default: twice the number of workers or worker threads).
        Finished tiles wait in memory only until yielded, so memory stays bounded by this many tiles.

    The tiles come in the order they finish, not in row order; each is :func:`predict_tile` of the same
    arguments whichever way it ran, so the three ways give the same numbers.
    """
    _check_count("workers", workers)
    if in_flight is not None:
        _check_count("in_flight", in_flight)
    if scheduler is not None and workers != 1:
        raise ParameterError("give workers= (local processes) or scheduler= (a Dask cluster), not both",
                             param=("workers", "scheduler"))
    has_std = wants_std(model, return_std)
    jobs = tile_rows(grid, budget_bytes)

    def tile_mask(r0, r1):
        if mask_fn is None:
            return None
        m = np.asarray(mask_fn(r0, r1), dtype=bool)
        if m.shape != (r1 - r0, grid.ncols):
            raise ParameterError(f"mask_fn({r0}, {r1}) gave shape {m.shape}; expected {(r1 - r0, grid.ncols)}",
                                 param="mask_fn")
        return m

    if scheduler is not None:
        from .dask_tiles import cluster_tiles

        return cluster_tiles(scheduler, model, grid, jobs, tile_mask, has_std, in_flight=in_flight)
    if workers > 1 and len(jobs) > 1:
        return _pool_tiles(model, grid, jobs, tile_mask, has_std, min(int(workers), len(jobs)), in_flight)
    return ((r0, r1, *predict_tile(model, grid, r0, r1, tile_mask(r0, r1), has_std)) for r0, r1 in jobs)


def _check_count(name: str, value) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
        raise ParameterError(f"{name} must be a whole number >= 1; got {value!r}", param=name)


#: the model a pool process was given when it started (:func:`_pool_tiles`)
_HELD_MODEL = None


def _hold_model(model) -> None:
    global _HELD_MODEL
    _HELD_MODEL = model


def _predict_held(grid, row0, row1, mask, return_std):
    return predict_tile(_HELD_MODEL, grid, row0, row1, mask, return_std)


def _pool_tiles(model, grid, jobs, tile_mask, has_std, workers, in_flight):
    """Tiles in a pool of spawned processes, each sent the model once; at most ``in_flight`` tiles out.

    The pool spawns fresh interpreters: numba's threading layer does not survive a fork of a process that
    has already used it.
    """
    from concurrent.futures import FIRST_COMPLETED, wait

    limit = in_flight or 2 * workers
    pending = {}
    todo = iter(jobs)
    with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
                             initializer=_hold_model, initargs=(model,)) as pool:

        def hand_out() -> None:
            for r0, r1 in todo:
                pending[pool.submit(_predict_held, grid, r0, r1, tile_mask(r0, r1), has_std)] = (r0, r1)
                return

        try:
            for _ in range(limit):
                hand_out()
            while pending:
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for fut in done:
                    r0, r1 = pending.pop(fut)
                    est, std = fut.result()
                    hand_out()
                    yield r0, r1, est, std
        finally:
            for fut in pending:
                fut.cancel()


def predict_grid(model, grid: GridSpec, *, mask=None, return_std: bool = True, workers: int = 1, scheduler=None,
                 budget_bytes: int = TILE_BUDGET, progress=None):
    """Predict over the whole grid tile by tile, in this process, a local process pool or a Dask cluster.

    Returns (estimate, std) arrays of the grid's shape (std None when not asked or
    the model has no std, ``model.has_std`` False); cells outside ``mask`` (bool, the grid's shape) are NaN.
    ``workers`` > 1 runs the tiles in a pool of spawned processes; ``scheduler`` (an address, a scheduler
    file or a ``distributed.Client``) on a Dask cluster. Both run the module-level pure :func:`predict_tile`,
    so every way gives the same numbers. ``progress(rows)`` is called as each tile is done. For grids too
    large to hold, write tiles to a file as they come: :func:`hydroatlas.workflows.surface_tiles.predict_to_geotiff`.
    """
    if mask is not None:
        mask = np.asarray(mask, dtype=bool)
        if mask.shape != grid.shape:
            raise ParameterError(f"mask has shape {mask.shape}, the grid {grid.shape}", param="mask")
    tiles = iter_tiles(model, grid, mask_fn=None if mask is None else (lambda r0, r1: mask[r0:r1]),
                       return_std=return_std, workers=workers, scheduler=scheduler, budget_bytes=budget_bytes)
    est = np.full(grid.shape, np.nan)
    std = np.full(grid.shape, np.nan) if wants_std(model, return_std) else None
    for r0, r1, e, s in tiles:
        est[r0:r1] = e
        if std is not None:
            std[r0:r1] = s
        if progress:
            progress(r1 - r0)
    return est, std
