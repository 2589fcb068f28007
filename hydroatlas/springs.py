"""Spring discharge against head: pairing, linear and power-law fits, cease-flow head, trigger levels, recession.

Pure numeric core (numpy and scipy only): arrays and plain numbers in, frozen results out; no store, no files.
Times are float days on any common origin (the workflow uses days since the Unix epoch). Heads and discharges
are in whatever units the caller uses, the same within one call (the workflow passes heads in the store's length
unit and discharge in its display rate unit); every result is in those units.

The steps, each a function:

- :func:`pair_readings`: each discharge reading with the index zone's head at that time, either the nearest head
  reading within ``tolerance_days`` (``how="nearest"``) or linear interpolation in time between the two head
  readings that bracket it when they lie at most ``2 * tolerance_days`` apart (``how="interpolate"``; then the
  nearer of them is within ``tolerance_days``). Unpaired readings are returned with the reason, never dropped
  silently.
- :func:`fit_relation`: discharge Q against head h, a straight line Q = a + b h (cease-flow head h0 = -a / b) and
  a power law Q = c (h - h0)^n (zero below h0), each fitted only where the data support it, and the better one
  chosen by AIC; the cease-flow head and the trigger levels (heads at which Q falls to given fractions of a
  reference discharge) with 95 % intervals: Fieller's inverse-prediction interval for the line, a seeded
  residual bootstrap for the power law.
- :func:`rank_candidates`: candidate index zones ordered by how well a line fits their pairs.
- :func:`recession_segments`, :func:`fit_recession`, :func:`recession_days`: Maillet's exponential recession
  Q = Q0 exp(-a t) on dry-season segments, the recession constant a (1/d) with its interval and the days from one
  discharge to another with no recharge.
- :func:`discharge_change`: the change of discharge a drawdown s at the index zone implies, Q(h) - Q(h - s), with
  its interval from the bootstrap draws of the fit; :func:`equivalent_recharge`: discharge over an area as a
  depth per time.

Sources: the least-squares line and its standard errors as in any regression text (checked against
scipy.stats.linregress); Fieller (1954, J. R. Stat. Soc. B 16(2), 175-185) for the interval of a ratio such as
-a / b (inverse prediction, Draper and Smith 1998, Applied Regression Analysis, 3rd ed., section 3.2); the residual
bootstrap after Efron and Tibshirani (1993, An Introduction to the Bootstrap, chapter 9) with residuals inflated by
sqrt(n / (n - p)) (Davison and Hinkley 1997, Bootstrap Methods and their Application, section 6.2.3); AIC after
Akaike (1974) for Gaussian errors, AIC = n ln(RSS / n) + 2 k; Maillet (1905, Essais d'hydraulique souterraine et
fluviale) for the recession.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import InsufficientDataError, ParameterError

PAIRING = ("nearest", "interpolate")
#: days a head reading may lie from a discharge reading (common practice, no source: half of a monthly reading
#: interval, rounded up, so a monthly head record pairs every discharge reading)
DEFAULT_TOLERANCE_DAYS = 16.0
#: fractions of the reference discharge whose heads are the default trigger levels (percent)
DEFAULT_LEVELS = (50.0, 25.0, 10.0)
#: least pairs for a line, and for a power law (three parameters and a shape to see)
MIN_PAIRS_LINEAR = 5
MIN_PAIRS_POWER = 10
#: least distinct heads for a line, and for a power law
MIN_HEADS_LINEAR = 3
MIN_HEADS_POWER = 5
#: significance level of the slope test (two-sided)
SLOPE_ALPHA = 0.05
#: the exponent of a supported power law lies in this range
POWER_EXPONENT_RANGE = (0.1, 10.0)
#: a supported power law puts h0 no more than this many head ranges below the lowest head with flow
POWER_H0_RANGES = 10.0
#: AIC difference by which the power law (one parameter more) must beat the line to be chosen (common practice,
#: no source: differences under 2 are read as no real support, Burnham and Anderson 2002, section 2.6, from memory)
AIC_MARGIN = 2.0
#: bootstrap draws by default
DEFAULT_BOOTSTRAP = 999
#: least readings of a recession segment by default
DEFAULT_RECESSION_READINGS = 4


def _array(values, name: str) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=float).ravel()
    except (TypeError, ValueError):
        raise ParameterError(f"{name}= must be numbers; got {values!r}", param=name) from None
    return arr


def _same_length(**arrays) -> None:
    sizes = {k: len(v) for k, v in arrays.items()}
    if len(set(sizes.values())) > 1:
        raise ParameterError(f"{', '.join(f'{k}=' for k in sizes)} must have the same length; got "
                             f"{', '.join(str(v) for v in sizes.values())}", param=tuple(sizes))


def _check_confidence(confidence) -> float:
    if not (isinstance(confidence, (int, float, np.number)) and 0 < confidence < 1):
        raise ParameterError(f"confidence= must be in (0, 1); got {confidence!r}", param="confidence")
    return float(confidence)


# -- pairing ------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Pairing:
    """Discharge readings with the index head at their times.

    Attributes
    ----------
    head : ndarray, shape (n,)
        Head at each discharge reading (NaN where unpaired), in the heads' unit.
    offset_days : ndarray, shape (n,)
        Days from the discharge reading to the head reading used (nearest: signed, positive when the head reading
        is later; interpolate: the distance to the nearer bracketing reading); NaN where unpaired.
    paired : ndarray of bool, shape (n,)
    reason : tuple of (str or None)
        Why each unpaired reading has no head (None where paired).
    how : str
    tolerance_days : float
    """

    head: np.ndarray
    offset_days: np.ndarray
    paired: np.ndarray
    reason: tuple
    how: str
    tolerance_days: float

    @property
    def n_paired(self) -> int:
        return int(self.paired.sum())


def pair_readings(q_days, h_days, h, *, how: str = "nearest",
                  tolerance_days: float = DEFAULT_TOLERANCE_DAYS) -> Pairing:
    """The index head at the time of each discharge reading.

    Parameters
    ----------
    q_days : array-like, shape (n,)
        Times of the discharge readings (days on any origin shared with ``h_days``).
    h_days, h : array-like, shape (m,)
        Times (days) and values of the head readings of the index zone; NaN heads are ignored.
    how : {"nearest", "interpolate"}
        ``nearest``: the head reading nearest in time, if within ``tolerance_days`` (ties go to the earlier
        reading). ``interpolate``: linear in time between the last head reading at or before and the first at or
        after the discharge reading, if they lie at most ``2 * tolerance_days`` apart; a head reading at the same
        instant is used as it is.
    tolerance_days : float
        Days (>= 0).

    Returns
    -------
    Pairing

    Examples
    --------
    >>> p = pair_readings([10.0], [0.0, 20.0], [100.0, 102.0], how="interpolate")
    >>> float(p.head[0]), float(p.offset_days[0])
    (101.0, 10.0)
    """
    if how not in PAIRING:
        raise ParameterError(f"how= must be one of {', '.join(PAIRING)}; got {how!r}", param="how")
    if not (isinstance(tolerance_days, (int, float, np.number)) and math.isfinite(tolerance_days)
            and tolerance_days >= 0):
        raise ParameterError(f"tolerance_days= must be a number of days >= 0 and finite; got {tolerance_days!r}",
                             param="tolerance_days")
    tq = _array(q_days, "q_days")
    th, hv = _array(h_days, "h_days"), _array(h, "h")
    _same_length(h_days=th, h=hv)
    ok = np.isfinite(th) & np.isfinite(hv)
    th, hv = th[ok], hv[ok]
    order = np.argsort(th, kind="stable")
    th, hv = th[order], hv[order]
    n = len(tq)
    head = np.full(n, np.nan)
    offset = np.full(n, np.nan)
    reason: list[str | None] = [None] * n
    tol = float(tolerance_days)
    if len(th) == 0:
        return Pairing(head, offset, np.zeros(n, bool), tuple("no head reading" for _ in range(n)), how, tol)
    # index of the first head reading at or after each discharge time, and the one before
    right = np.searchsorted(th, tq, side="left")
    for i, t in enumerate(tq):
        if not np.isfinite(t):
            reason[i] = "no time"
            continue
        r = right[i]
        after = r if r < len(th) else None
        before = r - 1 if r > 0 else None
        if after is not None and th[after] == t:  # a head reading at the same instant
            head[i], offset[i] = hv[after], 0.0
            continue
        if how == "nearest":
            cands = [j for j in (before, after) if j is not None]
            j = min(cands, key=lambda k: (abs(th[k] - t), th[k]))
            d = th[j] - t
            if abs(d) <= tol:
                head[i], offset[i] = hv[j], d
            else:
                reason[i] = f"no head reading within {tol:g} days (nearest {abs(d):.1f} days away)"
        else:
            if before is None or after is None:
                reason[i] = "outside the head record (no head reading on one side to interpolate from)"
                continue
            gap = th[after] - th[before]
            if gap > 2.0 * tol:
                reason[i] = (f"the head readings around it lie {gap:.1f} days apart, more than "
                             f"2 x {tol:g} days")
                continue
            w = (t - th[before]) / gap
            head[i] = hv[before] + w * (hv[after] - hv[before])
            offset[i] = min(t - th[before], th[after] - t)
    paired = np.isfinite(head)
    return Pairing(head, offset, paired, tuple(reason), how, tol)


# -- the straight line ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LinearFit:
    """Least-squares line Q = a + b h and its statistics (units: those of h and Q given to :func:`fit_linear`).

    ``se_a``, ``se_b`` and ``cov_ab`` are the usual standard errors and covariance of the intercept and slope
    (residual variance with n - 2 degrees of freedom); ``aic`` counts three parameters (a, b and the error
    variance).
    """

    a: float
    b: float
    se_a: float
    se_b: float
    cov_ab: float
    sigma: float
    n: int
    r2: float
    r2_adj: float
    p_slope: float
    rss: float
    aic: float
    h_mean: float

    @property
    def df(self) -> int:
        return self.n - 2

    def predict(self, h) -> np.ndarray:
        """Q at heads ``h`` (the line itself, negative below h0)."""
        return self.a + self.b * np.asarray(h, float)

    def head_at(self, q: float) -> float:
        """Head at which the line gives discharge ``q``."""
        return (q - self.a) / self.b if self.b != 0 else float("nan")

    def fieller(self, q: float, *, confidence: float = 0.95) -> tuple[float, float]:
        """Interval of the head at which the mean discharge is ``q`` (inverse prediction, Fieller 1954).

        The heads h whose confidence band for the mean discharge a + b h holds ``q``:
        (a - q + b h)^2 <= t^2 (var a + 2 h cov(a, b) + h^2 var b), t the Student quantile with n - 2 degrees of
        freedom. Bounded exactly when the slope differs from 0 at the same level; (nan, nan) otherwise.
        """
        t = _t_quantile(confidence, self.df)
        d = self.a - q
        qa = self.b ** 2 - t ** 2 * self.se_b ** 2
        qb = 2.0 * (d * self.b - t ** 2 * self.cov_ab)
        qc = d ** 2 - t ** 2 * self.se_a ** 2
        disc = qb ** 2 - 4.0 * qa * qc
        if qa <= 0 or disc < 0:
            return float("nan"), float("nan")
        root = math.sqrt(disc)
        lo, hi = (-qb - root) / (2.0 * qa), (-qb + root) / (2.0 * qa)
        return float(min(lo, hi)), float(max(lo, hi))


def _t_quantile(confidence: float, df: int) -> float:
    from scipy import stats

    return float(stats.t.ppf(0.5 + confidence / 2.0, df))


def fit_linear(h, q) -> LinearFit:
    """Least-squares line of discharge on head.

    Parameters
    ----------
    h, q : array-like, shape (n,)
        Heads and discharges (finite), n >= 3 with at least two distinct heads.

    Returns
    -------
    LinearFit
    """
    from scipy import stats

    x, y = _array(h, "h"), _array(q, "q")
    _same_length(h=x, q=y)
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise ParameterError("h= and q= must be finite", param=("h", "q"))
    n = len(x)
    if n < 3:
        raise InsufficientDataError(f"a line of discharge on head needs at least 3 pairs; got {n}")
    xm, ym = x.mean(), y.mean()
    sxx = float(np.sum((x - xm) ** 2))
    if sxx <= 0:
        raise InsufficientDataError("every pair has the same head: no line can be fitted")
    b = float(np.sum((x - xm) * (y - ym)) / sxx)
    a = float(ym - b * xm)
    resid = y - (a + b * x)
    rss = float(np.sum(resid ** 2))
    tss = float(np.sum((y - ym) ** 2))
    s2 = rss / (n - 2)
    se_b = math.sqrt(s2 / sxx)
    se_a = math.sqrt(s2 * (1.0 / n + xm ** 2 / sxx))
    cov_ab = -xm * s2 / sxx
    r2 = 1.0 - rss / tss if tss > 0 else float("nan")
    r2_adj = 1.0 - (1.0 - r2) * (n - 1) / (n - 2) if tss > 0 else float("nan")
    if se_b > 0:
        p = float(2.0 * stats.t.sf(abs(b) / se_b, n - 2))
    else:
        p = 0.0 if b != 0 else 1.0
    return LinearFit(a=a, b=b, se_a=se_a, se_b=se_b, cov_ab=cov_ab, sigma=math.sqrt(s2), n=n, r2=r2,
                     r2_adj=r2_adj, p_slope=p, rss=rss, aic=_aic(rss, n, 3), h_mean=float(xm))


def _aic(rss: float, n: int, k: int) -> float:
    """AIC of a least-squares fit with Gaussian errors: n ln(RSS / n) + 2 k (k counts the error variance)."""
    return float(n * math.log(max(rss, 1e-300) / n) + 2 * k)


# -- the power law ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class PowerFit:
    """Least-squares power law Q = c (h - h0)^n for h > h0, Q = 0 below (units those of the data).

    ``aic`` counts four parameters (c, h0, n and the error variance).
    """

    c: float
    h0: float
    n_exp: float
    sigma: float
    n: int
    r2: float
    r2_adj: float
    rss: float
    aic: float

    def predict(self, h) -> np.ndarray:
        return power_law(h, self.c, self.h0, self.n_exp)

    def head_at(self, q: float) -> float:
        """Head at which the law gives discharge ``q`` (> 0)."""
        return float(self.h0 + (q / self.c) ** (1.0 / self.n_exp)) if q > 0 else float(self.h0)


def power_law(h, c, h0, n_exp) -> np.ndarray:
    """Q = c (h - h0)^n where h > h0, else 0; broadcasts (e.g. bootstrap parameter columns against heads)."""
    d = np.asarray(h, float) - np.asarray(h0, float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return np.where(d > 0, np.asarray(c, float) * np.abs(d) ** np.asarray(n_exp, float), 0.0)


def _power_solve(x, y, hmin, start):
    """Least squares on p = (ln c, u, ln n) with h0 = hmin - exp(u); returns (c, h0, n, rss) or None."""
    from scipy.optimize import least_squares

    def model(p):
        c, h0, n = math.exp(p[0]), hmin - math.exp(p[1]), math.exp(p[2])
        d = x - h0
        pos = d > 0
        f = np.zeros_like(x)
        f[pos] = c * d[pos] ** n
        return f, d, pos, c, h0, n

    def resid(p):
        return model(p)[0] - y

    def jac(p):
        f, d, pos, c, h0, n = model(p)
        j = np.zeros((len(x), 3))
        j[:, 0] = f
        dp = np.where(pos, d, 1.0)
        j[:, 1] = np.where(pos, n * f * (hmin - h0) / dp, 0.0)
        j[:, 2] = np.where(pos, f * n * np.log(dp), 0.0)
        return j

    with np.errstate(over="ignore", invalid="ignore"):
        try:
            res = least_squares(resid, start, jac=jac, method="lm", x_scale="jac", max_nfev=400)
        except (ValueError, FloatingPointError):
            return None
    if not np.all(np.isfinite(res.x)) or not np.isfinite(res.cost):
        return None
    c, h0, n = math.exp(res.x[0]), hmin - math.exp(res.x[1]), math.exp(res.x[2])
    return c, h0, n, float(2.0 * res.cost), res.x


def _power_start(x, y, hmin, span):
    """Start values: for a grid of h0 below hmin, the log-log line of Q on (h - h0); the best in Q space."""
    pos = y > 0
    g = np.geomspace(1e-3, 20.0, 40)
    lx = np.log(x[pos][None, :] - (hmin - g * span)[:, None])  # (grid, flows)
    ly = np.log(y[pos])
    lxm = lx.mean(axis=1, keepdims=True)
    sxx = np.sum((lx - lxm) ** 2, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        n = np.sum((lx - lxm) * (ly - ly.mean()), axis=1) / sxx
        lnc = ly.mean() - n * lxm[:, 0]
        rss = np.sum((power_law(x[None, :], np.exp(lnc)[:, None], (hmin - g * span)[:, None], n[:, None])
                      - y[None, :]) ** 2, axis=1)
    good = (sxx > 0) & (n > 0) & np.isfinite(lnc) & np.isfinite(rss)
    if not good.any():
        return None
    k = int(np.argmin(np.where(good, rss, np.inf)))
    return np.array([lnc[k], math.log(g[k] * span), math.log(n[k])])


def fit_power(h, q) -> PowerFit:
    """Least-squares power law Q = c (h - h0)^n, h0 below the lowest head with flow (scipy.optimize).

    Parameters
    ----------
    h, q : array-like, shape (n,)
        Heads and discharges (finite, q >= 0), at least 4 pairs with q > 0 and two distinct heads.

    Raises
    ------
    InsufficientDataError
        Too few pairs with flow, or no fit converged.
    """
    x, y = _array(h, "h"), _array(q, "q")
    _same_length(h=x, q=y)
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise ParameterError("h= and q= must be finite", param=("h", "q"))
    pos = y > 0
    if pos.sum() < 4 or np.ptp(x[pos]) <= 0:
        raise InsufficientDataError("a power law needs at least 4 pairs with flow at two or more heads")
    hmin = float(x[pos].min())
    span = float(np.ptp(x))
    start = _power_start(x, y, hmin, span)
    if start is None:
        raise InsufficientDataError("no start for the power law: discharge does not rise with head")
    got = _power_solve(x, y, hmin, start)
    if got is None:
        raise InsufficientDataError("the power-law fit did not converge")
    c, h0, n_exp, rss, _ = got
    n = len(x)
    tss = float(np.sum((y - y.mean()) ** 2))
    r2 = 1.0 - rss / tss if tss > 0 else float("nan")
    r2_adj = 1.0 - (1.0 - r2) * (n - 1) / (n - 3) if tss > 0 and n > 3 else float("nan")
    return PowerFit(c=c, h0=h0, n_exp=n_exp, sigma=math.sqrt(rss / max(n - 3, 1)), n=n, r2=r2, r2_adj=r2_adj,
                    rss=rss, aic=_aic(rss, n, 4))


# -- bootstrap ------------------------------------------------------------------------------------------------------
def _resampled(fitted, resid, p, rng, B):
    """B synthetic discharge records: fitted values plus resampled, centred residuals inflated by sqrt(n/(n-p))."""
    n = len(resid)
    r = (resid - resid.mean()) * math.sqrt(n / max(n - p, 1))
    return fitted[None, :] + r[rng.integers(0, n, size=(B, n))]


def bootstrap_linear(h, q, fit: LinearFit, *, B: int, seed) -> np.ndarray:
    """Residual-bootstrap draws of (a, b), shape (B, 2)."""
    x = _array(h, "h")
    y = _array(q, "q")
    rng = np.random.default_rng(seed)
    ys = _resampled(fit.predict(x), y - fit.predict(x), 2, rng, B)
    xm = x.mean()
    sxx = np.sum((x - xm) ** 2)
    b = ((ys - ys.mean(axis=1, keepdims=True)) @ (x - xm)) / sxx
    a = ys.mean(axis=1) - b * xm
    return np.column_stack([a, b])


def bootstrap_power(h, q, fit: PowerFit, *, B: int, seed) -> np.ndarray:
    """Residual-bootstrap draws of (c, h0, n), shape (B, 3); rows whose refit failed are NaN.

    Each draw is refitted from the fit's own parameters by :func:`_power_solve_batch` (all draws at once).
    """
    x = _array(h, "h")
    y = _array(q, "q")
    rng = np.random.default_rng(seed)
    ys = _resampled(fit.predict(x), y - fit.predict(x), 3, rng, B)
    return _power_solve_batch(x, ys, fit)


def _power_solve_batch(x, ys, fit: PowerFit, *, max_iter: int = 200) -> np.ndarray:
    """Least squares of the power law for every row of ``ys`` (shape (B, n)) at once: Levenberg-Marquardt.

    Same parameters as :func:`_power_solve` (ln c, u, ln n with h0 = hmin - exp(u), hmin the lowest head with
    flow in each row), started from ``fit``; the damping of each row adapts on its own (divided by 3 after a
    step that lowers the sum of squares, doubled otherwise, Marquardt 1963). Rows with fewer than 4 flows, or
    that do not converge, are NaN.
    """
    B, n = ys.shape
    pos_any = ys > 0
    ok = pos_any.sum(axis=1) >= 4
    hmin = np.where(pos_any, x[None, :], np.inf).min(axis=1)
    hmin = np.where(np.isfinite(hmin), hmin, x.min())
    small = 1e-3 * max(float(np.ptp(x)), 1e-9)
    gap = np.maximum(hmin - fit.h0, small)
    P = np.column_stack([np.full(B, math.log(fit.c)), np.log(gap), np.full(B, math.log(fit.n_exp))])

    def evaluate(P):
        c, h0, ne = np.exp(P[:, :1]), hmin[:, None] - np.exp(P[:, 1:2]), np.exp(P[:, 2:3])
        d = x[None, :] - h0
        on = d > 0
        dp = np.where(on, d, 1.0)
        with np.errstate(over="ignore", invalid="ignore"):
            f = np.where(on, c * dp ** ne, 0.0)
            J = np.stack([f, np.where(on, ne * f * (hmin[:, None] - h0) / dp, 0.0),
                          np.where(on, f * ne * np.log(dp), 0.0)], axis=2)
        r = f - ys
        return r, J, np.sum(r * r, axis=1)

    r, J, cost = evaluate(P)
    lam = np.full(B, 1e-3)
    done = ~ok
    for _ in range(max_iter):
        Jt = J.transpose(0, 2, 1)
        A = Jt @ J
        g = (Jt @ r[:, :, None])[:, :, 0]
        M = A.copy()
        idx = np.arange(3)
        M[:, idx, idx] += lam[:, None] * np.maximum(A[:, idx, idx], 1e-12)
        with np.errstate(all="ignore"):
            try:
                step = -np.linalg.solve(M, g[:, :, None])[:, :, 0]
            except np.linalg.LinAlgError:
                step = -np.stack([np.linalg.lstsq(m, v, rcond=None)[0] for m, v in zip(M, g)])
        step[done] = 0.0
        Pn = P + step
        rn, Jn, cn = evaluate(Pn)
        better = np.isfinite(cn) & (cn < cost) & ~done
        small_gain = better & ((cost - cn) <= 1e-12 * np.maximum(cost, 1e-300) + 1e-300)
        P[better], r[better], J[better] = Pn[better], rn[better], Jn[better]
        cost_new = np.where(better, cn, cost)
        lam = np.where(better, lam / 3.0, lam * 2.0)
        done |= small_gain | (np.max(np.abs(step), axis=1) < 1e-10) | (lam > 1e12)
        cost = cost_new
        if done.all():
            break
    out = np.column_stack([np.exp(P[:, 0]), hmin - np.exp(P[:, 1]), np.exp(P[:, 2])])
    out[~ok | ~np.isfinite(cost)] = np.nan
    return out


def _percentile_interval(values, confidence: float) -> tuple[float, float]:
    v = np.asarray(values, float)
    v = v[np.isfinite(v)]
    if len(v) < 10:
        return float("nan"), float("nan")
    lo, hi = np.percentile(v, [50.0 * (1 - confidence), 50.0 * (1 + confidence)])
    return float(lo), float(hi)


# -- the relation: both fits, the choice, h0 and trigger levels ----------------------------------------------------
@dataclass(frozen=True)
class Level:
    """A trigger level: the head at which discharge falls to ``fraction`` of the reference discharge."""

    percent: float
    discharge: float
    head: float
    low: float
    high: float


@dataclass(frozen=True)
class Relation:
    """Discharge against head, fitted where the data support it (see :func:`fit_relation`).

    Attributes
    ----------
    linear, power : LinearFit or PowerFit or None
        The fits (None where not fitted); ``linear_why_not`` / ``power_why_not`` say why a model is not supported
        (empty when it is).
    model : str or None
        'linear' or 'power', the chosen model; None when neither is supported.
    criterion : str
        How the model was chosen.
    h0, h0_low, h0_high : float
        Cease-flow head and its interval (NaN without a model).
    interval_method : str
    levels : tuple of Level
    reference_discharge : float
        The discharge the trigger fractions refer to (median of the discharges given).
    draws : ndarray, shape (B, k)
        Bootstrap parameter draws of the chosen model ((a, b) or (c, h0, n)); empty without a model.
    confidence : float
    """

    linear: LinearFit | None
    power: PowerFit | None
    linear_why_not: str
    power_why_not: str
    model: str | None
    criterion: str
    h0: float
    h0_low: float
    h0_high: float
    interval_method: str
    levels: tuple
    reference_discharge: float
    reference_head: float
    draws: np.ndarray = field(repr=False)
    confidence: float
    n_pairs: int
    head_range: tuple

    @property
    def fit(self):
        """The chosen fit (LinearFit or PowerFit), None without a model."""
        return {"linear": self.linear, "power": self.power}.get(self.model)

    def predict(self, h) -> np.ndarray:
        """Discharge of the chosen model at heads ``h``, never below 0."""
        if self.model is None:
            raise ParameterError("the relation has no supported model; nothing to predict")
        return np.maximum(self.fit.predict(h), 0.0)

    def params(self) -> dict:
        """The chosen model's parameters by name."""
        if self.model == "linear":
            return {"a": self.linear.a, "b": self.linear.b}
        if self.model == "power":
            return {"c": self.power.c, "h0": self.power.h0, "n": self.power.n_exp}
        return {}


