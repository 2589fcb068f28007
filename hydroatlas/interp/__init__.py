"""Spatial interpolation: the numeric core takes and returns numpy arrays."""

from .idw import IDW

__all__ = ["IDW"]
