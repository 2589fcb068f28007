"""Slug-test reduction: Hvorslev (1951) and Bouwer and Rice (1976) (numpy in, numbers out).

Use consistent units (metres and seconds give K in m/s). A test is a record of
displacement (head above or below static, either sign) against time since the
slug was added or removed; it is normalised by the initial displacement H0 and
a straight line is fitted to ln(H/H0) against time over the normalised-head
range that current guidance recommends (Butler 1998): 0.15-0.25 for Hvorslev,
0.20-0.30 for Bouwer and Rice.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import InsufficientDataError, ParameterError

HVORSLEV_RANGE = (0.15, 0.25)
BOUWER_RICE_RANGE = (0.20, 0.30)
# ln((H - Lw) / rw) is capped at this value in the Bouwer-Rice expression (from memory: Bouwer and Rice 1976).
BR_LOG_CAP = 6.0
# Repeat tests whose K differ by more than this fraction of the smaller one are flagged (common practice).
REPEAT_TOLERANCE = 0.25


def _positive(name, value):
    if not (isinstance(value, (int, float, np.floating)) and math.isfinite(value) and value > 0):
        raise ParameterError(f"{name} must be a finite number > 0; got {value!r}")
    return float(value)


def normalized_head(t, displacement, *, h0: float | None = None):
    """Times and H/H0 of a record (H0 = the displacement at the earliest time unless given)."""
    t = np.asarray(t, dtype=float)
    d = np.asarray(displacement, dtype=float)
    if t.shape != d.shape or t.ndim != 1 or len(t) < 3:
        raise ParameterError(f"t and displacement must be 1-D arrays of one length >= 3; got {t.shape}, {d.shape}")
    if not (np.isfinite(t).all() and np.isfinite(d).all()):
        raise ParameterError("t and displacement must be finite")
    order = np.argsort(t, kind="stable")
    t, d = t[order], d[order]
    h0 = d[0] if h0 is None else float(h0)
    if h0 == 0:
        raise ParameterError("the initial displacement H0 is zero; nothing to normalise")
    return t, d / h0


def fit_recovery(t, h_norm, *, window=(0.15, 0.25)) -> dict:
    """Least-squares line through ln(H/H0) against t for H/H0 inside ``window``.

    Returns slope (1/time, negative for recovery), intercept, r2, n and the time span used.
    """
    lo, hi = window
    if not 0 < lo < hi <= 1:
        raise ParameterError(f"the normalised-head window must satisfy 0 < low < high <= 1; got {window}")
    t = np.asarray(t, float)
    h = np.asarray(h_norm, float)
    keep = (h >= lo) & (h <= hi)
    if keep.sum() < 2:
        raise InsufficientDataError(f"fewer than 2 readings with H/H0 between {lo} and {hi}; the record does not "
                                    "cover the recommended fitting range")
    x, y = t[keep], np.log(h[keep])
    slope, intercept = np.polyfit(x, y, 1)
    resid = y - (slope * x + intercept)
    ss = float(((y - y.mean()) ** 2).sum())
    r2 = 1.0 - float((resid**2).sum()) / ss if ss > 0 else 1.0
    if slope >= 0:
        raise InsufficientDataError("the fitted head does not recover (slope of ln(H/H0) >= 0)")
    return {"slope": float(slope), "intercept": float(intercept), "r2": r2, "n": int(keep.sum()),
            "t_from": float(x.min()), "t_to": float(x.max()), "window": [lo, hi]}


def hvorslev_k(t, displacement, *, casing_radius: float, screen_length: float, well_radius: float,
               window=HVORSLEV_RANGE, h0: float | None = None) -> dict:
    """Hvorslev (1951) basic time lag: K = r_c^2 ln(L/R) / (2 L T0), for L/R > 8.

    T0 is the time at which the fitted line reaches H/H0 = 0.37 (ln = -1):
    ``T0 = (-1 - intercept) / slope``.

    >>> round(hvorslev_k_from_t0(300.0, casing_radius=0.0254, screen_length=1.524, well_radius=0.0508), 10)
    2.3997e-06
    """
    rc = _positive("casing_radius", casing_radius)
    L = _positive("screen_length", screen_length)
    R = _positive("well_radius", well_radius)
    tt, hn = normalized_head(t, displacement, h0=h0)
    fit = fit_recovery(tt, hn, window=window)
    t0 = (-1.0 - fit["intercept"]) / fit["slope"]
    if not t0 > 0:
        raise InsufficientDataError(f"the basic time lag T0 comes out as {t0:g}; check the record")
    return {"method": "Hvorslev (1951)", "k": hvorslev_k_from_t0(t0, casing_radius=rc, screen_length=L,
                                                                  well_radius=R),
            "t0": t0, "shape_ok": L / R > 8, "fit": fit}


def hvorslev_k_from_t0(t0: float, *, casing_radius: float, screen_length: float, well_radius: float) -> float:
    """K = r_c^2 ln(L/R) / (2 L T0) (Hvorslev's case for L/R > 8)."""
    rc = _positive("casing_radius", casing_radius)
    L = _positive("screen_length", screen_length)
    R = _positive("well_radius", well_radius)
    t0 = _positive("t0", t0)
    return rc * rc * math.log(L / R) / (2.0 * L * t0)


def _abc(x: float) -> tuple[float, float, float]:
    """Bouwer-Rice coefficients A, B, C as polynomials in Le/rw.

    from memory: the polynomial fits attributed to Van Rooy (1988), as reproduced with Butler (1998); checked
    against the project's computed case ln(Re/rw) = 2.4391 (VERIFY.md).
    """
    a = 1.4720 + 3.537e-2 * x - 8.148e-5 * x**2 + 1.028e-7 * x**3 - 6.484e-11 * x**4 + 1.573e-14 * x**5
    b = 0.2372 + 5.151e-3 * x - 2.682e-6 * x**2 - 3.491e-10 * x**3 + 4.738e-13 * x**4
    c = 0.7920 + 3.993e-2 * x - 5.743e-5 * x**2 + 3.858e-8 * x**3 - 9.659e-12 * x**4
    return a, b, c


def bouwer_rice_ln_re_rw(*, well_radius: float, screen_length: float, lw: float, aquifer_thickness: float) -> float:
    """ln(Re/rw) of Bouwer and Rice (1976).

    Parameters
    ----------
    well_radius : rw, radius of the borehole (with its filter pack)
    screen_length : Le
    lw : Lw, height of water above the bottom of the screen at rest
    aquifer_thickness : H, saturated thickness (H = Lw for a fully penetrating well)

    Partially penetrating (Lw < H): ``1 / (1.1 / ln(Lw/rw) + (A + B ln((H - Lw)/rw)) / (Le/rw))`` with
    ln((H - Lw)/rw) capped at 6; fully penetrating: ``1 / (1.1 / ln(Lw/rw) + C / (Le/rw))``.
    """
    rw = _positive("well_radius", well_radius)
    le = _positive("screen_length", screen_length)
    lw = _positive("lw", lw)
    h = _positive("aquifer_thickness", aquifer_thickness)
    if lw > h:
        raise ParameterError(f"Lw ({lw:g}) cannot exceed the saturated thickness H ({h:g})")
    if le > lw:
        raise ParameterError(f"the screen length Le ({le:g}) cannot exceed Lw ({lw:g})")
    a, b, c = _abc(le / rw)
    first = 1.1 / math.log(lw / rw)
    if h - lw <= 1e-9 * h:
        return 1.0 / (first + c / (le / rw))
    log_term = min(math.log((h - lw) / rw), BR_LOG_CAP)
    return 1.0 / (first + (a + b * log_term) / (le / rw))


def bouwer_rice_k(t, displacement, *, casing_radius: float, well_radius: float, screen_length: float, lw: float,
                  aquifer_thickness: float, window=BOUWER_RICE_RANGE, h0: float | None = None) -> dict:
    """Bouwer and Rice (1976): K = r_c^2 ln(Re/rw) / (2 Le) (1/t) ln(y0/yt), (1/t) ln(y0/yt) = -slope."""
    rc = _positive("casing_radius", casing_radius)
    ln_re = bouwer_rice_ln_re_rw(well_radius=well_radius, screen_length=screen_length, lw=lw,
                                 aquifer_thickness=aquifer_thickness)
    tt, hn = normalized_head(t, displacement, h0=h0)
    fit = fit_recovery(tt, hn, window=window)
    k = rc * rc * ln_re / (2.0 * float(screen_length)) * (-fit["slope"])
    return {"method": "Bouwer and Rice (1976)", "k": k, "ln_re_rw": ln_re, "fit": fit}


def compare_repeats(k_values, *, tolerance: float = REPEAT_TOLERANCE) -> dict:
    """Compare the K of repeat tests of one zone; ``disagree`` when max/min - 1 exceeds ``tolerance``."""
    k = np.asarray(k_values, float)
    if k.size < 2:
        return {"n": int(k.size), "spread": 0.0, "disagree": False}
    if not (np.isfinite(k).all() and (k > 0).all()):
        raise ParameterError("K values of repeat tests must be finite and > 0")
    spread = float(k.max() / k.min() - 1.0)
    return {"n": int(k.size), "spread": spread, "disagree": spread > tolerance,
            "geomean": float(np.exp(np.log(k).mean()))}
