"""The contract every interpolator keeps (fit/predict, as in STYLE.md item 3)."""

from __future__ import annotations

import numpy as np


class Interpolator:
    """Shared base of the interpolators.

    Attributes
    ----------
    min_points : int
        Fewest distinct data points ``fit`` accepts.
    has_std : bool
        Whether ``predict(..., return_std=True)`` gives a real standard deviation
        (kriging). Where it is False the std returned is NaN everywhere: the method
        has no estimation variance, and NaN says "not available" rather than
        pretending to a zero or an invented spread.
    """

    min_points = 1
    has_std = False
    name = "interpolator"

    def _params(self) -> dict:
        """Keyword arguments that rebuild this interpolator without its data."""
        raise NotImplementedError

    def clone(self):
        """A new, unfitted interpolator with the same parameters (the data are not copied)."""
        return type(self)(**self._params())

    def fit(self, xy, z):  # pragma: no cover - every subclass defines it
        raise NotImplementedError

    def predict(self, xy_new, *, return_std: bool = False):  # pragma: no cover - every subclass defines it
        raise NotImplementedError

    @staticmethod
    def _no_std(est: np.ndarray) -> np.ndarray:
        return np.full(np.shape(est), np.nan)
