"""Spatial interpolation: the numeric core takes and returns numpy arrays.

>>> from hydroatlas.interp import Variogram, OrdinaryKriging, UniversalKriging, IDW
"""

from .base import Interpolator
from .idw import IDW
from .kriging import OrdinaryKriging, UniversalKriging
from .variogram import ExperimentalVariogram, Variogram

__all__ = ["Interpolator", "IDW", "OrdinaryKriging", "UniversalKriging", "Variogram", "ExperimentalVariogram"]
