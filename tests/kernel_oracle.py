"""Plain-numpy reference implementations of the compiled interpolation kernels (the oracle).

The kernels in ``hydroatlas/interp/_kernels.py`` are fast because they are fused, compiled and clever (bucket
search, set hashing, one factorisation per neighbour set, a Cholesky shortcut). This module is none of that:
one target at a time, brute-force distances, ``numpy.linalg.solve`` on the system as the textbooks write it.
It shares no code with the package, so the two can only agree by both being right.

Sources of the equations:

- Variogram models with the practical range: Isaaks and Srivastava (1989), An Introduction to Applied
  Geostatistics, ch. 16 (spherical; exponential 1 - exp(-3h/a); gaussian 1 - exp(-3h^2/a^2)), as SPEC
  section 6 states them, with a nugget jump after h = 0 and gamma(0) = 0.
- Geometric anisotropy: the same chapter; distances are measured after rotating to the major axis and
  dividing the minor-axis component by the anisotropy ratio (minor/major range).
- Ordinary kriging: Isaaks and Srivastava (1989), ch. 12, the system in covariance form,
  ``sum_j w_j C_ij + mu = C_i0``, ``sum_j w_j = 1``, variance ``C_00 - (sum_i w_i C_i0 + mu)``.
- Universal kriging (linear drift 1, x, y): Cressie (1993), Statistics for Spatial Data, section 3.4, the
  same system bordered by the drift functions F: ``[C F; F' 0] [w; mu] = [c0; f0]``, variance
  ``C_00 - w'c0 - mu'f0``.
- Inverse-distance weighting: Shepard (1968), "A two-dimensional interpolation function for irregularly-spaced
  data", weights ``d^-p``, the data value itself at a data point.
"""

from __future__ import annotations

import math

import numpy as np


def gamma(h, model: str, nugget: float, sill: float, range_: float) -> np.ndarray:
    """Semivariance at lag(s) ``h`` (Isaaks and Srivastava 1989, ch. 16; practical range)."""
    h = np.asarray(h, float)
    r = h / range_
    if model == "spherical":
        shape = np.where(r < 1.0, 1.5 * r - 0.5 * r**3, 1.0)
    elif model == "exponential":
        shape = 1.0 - np.exp(-3.0 * r)
    elif model == "gaussian":
        shape = 1.0 - np.exp(-3.0 * r**2)
    else:
        raise ValueError(model)
    return np.where(h > 0.0, nugget + (sill - nugget) * shape, 0.0)


def covariance(h, model, nugget, sill, range_) -> np.ndarray:
    """C(h) = sill - gamma(h); C(0) = sill (the nugget is part of the variance at zero lag)."""
    return sill - gamma(h, model, nugget, sill, range_)


def distance(p, q, angle: float = 0.0, ratio: float = 1.0) -> np.ndarray:
    """Anisotropic distances between points ``p`` (n, 2) and ``q`` (m, 2): (n, m).

    ``angle`` is the azimuth of the major axis in degrees clockwise from north (+y), ``ratio`` the
    minor/major range ratio: the separation is split into its components along the major axis and across
    it, and the cross component is divided by ``ratio``.
    """
    p = np.atleast_2d(np.asarray(p, float))
    q = np.atleast_2d(np.asarray(q, float))
    d = p[:, None, :] - q[None, :, :]
    t = math.radians(angle)
    along = d[..., 0] * math.sin(t) + d[..., 1] * math.cos(t)
    across = d[..., 0] * math.cos(t) - d[..., 1] * math.sin(t)
    return np.sqrt(along**2 + (across / ratio) ** 2)


def nearest(xy, target, k: int | None, *, radius: float | None = None, angle: float = 0.0, ratio: float = 1.0,
            exclude: int | None = None) -> np.ndarray:
    """Indices of the k nearest data points of one target (all of them for k None), nearest first.

    Distances are anisotropic as in :func:`distance`; points beyond ``radius`` are left out, and so is the
    point ``exclude`` (leave-one-out).
    """
    d = distance(xy, np.asarray(target, float)[None], angle, ratio)[:, 0]
    order = np.argsort(d, kind="stable")
    if exclude is not None:
        order = order[order != exclude]
    if radius is not None:
        order = order[d[order] <= radius]
    return order if k is None else order[:k]