def _linear_support(h, fit: LinearFit | None, *, why: str) -> str:
    if fit is None:
        return why
    if len(np.unique(h)) < MIN_HEADS_LINEAR:
        return f"fewer than {MIN_HEADS_LINEAR} distinct heads"
    if not fit.b > 0:
        return f"discharge does not rise with head (slope {fit.b:.4g})"
    if not fit.p_slope < SLOPE_ALPHA:
        return f"the slope is not significant (p = {fit.p_slope:.3g} >= {SLOPE_ALPHA:g})"
    return ""


def _power_support(h, q, fit: PowerFit | None, linear_ok: bool, *, why: str) -> str:
    if fit is None:
        return why
    if len(h) < MIN_PAIRS_POWER:
        return f"fewer than {MIN_PAIRS_POWER} pairs ({len(h)})"
    if len(np.unique(h)) < MIN_HEADS_POWER:
        return f"fewer than {MIN_HEADS_POWER} distinct heads"
    if not linear_ok:
        return "no significant rise of discharge with head"
    lo, hi = POWER_EXPONENT_RANGE
    if not lo <= fit.n_exp <= hi:
        return f"the exponent {fit.n_exp:.3g} lies outside [{lo:g}, {hi:g}]"
    h_flow = float(np.min(np.asarray(h)[np.asarray(q) > 0]))
    if h_flow - fit.h0 > POWER_H0_RANGES * max(np.ptp(h), 1e-12):
        return (f"the cease-flow head lies more than {POWER_H0_RANGES:g} head ranges below the lowest head with "
                "flow: an extrapolation the data do not support")
    return ""


