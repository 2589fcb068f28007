"""hydroatlas: a spatial store and mapper of hydrostratigraphic properties."""

from .errors import HydroatlasError
from .store import create_store, open_store

__version__ = "0.1.0"
__all__ = ["open_store", "create_store", "HydroatlasError", "__version__"]
