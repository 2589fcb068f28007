"""Drawdown around pumping wells: Theis, Cooper-Jacob, Thiem and superposition.

A pure numeric core: numpy arrays and plain numbers in, numpy arrays and plain
numbers out; no files and no store. Every function works in *consistent
units*: pick one length unit and one time unit and express everything in them,
e.g. r in m, t in d, Q in m3/d, T in m2/d (S is dimensionless), which gives
drawdown in m. Pumping (extraction) is a positive Q and gives a positive
drawdown; injection is a negative Q and gives a negative drawdown (a rise).

The aquifer model behind :func:`theis_drawdown` and the superposition
functions is the usual idealisation: confined, homogeneous, isotropic,
infinite in extent, of uniform thickness, fully penetrating wells of
negligible storage, pumping at a constant rate from t = 0. Drawdown from
several wells is the sum of the single-well drawdowns, which holds because the
governing equation is linear.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange
from scipy.special import exp1

from .errors import ParameterError

__all__ = [
    "EULER_GAMMA",
    "DEFAULT_R_MIN",
    "well_function",
    "theis_drawdown",
    "cooper_jacob_drawdown",
    "thiem_transmissivity",
    "superpose_drawdown",
    "superpose_drawdown_grid",
    "history_terms",
    "full_penetrations",
]

#: Euler-Mascheroni constant (from memory: 0.57721 56649 01532 86060...).
EULER_GAMMA = 0.5772156649015329

#: Default smallest well-to-point distance used by the superposition functions,
#: in the length unit of the coordinates (1 mm when that unit is the metre).
DEFAULT_R_MIN = 1e-3


# ---------------------------------------------------------------------------
# argument checks
# ---------------------------------------------------------------------------

def _first_bad(values: np.ndarray, bad: np.ndarray):
    """The first offending element, as a plain number, for an error message."""
    return values[bad].flat[0].item()


def _positive(name: str, value, *, allow_inf: bool = False) -> np.ndarray:
    """``value`` as a float array, every element finite (or +inf) and > 0."""
    try:
        a = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number or an array of numbers; got {value!r}") from None
    bad = ~(a > 0)  # catches NaN too
    if not allow_inf:
        bad |= ~np.isfinite(a)
    if bad.any():
        raise ParameterError(f"{name} must be > 0{'' if allow_inf else ' and finite'}; "
                             f"got {_first_bad(a, bad)}")
    return a


def _finite(name: str, value) -> np.ndarray:
    """``value`` as a float array, every element finite."""
    try:
        a = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number or an array of numbers; got {value!r}") from None
    bad = ~np.isfinite(a)
    if bad.any():
        raise ParameterError(f"{name} must be finite; got {_first_bad(a, bad)}")
    return a


def _storativity(value) -> np.ndarray:
    """Storativity as a float array, every element finite, > 0 and <= 1 (it is a dimensionless fraction)."""
    a = _positive("S", value)
    bad = a > 1
    if bad.any():
        raise ParameterError(f"S must be <= 1 (storativity is a dimensionless fraction); got {_first_bad(a, bad)}")
    return a


def _scalar(name: str, a: np.ndarray) -> float:
    if a.ndim != 0:
        raise ParameterError(f"{name} must be a single number; got an array of shape {a.shape}")
    return float(a)


def _out(a: np.ndarray, scalar: bool):
    """Plain float for scalar input, array otherwise."""
    return float(a) if scalar else a


# ---------------------------------------------------------------------------
# single-well solutions
# ---------------------------------------------------------------------------

def well_function(u):
    """Theis well function W(u), the exponential integral E1(u).

    W(u) = integral from u to infinity of exp(-y) / y dy, evaluated with
    :func:`scipy.special.exp1`.

    Parameters
    ----------
    u : float or array_like
        Dimensionless argument, u = r^2 S / (4 T t); must be > 0 (+inf gives 0).

    Returns
    -------
    float or numpy.ndarray
        W(u), dimensionless, a float for scalar input, otherwise an array of
        the shape of ``u``.

    Raises
    ------
    ParameterError
        If any u is <= 0 or NaN.
    """
    a = _positive("u", u, allow_inf=True)
    return _out(exp1(a), a.ndim == 0)


def _theis_args(r, t, Q, T, S):
    r_ = _positive("r", r)
    t_ = _positive("t", t)
    Q_ = _finite("Q", Q)
    T_ = _positive("T", T)
    S_ = _storativity(S)
    scalar = all(np.ndim(a) == 0 for a in (r_, t_, Q_, T_, S_))
    u = r_ * r_ * S_ / (4.0 * T_ * t_)
    return u, Q_ / (4.0 * math.pi * T_), scalar


def theis_drawdown(r, t, *, Q, T, S):
    """Theis (1935) drawdown around a well pumping at a constant rate.

    s = Q / (4 pi T) W(u),  u = r^2 S / (4 T t).

    Parameters
    ----------
    r : float or array_like
        Distance from the pumping well, > 0 (length, e.g. m).
    t : float or array_like
        Time since pumping started, > 0 (time, e.g. d). Broadcast against ``r``.
    Q : float or array_like
        Pumping rate (volume / time, e.g. m3/d); positive for extraction,
        negative for injection, 0 allowed.
    T : float or array_like
        Transmissivity, > 0 (length^2 / time, e.g. m2/d).
    S : float or array_like
        Storativity (storage coefficient), in (0, 1], dimensionless.

    Returns
    -------
    float or numpy.ndarray
        Drawdown (length, e.g. m), positive for extraction; a float when all
        arguments are scalars, else an array of the broadcast shape.

    Raises
    ------
    ParameterError
        If r, t, T or S is not finite and > 0, S > 1, or Q is not finite.
    """
    u, coef, scalar = _theis_args(r, t, Q, T, S)
    return _out(coef * exp1(u), scalar)


def cooper_jacob_drawdown(r, t, *, Q, T, S):
    """Cooper-Jacob (1946) straight-line approximation of the Theis drawdown.

    s = Q / (4 pi T) (-gamma - ln u),  u = r^2 S / (4 T t),  gamma = 0.5772156649.

    It keeps the first two terms of the series W(u) = -gamma - ln u + u - ...
    and is therefore valid only for small u: u < 0.01 is the usual criterion
    (common practice), where it underestimates the Theis drawdown by about
    0.25 %; at u = 0.1 the shortfall is about 5 %. No check of u is made; for
    u > exp(-gamma) = 0.56 the formula even gives a drawdown of the wrong sign.

    Parameters
    ----------
    r, t : float or array_like
        Distance (> 0, length) and time since pumping started (> 0, time), broadcast.
    Q : float or array_like
        Pumping rate (volume / time), positive for extraction.
    T : float or array_like
        Transmissivity, > 0 (length^2 / time).
    S : float or array_like
        Storativity, in (0, 1], dimensionless.

    Returns
    -------
    float or numpy.ndarray
        Approximate drawdown (length), of the broadcast shape of the arguments
        (a float when all are scalars).

    Raises
    ------
    ParameterError
        As :func:`theis_drawdown`.
    """
    u, coef, scalar = _theis_args(r, t, Q, T, S)
    return _out(coef * (-EULER_GAMMA - np.log(u)), scalar)


def thiem_transmissivity(Q, r1, s1, r2, s2) -> float:
    """Transmissivity from steady drawdowns in two observation wells (Thiem, 1906).

    T = Q ln(r2 / r1) / (2 pi (s1 - s2)).

    Parameters
    ----------
    Q : float
        Pumping rate (volume / time, e.g. m3/d), positive for extraction.
    r1, r2 : float
        Distances of the two observation wells from the pumping well, > 0 and
        different (length, e.g. m).
    s1, s2 : float
        Steady drawdowns at r1 and r2 (length, e.g. m); they must differ.

    Returns
    -------
    float
        Transmissivity (length^2 / time, e.g. m2/d).

    Raises
    ------
    ParameterError
        If an argument is not a finite number, r1 or r2 is <= 0, r1 == r2,
        s1 == s2, Q == 0, or the drawdowns do not fall away from the well in
        the sense of Q (which would give T <= 0).
    """
    Q_ = _scalar("Q", _finite("Q", Q))
    r1_ = _scalar("r1", _positive("r1", r1))
    r2_ = _scalar("r2", _positive("r2", r2))
    s1_ = _scalar("s1", _finite("s1", s1))
    s2_ = _scalar("s2", _finite("s2", s2))
    if r1_ == r2_:
        raise ParameterError(f"r1 and r2 must differ; got both {r1_}")
    if s1_ == s2_:
        raise ParameterError(f"s1 and s2 must differ; got both {s1_}")
    if Q_ == 0:
        raise ParameterError("Q must not be 0; got 0")
    T = Q_ * math.log(r2_ / r1_) / (2.0 * math.pi * (s1_ - s2_))
    if not T > 0:
        raise ParameterError(
            f"the drawdowns must decrease away from the well (for Q > 0); got s1={s1_} at r1={r1_}, "
            f"s2={s2_} at r2={r2_}, Q={Q_}, giving T = {T}")
    return T


# ---------------------------------------------------------------------------
# superposition: a tabulated W(u) inside a compiled kernel
# ---------------------------------------------------------------------------
#
# Why a hand-written kernel: the target is of the order of 100 wells on a
# 1000 x 1000 grid, 1e8 well-cell pairs, in about a second. No library offers
# a fused "sum of Theis drawdowns over many wells" kernel, and the obvious
# numpy route, scipy.special.exp1 on a (wells, cells) array, both costs 1e8
# full exponential-integral evaluations (tens of seconds) and needs gigabytes
# of temporaries. Here a numba kernel runs over rows of cells (or blocks of
# points) in parallel and over wells, accumulating in place, and reads W(u)
# from a small precomputed table of cubics.
#
# The table, and why it needs no logarithm: for a positive binary64 number u
# in [2^e, 2^(e+1)) the 64-bit pattern is (e + 1023) * 2^52 + mantissa bits,
# and the mantissa bits grow linearly with u across the octave. So the top
# bits of the pattern (the exponent and the first _M = 7 mantissa bits) pick
# one of 128 intervals per octave, each of relative width at most 2^-7, and
# the remaining 45 bits, scaled to [0, 1), are the position tau inside it,
# linear in u. On each interval W is the cubic Hermite interpolant in tau of
# the exact values exp1(u_a), exp1(u_b) (scipy) and the exact slopes
# dW/du = -exp(-u) / u. Evaluating it costs an integer shift, a mask and a
# Horner cubic; taking ln u instead (a table uniform in ln u) was three times
# slower, the log call dominating. The table spans u = 2^-40 (9.1e-13) to
# 2^6 = 64: 46 octaves, 5,888 intervals, 188 kB of coefficients. Measured
# relative error against scipy's exp1: below 7e-9 wherever W > 1e-4 (u < 7.3),
# against the 1e-6 asked for, and below 6e-11 absolute everywhere (largest at
# the small-u end, where W is about 27);
# tests/test_pumping.py checks it on random u. Beyond the table, u >= 64:
# W < 3e-30, taken as 0. Below it, u < 2^-40: the series
# W = -gamma - ln u + u - u^2/4 (next term u^3/18 < 1e-37) is exact to rounding.
# The bit trick assumes IEEE-754 binary64, which numpy's float64 is.

_M = 7                      # mantissa bits that select the interval: 2^_M intervals per octave
_E_LO, _E_HI = -40, 6       # the table covers u in [2^_E_LO, 2^_E_HI)
_U_LO = 2.0 ** _E_LO
_U_HI = 2.0 ** _E_HI
_BITS_LO = (_E_LO + 1023) << 52   # bit pattern of _U_LO
_SHIFT = 52 - _M
_MASK = (1 << _SHIFT) - 1
_TAU_SCALE = 1.0 / (1 << _SHIFT)


def _build_table(m: int = _M, e_lo: int = _E_LO, e_hi: int = _E_HI) -> np.ndarray:
    """Per-interval cubic coefficients of W in the mantissa-linear variable tau.

    Returns
    -------
    numpy.ndarray ((e_hi - e_lo) * 2**m, 4)
        Row i covers u in [u_a, u_b) = [2^e (1 + f / 2^m), 2^e (1 + (f + 1) / 2^m)) with
        e = e_lo + i // 2^m, f = i % 2^m; there, with tau = (u - u_a) / (u_b - u_a),
        W = c0 + tau (c1 + tau (c2 + tau c3)).
    """
    i = np.arange((e_hi - e_lo) * 2**m)
    e = e_lo + i // 2**m
    f = i % 2**m
    ua = np.ldexp(1.0 + f / 2.0**m, e)
    ub = np.ldexp(1.0 + (f + 1) / 2.0**m, e)
    f0, f1 = exp1(ua), exp1(ub)
    d0 = -np.exp(-ua) / ua * (ub - ua)  # dW/dtau at the two ends
    d1 = -np.exp(-ub) / ub * (ub - ua)
    coef = np.empty((i.size, 4))
    coef[:, 0] = f0
    coef[:, 1] = d0
    coef[:, 2] = 3.0 * (f1 - f0) - 2.0 * d0 - d1
    coef[:, 3] = 2.0 * (f0 - f1) + d0 + d1
    return coef


_TABLE = _build_table()


@njit(cache=True, inline="always")
def _w_bits(u, bits, table):
    """W(u) for u > 0, given u and its binary64 bit pattern ``bits`` (see the comment above)."""
    if u >= _U_HI:
        return 0.0
    if u < _U_LO:
        return -0.5772156649015329 - math.log(u) + u - 0.25 * u * u
    b = bits - _BITS_LO
    i = b >> _SHIFT
    tau = (b & _MASK) * _TAU_SCALE
    return table[i, 0] + tau * (table[i, 1] + tau * (table[i, 2] + tau * table[i, 3]))


@njit(cache=True)
def _w_table_array(u, table):
    """Tabulated W at each element of a 1-D float64 array (for tests and checks)."""
    bits = u.view(np.int64)
    out = np.empty(u.shape[0])
    for i in range(u.shape[0]):
        out[i] = _w_bits(u[i], bits[i], table)
    return out


_BLOCK = 256  # points per parallel work item in _superpose_points


@njit(cache=True, parallel=True)
def _superpose_points(px, py, wx, wy, coef, r2min, c, table):
    """Sum over wells q of coef_q W(max(r^2, r2min_q) c_q) at each point."""
    m = px.shape[0]
    k = wx.shape[0]
    out = np.zeros(m)
    nblocks = (m + _BLOCK - 1) // _BLOCK
    for blk in prange(nblocks):
        lo = blk * _BLOCK
        hi = min(lo + _BLOCK, m)
        buf = np.empty(hi - lo)
        bits = buf.view(np.int64)
        for q in range(k):
            rq = r2min[q]
            cq_u = c[q]
            for p in range(lo, hi):
                dx = px[p] - wx[q]
                dy = py[p] - wy[q]
                r2 = dx * dx + dy * dy
                if r2 < rq:
                    r2 = rq
                buf[p - lo] = r2 * cq_u
            cq = coef[q]
            for p in range(lo, hi):
                out[p] += cq * _w_bits(buf[p - lo], bits[p - lo], table)
    return out


@njit(cache=True, parallel=True)
def _superpose_grid(xc, yc, wx, wy, coef, r2min, c, table):
    """Sum over wells q of coef_q W(max(r^2, r2min_q) c_q) on the grid (yc[i], xc[j])."""
    nx = xc.shape[0]
    ny = yc.shape[0]
    k = wx.shape[0]
    dx2 = np.empty((k, nx))
    for q in range(k):
        for j in range(nx):
            d = xc[j] - wx[q]
            dx2[q, j] = d * d
    out = np.zeros((ny, nx))
    for i in prange(ny):
        buf = np.empty(nx)
        bits = buf.view(np.int64)
        for q in range(k):
            d = yc[i] - wy[q]
            dy2 = d * d
            rq = r2min[q]
            cq_u = c[q]
            if max(dy2, rq) * cq_u >= _U_HI:
                continue  # the whole row lies beyond the reach of this well
            for j in range(nx):
                r2 = dx2[q, j] + dy2
                if r2 < rq:
                    r2 = rq
                buf[j] = r2 * cq_u
            cq = coef[q]
            for j in range(nx):
                out[i, j] += cq * _w_bits(buf[j], bits[j], table)
    return out


def _per_well(name: str, a: np.ndarray, k: int) -> np.ndarray:
    """One number for every well, or one number per well: always an array of shape (k,)."""
    if a.ndim == 0:
        return np.full(k, float(a))
    if a.shape != (k,):
        raise ParameterError(f"{name} must be one number or have shape ({k},); got {a.shape}")
    return a


def _superpose_args(wells_xy, rates, t, T, S, r_min):
    """Validate the shared arguments; return well x, y, per-well coefficients, r_min^2 and u / r^2 per well."""
    w = _finite("wells_xy", wells_xy)
    if w.ndim != 2 or w.shape[1] != 2:
        raise ParameterError(f"wells_xy must have shape (k, 2); got {w.shape}")
    k = w.shape[0]
    q = _finite("rates", rates)
    if q.shape != (k,):
        raise ParameterError(f"rates must have shape ({k},) to match wells_xy; got {q.shape}")
    t_ = _per_well("t", _positive("t", t), k)
    T_ = _per_well("T", _positive("T", T), k)
    S_ = _per_well("S", _storativity(S), k)
    rm = np.full(k, DEFAULT_R_MIN) if r_min is None else _per_well("r_min", _positive("r_min", r_min), k)
    coef = q / (4.0 * math.pi * T_)
    c = S_ / (4.0 * T_ * t_)
    return (np.ascontiguousarray(w[:, 0]), np.ascontiguousarray(w[:, 1]),
            np.ascontiguousarray(coef), np.ascontiguousarray(rm * rm), np.ascontiguousarray(c))


def superpose_drawdown(xy, wells_xy, rates, t, *, T, S, r_min=None):
    """Theis drawdown at many points from many wells, summed (superposition).

    s(p) = sum_k rates_k / (4 pi T_k) W(r_pk^2 S_k / (4 T_k t_k)), with the
    distance r_pk from well k to point p clamped below at r_min. t, T and S
    are one number for all wells or one per well: a per-well t superposes
    wells that started at different times (a negative rate at the time a well
    stopped gives its recovery), a per-well T uses the transmissivity at each
    well (a screening approximation where T varies). W is read from a
    precomputed table (relative error < 1e-8 wherever W > 1e-4, see the module
    source), in a compiled parallel kernel: 1e8 well-point pairs take well under
    a second on two cores.

    Parameters
    ----------
    xy : array_like (m, 2)
        Points where drawdown is wanted, columns x and y (length, e.g. m).
    wells_xy : array_like (k, 2)
        Well positions, same length unit.
    rates : array_like (k,)
        Pumping rate of each well (volume / time, e.g. m3/d), positive for
        extraction, negative for injection.
    t : float or array_like (k,)
        Time since the wells (or each well) started pumping, > 0 (time, e.g. d).
    T : float or array_like (k,)
        Transmissivity, > 0 (length^2 / time, e.g. m2/d), one for all wells or one per well.
    S : float or array_like (k,)
        Storativity, in (0, 1], dimensionless, one for all wells or one per well.
    r_min : float or array_like (k,), optional
        Smallest distance used (length): a point closer than r_min to a well
        (the well itself included) gets the drawdown at r_min, the well-face
        drawdown when r_min is the well radius. One number for all wells or
        one per well; default :data:`DEFAULT_R_MIN` (1e-3 length units).

    Returns
    -------
    numpy.ndarray (m,)
        Drawdown at each point (length, e.g. m).

    Raises
    ------
    ParameterError
        On shapes that do not match, non-finite coordinates or rates, or t, T,
        S, r_min that are not finite and > 0, or S > 1.
    """
    p = _finite("xy", xy)
    if p.ndim != 2 or p.shape[1] != 2:
        raise ParameterError(f"xy must have shape (m, 2); got {p.shape}")
    wx, wy, coef, r2min, c = _superpose_args(wells_xy, rates, t, T, S, r_min)
    return _superpose_points(np.ascontiguousarray(p[:, 0]), np.ascontiguousarray(p[:, 1]),
                             wx, wy, coef, r2min, c, _TABLE)


def superpose_drawdown_grid(x_centers, y_centers, wells_xy, rates, t, *, T, S, r_min=None):
    """Superposed Theis drawdown on a regular grid of cell centres.

    Same as :func:`superpose_drawdown` at the points (x_centers[j],
    y_centers[i]), without building the (ny * nx, 2) point array.

    Parameters
    ----------
    x_centers : array_like (nx,)
        Cell-centre x coordinates (length, e.g. m).
    y_centers : array_like (ny,)
        Cell-centre y coordinates; row i of the result uses y_centers[i]
        (pass them north-first for a north-up raster).
    wells_xy, rates, t, T, S, r_min
        As :func:`superpose_drawdown`.

    Returns
    -------
    numpy.ndarray (ny, nx)
        Drawdown at each cell centre (length, e.g. m).

    Raises
    ------
    ParameterError
        As :func:`superpose_drawdown`, and if x_centers or y_centers is not 1-D.
    """
    xc = _finite("x_centers", x_centers)
    yc = _finite("y_centers", y_centers)
    if xc.ndim != 1:
        raise ParameterError(f"x_centers must be 1-D; got shape {xc.shape}")
    if yc.ndim != 1:
        raise ParameterError(f"y_centers must be 1-D; got shape {yc.shape}")
    wx, wy, coef, r2min, c = _superpose_args(wells_xy, rates, t, T, S, r_min)
    return _superpose_grid(np.ascontiguousarray(xc), np.ascontiguousarray(yc),
                           wx, wy, coef, r2min, c, _TABLE)


# ---------------------------------------------------------------------------
# pumping histories and the thickness behind T = K b
# ---------------------------------------------------------------------------

def history_terms(rates, since_start, since_stop=None):
    """Superposition terms of pumping records: each record's start and, if it stopped, its stop.

    A record pumping Q from t_on to t_off gives, at a later time t, the drawdown
    Q W(u(t - t_on)) - Q W(u(t - t_off)) (superposition in time: a well that
    stops is the same well plus an injection of Q from t_off on). This returns
    the terms of that sum, to be passed to :func:`superpose_drawdown` with one
    ``t`` per term.

    Parameters
    ----------
    rates : array_like (k,)
        Rate of each record (volume / time), finite.
    since_start : array_like (k,)
        Time from each record's start to the time of interest (time). A record
        with ``since_start <= 0`` has not started yet and gives no term.
    since_stop : array_like (k,), optional
        Time from each record's stop to the time of interest; NaN (or <= 0)
        where the record had not stopped by then. Must not exceed ``since_start``.

    Returns
    -------
    index, rates, times : numpy.ndarray
        For every term, the record it belongs to (int), its rate (+Q at the
        start, -Q at the stop) and its elapsed time (> 0).

    Raises
    ------
    ParameterError
        On shapes that differ, non-finite rates or start times, or a stop before the start.
    """
    q = _finite("rates", rates)
    t_on = _finite("since_start", since_start)
    if q.ndim != 1 or t_on.shape != q.shape:
        raise ParameterError(f"rates and since_start must be 1-D of one shape; got {q.shape}, {t_on.shape}")
    if since_stop is None:
        t_off = np.full(q.shape, np.nan)
    else:
        t_off = np.asarray(since_stop, dtype=float)
        if t_off.shape != q.shape or np.isinf(t_off).any():
            raise ParameterError(f"since_stop must be finite or NaN, of shape {q.shape}; got shape {t_off.shape}")
    stopped = np.isfinite(t_off) & (t_off > 0)
    if (stopped & (t_off > t_on)).any():
        raise ParameterError("a record stops before it starts (since_stop > since_start)")
    started = t_on > 0
    idx = np.flatnonzero(started)
    stop_idx = np.flatnonzero(started & stopped)
    index = np.concatenate([idx, stop_idx])
    out_q = np.concatenate([q[idx], -q[stop_idx]])
    times = np.concatenate([t_on[idx], t_off[stop_idx]])
    return index, out_q, times


def full_penetrations(bottom_depth, total_depth, has_unit_below, *, tolerance: float):
    """Which wells' picks hold a unit's true bottom (and hence its full thickness).

    A pick's bottom is only the unit's bottom when the well went on below it:
    a pick whose bottom lies at the well's total depth (within ``tolerance``)
    is where the drilling stopped. The well must also show that it went on: a
    pick of a lower unit, or a known total depth below the pick (the lowest
    unit of a district has no unit below to pick). A well with neither, e.g.
    no total depth and no lower pick, has not shown the bottom.

    Parameters
    ----------
    bottom_depth : array_like (n,)
        Depth of the unit's bottom pick at each well (length).
    total_depth : array_like (n,)
        Total depth of each well (same length unit); NaN where unknown.
    has_unit_below : array_like of bool (n,)
        Whether the well has a pick of a unit below this one.
    tolerance : float
        Largest difference (length, >= 0) at which a bottom counts as "at total depth".

    Returns
    -------
    numpy.ndarray of bool (n,)
    """
    bottom = _finite("bottom_depth", bottom_depth)
    td = np.asarray(total_depth, dtype=float)
    below = np.asarray(has_unit_below, dtype=bool)
    if td.shape != bottom.shape or below.shape != bottom.shape:
        raise ParameterError(f"bottom_depth, total_depth and has_unit_below must have one shape; got "
                             f"{bottom.shape}, {td.shape}, {below.shape}")
    if not (np.isfinite(tolerance) and tolerance >= 0):
        raise ParameterError(f"tolerance must be finite and >= 0; got {tolerance}")
    at_total_depth = np.isfinite(td) & (np.abs(td - bottom) <= tolerance)
    drilled_on = np.isfinite(td) & (td > bottom + tolerance)
    return (below | drilled_on) & ~at_total_depth


# ---------------------------------------------------------------------------
# a pumping scenario: its drawdown, the adjustment to unpumped heads, and where heads fall below a unit
# ---------------------------------------------------------------------------

def scenario_drawdown(wells_xy, rates, t, *, T, S, r_min=None, history=None, grid=None, points=None):
    """Drawdown of a pumping scenario and the drawdown of past pumping, on a grid or at points.

    The scenario's wells pump ``rates`` for ``t`` (:func:`superpose_drawdown`; wells with a zero rate add
    nothing). ``history`` holds superposition terms of the pumping already in measured heads
    (:func:`history_terms`); their summed drawdown is returned apart, so that a caller can add it back to
    measured heads to get unpumped heads.

    Parameters
    ----------
    wells_xy : array_like (k, 2)
        Scenario wells (length, e.g. m).
    rates : array_like (k,)
        Rate of each (volume / time, e.g. m3/d); negative: less pumping than before (recovery).
    t : float
        Duration of the scenario (time, e.g. d), > 0.
    T : float or array_like (k,)
        Transmissivity (length^2 / time) for all or at each scenario well.
    S : float
        Storativity (dimensionless).
    r_min : float, optional
        Smallest distance used (the well radius); see :func:`superpose_drawdown`.
    history : tuple (xy (h, 2), rates (h,), t (h,), T (h,)), optional
        Terms of past pumping at the time of the heads (elapsed time per term).
    grid : tuple (x_centers (nx,), y_centers (ny,)), optional
        Evaluate on this grid (north first for a north-up raster) ...
    points : array_like (m, 2), optional
        ... or at these points (one of the two).

    Returns
    -------
    drawdown, history_drawdown : numpy.ndarray (ny, nx) or (m,)
        Scenario drawdown and the drawdown of the history terms (length, zero where there are none).

    Examples
    --------
    One well, no history, at 10 m: Q / (4 pi T) W(r^2 S / (4 T t)).

    >>> s, past = scenario_drawdown([[0.0, 0.0]], [1000.0], 1.0, T=500.0, S=1e-4, points=[[10.0, 0.0]])
    >>> bool(abs(s[0] - theis_drawdown(10.0, 1.0, Q=1000.0, T=500.0, S=1e-4)) < 1e-9), past.tolist()
    (True, [0.0])
    """
    if (grid is None) == (points is None):
        raise ParameterError("give grid= or points=, one of them", param=("grid", "points"))
    q = _finite("rates", rates).reshape(-1)
    w = _finite("wells_xy", wells_xy).reshape(-1, 2)
    if len(w) != len(q):
        raise ParameterError(f"rates must have shape ({len(w)},) to match wells_xy; got {q.shape}")
    T_ = _per_well("T", np.asarray(T, dtype=float), len(q))  # checked > 0 where a well pumps (below)
    on = q != 0
    terms = [(w[on], q[on], float(t), T_[on])]
    if history is not None:
        terms.append(tuple(history))
    if grid is not None:
        xc, yc = grid
        shape = (len(yc), len(xc))
    else:
        pts = _finite("points", points).reshape(-1, 2)
        shape = (len(pts),)
    out = [np.zeros(shape), np.zeros(shape)]
    for i, (txy, tq, tt, tT) in enumerate(terms):
        if len(tq) == 0:
            continue
        if grid is not None:
            v = superpose_drawdown_grid(xc, yc, txy, tq, tt, T=tT, S=S, r_min=r_min)
        else:
            v = superpose_drawdown(pts, txy, tq, tt, T=tT, S=S, r_min=r_min)
        out[min(i, 1)] += v
    return out[0], out[1]


def level_crossings(head_before, head_after, unit_top, unit_bottom) -> dict:
    """Where lowered heads fall below a unit's top (confined to unconfined) or its bottom (dewatered).

    Parameters
    ----------
    head_before, head_after : array_like
        Heads before and after the drawdown (length above the datum), one shape.
    unit_top, unit_bottom : array_like
        Elevation of the unit's top and bottom, same shape; NaN where unknown (no crossing there).

    Returns
    -------
    dict of bool arrays
        ``below_top`` (after < top), ``taken_below_top`` (before >= top and after < top) and ``below_bottom``
        (after < bottom); False wherever a value is NaN.

    >>> c = level_crossings([10.0, 10.0], [8.0, 4.0], [9.0, float("nan")], [5.0, 5.0])
    >>> {k: v.tolist() for k, v in c.items()}
    {'below_top': [True, False], 'taken_below_top': [True, False], 'below_bottom': [False, True]}
    """
    before, after, top, bottom = np.broadcast_arrays(*(np.asarray(a, float) for a in
                                                       (head_before, head_after, unit_top, unit_bottom)))
    with np.errstate(invalid="ignore"):
        below_top = after < top
        return {"below_top": below_top, "taken_below_top": below_top & (before >= top),
                "below_bottom": after < bottom}
