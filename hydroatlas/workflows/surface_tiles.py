"""Surfaces written tile by tile, never holding the grid (SPEC 2.14, issue 15).

:func:`hydroatlas.workflows.build_surface` takes this path for grids of more than :data:`STREAM_CELLS` cells and
whenever a Dask scheduler is given. The tiles of :func:`hydroatlas.interp.grid.iter_tiles` (this process, a
local process pool or a Dask cluster) go into the GeoTIFF as they arrive (:func:`hydroatlas.export.rasters.
geotiff_stream`); the mask of each tile is made as the tile is handed out (:class:`SurfaceMask`), and for heads
the gradient raster and the flow arrows are made from the same tiles, each with one row of its neighbours
(:class:`GradientTiles`). Memory: a bounded number of tiles (``in_flight``, by default twice the number of
workers) plus GDAL's block cache, whatever the size of the grid. The numbers are those of the in-memory path.
"""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..errors import ParameterError
from ..interp.grid import TILE_BUDGET, iter_tiles, wants_std

#: grids of more cells than this are written tile by tile (an estimate and a std in memory would be 160 MB)
STREAM_CELLS = 10_000_000


def predict_to_geotiff(model, grid, path, *, crs, mask_fn=None, return_std: bool = True, workers: int = 1,
                       scheduler=None, descriptions=None, units=None, tags=None,
                       budget_bytes: int = TILE_BUDGET, in_flight: int | None = None, progress=None,
                       on_tile=None, before_close=None) -> Path:
    """Predict ``grid`` tile by tile and write each tile into a GeoTIFF as it arrives.

    Parameters
    ----------
    model : fitted interpolator
    grid : GridSpec
    path : path-like
        The GeoTIFF (Cloud Optimized layout, :func:`hydroatlas.export.rasters.geotiff_stream`): band 1 the
        estimate, band 2 the standard deviation where the model has one and ``return_std`` is True.
    crs, descriptions, units, tags
        As :func:`hydroatlas.export.rasters.write_geotiff`.
    mask_fn, return_std, workers, scheduler, budget_bytes, in_flight
        As :func:`hydroatlas.interp.grid.iter_tiles`: ``scheduler`` (an address, a scheduler file or a
        ``distributed.Client``) runs the tiles on a Dask cluster, ``workers`` > 1 in local spawned processes.
    progress : callable, optional
        ``progress(rows)`` after each tile.
    on_tile : callable, optional
        ``on_tile(row0, row1, estimate, std)`` after each tile is written (tiles come in any order).
    before_close : callable, optional
        Called after the last tile, before the file is laid out and moved into place; an error it raises
        leaves no file.

    Returns the path written. Nothing appears at ``path`` unless every tile was written.
    """
    from ..export.rasters import geotiff_stream

    has_std = wants_std(model, return_std)
    tiles = iter_tiles(model, grid, mask_fn=mask_fn, return_std=has_std, workers=workers, scheduler=scheduler,
                       budget_bytes=budget_bytes, in_flight=in_flight)
    with geotiff_stream(path, grid, 2 if has_std else 1, crs=crs, descriptions=descriptions, units=units,
                        tags=tags) as sink:
        for r0, r1, est, std in tiles:
            sink.write(r0, [est, std] if has_std else [est])
            if on_tile is not None:
                on_tile(r0, r1, est, std)
            if progress:
                progress(r1 - r0)
        if sink.rows_written != grid.nrows:  # every tile once: a lost tile must not pass as no data
            raise RuntimeError(f"{sink.rows_written} of {grid.nrows} rows were written")
        if before_close is not None:
            before_close()
    return Path(path)


