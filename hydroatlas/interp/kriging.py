"""Ordinary and universal kriging with global or nearest-N neighbourhoods.

Both solve the kriging system in variogram form. For ordinary kriging, with
Gamma the data semivariances and gamma_0 those between data and target::

    [Gamma 1] [w ]   [gamma_0]
    [1'    0] [mu] = [1      ]      estimate = w'z,  variance = w'gamma_0 + mu

Universal kriging adds a linear drift (1, x, y) with its three Lagrange
multipliers. With a local neighbourhood the N nearest points of each target
are used; since neighbour sets are piecewise constant over a grid, each
distinct set's system is inverted once and applied to all its targets.
"""

from __future__ import annotations

import numbers

import numpy as np
from scipy.linalg import lu_factor, lu_solve

from ..errors import InsufficientDataError, NotFittedError, ParameterError
from . import _kernels
from ._validate import as_points, as_values, merge_duplicates, require_points
from .base import Interpolator
from .variogram import Variogram

# Targets per block of the local solver; bounds the memory of one block to a few tens of MB.
BLOCK_TARGETS = 65_536
# Bytes for the right-hand sides of one chunk of the global solver.
GLOBAL_CHUNK_BYTES = 64 * 2**20


class _Kriging(Interpolator):
    n_drift = 1
    min_points = 2
    has_std = True
    name = "kriging"

    def __init__(self, variogram: Variogram, *, neighbors: int | None = 16, radius: float | None = None):
        self.variogram = variogram
        self.neighbors = neighbors
        self.radius = radius

    def _params(self) -> dict:
        return {"variogram": self.variogram, "neighbors": self.neighbors, "radius": self.radius}

    def _check_params(self):
        owner = type(self).__name__
        if not isinstance(self.variogram, Variogram):
            raise ParameterError(f"The 'variogram' parameter of {owner} must be a Variogram. "
                                 f"Got {self.variogram!r} instead.")
        if self.neighbors is not None and not (isinstance(self.neighbors, (int, np.integer))
                                               and self.neighbors >= self.min_points_local):
            raise ParameterError(f"The 'neighbors' parameter of {owner} must be an int >= {self.min_points_local} "
                                 f"or None. Got {self.neighbors!r} instead.")
        if self.radius is not None and not (isinstance(self.radius, numbers.Real) and self.radius > 0):
            raise ParameterError(f"The 'radius' parameter of {owner} must be a float > 0 or None. "
                                 f"Got {self.radius!r} instead.")

    def fit(self, xy, z):
        """Store the data (duplicates merged by their mean) and prepare the solver; returns self."""
        self._check_params()
        xy = as_points(xy)
        z = as_values(z, len(xy))
        xy, z = merge_duplicates(xy, z, type(self).__name__)
        require_points(len(xy), self.min_points, type(self).__name__)
        v = self.variogram
        self.xy_, self.z_ = xy, z
        self.iso_ = np.ascontiguousarray(v.to_isotropic(xy))
        self.center_ = xy.mean(axis=0)
        self.scale_ = float(max(np.ptp(xy, axis=0).max(), 1e-12))
        if self.n_drift == 3 and np.linalg.matrix_rank(np.column_stack([np.ones(len(xy)), xy - self.center_])) < 3:
            raise InsufficientDataError(f"{type(self).__name__} with a linear drift needs points that are not all "
                                        "on one line")
        k = self.neighbors
        self.global_ = k is None or (k >= len(xy) and self.radius is None)
        if self.global_:
            self._factor_global()
        else:
            self.k_ = int(min(k, len(xy)))
            self.buckets_ = _kernels.build_buckets(self.iso_)
            self.keys_ = np.random.default_rng(12345).integers(1, 2**63, (len(xy), 2), dtype=np.int64).astype(np.uint64)
            self.tile_width_ = tile_width(self.iso_, self.k_)
        return self

    # -- helpers ---------------------------------------------------------------
    def _drift(self, xy):
        d = (np.asarray(xy, float) - self.center_) / self.scale_
        return np.column_stack([np.ones(len(d)), d])[:, : self.n_drift]

    def _system(self, iso, xy, mask=None):
        """Kriging matrices for a batch of sets: iso/xy shape (G, k, 2); mask (G, k) marks real points."""
        v = self.variogram
        G, k = iso.shape[:2]
        s = k + self.n_drift
        d = np.sqrt(((iso[:, :, None, :] - iso[:, None, :, :]) ** 2).sum(-1))
        a = np.zeros((G, s, s))
        a[:, :k, :k] = v(d)
        drift = ((xy - self.center_) / self.scale_)
        f = np.concatenate([np.ones((G, k, 1)), drift], axis=2)[:, :, : self.n_drift]
        if mask is not None:
            f = f * mask[:, :, None]
            a[:, :k, :k] *= mask[:, :, None] & mask[:, None, :]
            eye = np.arange(k)
            a[:, eye, eye] = np.where(mask, 0.0, 1.0)  # dummy rows: identity, zero weight
        a[:, :k, k:] = f
        a[:, k:, :k] = np.swapaxes(f, 1, 2)
        return a

    def _factor_global(self):
        a = self._system(self.iso_[None], self.xy_[None])[0]
        try:
            self.lu_ = lu_factor(a, check_finite=False)
        except (np.linalg.LinAlgError, ValueError) as exc:
            raise InsufficientDataError(f"the kriging system is singular ({exc})") from None
        rhs = np.concatenate([self.z_, np.zeros(self.n_drift)])
        self.alpha_global_ = lu_solve(self.lu_, rhs)

    # -- prediction ------------------------------------------------------------
    def predict(self, xy_new, *, return_std: bool = False):
        """Estimates at ``xy_new`` (shape (m, 2)); with ``return_std`` also the kriging standard deviation.

        Targets with fewer than the needed points inside the search radius get NaN.
        """
        if not hasattr(self, "xy_"):
            raise NotFittedError(f"{type(self).__name__}.predict called before fit")
        q = as_points(xy_new, "xy_new")
        est = np.empty(len(q))
        var = np.empty(len(q))
        solve = self._predict_global if self.global_ else self._predict_local
        step = BLOCK_TARGETS if not self.global_ else max(1, GLOBAL_CHUNK_BYTES // (8 * (len(self.xy_) + 3)))
        for s in range(0, len(q), step):
            est[s:s + step], var[s:s + step] = solve(q[s:s + step])
        if return_std:
            return est, np.sqrt(np.maximum(var, 0.0))
        return est

    def _predict_global(self, q):
        v = self.variogram
        iso = v.to_isotropic(q)
        d = np.sqrt(((iso[:, None, :] - self.iso_[None, :, :]) ** 2).sum(-1))
        b = np.concatenate([v(d), self._drift(q)], axis=1).T  # (n + drift, m)
        w = lu_solve(self.lu_, b, check_finite=False)
        est = b.T @ self.alpha_global_
        var = np.einsum("ij,ij->j", w, b)
        return est, var

    def _predict_local(self, q):
        v = self.variogram
        iso = np.ascontiguousarray(v.to_isotropic(q))
        x0, y0, size, nbx, nby, order, starts = self.buckets_
        radius2 = np.inf if self.radius is None else float(self.radius) ** 2
        perm, tile_starts, centers, half_diag = _tiles(iso, self.tile_width_)
        sq = np.ascontiguousarray(iso[perm])
        idx_s, count_s, hash_s = _kernels.knn_tiles(sq, tile_starts, centers, half_diag, self.iso_, x0, y0, size,
                                                     nbx, nby, order, starts, self.k_, radius2, self.keys_)
        idx = np.empty_like(idx_s)
        idx[perm] = idx_s
        count = np.empty_like(count_s)
        count[perm] = count_s
        hashes = np.empty_like(hash_s)
        hashes[perm] = hash_s
        enough = count >= self.min_points_local
        h1 = np.where(enough, hashes[:, 0], np.uint64(0))
        _, first, group = np.unique(h1, return_index=True, return_inverse=True)
        group = group.ravel().astype(np.int64)
        # a second, independent hash must agree too; a target where it does not shares a
        # first hash with another set by chance (odds about 2**-64) and is solved alone
        lone = enough & (hashes[:, 1] != hashes[first, 1][group])
        rep = np.ascontiguousarray(idx[first])
        return self._solve_sets(q, iso, idx, count, group, rep, lone)

    def _predict_sets(self, q, idx, count):
        """Estimate and kriging variance at ``q`` (m, 2), each from its own given neighbour set.

        ``idx`` (m, k) holds indices into the fitted data, valid entries first and -1 after
        ``count`` (m,) of them. Used by leave-one-out, where every point's set is its k
        nearest other points.
        """
        q = np.ascontiguousarray(q, dtype=float)
        iso = np.ascontiguousarray(self.variogram.to_isotropic(q))
        idx = np.ascontiguousarray(idx, dtype=np.int64)
        count = np.ascontiguousarray(count, dtype=np.int64)
        group = np.arange(len(q), dtype=np.int64)
        return self._solve_sets(q, iso, idx, count, group, idx, np.zeros(len(q), bool))

    def _solve_sets(self, q, iso, idx, count, group, rep, lone):
        """Solve each distinct neighbour set (rows of ``rep``) once and apply it to its targets (``group``)."""
        v = self.variogram
        if self.n_drift == 1:
            L, u1, s_, w, mhat, chol_ok = _kernels.build_cholesky_ok(rep, self.iso_, self.z_, v.code, v.nugget,
                                                                     v.partial_sill, v.range)
            if chol_ok.all():
                est, var = _kernels.apply_cholesky_ok(iso, self.iso_, count, group, rep, L, u1, s_, w, mhat,
                                                      v.code, v.nugget, v.partial_sill, v.range,
                                                      self.min_points_local)
                for c in np.flatnonzero(lone):
                    est[c], var[c] = self._solve_one(q[c], idx[c, : count[c]])
                return est, var
        ainv, alpha, solved = _kernels.build_systems(
            rep, self.iso_, self.xy_, self.z_, v.code, v.nugget, v.partial_sill, v.range, self.n_drift,
            float(self.center_[0]), float(self.center_[1]), self.scale_)
        if not solved.all():  # singular sets (e.g. collinear points under a drift): pseudo-inverse
            for g in np.flatnonzero(~solved):
                members = rep[g][rep[g] >= 0]
                if len(members) >= self.min_points_local:
                    ainv[g], alpha[g] = self._pinv_system(members, rep.shape[1])
        est, var = _kernels.apply_systems(
            iso, np.ascontiguousarray(q), self.iso_, count, group, rep, ainv, alpha, v.code, v.nugget, v.partial_sill, v.range,
            self.n_drift, float(self.center_[0]), float(self.center_[1]), self.scale_, self.min_points_local)
        for c in np.flatnonzero(lone):
            est[c], var[c] = self._solve_one(q[c], idx[c, : count[c]])
        return est, var

    def _pinv_system(self, members, k):
        s = k + self.n_drift
        n = len(members)
        a = self._system(self.iso_[members][None], self.xy_[members][None])[0]
        full = np.eye(s)
        keep = np.r_[np.arange(n), k + np.arange(self.n_drift)]
        full[np.ix_(keep, keep)] = a
        inv = np.linalg.pinv(full)
        rhs = np.zeros(s)
        rhs[:n] = self.z_[members]
        return inv, inv @ rhs

    @property
    def min_points_local(self) -> int:
        return 1 if self.n_drift == 1 else 3

    def _solve_one(self, q, members):
        v = self.variogram
        a = self._system(self.iso_[members][None], self.xy_[members][None])[0]
        iso = v.to_isotropic(q[None])[0]
        b = np.concatenate([v(np.hypot(*(self.iso_[members] - iso).T)), self._drift(q[None])[0]])
        w = np.linalg.lstsq(a, b, rcond=None)[0]
        return float(w[: len(members)] @ self.z_[members]), float(w @ b)


def tile_width(xy: np.ndarray, k: int) -> float:
    """Tiles about half the typical distance to the k-th neighbour wide: few candidates per target."""
    span = np.ptp(xy, axis=0)
    area = max(float(span[0] * span[1]), float(span.max()) ** 2 * 1e-6, 1e-300)
    return 0.5 * float(np.sqrt(k * area / (np.pi * len(xy))))


def _tiles(q: np.ndarray, width: float):
    """Group targets into square tiles of ``width``: permutation, tile starts, centres, half-diagonals."""
    lo = q.min(axis=0)
    cell = np.floor((q - lo) / width).astype(np.int64)
    nx = int(cell[:, 0].max()) + 1
    key = cell[:, 1] * nx + cell[:, 0]
    perm = np.argsort(key, kind="stable")
    skey = key[perm]
    breaks = np.flatnonzero(np.diff(skey)) + 1
    tile_starts = np.concatenate([[0], breaks, [len(q)]]).astype(np.int64)
    tkey = skey[tile_starts[:-1]]
    centers = np.column_stack([lo[0] + (tkey % nx + 0.5) * width, lo[1] + (tkey // nx + 0.5) * width])
    half_diag = np.full(len(centers), width * np.sqrt(0.5))
    return perm, tile_starts, centers, half_diag


class OrdinaryKriging(_Kriging):
    """Ordinary kriging (unknown constant mean).

    Parameters
    ----------
    variogram : Variogram
    neighbors : int or None, default 16
        Nearest points used per target; None solves one global system.
    radius : float, optional
        Search radius (coordinate units); targets with no point inside get NaN.

    Examples
    --------
    >>> import numpy as np
    >>> xy = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    >>> ok = OrdinaryKriging(Variogram("exponential", sill=1.0, range=3.0), neighbors=None).fit(xy, [1.0, 2.0, 3.0])
    >>> float(ok.predict([[1.0, 0.0]])[0])
    2.0
    """

    n_drift = 1
    name = "kriging"


class UniversalKriging(_Kriging):
    """Universal kriging with a linear drift m(x, y) = b0 + b1 x + b2 y (a regional head trend).

    Same parameters as :class:`OrdinaryKriging`; needs at least 3 points not on one line.
    """

    n_drift = 3
    min_points = 3
    name = "uk"
