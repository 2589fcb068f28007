"""Leave-one-out cross-validation of interpolators."""

from __future__ import annotations

import copy

import numpy as np

from ..errors import InsufficientDataError
from ._validate import as_points, as_values, merge_duplicates


def leave_one_out(model, xy, z) -> dict:
    """Predict every point from all the others with a copy of ``model`` (its parameters, not its data).

    Returns
    -------
    dict
        n, mean_error (mean of estimate - value), rmse, mean_standardized_error
        and mean_squared_standardized_error (errors over the kriging standard
        deviation; about 0 and 1 for a well-chosen variogram; None for IDW),
        and the per-point ``estimate``, ``std`` and ``error`` arrays.

    Global ordinary and universal kriging use the closed form of Dubrule (1983):
    with K the kriging matrix and ``a = K^-1 [z; 0]``, the left-out error is
    ``-a_i / (K^-1)_ii`` and the kriging variance ``-1 / (K^-1)_ii`` (variogram
    form); local neighbourhoods and IDW refit without the point.
    """
    xy = as_points(xy)
    z = as_values(z, len(xy))
    xy, z = merge_duplicates(xy, z, "leave_one_out")
    n = len(xy)
    needed = 4 if getattr(model, "n_drift", 1) == 3 else 3
    if n < needed:
        raise InsufficientDataError(f"cross-validation needs at least {needed} points; got {n}")
    has_std = hasattr(model, "variogram")
    fitted = copy.copy(model).fit(xy, z)
    if has_std and fitted.global_:
        est, std = _dubrule(fitted, xy, z)
    else:
        est = np.empty(n)
        std = np.empty(n) if has_std else None
        keep = np.ones(n, bool)
        for i in range(n):
            keep[i] = False
            m = copy.copy(model).fit(xy[keep], z[keep])
            if has_std:
                e, s = m.predict(xy[i:i + 1], return_std=True)
                std[i] = s[0]
            else:
                e = m.predict(xy[i:i + 1])
            est[i] = e[0]
            keep[i] = True
    err = est - z
    out = {"n": int(n), "mean_error": float(np.mean(err)), "rmse": float(np.sqrt(np.mean(err**2))),
           "mean_standardized_error": None, "mean_squared_standardized_error": None,
           "estimate": est, "std": std, "error": err}
    if std is not None:
        ok = std > 0
        if ok.any():
            se = err[ok] / std[ok]
            out["mean_standardized_error"] = float(se.mean())
            out["mean_squared_standardized_error"] = float(np.mean(se**2))
    return out


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