def _check_levels(levels) -> tuple[float, ...]:
    try:
        out = tuple(float(v) for v in levels)
    except (TypeError, ValueError):
        raise ParameterError(f"levels= must be percentages; got {levels!r}", param="levels") from None
    if not out or any(not (0 < v < 100) for v in out):
        raise ParameterError(f"levels= must be percentages in (0, 100); got {list(levels)!r}", param="levels")
    return out


def fit_relation(h, q, *, levels=DEFAULT_LEVELS, reference_discharge: float | None = None,
                 bootstrap: int = DEFAULT_BOOTSTRAP, seed=0, confidence: float = 0.95) -> Relation:
    """Fit discharge against head, choose a model, and give the cease-flow head and trigger levels.

    The line is supported with at least :data:`MIN_PAIRS_LINEAR` pairs at :data:`MIN_HEADS_LINEAR` distinct
    heads and a slope that is positive and significant (two-sided t test at :data:`SLOPE_ALPHA`). The power law
    is supported where the line is, with at least :data:`MIN_PAIRS_POWER` pairs at :data:`MIN_HEADS_POWER`
    distinct heads, an exponent within :data:`POWER_EXPONENT_RANGE` and h0 no more than
    :data:`POWER_H0_RANGES` head ranges below the lowest head with flow. Of the supported models the one with
    the lower AIC on the same pairs is chosen, the power law only when it beats the line by more than
    :data:`AIC_MARGIN`.

    Intervals: for the line, Fieller's interval of the head at which the mean discharge reaches 0 (h0) or a
    trigger discharge; for the power law, percentiles of a residual bootstrap (``bootstrap`` draws, ``seed``).
    Trigger levels are the heads at which the chosen model's discharge is ``levels`` percent of the reference
    discharge; the reference discharge is taken as known (its own uncertainty is not in the intervals).

    Parameters
    ----------
    h, q : array-like, shape (n,)
        Paired heads and discharges (finite, q >= 0).
    levels : sequence of float
        Percentages of the reference discharge, each in (0, 100).
    reference_discharge : float, optional
        Default: the median of ``q``.
    bootstrap : int
        Number of bootstrap draws (>= 100).
    seed : int or None
        Seed of the bootstrap.
    confidence : float
        Of the intervals (0.95).

    Raises
    ------
    InsufficientDataError
        Fewer than :data:`MIN_PAIRS_LINEAR` pairs.
    """
    x, y = _array(h, "h"), _array(q, "q")
    _same_length(h=x, q=y)
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise ParameterError("h= and q= must be finite", param=("h", "q"))
    if (y < 0).any():
        raise ParameterError("q= must be >= 0 (discharge)", param="q")
    lv = _check_levels(levels)
    conf = _check_confidence(confidence)
    if not (isinstance(bootstrap, (int, np.integer)) and bootstrap >= 100):
        raise ParameterError(f"bootstrap= must be a whole number >= 100; got {bootstrap!r}", param="bootstrap")
    n = len(x)
    if n < MIN_PAIRS_LINEAR:
        raise InsufficientDataError(f"only {n} pair(s) of discharge and head; at least {MIN_PAIRS_LINEAR} are "
                                    "needed to fit discharge against head")
    q_ref = float(np.median(y)) if reference_discharge is None else float(reference_discharge)
    if not (math.isfinite(q_ref) and q_ref > 0):
        raise ParameterError(f"reference_discharge= must be > 0; got {q_ref}", param="reference_discharge")
    try:
        lin, lin_why = fit_linear(x, y), ""
    except InsufficientDataError as exc:
        lin, lin_why = None, str(exc)
    lin_why = _linear_support(x, lin, why=lin_why)
    try:
        pw, pw_why = fit_power(x, y), ""
    except InsufficientDataError as exc:
        pw, pw_why = None, str(exc)
    pw_why = _power_support(x, y, pw, not lin_why, why=pw_why)
    model, criterion = None, "no supported model"
    if not lin_why:
        model, criterion = "linear", "the only supported model"
        if not pw_why:
            d = lin.aic - pw.aic
            if d > AIC_MARGIN:
                model = "power"
                criterion = (f"AIC on the same {n} pairs: power law {pw.aic:.2f} beats the line {lin.aic:.2f} by "
                             f"{d:.2f} > {AIC_MARGIN:g}")
            else:
                criterion = (f"AIC on the same {n} pairs: line {lin.aic:.2f}, power law {pw.aic:.2f}; the power "
                             f"law must be lower by more than {AIC_MARGIN:g} to be chosen")
    nan = float("nan")
    out_levels = []
    draws = np.empty((0, 0))
    h0 = h0_lo = h0_hi = nan
    method = ""
    if model == "linear":
        h0 = lin.head_at(0.0)
        h0_lo, h0_hi = lin.fieller(0.0, confidence=conf)
        method = "Fieller's inverse-prediction interval of the regression"
        draws = bootstrap_linear(x, y, lin, B=int(bootstrap), seed=seed)
        for p in lv:
            qt = q_ref * p / 100.0
            lo, hi = lin.fieller(qt, confidence=conf)
            out_levels.append(Level(p, qt, lin.head_at(qt), lo, hi))
    elif model == "power":
        draws = bootstrap_power(x, y, pw, B=int(bootstrap), seed=seed)
        h0 = pw.h0
        h0_lo, h0_hi = _percentile_interval(draws[:, 1], conf)
        method = f"percentiles of a residual bootstrap ({int(bootstrap)} draws, seed {seed})"
        for p in lv:
            qt = q_ref * p / 100.0
            with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
                hs = draws[:, 1] + (qt / draws[:, 0]) ** (1.0 / draws[:, 2])
            lo, hi = _percentile_interval(hs, conf)
            out_levels.append(Level(p, qt, pw.head_at(qt), lo, hi))
    return Relation(linear=lin, power=pw, linear_why_not=lin_why, power_why_not=pw_why, model=model,
                    criterion=criterion, h0=float(h0), h0_low=float(h0_lo), h0_high=float(h0_hi),
                    interval_method=method, levels=tuple(out_levels), reference_discharge=q_ref,
                    reference_head=float(np.median(x)), draws=draws, confidence=conf, n_pairs=n,
                    head_range=(float(x.min()), float(x.max())))


