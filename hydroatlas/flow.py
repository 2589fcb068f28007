"""Head gradients, flow directions and the three-point solution (numpy in, numpy out)."""

from __future__ import annotations

import numpy as np

from .errors import ParameterError


def azimuth_deg(east, north):
    """Azimuth in degrees clockwise from grid north of the vector (east, north), in [0, 360)."""
    return np.mod(np.degrees(np.arctan2(east, north)), 360.0)


def three_point(xy, heads) -> dict:
    """Plane through three head measurements: gradient magnitude and flow azimuth.

    Parameters
    ----------
    xy : array (3, 2)
        Well coordinates (x east, y north).
    heads : array (3,)
        Heads in the same length unit as the coordinates (or scale the result).

    Returns
    -------
    dict
        dh_dx, dh_dy, gradient (magnitude), azimuth (of -grad h, degrees clockwise from north).
    """
    xy = np.asarray(xy, float)
    h = np.asarray(heads, float)
    if xy.shape != (3, 2) or h.shape != (3,):
        raise ParameterError(f"three_point needs xy of shape (3, 2) and heads of shape (3,); got {xy.shape}, {h.shape}")
    a = np.column_stack([xy - xy.mean(axis=0), np.ones(3)])
    if abs(np.linalg.det(a)) < 1e-12 * max(1.0, np.ptp(xy) ** 2):
        raise ParameterError("the three wells lie on one line; no plane can be fitted")
    gx, gy, _ = np.linalg.solve(a, h)
    return {"dh_dx": float(gx), "dh_dy": float(gy), "gradient": float(np.hypot(gx, gy)),
            "azimuth": float(azimuth_deg(-gx, -gy))}


def grid_gradient(head, cell: float, *, vertical_per_horizontal: float = 1.0):
    """Gradient magnitude and flow azimuth of a north-up head grid.

    Parameters
    ----------
    head : array (nrows, ncols)
        Row 0 is the northernmost row; NaN cells are skipped (their neighbours use one-sided differences).
    cell : float
        Cell size in horizontal units.
    vertical_per_horizontal : float
        Factor turning head units into horizontal units (e.g. 0.3048 for heads in ft, x in m).

    Returns
    -------
    magnitude, azimuth : arrays of the grid shape (azimuth of -grad h, degrees clockwise from north)
    """
    h = np.asarray(head, float) * vertical_per_horizontal
    if h.ndim != 2:
        raise ParameterError(f"head grid must be 2-D; got shape {h.shape}")
    d_drow, d_dcol = _nan_gradient(h)
    gx = d_dcol / cell
    gy = -d_drow / cell  # rows run south
    mag = np.hypot(gx, gy)
    az = azimuth_deg(-gx, -gy)
    az = np.where(np.isfinite(mag), az, np.nan)
    return mag, az


def _nan_gradient(h):
    """Central differences where both neighbours exist, one-sided at edges and beside NaN cells."""
    out = []
    for axis in (0, 1):
        fwd = np.full_like(h, np.nan)
        bwd = np.full_like(h, np.nan)
        sl_a = [slice(None)] * 2
        sl_b = [slice(None)] * 2
        sl_a[axis] = slice(1, None)
        sl_b[axis] = slice(None, -1)
        diff = h[tuple(sl_a)] - h[tuple(sl_b)]
        fwd[tuple(sl_b)] = diff  # h[i+1] - h[i] stored at i
        bwd[tuple(sl_a)] = diff  # h[i] - h[i-1] stored at i
        central = 0.5 * (fwd + bwd)
        g = np.where(np.isfinite(central), central, np.where(np.isfinite(fwd), fwd, bwd))
        out.append(g)
    return out[0], out[1]
