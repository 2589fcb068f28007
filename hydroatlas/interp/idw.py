"""Inverse-distance weighting."""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from ..errors import NotFittedError, ParameterError
from ._validate import as_points, as_values, merge_duplicates, require_points
from .base import Interpolator


class IDW(Interpolator):
    """Inverse-distance-weighted interpolation, exact at the data points.

    IDW has no estimation variance: ``predict(..., return_std=True)`` returns a
    std of NaN at every target (``has_std`` is False), so callers can treat every
    interpolator alike and still see that no spread is available.

    Parameters
    ----------
    power : float, default 2
        Exponent of the inverse distance (> 0).
    neighbors : int or None, default 16
        Number of nearest points used per estimate; None uses every point.
    radius : float or None
        Search radius in the units of ``xy``; points farther away are ignored
        (an estimate with no point in the radius is NaN).
    """

    min_points = 1
    has_std = False
    name = "idw"

    def __init__(self, power: float = 2.0, *, neighbors: int | None = 16, radius: float | None = None):
        self.power = power
        self.neighbors = neighbors
        self.radius = radius

    def _params(self) -> dict:
        return {"power": self.power, "neighbors": self.neighbors, "radius": self.radius}

    def _check_params(self):
        if not (isinstance(self.power, (int, float)) and self.power > 0):
            raise ParameterError(f"The 'power' parameter of IDW must be a float > 0. Got {self.power!r} instead.")
        if self.neighbors is not None and not (isinstance(self.neighbors, (int, np.integer)) and self.neighbors >= 1):
            raise ParameterError(f"The 'neighbors' parameter of IDW must be an int >= 1 or None. "
                                 f"Got {self.neighbors!r} instead.")
        if self.radius is not None and not self.radius > 0:
            raise ParameterError(f"The 'radius' parameter of IDW must be a float > 0 or None. "
                                 f"Got {self.radius!r} instead.")

    def fit(self, xy, z) -> "IDW":
        self._check_params()
        xy = as_points(xy)
        z = as_values(z, len(xy))
        xy, z = merge_duplicates(xy, z, "IDW")
        require_points(len(xy), self.min_points, "IDW")
        self.xy_, self.z_ = xy, z
        self.tree_ = cKDTree(xy)
        k = len(xy) if self.neighbors is None else min(self.neighbors, len(xy))
        if k < len(xy) or self.radius is not None:
            # the compiled tile-wise neighbour search of the kriging solver (see kriging._tiles)
            from . import _kernels
            from .kriging import tile_width

            self.k_ = k
            self.buckets_ = _kernels.build_buckets(xy)
            self.keys_ = np.zeros((len(xy), 2), dtype=np.uint64)
            self.tile_width_ = tile_width(xy, k)
        return self

    def predict(self, xy_new, *, return_std: bool = False, chunk: int = 200_000):
        """Estimates at ``xy_new`` (shape (m, 2)); evaluated in chunks to bound memory.

        With ``return_std`` returns (estimate, std) where std is NaN everywhere (IDW has no variance).
        """
        if not hasattr(self, "tree_"):
            raise NotFittedError("IDW.predict called before fit")
        pts = as_points(xy_new, "xy_new")
        est = self._predict_local(pts, chunk) if hasattr(self, "buckets_") else self._predict_tree(pts, chunk)
        return (est, self._no_std(est)) if return_std else est

    def _predict_tree(self, pts, chunk):
        k = len(self.xy_) if self.neighbors is None else min(self.neighbors, len(self.xy_))
        out = np.empty(len(pts))
        bound = np.inf if self.radius is None else self.radius
        for s in range(0, len(pts), chunk):
            dist, idx = self.tree_.query(pts[s:s + chunk], k=k, distance_upper_bound=bound)
            dist = dist.reshape(len(dist), -1)
            idx = idx.reshape(len(idx), -1)
            valid = np.isfinite(dist)
            safe_idx = np.where(valid, idx, 0)
            with np.errstate(divide="ignore"):
                w = np.where(valid, 1.0 / np.maximum(dist, 1e-300) ** self.power, 0.0)
            exact = valid & (dist == 0)
            vals = self.z_[safe_idx]
            wsum = w.sum(axis=1)
            with np.errstate(invalid="ignore", divide="ignore"):
                est = (w * vals).sum(axis=1) / wsum
            hit = exact.any(axis=1)
            est[hit] = vals[hit, np.argmax(exact[hit], axis=1)]
            est[~valid.any(axis=1)] = np.nan
            out[s:s + chunk] = est
        return out

    def _predict_local(self, pts, chunk):
        from . import _kernels
        from .kriging import _tiles

        x0, y0, size, nbx, nby, order, starts = self.buckets_
        radius2 = np.inf if self.radius is None else float(self.radius) ** 2
        out = np.empty(len(pts))
        for s in range(0, len(pts), chunk):
            q = np.ascontiguousarray(pts[s:s + chunk])
            perm, tile_starts, centers, half_diag = _tiles(q, self.tile_width_)
            sq = np.ascontiguousarray(q[perm])
            idx, count, _ = _kernels.knn_tiles(sq, tile_starts, centers, half_diag, self.xy_, x0, y0, size, nbx,
                                               nby, order, starts, self.k_, radius2, self.keys_)
            est = _kernels.idw_apply(sq, self.xy_, self.z_, idx, count, float(self.power))
            res = np.empty(len(q))
            res[perm] = est
            out[s:s + chunk] = res
        return out