def model_discharge(model: str, params, h) -> np.ndarray:
    """Discharge (>= 0) of a model at heads ``h`` for one parameter set or rows of them.

    ``params`` is (a, b) for 'linear' and (c, h0, n) for 'power', a 1-D sequence or an array of shape (B, k);
    with rows the result has shape (B, len(h)).
    """
    p = np.asarray(params, float)
    hh = np.atleast_1d(np.asarray(h, float))
    rows = p.ndim == 2
    p2 = p if rows else p[None, :]
    if model == "linear":
        q = p2[:, :1] + p2[:, 1:2] * hh[None, :]
    elif model == "power":
        q = power_law(hh[None, :], p2[:, :1], p2[:, 1:2], p2[:, 2:3])
    else:
        raise ParameterError(f"model= must be 'linear' or 'power'; got {model!r}", param="model")
    q = np.maximum(q, 0.0)
    return q if rows else q[0]


def discharge_change(model: str, params, draws, *, head: float, drawdown: float,
                     confidence: float = 0.95) -> dict:
    """Discharge change a drawdown ``s`` at the index zone implies: Q(h) - Q(h - s) (positive: a loss).

    Parameters
    ----------
    model : {'linear', 'power'}
    params : sequence
        The fit's parameters ((a, b) or (c, h0, n)).
    draws : array, shape (B, k)
        Bootstrap draws of the parameters; the interval is their percentile interval of the change.
    head : float
        Index head before the drawdown (the heads' unit).
    drawdown : float
        Drawdown at the index zone (same unit; negative for a recovery).

    Returns
    -------
    dict
        ``before``, ``after``, ``change``, ``change_low``, ``change_high`` (discharge unit), ``percent``
        (change over before x 100, NaN when before is 0), ``ceases`` (the head after is at or below the
        model's cease-flow head).
    """
    conf = _check_confidence(confidence)
    if not (math.isfinite(head) and math.isfinite(drawdown)):
        raise ParameterError("head= and drawdown= must be finite", param=("head", "drawdown"))
    hh = np.array([head, head - drawdown])
    before, after = model_discharge(model, params, hh)
    lo = hi = float("nan")
    d = np.asarray(draws, float)
    if d.ndim == 2 and len(d):
        q = model_discharge(model, d, hh)
        lo, hi = _percentile_interval(q[:, 0] - q[:, 1], conf)
    return {"before": float(before), "after": float(after), "change": float(before - after), "change_low": lo,
            "change_high": hi, "percent": float(100.0 * (before - after) / before) if before > 0 else float("nan"),
            "ceases": bool(after <= 0)}


