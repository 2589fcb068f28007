"""Leave-one-out cross-validation of interpolators.

Global kriging systems use the closed form of Dubrule (1983); local
neighbourhoods and IDW take the k + 1 nearest points of every data point in
one query, drop the point itself and solve each point's small system in one
batch through the compiled kernels, so the cost grows like n k^3, not n times
a refit. :func:`leave_one_out_refit` refits the model once per point; it is
slow and kept as the plain reference the fast path is tested against.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from ..errors import InsufficientDataError
from ._validate import as_points, as_values, merge_duplicates

#: entries of one block of the neighbour query of a global IDW (bounds its memory to about 130 MB)
IDW_BLOCK_ENTRIES = 2**24


def _prepare(model, xy, z):
    xy = as_points(xy)
    z = as_values(z, len(xy))
    xy, z = merge_duplicates(xy, z, "leave_one_out")
    n = len(xy)
    needed = 4 if getattr(model, "n_drift", 1) == 3 else 3
    if n < needed:
        raise InsufficientDataError(f"cross-validation needs at least {needed} points; got {n}")
    return xy, z, n


def leave_one_out(model, xy, z) -> dict:
    """Predict every point from all the others with the parameters of ``model`` (not its data).

    Parameters
    ----------
    model : Interpolator
        OrdinaryKriging, UniversalKriging or IDW; fitted or not (only its parameters are used).
    xy : array (n, 2)
        Data coordinates.
    z : array (n,)
        Data values (duplicated locations are merged by their mean, as ``fit`` does).

    Returns
    -------
    dict
        n, mean_error (mean of estimate - value), rmse, mean_standardized_error
        and mean_squared_standardized_error (errors over the kriging standard
        deviation; about 0 and 1 for a well-chosen variogram; None for IDW),
        and the per-point ``estimate``, ``std`` (None for IDW) and ``error`` arrays.

    Notes
    -----
    Global ordinary and universal kriging use the closed form of Dubrule (1983):
    with K the kriging matrix and ``a = K^-1 [z; 0]``, the left-out error is
    ``-a_i / (K^-1)_ii`` and the kriging variance ``-1 / (K^-1)_ii`` (variogram
    form). Local neighbourhoods: the k nearest other points of each point (its
    k + 1 nearest, itself dropped) are exactly the set a model refitted without
    the point would use, so the result equals a refit per point up to rounding.
    """
    xy, z, n = _prepare(model, xy, z)
    has_std = bool(getattr(model, "has_std", False))
    fitted = model.clone().fit(xy, z)
    if has_std and fitted.global_:
        est, std = _dubrule(fitted, xy, z)
    elif has_std:
        idx, count = _others(fitted.iso_, fitted.k_, fitted.radius)
        est, var = fitted._predict_sets(xy, idx, count)
        std = np.sqrt(np.maximum(var, 0.0))
    else:
        est, std = _idw_loo(fitted, xy, z), None
    return _scores(z, est, std)


def leave_one_out_refit(model, xy, z) -> dict:
    """Reference leave-one-out: refit ``model`` without each point in turn (n fits; slow, for tests)."""
    xy, z, n = _prepare(model, xy, z)
    has_std = bool(getattr(model, "has_std", False))
    est = np.empty(n)
    std = np.empty(n) if has_std else None
    keep = np.ones(n, bool)
    for i in range(n):
        keep[i] = False
        m = model.clone().fit(xy[keep], z[keep])
        e, s = m.predict(xy[i:i + 1], return_std=True)
        est[i] = e[0]
        if has_std:
            std[i] = s[0]
        keep[i] = True
    return _scores(z, est, std)


def _scores(z, est, std) -> dict:
    err = est - z
    out = {"n": int(len(z)), "mean_error": float(np.mean(err)), "rmse": float(np.sqrt(np.mean(err**2))),
           "mean_standardized_error": None, "mean_squared_standardized_error": None,
           "estimate": est, "std": std, "error": err}
    if std is not None:
        ok = std > 0
        if ok.any():
            se = err[ok] / std[ok]
            out["mean_standardized_error"] = float(se.mean())
            out["mean_squared_standardized_error"] = float(np.mean(se**2))
    return out


def _others(pts, k, radius, rows=None):
    """The (at most) k nearest other points of each point: idx (m, k') valid first and -1 padded, count (m,).

    ``rows`` selects the points (default all); k' = min(k, n - 1).
    """
    n = len(pts)
    rows = np.arange(n) if rows is None else rows
    kk = int(min(k, n - 1))
    # inclusive search radius, as the compiled search (d^2 <= r^2); the tree's bound is strict
    bound = np.inf if radius is None else float(np.nextafter(float(radius), np.inf))
    dist, nb = cKDTree(pts).query(pts[rows], k=kk + 1, distance_upper_bound=bound)
    dist = dist.reshape(len(rows), -1)
    nb = nb.reshape(len(rows), -1)
    valid = np.isfinite(dist) & (nb != rows[:, None])
    # points are distinct (duplicates merged), so each point is its own nearest: keep the next kk valid ones
    order = np.argsort(~valid, axis=1, kind="stable")[:, :kk]
    idx = np.take_along_axis(nb, order, axis=1)
    ok = np.take_along_axis(valid, order, axis=1)
    idx = np.where(ok, idx, -1).astype(np.int64)
    return np.ascontiguousarray(idx), ok.sum(axis=1).astype(np.int64)


def _idw_loo(model, xy, z):
    from . import _kernels

    n = len(xy)
    k = n - 1 if model.neighbors is None else min(int(model.neighbors), n - 1)
    block = max(1, IDW_BLOCK_ENTRIES // (k + 1))
    est = np.empty(n)
    for s in range(0, n, block):
        rows = np.arange(s, min(n, s + block))
        idx, count = _others(xy, k, model.radius, rows)
        est[rows] = _kernels.idw_apply(np.ascontiguousarray(xy[rows]), xy, z, idx, count, float(model.power))
    return est


def _dubrule(model, xy, z):
    n = len(z)
    a = model._system(model.iso_[None], model.xy_[None])[0]
    inv = np.linalg.inv(a)
    rhs = np.concatenate([model.z_, np.zeros(model.n_drift)])
    coef = inv @ rhs
    diag = np.diag(inv)[:n]
    err = -coef[:n] / diag
    var = -1.0 / diag
    return model.z_ + err, np.sqrt(np.maximum(var, 0.0))


def summary(cv: dict) -> dict:
    """The scalar figures of a cross-validation result (for JSON sidecars)."""
    return {k: v for k, v in cv.items() if k not in ("estimate", "std", "error")}
