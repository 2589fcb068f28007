"""GeoTIFFs: written as Cloud Optimized GeoTIFFs (north-up, float32, CRS, nodata, band descriptions and units),
and read back as xarray DataArrays (:func:`read_surface`).

The layout is GDAL's COG (Cloud Optimized GeoTIFF): tiled, deflate-compressed, with internal overviews when the
raster is larger than one tile, and every directory (IFD) before the pixel data, so that GIS tools and web
clients can read a window or a zoomed-out view without reading the whole file. GDAL's own COG driver makes it.
"""

from __future__ import annotations

import json
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..errors import ParameterError
from .names import atomic_path, write_text

NODATA = -9999.0
#: tile size of the COG layout, pixels (GDAL's default is 512; 256 suits surfaces of a few hundred cells)
COG_BLOCK = 256
#: overview resampling methods GDAL accepts that make sense for continuous values and for directions
OVERVIEW_RESAMPLING = ("average", "nearest", "bilinear", "cubic", "mode")
#: the band names :func:`read_surface` gives, in band order
SURFACE_BANDS = ("estimate", "std")
#: quantities of rasters that are not one estimate (and its std) per cell: refused by :func:`read_surface`
NOT_SURFACES = {"gradient": "its bands are the gradient magnitude and the flow azimuth"}


def write_geotiff(path, grid, bands, *, crs, descriptions=None, units=None, nodata: float = NODATA, tags=None,
                  overview_resampling: str = "average") -> Path:
    """Write 2-D arrays (NaN = no data) as the bands of one Cloud Optimized GeoTIFF.

    Parameters
    ----------
    path : path-like
    grid : GridSpec
    bands : list of arrays of ``grid.shape``
    crs : CRS-like (pyproj CRS, WKT or EPSG string)
    descriptions : list of str, optional
        One text per band (GDAL band description); one text applies to every band.
    units : str or list of str, optional
        Unit of each band's values (GDAL band unit type), e.g. ``'ft'`` for a head and its standard deviation,
        ``'log10(ft/d)'`` for log K, ``'1'`` for a dimensionless gradient, ``'degree'`` for an azimuth.
        One text applies to every band.
    nodata : float
        Written where a value is not finite.
    tags : dict, optional
        Dataset metadata items (values written as text).
    overview_resampling : str
        How the overviews average cells: ``'average'`` (default; no-data cells are left out of the mean)
        suits heads and K; use ``'nearest'`` for directions, whose mean across north is meaningless.

    The file appears whole or not at all: an uncompressed working copy is written beside it, GDAL's COG
    driver copies it into the final layout (tiles of ``COG_BLOCK`` pixels, deflate, overviews), and the
    result is moved into place (:func:`geotiff_stream`).
    """
    path = Path(path)
    arrays = [np.asarray(band, dtype=float) for band in bands]
    if not arrays:
        raise ParameterError("bands must hold at least one array")
    for i, arr in enumerate(arrays, start=1):
        if arr.shape != grid.shape:
            raise ParameterError(f"band {i} has shape {arr.shape}, the grid {grid.shape}")
    descriptions = _per_band("descriptions", descriptions, len(arrays))
    units = _per_band("units", units, len(arrays))
    if overview_resampling not in OVERVIEW_RESAMPLING:
        raise ParameterError(f"overview_resampling must be one of {', '.join(OVERVIEW_RESAMPLING)}; "
                             f"got {overview_resampling!r}")
    with geotiff_stream(path, grid, len(arrays), crs=crs, descriptions=descriptions, units=units, nodata=nodata,
                        tags=tags, overview_resampling=overview_resampling) as sink:
        sink.write(0, arrays)
    return path


class GeoTiffStream:
    """The writer :func:`geotiff_stream` yields: ``write(row0, bands)`` puts blocks of rows in place."""

    def __init__(self, dataset, grid, nodata: float):
        self._dst = dataset
        self._grid = grid
        self._nodata = nodata
        #: grid rows written so far (a row written twice counts twice)
        self.rows_written = 0

    def write(self, row0: int, bands) -> None:
        """Write one block of rows: ``bands`` holds one array of shape (rows, ncols) per band (NaN = no data).

        Blocks may come in any order; the rows are ``row0`` to ``row0 + rows``.
        """
        from rasterio.windows import Window

        arrays = [np.asarray(b, dtype=float) for b in bands]
        if len(arrays) != self._dst.count:
            raise ParameterError(f"bands must give one array per band ({self._dst.count}); got {len(arrays)}")
        rows = arrays[0].shape[0] if arrays[0].ndim == 2 else -1
        for i, arr in enumerate(arrays, start=1):
            if arr.shape != (rows, self._grid.ncols):
                raise ParameterError(f"band {i} block has shape {arr.shape}; expected (rows, {self._grid.ncols})")
        whole = not isinstance(row0, bool) and isinstance(row0, (int, np.integer))
        if not whole or not 0 <= row0 <= self._grid.nrows - rows:
            raise ParameterError(f"row0= {row0!r} with {rows} rows falls outside the grid's {self._grid.nrows} rows",
                                 param="row0")
        window = Window(0, int(row0), self._grid.ncols, rows)
        for i, arr in enumerate(arrays, start=1):
            self._dst.write(np.where(np.isfinite(arr), arr, self._nodata).astype("float32"), i, window=window)
        self.rows_written += rows