def equivalent_recharge(discharge_m3d, area_m2) -> np.ndarray:
    """Discharge over an area as a depth per time: m/d for m3/d over m2 (any consistent units work)."""
    q, a = np.asarray(discharge_m3d, float), np.asarray(area_m2, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(a > 0, q / a, np.nan)


# -- ranking candidate index zones ----------------------------------------------------------------------------------
def rank_candidates(candidates: dict, q_days, q, *, how: str = "nearest",
                    tolerance_days: float = DEFAULT_TOLERANCE_DAYS) -> list[dict]:
    """Candidate index zones ordered by how well a line of discharge on their head fits.

    Parameters
    ----------
    candidates : dict
        label -> (head times in days, heads).
    q_days, q : array-like
        Discharge readings.

    Returns
    -------
    list of dict
        One per candidate, best first: ``label``, ``n_pairs``, ``r2``, ``slope``, ``p_slope``, ``supported``
        and ``why_not``. Order: supported lines first, then by R^2 (higher first), then by the number of pairs.
    """
    qv = _array(q, "q")
    rows = []
    for label, (th, hv) in candidates.items():
        pairing = pair_readings(q_days, th, hv, how=how, tolerance_days=tolerance_days)
        m = pairing.paired
        hp, qp = pairing.head[m], qv[m]
        row = {"label": label, "n_pairs": int(m.sum()), "r2": float("nan"), "slope": float("nan"),
               "p_slope": float("nan"), "supported": False, "why_not": ""}
        if len(hp) < MIN_PAIRS_LINEAR:
            row["why_not"] = f"fewer than {MIN_PAIRS_LINEAR} pairs ({len(hp)})"
        else:
            try:
                fit = fit_linear(hp, qp)
                row.update(r2=fit.r2, slope=fit.b, p_slope=fit.p_slope)
                row["why_not"] = _linear_support(hp, fit, why="")
            except InsufficientDataError as exc:
                row["why_not"] = str(exc)
            row["supported"] = not row["why_not"]
        rows.append(row)
    rows.sort(key=lambda r: (not r["supported"], -(r["r2"] if math.isfinite(r["r2"]) else -1.0),
                             -r["n_pairs"], str(r["label"])))
    return rows


# -- Maillet recession ------------------------------------------------------------------------------------------------
def recession_segments(t_days, q, *, min_readings: int = DEFAULT_RECESSION_READINGS, min_days: float = 0.0,
                       windows=None) -> list[tuple[int, int]]:
    """Segments of a discharge record to fit a recession on, as (first, last) indices (inclusive).

    Without ``windows``: maximal runs of non-increasing discharge (each reading <= the one before, all > 0) of at
    least ``min_readings`` readings spanning at least ``min_days`` days. With ``windows`` (pairs of times in
    days): the readings with discharge > 0 inside each window, when they are at least ``min_readings``
    (those need not be non-increasing).

    Parameters
    ----------
    t_days, q : array-like, shape (n,)
        Times (days, increasing) and discharges.
    """
    t, qv = _array(t_days, "t_days"), _array(q, "q")
    _same_length(t_days=t, q=qv)
    if not (isinstance(min_readings, (int, np.integer)) and min_readings >= 3):
        raise ParameterError(f"min_readings= must be a whole number >= 3; got {min_readings!r}",
                             param="min_readings")
    if not (isinstance(min_days, (int, float, np.number)) and math.isfinite(min_days) and min_days >= 0):
        raise ParameterError(f"min_days= must be >= 0 and finite; got {min_days!r}", param="min_days")
    if len(t) > 1 and np.any(np.diff(t) <= 0):
        raise ParameterError("t_days= must increase strictly (one discharge reading per instant)", param="t_days")
    out = []
    if windows is not None:
        for w in windows:
            a, b = float(w[0]), float(w[1])
            idx = np.nonzero((t >= a) & (t <= b) & (qv > 0))[0]
            if len(idx) >= min_readings and t[idx[-1]] - t[idx[0]] >= min_days:
                out.append((int(idx[0]), int(idx[-1])))
        return out
    i = 0
    n = len(t)
    while i < n:
        if not qv[i] > 0:
            i += 1
            continue
        j = i
        while j + 1 < n and qv[j + 1] > 0 and qv[j + 1] <= qv[j]:
            j += 1
        if j - i + 1 >= min_readings and t[j] - t[i] >= min_days:
            out.append((i, j))
        i = j + 1 if j > i else i + 1
    return out


@dataclass(frozen=True)
class RecessionFit:
    """Maillet recession Q = Q0_k exp(-a t) fitted to segments with one constant a and an intercept each.

    Attributes
    ----------
    a, se_a : float
        Recession constant (1/d) and its standard error.
    a_low, a_high : float
        Its interval (Student t, ``df`` degrees of freedom).
    q0 : tuple of float
        Discharge at the start of each segment from the fit.
    segments : tuple of (int, int)
    n, df : int
    r2 : float
        Of ln Q within segments (the share of within-segment variance of ln Q explained).
    confidence : float
    """

    a: float
    se_a: float
    a_low: float
    a_high: float
    q0: tuple
    segments: tuple
    n: int
    df: int
    r2: float
    confidence: float

    @property
    def half_life_days(self) -> float:
        return math.log(2.0) / self.a if self.a > 0 else float("inf")


def fit_recession(t_days, q, segments, *, confidence: float = 0.95) -> RecessionFit:
    """Least squares of ln Q on time, one slope -a shared by the segments and one intercept per segment.

    Parameters
    ----------
    t_days, q : array-like, shape (n,)
        Times (days) and discharges of the whole record.
    segments : list of (int, int)
        From :func:`recession_segments`.

    Raises
    ------
    InsufficientDataError
        No segment, or too few readings for the parameters.
    """
    t, qv = _array(t_days, "t_days"), _array(q, "q")
    _same_length(t_days=t, q=qv)
    conf = _check_confidence(confidence)
    segs = [(int(a), int(b)) for a, b in segments]
    if not segs:
        raise InsufficientDataError("no recession segment to fit (no run of falling discharge long enough)")
    rows_t, rows_y, rows_k = [], [], []
    for k, (i, j) in enumerate(segs):
        sl = slice(i, j + 1)
        if np.any(qv[sl] <= 0):
            raise ParameterError(f"segment {k} holds a discharge <= 0; a recession needs flow", param="segments")
        rows_t.append(t[sl] - t[i])
        rows_y.append(np.log(qv[sl]))
        rows_k.append(np.full(j - i + 1, k))
    tt, yy, kk = np.concatenate(rows_t), np.concatenate(rows_y), np.concatenate(rows_k)
    m = len(segs)
    n = len(tt)
    df = n - m - 1
    if df < 1:
        raise InsufficientDataError(f"{n} readings in {m} segment(s) are too few for a recession fit")
    X = np.zeros((n, m + 1))
    X[np.arange(n), kk] = 1.0
    X[:, m] = -tt
    coef, *_ = np.linalg.lstsq(X, yy, rcond=None)
    resid = yy - X @ coef
    rss = float(resid @ resid)
    s2 = rss / df
    cov = s2 * np.linalg.inv(X.T @ X)
    a = float(coef[m])
    se = float(math.sqrt(cov[m, m]))
    t_q = _t_quantile(conf, df)
    within = yy - np.array([yy[kk == k].mean() for k in range(m)])[kk]
    tss = float(within @ within)
    return RecessionFit(a=a, se_a=se, a_low=a - t_q * se, a_high=a + t_q * se,
                        q0=tuple(float(math.exp(c)) for c in coef[:m]), segments=tuple(segs), n=n, df=df,
                        r2=1.0 - rss / tss if tss > 0 else float("nan"), confidence=conf)


def recession_days(q_from: float, q_to: float, fit: RecessionFit) -> dict:
    """Days for discharge to fall from ``q_from`` to ``q_to`` with no recharge: t = ln(q_from / q_to) / a.

    Returns ``days``, ``low`` and ``high`` (from the interval of a: a larger a gives fewer days; ``high`` is
    infinite when the interval of a reaches 0).
    """
    if not (math.isfinite(q_from) and math.isfinite(q_to) and q_from > q_to > 0):
        raise ParameterError(f"q_from= must exceed q_to= > 0; got {q_from!r} and {q_to!r}",
                             param=("q_from", "q_to"))
    if not fit.a > 0:
        raise InsufficientDataError(f"the recession constant is not positive ({fit.a:.4g} 1/d): discharge does "
                                    "not fall on the segments")
    span = math.log(q_from / q_to)
    return {"days": span / fit.a, "low": span / fit.a_high if fit.a_high > 0 else float("nan"),
            "high": span / fit.a_low if fit.a_low > 0 else float("inf")}
