"""hydroatlas: a spatial store and mapper of hydrostratigraphic properties."""

from .errors import HydroatlasError

__version__ = "0.1.0"
__all__ = ["open_store", "create_store", "HydroatlasError", "__version__"]


def __getattr__(name):
    # the store (and with it pandas, pyproj, ...) is imported on first use, so that `hydroatlas --help` starts fast
    if name in ("open_store", "create_store"):
        from . import store

        return getattr(store, name)
    raise AttributeError(f"module 'hydroatlas' has no attribute {name!r}")