class SurfaceMask:
    """The cells of a surface grid that get a value, made tile by tile: ``mask(row0, row1)``.

    A cell counts when its centre lies inside one of ``polygons`` (the domain), or, without polygons, within
    ``distance`` of one of ``points``; and inside the extent of every unit whose presence table is in
    ``presences`` (:func:`hydroatlas.assign.inside_extent`). These are the rules of
    :func:`hydroatlas.interp.grid.mask_from_polygons`, :func:`~hydroatlas.interp.grid.mask_from_buffer` and
    :func:`hydroatlas.workflows.surfaces.extent_mask`, applied to the rows of one tile; the tiles give the
    same cells as the whole grid does.

    Each call adds to the counts ``cells_in_area`` (inside the domain or buffer), ``cells_removed`` (of those,
    outside the extent) and ``cells_kept``, so after one pass over the tiles they hold the whole grid's.
    """

    def __init__(self, grid, *, polygons=None, points=None, distance: float | None = None, presences=()):
        self.grid = grid
        self.polygons = None
        self.tree = None
        if polygons is not None:
            self.polygons = [g for g in polygons if g is not None and not g.is_empty]
            if not self.polygons:
                raise ParameterError("the domain holds no polygon")
        else:
            from scipy.spatial import cKDTree

            if points is None or distance is None:
                raise ParameterError("a mask needs polygons=, or points= and distance=",
                                     param=("polygons", "points", "distance"))
            if not (np.isfinite(distance) and distance > 0):
                raise ParameterError(f"buffer distance must be a finite number > 0; got {distance}")
            self.tree = cKDTree(np.asarray(points, float))
            self.distance = float(distance)
        self.presences = list(presences)
        self.cells_in_area = self.cells_removed = self.cells_kept = 0

    def __call__(self, row0: int, row1: int) -> np.ndarray:
        from .. import assign

        grid = self.grid
        shape = (row1 - row0, grid.ncols)
        if self.polygons is not None:
            from rasterio.features import geometry_mask
            from rasterio.transform import from_origin

            transform = from_origin(grid.x0, grid.y0 - row0 * grid.cell, grid.cell, grid.cell)
            area = geometry_mask(self.polygons, out_shape=shape, transform=transform, invert=True,
                                 all_touched=False)
        else:
            d, _ = self.tree.query(grid.centers(row0, row1), k=1, distance_upper_bound=self.distance, workers=-1)
            area = np.isfinite(d).reshape(shape)
        kept = area.copy()
        if self.presences:
            centres = grid.centers(row0, row1)
            for pres in self.presences:
                kept &= assign.inside_extent(pres, centres).reshape(shape)
        self.cells_in_area += int(area.sum())
        self.cells_removed += int((area & ~kept).sum())
        self.cells_kept += int(kept.sum())
        return kept

    def whole(self, rows_per_tile: int = 256) -> np.ndarray:
        """The mask of the whole grid (for grids held in memory)."""
        out = np.empty(self.grid.shape, dtype=bool)
        for r0 in range(0, self.grid.nrows, rows_per_tile):
            r1 = min(self.grid.nrows, r0 + rows_per_tile)
            out[r0:r1] = self(r0, r1)
        return out