@contextmanager
def geotiff_stream(path, grid, count: int, *, crs, descriptions=None, units=None, nodata: float = NODATA,
                   tags=None, overview_resampling: str = "average"):
    """Write the ``count`` bands of one Cloud Optimized GeoTIFF a block of rows at a time.

    Yields a :class:`GeoTiffStream`; its ``write(row0, bands)`` puts arrays of shape (rows, ncols) at row
    ``row0``, in any order, so a surface computed tile by tile never needs the whole grid in memory. The
    other arguments are those of :func:`write_geotiff`.

    The blocks go into an uncompressed working GeoTIFF beside ``path`` (band-interleaved strips, so that each
    block lands in place: 4 bytes per cell and band on disk, nothing held in memory beyond GDAL's block
    cache). When the with-block ends without error GDAL's COG driver copies it into the final layout (tiles,
    deflate, overviews), which reads the whole working file once more and needs about its size again in
    temporary space for the overviews; then the result is moved onto ``path``. On an error nothing appears at
    ``path``. Rows never written hold no data.
    """
    import rasterio
    import rasterio.shutil

    path = Path(path)
    if isinstance(count, bool) or not isinstance(count, (int, np.integer)) or count < 1:
        raise ParameterError(f"count= must be a whole number >= 1; got {count!r}", param="count")
    descriptions = _per_band("descriptions", descriptions, count)
    units = _per_band("units", units, count)
    if overview_resampling not in OVERVIEW_RESAMPLING:
        raise ParameterError(f"overview_resampling must be one of {', '.join(OVERVIEW_RESAMPLING)}; "
                             f"got {overview_resampling!r}")
    crs_text = crs.to_wkt() if hasattr(crs, "to_wkt") else crs
    profile = {"driver": "GTiff", "width": grid.ncols, "height": grid.nrows, "count": int(count),
               "dtype": "float32", "crs": crs_text, "transform": grid.transform, "nodata": nodata,
               "interleave": "band", "BIGTIFF": "IF_NEEDED"}
    # over about 2 GB of cells a deflated COG may still pass the 4 GB limit of classic TIFF
    bigtiff = "IF_SAFER" if grid.nrows * grid.ncols * int(count) * 4 > 2 * 10**9 else "IF_NEEDED"
    with atomic_path(path) as tmp:
        work = tmp.with_name(tmp.name + ".work.tif")
        try:
            with rasterio.open(work, "w", **profile) as dst:
                for i in range(1, int(count) + 1):
                    if descriptions[i - 1] is not None:
                        dst.set_band_description(i, str(descriptions[i - 1]))
                    if units[i - 1] is not None:
                        dst.set_band_unit(i, str(units[i - 1]))
                if tags:
                    dst.update_tags(**{k: str(v) for k, v in tags.items()})
                yield GeoTiffStream(dst, grid, nodata)
            with rasterio.open(work) as src:
                rasterio.shutil.copy(src, tmp, driver="COG", compress="DEFLATE", predictor="YES",
                                     blocksize=COG_BLOCK, overview_resampling=overview_resampling.upper(),
                                     num_threads="ALL_CPUS", bigtiff=bigtiff)
        finally:
            work.unlink(missing_ok=True)


def _per_band(name: str, value, count: int) -> list:
    if value is None:
        return [None] * count
    if isinstance(value, str):
        return [value] * count
    value = list(value)
    if len(value) != count:
        raise ParameterError(f"{name} must give one entry per band ({count}); got {len(value)}")
    return value


