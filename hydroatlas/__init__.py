"""hydroatlas: a spatial store and mapper of hydrostratigraphic properties."""

from .errors import HydroatlasError

__version__ = "0.1.0"
__all__ = ["open_store", "create_store", "read_surface", "HydroatlasError", "__version__"]


def __getattr__(name):
    # the store (and with it pandas, pyproj, ...) is imported on first use, so that `hydroatlas --help` starts fast
    if name in ("open_store", "create_store"):
        from . import store

        return getattr(store, name)
    if name == "read_surface":  # a surface GeoTIFF as an xarray DataArray (rasterio and xarray load on use)
        from .export.rasters import read_surface

        return read_surface
    raise AttributeError(f"module 'hydroatlas' has no attribute {name!r}")