def kriging(xy, z, target, model, nugget, sill, range_, *, drift: bool = False, angle: float = 0.0,
            ratio: float = 1.0) -> tuple[float, float]:
    """Ordinary (``drift`` False) or universal (linear drift) kriging of one target from the given points.

    Returns (estimate, kriging variance). Covariance form, solved as written (see the module docstring).
    """
    xy = np.asarray(xy, float)
    z = np.asarray(z, float)
    target = np.asarray(target, float)
    n = len(xy)
    c = covariance(distance(xy, xy, angle, ratio), model, nugget, sill, range_)
    c0 = covariance(distance(xy, target[None], angle, ratio)[:, 0], model, nugget, sill, range_)
    # drift functions 1, x, y; measured from the target (the span, and so the solution, does not change)
    f = np.ones((n, 1))
    f0 = np.ones(1)
    if drift:
        f = np.column_stack([f, xy - target])
        f0 = np.array([1.0, 0.0, 0.0])
    p = f.shape[1]
    a = np.zeros((n + p, n + p))
    a[:n, :n] = c
    a[:n, n:] = f
    a[n:, :n] = f.T
    sol = np.linalg.solve(a, np.concatenate([c0, f0]))
    w, mu = sol[:n], sol[n:]
    return float(w @ z), float(sill - w @ c0 - mu @ f0)


def kriging_at(xy, z, targets, model, nugget, sill, range_, *, k=None, radius=None, drift=False, angle=0.0,
               ratio=1.0, min_points=1) -> tuple[np.ndarray, np.ndarray]:
    """Kriging of many targets, each from its own k nearest points (all points for k None).

    A target with fewer than ``min_points`` points within ``radius`` gets NaN.
    """
    targets = np.atleast_2d(np.asarray(targets, float))
    est = np.full(len(targets), np.nan)
    var = np.full(len(targets), np.nan)
    for i, t in enumerate(targets):
        idx = nearest(xy, t, k, radius=radius, angle=angle, ratio=ratio)
        if len(idx) < min_points:
            continue
        est[i], var[i] = kriging(xy[idx], z[idx], t, model, nugget, sill, range_, drift=drift, angle=angle,
                                 ratio=ratio)
    return est, var


def kriging_leave_one_out(xy, z, model, nugget, sill, range_, *, k=None, drift=False, angle=0.0,
                          ratio=1.0) -> tuple[np.ndarray, np.ndarray]:
    """Each data point kriged from its k nearest other points (all others for k None): estimate, variance."""
    xy = np.asarray(xy, float)
    z = np.asarray(z, float)
    est = np.empty(len(xy))
    var = np.empty(len(xy))
    for i in range(len(xy)):
        idx = nearest(xy, xy[i], k, angle=angle, ratio=ratio, exclude=i)
        est[i], var[i] = kriging(xy[idx], z[idx], xy[i], model, nugget, sill, range_, drift=drift, angle=angle,
                                 ratio=ratio)
    return est, var


def idw(xy, z, target, power: float = 2.0) -> float:
    """Shepard (1968) inverse-distance weighting of one target from the given points."""
    d = distance(xy, np.asarray(target, float)[None])[:, 0]
    if np.any(d == 0.0):
        return float(np.asarray(z, float)[np.argmin(d)])
    w = d ** (-power)
    return float(w @ np.asarray(z, float) / w.sum())


def idw_at(xy, z, targets, *, power=2.0, k=None, radius=None) -> np.ndarray:
    """IDW of many targets, each from its own k nearest points within ``radius`` (NaN with none)."""
    targets = np.atleast_2d(np.asarray(targets, float))
    out = np.full(len(targets), np.nan)
    for i, t in enumerate(targets):
        idx = nearest(xy, t, k, radius=radius)
        if len(idx):
            out[i] = idw(xy[idx], z[idx], t, power)
    return out