def read_surface(path):
    """A surface GeoTIFF written by hydroatlas as an :class:`xarray.DataArray` of estimate and std.

    Parameters
    ----------
    path : path-like
        A raster of ``hydroatlas surface`` (``<unit>_<quantity>.tif``) or of a drawdown scenario.

    Returns
    -------
    xarray.DataArray
        Dimensions ``(band, y, x)``, float64, NaN where the file holds no data.

        - ``band``: ``["estimate", "std"]``. ``std`` is the kriging standard deviation in the unit of the
          estimate. Surfaces without one (IDW, drawdown) still have the ``std`` band, all NaN: the same rule as
          ``IDW.predict(..., return_std=True)``, so code can treat every surface alike and still see that no
          spread is available.
        - ``x``, ``y``: cell-centre coordinates in the CRS (``y`` from north to south).
        - ``spatial_ref``: scalar coordinate carrying the CRS the way CF and GDAL write it (``crs_wkt``,
          ``spatial_ref``, ``GeoTransform``); the DataArray's ``grid_mapping`` attribute names it, so rioxarray
          (``da.rio.crs``) and netCDF writers find the CRS.

        Attributes: ``crs`` (WKT), ``units`` (unit of the values, e.g. ``'ft'`` or ``'log10(m/d)'``),
        ``long_name`` (band 1 description), ``quantity``, ``unit_code`` (the hydrostratigraphic unit),
        ``caution``, ``source`` (the file) and, when the JSON sidecar (``<same name>.json``) lies beside the
        file: ``sidecar`` (its path), ``method``, ``window``, ``at`` (where set) and ``selection`` (the
        sidecar's selection record as JSON text, so that the attributes stay writable to netCDF).

    Raises
    ------
    ParameterError
        The file is missing, is not north-up with square cells, has more than two bands, or is a raster of
        another kind (a gradient raster).
    """
    import rasterio
    import xarray as xr

    from ..quantities import crs_unit_label

    path = Path(path)
    if not path.is_file():
        raise ParameterError(f"no surface raster at {path}")
    try:
        src = rasterio.open(path)
    except rasterio.errors.RasterioIOError as exc:
        raise ParameterError(f"{path} is not a raster GDAL can read ({exc})") from None
    with src:
        t = src.transform
        if t.b or t.d or not (t.a > 0 and abs(t.e + t.a) <= 1e-9 * t.a):
            raise ParameterError(f"{path} is not a north-up grid with square cells")
        tags = src.tags()
        quantity = tags.get("quantity")
        if quantity in NOT_SURFACES:
            raise ParameterError(f"{path} is a {quantity} raster, not a surface: {NOT_SURFACES[quantity]}; "
                                 "open it with rasterio or rioxarray")
        if src.count > len(SURFACE_BANDS):
            raise ParameterError(f"{path} has {src.count} bands; a surface has an estimate and at most a std")
        data = np.full((len(SURFACE_BANDS), src.height, src.width), np.nan)
        for i in range(1, src.count + 1):
            data[i - 1] = src.read(i, masked=True).astype(float).filled(np.nan)
        crs_wkt = src.crs.to_wkt() if src.crs else ""
        xy_unit = crs_unit_label(src.crs.linear_units) if src.crs else ""
        units = src.units[0] or ""
        long_name = src.descriptions[0] or ""
        height, width = src.height, src.width
    cell = t.a
    x = t.c + (np.arange(width) + 0.5) * cell
    y = t.f - (np.arange(height) + 0.5) * cell
    attrs = {"crs": crs_wkt, "units": units, "long_name": long_name, "quantity": quantity or "",
             "unit_code": tags.get("unit", ""), "caution": tags.get("caution", ""), "source": str(path),
             "grid_mapping": "spatial_ref"}
    side = path.with_suffix(".json")
    if side.is_file():
        try:
            meta = json.loads(side.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise ParameterError(f"the sidecar {side} cannot be read as JSON ({exc})") from None
        attrs["sidecar"] = str(side)
        if not attrs["units"] and meta.get("value_unit"):
            attrs["units"] = str(meta["value_unit"])
        for key, name in (("selected_method", "method"), ("window", "window"), ("at", "at")):
            if meta.get(key) is not None:
                attrs[name] = str(meta[key])
        if meta.get("selection") is not None:
            attrs["selection"] = json.dumps(meta["selection"])
    spatial_ref = xr.Variable((), 0, attrs={
        "crs_wkt": crs_wkt, "spatial_ref": crs_wkt,
        "GeoTransform": " ".join(repr(float(v)) for v in (t.c, t.a, t.b, t.f, t.d, t.e))})
    return xr.DataArray(
        data, dims=("band", "y", "x"),
        coords={"band": list(SURFACE_BANDS),
                "y": ("y", y, {"axis": "Y", "standard_name": "projection_y_coordinate", "units": xy_unit}),
                "x": ("x", x, {"axis": "X", "standard_name": "projection_x_coordinate", "units": xy_unit}),
                "spatial_ref": spatial_ref},
        name=quantity or path.stem, attrs=attrs)


def write_sidecar(path, payload: dict) -> Path:
    """A JSON sidecar (NaN written as null), written whole or not at all."""
    return write_text(path, json.dumps(_clean(payload), indent=2))


def _clean(value):
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, np.ndarray):
        return _clean(value.tolist())
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value
