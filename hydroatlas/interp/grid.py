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
        """Smallest grid of ``cell``-sized cells covering the bounds (snapped outward to multiples of cell)."""
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
        x0 = math.floor(xmin / cell) * cell
        y1 = math.ceil(ymax / cell) * cell
        ncols = max(1, int(math.ceil((xmax - x0) / cell - 1e-9)))
        nrows = max(1, int(math.ceil((y1 - ymin) / cell - 1e-9)))
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


def auto_cell(xmin, ymin, xmax, ymax, *, cells_across: int = AUTO_CELLS_ACROSS) -> float:
    """Cell size giving ``cells_across`` cells along the longer side of the bounds.

    Raises ParameterError when the bounds have no extent (one point), where any
    cell size would be arbitrary: give one explicitly.
    """
    span = max(xmax - xmin, ymax - ymin)
    if not (math.isfinite(span) and span > 0):
        raise ParameterError(f"the area ({xmin:g}, {ymin:g}) - ({xmax:g}, {ymax:g}) has no extent; "
                             "give a cell size")
    return float(span / cells_across)


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


def rows_per_tile(grid: GridSpec, budget_bytes: int = 256 * 2**20, bytes_per_cell: int = 400) -> int:
    """Rows per tile so that one tile's working arrays stay within ``budget_bytes``."""
    return max(1, min(grid.nrows, budget_bytes // max(1, bytes_per_cell * grid.ncols)))


def predict_grid(model, grid: GridSpec, *, mask=None, return_std: bool = True, workers: int = 1,
                 budget_bytes: int = 256 * 2**20, progress=None):
    """Predict over the whole grid tile by tile; ``workers`` > 1 runs tiles in a process pool.

    Returns (estimate, std) arrays of the grid's shape (std None when not asked or
    the model has no std, ``model.has_std`` False); cells outside ``mask`` are NaN.

    The pool starts its processes by spawning fresh interpreters: numba's threading
    layer does not survive a fork of a process that has already used it. Each task is
    the module-level pure :func:`predict_tile` with a pickled model, so a Dask cluster
    can run the same tasks.
    """
    if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise ParameterError(f"workers must be a whole number >= 1; got {workers!r}")
    rows = rows_per_tile(grid, budget_bytes)
    has_std = bool(return_std and getattr(model, "has_std", False))
    est = np.full(grid.shape, np.nan)
    std = np.full(grid.shape, np.nan) if has_std else None
    jobs = [(r0, min(grid.nrows, r0 + rows)) for r0 in range(0, grid.nrows, rows)]

    def tile_mask(r0, r1):
        return None if mask is None else mask[r0:r1]

    if workers > 1 and len(jobs) > 1:
        with ProcessPoolExecutor(max_workers=min(int(workers), len(jobs)),
                                 mp_context=multiprocessing.get_context("spawn")) as pool:
            futures = [(r0, r1, pool.submit(predict_tile, model, grid, r0, r1, tile_mask(r0, r1), has_std))
                       for r0, r1 in jobs]
            for r0, r1, fut in futures:
                e, s = fut.result()
                est[r0:r1] = e
                if has_std:
                    std[r0:r1] = s
                if progress:
                    progress(r1 - r0)
    else:
        for r0, r1 in jobs:
            e, s = predict_tile(model, grid, r0, r1, tile_mask(r0, r1), has_std)
            est[r0:r1] = e
            if has_std:
                std[r0:r1] = s
            if progress:
                progress(r1 - r0)
    return est, std