class GradientTiles:
    """The gradient raster and the flow-arrow samples of a head surface, from its tiles in any order.

    ``feed(row0, row1, head, std)`` takes a head tile (float64, as predicted); the rows are worked through in
    order, each tile with the last row of the one above and the first row of the one below, so the central
    differences of :func:`hydroatlas.flow.grid_gradient` come out as on the whole grid. Tiles that arrive
    ahead of their turn wait; with tiles handed out in order and a bounded number in flight, so are they.
    """

    def __init__(self, grid, sink, *, vertical_per_horizontal: float, arrows_across: int = 18):
        from .surfaces import arrow_cells

        self.grid = grid
        self.sink = sink
        self.scale = float(vertical_per_horizontal)
        rows, cols = arrow_cells(grid, arrows_across)
        self.arrow_rows = np.unique(rows)
        self.arrow_cols = np.unique(cols)
        self.waiting = {}
        self.next_row = 0
        self.above = None  # the last head row of the tile before next_row
        self.samples = []  # (rows, cols, mag, az, head) per tile, in row order

    def feed(self, row0: int, row1: int, head, std=None) -> None:
        self.waiting[int(row0)] = (int(row1), np.asarray(head, float))
        while self.next_row in self.waiting:
            r0 = self.next_row
            r1, tile = self.waiting[r0]
            if r1 < self.grid.nrows and r1 not in self.waiting:
                return  # the row below is still out
            below = self.waiting[r1][1][:1] if r1 < self.grid.nrows else tile[:0]
            self._work(r0, r1, tile, below)
            del self.waiting[r0]
            self.above = tile[-1:]
            self.next_row = r1

    def _work(self, r0, r1, tile, below) -> None:
        from .. import flow

        above = self.above if self.above is not None else tile[:0]
        block = np.concatenate([above, tile, below])
        mag, az = flow.grid_gradient(block, self.grid.cell, vertical_per_horizontal=self.scale)
        inner = slice(len(above), len(above) + (r1 - r0))
        mag, az = mag[inner], az[inner]
        self.sink.write(r0, [mag, az])
        rows = self.arrow_rows[(self.arrow_rows >= r0) & (self.arrow_rows < r1)]
        if len(rows):
            rr, cc = np.meshgrid(rows, self.arrow_cols, indexing="ij")
            rr, cc = rr.ravel(), cc.ravel()
            self.samples.append((rr, cc, mag[rr - r0, cc], az[rr - r0, cc], tile[rr - r0, cc]))

    def arrows(self):
        """(rows, cols, gradient, azimuth, head) of the arrow cells, in row-major order."""
        if self.next_row != self.grid.nrows:
            raise RuntimeError(f"the gradient reached row {self.next_row} of {self.grid.nrows}")
        if not self.samples:
            empty = np.empty(0)
            return empty.astype(int), empty.astype(int), empty, empty, empty
        return tuple(np.concatenate(parts) for parts in zip(*self.samples))


@contextmanager
def gradient_tiles(store, unit: str, grid, out, *, crs_to_m: float):
    """Yield a :class:`GradientTiles` writing OUT/<unit>_gradient.tif; when the block ends without error, the
    flow_arrows layer is written and the files are in ``.files`` (as :func:`~.surfaces.write_gradients`)."""
    from ..export.names import unit_path
    from ..export.rasters import geotiff_stream
    from .surfaces import gradient_raster_args, gradient_scale, write_flow_arrows

    path = unit_path(out, unit, "gradient.tif")
    with geotiff_stream(path, grid, 2, **gradient_raster_args(store, unit)) as sink:
        grad = GradientTiles(grid, sink, vertical_per_horizontal=gradient_scale(store, crs_to_m))
        yield grad
        rows, cols, mag, az, head = grad.arrows()
    grad.files = {"gradient": str(path), **write_flow_arrows(store, unit, grid, rows, cols, mag, az, head, out)}


def write_surface_tiles(store, unit: str, quantity: str, model, grid, mask: SurfaceMask, out, *, raster_args: dict,
                        crs_to_m: float, scheduler=None, workers: int = 1, progress=None,
                        before_close=None) -> tuple[Path, dict]:
    """The surface raster of a unit (and, for heads, its gradient raster and flow arrows), tile by tile.

    Returns (raster path, gradient files: {} unless a head surface).
    """
    from ..export.names import unit_path

    path = unit_path(out, unit, f"{quantity}.tif")
    if quantity != "head":
        return predict_to_geotiff(model, grid, path, mask_fn=mask, scheduler=scheduler, workers=workers,
                                  progress=progress, before_close=before_close, **raster_args), {}
    with gradient_tiles(store, unit, grid, out, crs_to_m=crs_to_m) as grad:
        tif = predict_to_geotiff(model, grid, path, mask_fn=mask, scheduler=scheduler, workers=workers,
                                 progress=progress, on_tile=grad.feed, before_close=before_close, **raster_args)
    return tif, grad.files
