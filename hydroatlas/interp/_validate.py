"""Shared argument checks for the interpolators."""

from __future__ import annotations

import warnings

import numpy as np

from ..errors import InsufficientDataError, ParameterError


def as_points(xy, name: str = "xy") -> np.ndarray:
    arr = np.asarray(xy, dtype=float)
    if arr.ndim != 2 or arr.shape[1] != 2:
        raise ParameterError(f"{name} must have shape (n, 2); got {arr.shape}")
    if not np.isfinite(arr).all():
        raise ParameterError(f"{name} holds NaN or infinite coordinates")
    return arr


def as_values(z, n: int, name: str = "z") -> np.ndarray:
    arr = np.asarray(z, dtype=float)
    if arr.shape != (n,):
        raise ParameterError(f"{name} must have shape ({n},) to match xy; got {arr.shape}")
    if not np.isfinite(arr).all():
        raise ParameterError(f"{name} holds NaN or infinite values; drop them before fitting")
    return arr


def merge_duplicates(xy: np.ndarray, z: np.ndarray, owner: str):
    """Average values at identical locations, warning once."""
    uniq, inverse, counts = np.unique(xy, axis=0, return_inverse=True, return_counts=True)
    if len(uniq) == len(xy):
        return xy, z
    inverse = inverse.ravel()
    warnings.warn(f"{owner}: {len(xy) - len(uniq)} duplicate location(s) merged by their mean value",
                  UserWarning, stacklevel=3)
    sums = np.bincount(inverse, weights=z, minlength=len(uniq))
    return uniq, sums / counts


def require_points(n: int, needed: int, owner: str):
    if n < needed:
        raise InsufficientDataError(f"{owner} needs at least {needed} distinct point(s); got {n}")
