"""GeoTIFF writing (rasterio): north-up, float32, with CRS, nodata and band descriptions."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from .names import atomic_path, write_text

NODATA = -9999.0


def write_geotiff(path, grid, bands, *, crs, descriptions=None, nodata: float = NODATA, tags=None) -> Path:
    """Write 2-D arrays (NaN = no data) as the bands of one GeoTIFF.

    Parameters
    ----------
    path : path-like
    grid : GridSpec
    bands : list of arrays of ``grid.shape``
    crs : CRS-like (pyproj CRS, WKT or EPSG string)

    The file appears whole or not at all (written beside it, then moved into place).
    """
    import rasterio

    path = Path(path)
    crs_text = crs.to_wkt() if hasattr(crs, "to_wkt") else crs
    profile = {"driver": "GTiff", "width": grid.ncols, "height": grid.nrows, "count": len(bands),
               "dtype": "float32", "crs": crs_text, "transform": grid.transform, "nodata": nodata,
               "compress": "deflate", "tiled": grid.ncols >= 256 and grid.nrows >= 256}
    if profile["tiled"]:
        profile.update(blockxsize=256, blockysize=256)
    arrays = [np.asarray(band, dtype=float) for band in bands]
    for i, arr in enumerate(arrays, start=1):
        if arr.shape != grid.shape:
            raise ValueError(f"band {i} has shape {arr.shape}, the grid {grid.shape}")
    with atomic_path(path) as tmp, rasterio.open(tmp, "w", **profile) as dst:
        for i, arr in enumerate(arrays, start=1):
            dst.write(np.where(np.isfinite(arr), arr, nodata).astype("float32"), i)
            if descriptions:
                dst.set_band_description(i, descriptions[i - 1])
        if tags:
            dst.update_tags(**{k: str(v) for k, v in tags.items()})
    return path


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
