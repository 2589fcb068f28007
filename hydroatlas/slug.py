"""Slug-test reduction (numpy arrays and numbers in, frozen value objects out; no store, no files).

Use consistent units: lengths in one unit and times in seconds give K in that length unit per second
(metres and seconds give m/s). A record is displacement (head above or below static, either sign: slug in or
slug out) against time since the slug was added or removed. It is normalised by the initial displacement H0
(the first reading unless ``h0`` is given).

Contract (other modules build on these names)
---------------------------------------------
``diagnose(t, displacement, *, h0=None) -> Diagnosis``
    response type ('overdamped', 'critically damped', 'underdamped', 'double straight line',
    'incomplete recovery'), ``h0``, ``final_fraction`` (last H/H0), ``n_points`` and ``evidence`` (zero
    crossings, damping-ratio estimate, slope ratio of the early and late segments, noise).
``hvorslev(t, displacement, *, casing_radius, well_radius, screen_length, geometry='screen', ...) -> SlugFit``
    Hvorslev (1951) with the cylindrical-intake shape factor.
``bouwer_rice(t, displacement, *, casing_radius, well_radius, screen_length, lw=None, aquifer_thickness, ...)``
    Bouwer and Rice (1976), unconfined, with the partially-saturated-screen rule, and the confined variant.
``cbp(t, displacement, *, casing_radius, well_radius, screen_length) -> SlugFit``
    Cooper, Bredehoeft and Papadopulos (1967) type-curve fit of T and S; ``k = T / screen_length``.
``oscillating(t, displacement, *, casing_radius, well_radius, screen_length, ...) -> SlugFit``
    damped-oscillator model of the water column (Springer and Gelhar 1991; Butler 1998; Butler, Garnett and
    Healey 2003): fits K and the effective water-column length Le.
``choose(diagnosis, geometry) -> (method, reason)`` and
``reduce(t, displacement, geometry, *, method='auto') -> (chosen SlugFit, alternatives, reason)``
    ``geometry`` keys: casing_radius, well_radius, screen_length (required); aquifer_thickness, static_depth,
    screen_top_depth, screen_bottom_depth, confined (bool), geometry_kind ('screen', 'packer', 'open_hole');
    optional aquifer_top_depth (top of the tested unit, for the confined Bouwer-Rice variant), pack_porosity,
    anisotropy, column_length (water column above the interval, for the friction correction) and
    length_unit ('m' or 'ft'; sets gravity and the viscosity of water for the oscillating method).
``compare_repeats(records, *, tolerance=REPEAT_CURVE_TOLERANCE) -> dict``
    repeats of one zone overlaid as H/H0 against time; ``compare_repeat_k(k_values)`` keeps the older
    comparison of K values.

A method function either returns a :class:`SlugFit` or refuses with :class:`~hydroatlas.errors.InsufficientDataError`
or :class:`~hydroatlas.errors.ParameterError` whose message says why (fewer than 5 readings in the fit window,
Le/rw outside the Bouwer-Rice curves, ...). :func:`reduce` turns a refusal into a ``SlugFit`` with ``k=None``,
``valid=False`` and the message in ``problems``. ``valid`` is True only when ``problems`` is empty.

Conventions
-----------
Hvorslev and Bouwer-Rice use one convention: K from the SLOPE of ln(H/H0) against time over the normalised-head
range that Butler (1998) recommends (0.15-0.25 Hvorslev, 0.20-0.30 Bouwer and Rice), never from the intercept,
so an offset first reading does not change K. At least 5 readings must lie in the window.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from .errors import InsufficientDataError, ParameterError

HVORSLEV_RANGE = (0.15, 0.25)
BOUWER_RICE_RANGE = (0.20, 0.30)
#: fewest readings inside a straight-line fit window (project rule: fewer gives r2 = 1 by construction)
MIN_WINDOW_POINTS = 5
#: r2 below this makes a straight-line or curve fit questionable (project choice, no source)
R2_MIN = 0.95
#: the slope of ln(H/H0) may change by this fraction across the window before the fit is called curved
#: (project choice, no source)
CURVATURE_LIMIT = 0.2
#: residuals whose rms is below this fraction of the data's spread are not read for a pattern (project choice)
RESIDUAL_MATTERS = 1e-3
# ln((H - Lw) / rw) is capped at this value in the Bouwer-Rice expression (Bouwer and Rice 1976, as quoted in a
# public textbook chapter: "the effect of partial penetration reaches a maximum when ln[(H-Lw)/rw] = 6").
BR_LOG_CAP = 6.0
#: Le/rw range in which the recalled polynomial fits of the A, B, C curves are used (see docs/methods.md):
#: above 1000 the fit of A turns down (at 1010) and C at 1398, a property of the fit, not of the flow.
BR_CURVE_RANGE = (4.0, 1000.0)
#: simple Hvorslev form ln(L/R) is within 0.7 % of the full shape factor for L/R above this (Hvorslev 1951)
HVORSLEV_SIMPLE_LR = 8.0
#: searched range of the CBP parameter alpha = rw^2 S / rc^2
CBP_ALPHA_RANGE = (1e-10, 1e-1)
# Repeat tests whose K differ by more than this fraction of the smaller one are flagged (common practice).
REPEAT_TOLERANCE = 0.25
#: repeat records whose normalised heads differ by more than this (max |dH/H0| over the common time span)
#: are flagged (common practice, no source)
REPEAT_CURVE_TOLERANCE = 0.10
#: standard gravity, m/s2 (CGPM 1901 definition)
GRAVITY_M_S2 = 9.80665
#: kinematic viscosity of water near 20 degrees C, m2/s (from memory: about 1.0e-6 m2/s)
WATER_VISCOSITY_M2_S = 1.0e-6
#: response types of :func:`diagnose`
RESPONSES = ("overdamped", "critically damped", "underdamped", "double straight line", "incomplete recovery")
METHODS = ("hvorslev", "bouwer-rice", "cbp", "oscillating")
GEOMETRY_KINDS = ("screen", "packer", "open_hole")
_LENGTH_TO_M = {"m": 1.0, "ft": 0.3048}


# --------------------------------------------------------------------------------------------- value objects
@dataclass(frozen=True)
class SlugFit:
    """One method's reduction of one slug-test record.

    Attributes
    ----------
    method : 'hvorslev', 'bouwer-rice', 'cbp' or 'oscillating'
    k : hydraulic conductivity, length/second in the units of the inputs (None when the method refused)
    t_s, s : transmissivity (length^2/second) and storativity (CBP only, else None)
    le : effective water-column length (oscillating only, else None)
    n_points : readings used by the fit
    r2 : coefficient of determination of the fit (on ln(H/H0) for straight lines, on H/H0 for curves)
    residual_pattern : 'random', 'curved', 'trend' or 'clustered'; the statistics behind it are in
        ``residual_stats`` (runs-test z, curvature, quadratic-term t)
    window : (low, high) normalised-head range actually fitted
    t_window : (first, last) time fitted, seconds
    shape : shape-factor facts (L/R, Le/rw, the curve range of the source, ``valid``)
    valid : True when ``problems`` is empty
    problems : what makes the result questionable or why the method refused
    fitted : ``{"t_fit": array, "h_fit": array}`` of the fitted line or curve (H/H0), for figures
    details : method-specific numbers (slope, T0, ln(Re/rw), damping ratio, ...)
    """

    method: str
    k: float | None
    t_s: float | None = None
    s: float | None = None
    le: float | None = None
    n_points: int = 0
    r2: float | None = None
    residual_pattern: str | None = None
    window: tuple | None = None
    t_window: tuple | None = None
    shape: dict = field(default_factory=dict)
    valid: bool = False
    problems: tuple = ()
    fitted: dict = field(default_factory=dict)
    residual_stats: dict = field(default_factory=dict)
    details: dict = field(default_factory=dict)
    h0: float | None = None

    def __post_init__(self):
        if self.method not in METHODS:
            raise ParameterError(f"unknown slug-test method {self.method!r}; expected one of {', '.join(METHODS)}")

    def as_dict(self) -> dict:
        """Plain JSON-ready dict (arrays become lists, non-finite numbers None)."""
        return _plain(asdict(self))


@dataclass(frozen=True)
class Diagnosis:
    """Response type of a record and the statistics that led to it (see :func:`diagnose`)."""

    response: str
    h0: float
    final_fraction: float
    n_points: int
    evidence: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        return _plain(asdict(self))


def _plain(obj):
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, np.ndarray)):
        return [_plain(v) for v in obj]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj) if math.isfinite(obj) else None
    return obj


# --------------------------------------------------------------------------------------------- helpers
def _positive(name, value):
    if isinstance(value, (bool, np.bool_)) or not (
            isinstance(value, (int, float, np.integer, np.floating)) and math.isfinite(value) and value > 0):
        raise ParameterError(f"{name} must be a finite number > 0; got {value!r}")
    return float(value)


def _optional(value):
    """None for None or NaN, else float."""
    if value is None:
        return None
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"expected a number, got {value!r}") from None
    return v if math.isfinite(v) else None


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
    if h0 == 0 or not math.isfinite(h0):
        raise ParameterError("the initial displacement H0 is zero; nothing to normalise")
    return t, d / h0


def _line(x, y):
    slope, intercept = np.polyfit(x, y, 1)
    resid = y - (slope * x + intercept)
    ss = float(((y - y.mean()) ** 2).sum())
    r2 = 1.0 - float((resid**2).sum()) / ss if ss > 0 else 1.0
    return float(slope), float(intercept), resid, r2


def _runs_z(resid) -> float | None:
    """Wald-Wolfowitz runs test on the signs of the residuals; z < -1.96: fewer runs than chance (clustered)."""
    r = np.asarray(resid, float)
    scale = np.abs(r).max() if r.size else 0.0
    signs = np.sign(r[np.abs(r) > 1e-12 * max(scale, 1e-300)])
    n1, n2 = int((signs > 0).sum()), int((signs < 0).sum())
    n = n1 + n2
    if n1 == 0 or n2 == 0 or n < 3:
        return None
    runs = 1 + int((signs[1:] != signs[:-1]).sum())
    mu = 2.0 * n1 * n2 / n + 1.0
    var = 2.0 * n1 * n2 * (2.0 * n1 * n2 - n) / (n * n * (n - 1.0))
    return float((runs - mu) / math.sqrt(var)) if var > 0 else None


def _residual_pattern(x, y, resid, *, straight: bool) -> tuple[str, dict]:
    """Classify residuals as random, curved (a bend in the window), trend or clustered.

    ``curvature`` is the change of the local slope across the window divided by the mean slope (a quadratic
    fitted to the data); it is called curved when |curvature| > CURVATURE_LIMIT and the quadratic term's
    t statistic exceeds 3.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    resid = np.asarray(resid, float)
    n = len(x)
    stats: dict = {"runs_z": _runs_z(resid), "curvature": None, "quadratic_t": None, "trend_t": None}
    span = float(x.max() - x.min()) if n else 0.0
    if n >= 4 and span > 0:
        xs = (x - x.min()) / span
        design = np.column_stack([np.ones(n), xs, xs * xs])
        coef, *_ = np.linalg.lstsq(design, y, rcond=None)
        res2 = y - design @ coef
        dof = n - 3
        sigma2 = float((res2**2).sum()) / dof if dof > 0 else 0.0
        cov = sigma2 * np.linalg.pinv(design.T @ design)
        se = math.sqrt(max(cov[2, 2], 0.0))
        slope_mean = coef[1] + coef[2]
        if abs(slope_mean) > 0:
            stats["curvature"] = float(2.0 * coef[2] / abs(slope_mean))
        if se > 0:
            stats["quadratic_t"] = float(coef[2] / se)
        elif abs(coef[2]) > 1e-9 * (abs(coef[1]) + 1e-300):
            stats["quadratic_t"] = math.inf
        else:
            stats["quadratic_t"] = 0.0
        if not straight:
            b, _, _, _ = _line(xs, resid)
            rr = resid - (b * xs + resid.mean() - b * xs.mean())
            s2 = float((rr**2).sum()) / max(n - 2, 1)
            sxx = float(((xs - xs.mean()) ** 2).sum())
            se_b = math.sqrt(s2 / sxx) if sxx > 0 and s2 > 0 else 0.0
            stats["trend_t"] = float(b / se_b) if se_b > 0 else (0.0 if abs(b) < 1e-12 else math.inf)
    scale = max(float(np.std(y)), 1e-300)
    stats["relative_rms"] = math.sqrt(float((resid**2).mean())) / scale if n else 0.0
    curved = (stats["curvature"] is not None and abs(stats["curvature"]) > CURVATURE_LIMIT
              and stats["quadratic_t"] is not None and abs(stats["quadratic_t"]) > 3)
    # residuals below 0.1 % of the spread of the data do not matter, whatever their order (project choice)
    clustered = (stats["runs_z"] is not None and stats["runs_z"] < -1.96
                 and stats["relative_rms"] > RESIDUAL_MATTERS)
    if straight and curved:
        return "curved", stats
    if not straight and clustered and stats["trend_t"] is not None and abs(stats["trend_t"]) > 3:
        return "trend", stats
    if clustered:
        return "clustered", stats
    return "random", stats


def fit_recovery(t, h_norm, *, window=HVORSLEV_RANGE, min_points: int = MIN_WINDOW_POINTS) -> dict:
    """Least-squares line through ln(H/H0) against t for H/H0 inside ``window``.

    Returns slope (1/time, negative for recovery), intercept, r2, n, the time span used, the window, the residual
    pattern and its statistics. Refuses (InsufficientDataError) with fewer than ``min_points`` readings in the
    window or when the line does not fall.
    """
    lo, hi = window
    if not 0 < lo < hi <= 1:
        raise ParameterError(f"the normalised-head window must satisfy 0 < low < high <= 1; got {window}")
    t = np.asarray(t, float)
    h = np.asarray(h_norm, float)
    keep = (h >= lo) & (h <= hi)
    n = int(keep.sum())
    if n < min_points:
        raise InsufficientDataError(
            f"only {n} reading(s) with H/H0 between {lo} and {hi}; at least {min_points} are needed in the "
            "recommended fitting range (record the recovery more densely or for longer)")
    x, y = t[keep], np.log(h[keep])
    slope, intercept, resid, r2 = _line(x, y)
    if slope >= 0:
        raise InsufficientDataError("the fitted head does not recover (slope of ln(H/H0) >= 0 in the window)")
    pattern, stats = _residual_pattern(x, y, resid, straight=True)
    return {"slope": slope, "intercept": intercept, "r2": r2, "n": n, "t_from": float(x.min()),
            "t_to": float(x.max()), "window": [lo, hi], "residual_pattern": pattern, "residual_stats": stats}


# --------------------------------------------------------------------------------------------- diagnosis
def _noise(h) -> float:
    """Reading noise of H/H0 from the median absolute second difference (robust, ignores smooth trends)."""
    if len(h) < 5:
        return 0.0
    d2 = np.diff(h, 2)
    return float(1.4826 * np.median(np.abs(d2 - np.median(d2))) / math.sqrt(6.0))


def _segment_slope(t, h, lo, hi):
    keep = (h >= lo) & (h <= hi)
    if keep.sum() < 3:
        return None
    # the first passage only: an oscillating record may come back into the band
    idx = np.flatnonzero(keep)
    first = idx[0]
    stop = np.flatnonzero(h[first:] < lo)
    end = first + (stop[0] if stop.size else len(h) - first)
    sel = idx[idx < end]
    if sel.size < 3:
        return None
    slope, _, _, _ = _line(t[sel], np.log(h[sel]))
    return slope


def diagnose(t, displacement, *, h0: float | None = None) -> Diagnosis:
    """Response type of a slug-test record.

    Rules (thresholds are project choices, no source; the response types follow Butler 1998):

    - 'underdamped': H/H0 crosses zero at least once by more than max(0.02, 4 x reading noise);
    - 'incomplete recovery': the record ends above H/H0 = 0.20, the bottom of the Bouwer-Rice range;
    - 'critically damped': the early slope of ln(H/H0) (H/H0 from 0.95 to 0.5) is less than 0.67 times the late
      slope (0.10 to 0.30): concave downward on a log-linear plot, the inertial start of a water column near
      critical damping;
    - 'double straight line': the early slope exceeds 1.5 times the late slope (concave upward: drainage of a
      filter pack or a skin, or storage in a confined interval);
    - 'overdamped' otherwise.

    ``evidence`` holds ``zero_crossings``, ``damping_ratio`` (from the logarithmic decrement of successive
    extrema, underdamped only), ``period_s``, ``slope_early``, ``slope_late``, ``slope_ratio``, ``noise``.
    """
    tt, h = normalized_head(t, displacement, h0=h0)
    h0_used = float(np.asarray(displacement, float)[np.argsort(np.asarray(t, float), kind="stable")][0]
                    if h0 is None else h0)
    noise = _noise(h)
    thr = max(0.02, 4.0 * noise)
    state, flips, crossing_t = 1, [], []
    for i in range(1, len(h)):
        if state > 0 and h[i] < -thr or state < 0 and h[i] > thr:
            state = -state
            flips.append(i)
            j = i
            while j > 0 and np.sign(h[j - 1]) == np.sign(h[i]):
                j -= 1
            if j > 0:
                a, b = h[j - 1], h[j]
                crossing_t.append(float(tt[j - 1] + (tt[j] - tt[j - 1]) * a / (a - b)) if a != b else float(tt[j]))
    evidence: dict = {"zero_crossings": len(flips), "noise": noise, "damping_ratio": None, "period_s": None,
                      "slope_early": None, "slope_late": None, "slope_ratio": None}
    final = float(np.median(h[-3:])) if len(h) >= 3 else float(h[-1])
    if flips:
        bounds = [0] + flips + [len(h)]
        extrema = [float(np.abs(h[bounds[i]:bounds[i + 1]]).max()) for i in range(len(bounds) - 1)]
        dec = [math.log(extrema[i] / extrema[i + 1]) for i in range(len(extrema) - 1)
               if extrema[i + 1] > thr and extrema[i] > extrema[i + 1]]
        if dec:
            d = float(np.mean(dec))
            evidence["damping_ratio"] = d / math.sqrt(math.pi**2 + d * d)
        if len(crossing_t) >= 2:
            evidence["period_s"] = float(2.0 * np.mean(np.diff(crossing_t)))
        elif crossing_t:
            evidence["period_s"] = float(4.0 * crossing_t[0])  # zero velocity at t = 0: first crossing at T/4
        return Diagnosis("underdamped", h0_used, final, len(h), evidence)
    early = _segment_slope(tt, h, 0.5, 0.95)
    late = _segment_slope(tt, h, 0.10, 0.30)
    evidence["slope_early"], evidence["slope_late"] = early, late
    if early is not None and late is not None and late < 0:
        evidence["slope_ratio"] = early / late
    if final > BOUWER_RICE_RANGE[0]:
        return Diagnosis("incomplete recovery", h0_used, final, len(h), evidence)
    ratio = evidence["slope_ratio"]
    if ratio is not None and ratio < 0.67:
        response = "critically damped"
    elif ratio is not None and ratio > 1.5:
        response = "double straight line"
    else:
        response = "overdamped"
    return Diagnosis(response, h0_used, final, len(h), evidence)


def _response_problem(diag: Diagnosis) -> list[str]:
    if diag.response in ("underdamped", "critically damped"):
        return [f"the response is {diag.response}: the water column's inertia matters and a straight line on "
                "ln(H/H0) does not describe it; use the oscillating method (Butler 1998)"]
    return []


def _straight_fit(method, tt, hn, window, k_per_rate, *, shape, problems, details, h0, diag):
    """Shared end of Hvorslev and Bouwer-Rice: fit the window, K = k_per_rate * (-slope), checks."""
    fit = fit_recovery(tt, hn, window=window)
    k = k_per_rate * (-fit["slope"])
    problems = list(problems) + _response_problem(diag)
    if fit["r2"] < R2_MIN:
        problems.append(f"r2 = {fit['r2']:.3f} in the fit window is below {R2_MIN}")
    if fit["residual_pattern"] == "curved":
        problems.append(f"the slope of ln(H/H0) changes by {abs(fit['residual_stats']['curvature']) * 100:.0f} % "
                        "across the fit window (a slope break inside the window)")
    elif fit["residual_pattern"] != "random":
        problems.append(f"the residuals of the fit are {fit['residual_pattern']} (runs test z = "
                        f"{fit['residual_stats']['runs_z']:.2f})")
    if not shape.get("valid", True):
        problems.append(shape.get("why", "shape factor outside its valid range"))
    t_fit = np.array([fit["t_from"], fit["t_to"]])
    h_fit = np.exp(fit["intercept"] + fit["slope"] * t_fit)
    details = dict(details, slope=fit["slope"], intercept=fit["intercept"], time_lag_s=-1.0 / fit["slope"],
                   response=diag.response)
    return SlugFit(method=method, k=float(k), n_points=fit["n"], r2=fit["r2"],
                   residual_pattern=fit["residual_pattern"], window=tuple(window),
                   t_window=(fit["t_from"], fit["t_to"]), shape=shape, valid=not problems,
                   problems=tuple(problems), fitted={"t_fit": t_fit, "h_fit": h_fit},
                   residual_stats=fit["residual_stats"], details=details, h0=h0)


# --------------------------------------------------------------------------------------------- Hvorslev
def hvorslev_shape(*, well_radius: float, screen_length: float, anisotropy: float = 1.0,
                   bounded: bool = False) -> tuple[float, dict]:
    """The logarithmic shape term of Hvorslev's cylindrical intake, K = r_c^2 * term / (2 L T0).

    In a uniform unit (Hvorslev 1951, intake in uniform soil; from memory) the term is
    ``ln(mL/(2R) + sqrt(1 + (mL/(2R))^2))`` with m = sqrt(Kh/Kv); for mL/R > 8 Hvorslev's simple form
    ``ln(mL/R)`` is used (within 0.7 % of the full form there, and the form of VERIFY.md's computed case).
    With ``bounded=True`` (the intake adjoins an impermeable boundary, e.g. directly below a confining unit)
    the image of the intake in the boundary doubles its length: ``ln(mL/R + sqrt(1 + (mL/R)^2))``, simple
    form ``ln(2mL/R)``.
    """
    R = _positive("well_radius", well_radius)
    L = _positive("screen_length", screen_length)
    ratio = _positive("anisotropy", anisotropy)
    m = math.sqrt(ratio)
    arg = m * L / (R if bounded else 2.0 * R)
    lr = L / R
    simple = arg > HVORSLEV_SIMPLE_LR / 2.0  # mL/(2R) > 4, i.e. L/R > 8 for an isotropic, unbounded intake
    # the simple form ln(2 arg) (= ln(mL/R) unbounded) where Hvorslev allows it, the full form below
    term = math.log(2.0 * arg) if simple else math.asinh(arg)
    full = "ln(mL/R + sqrt(1 + (mL/R)^2))" if bounded else "ln(mL/(2R) + sqrt(1 + (mL/(2R))^2))"
    shape = {"L/R": lr, "anisotropy_kh_kv": ratio, "bounded": bool(bounded),
             "form": ("ln(2mL/R)" if bounded else "ln(mL/R)") if simple else full,
             "simple_form_valid": bool(simple), "valid": lr >= 1.0}
    if lr < 1.0:
        shape["why"] = (f"L/R = {lr:.2f} < 1: the intake is shorter than its radius and Hvorslev's elongated "
                        "cylinder shape factor does not apply (project limit)")
    return term, shape


def hvorslev(t, displacement, *, casing_radius: float, well_radius: float, screen_length: float,
             geometry: str = "screen", h0: float | None = None, window=HVORSLEV_RANGE, anisotropy: float = 1.0,
             bounded: bool = False) -> SlugFit:
    """Hvorslev (1951): K = r_c^2 F_ln / (2 L) * (-slope of ln(H/H0)), fitted over ``window``.

    Parameters
    ----------
    t, displacement : 1-D arrays, seconds and length (either sign)
    casing_radius : r_c, radius of the pipe in which the water level moves
    well_radius : R, radius of the intake: the filter pack for a screen, the borehole for a packer interval or
        an open hole
    screen_length : L, length of the intake (screen, packer interval or open hole)
    geometry : 'screen', 'packer' or 'open_hole' (all are a cylindrical intake in the unit; recorded)
    h0 : initial displacement (default: the first reading)
    window : normalised-head range of the fit (Butler 1998: 0.15-0.25)
    anisotropy : Kh/Kv (1 = isotropic); K is then the horizontal K
    bounded : the intake adjoins an impermeable boundary (image form of the shape factor)
    """
    if geometry not in GEOMETRY_KINDS:
        raise ParameterError(f"unknown interval geometry {geometry!r}; expected one of {', '.join(GEOMETRY_KINDS)}")
    rc = _positive("casing_radius", casing_radius)
    L = _positive("screen_length", screen_length)
    term, shape = hvorslev_shape(well_radius=well_radius, screen_length=L, anisotropy=anisotropy, bounded=bounded)
    if not shape["valid"]:
        raise ParameterError(shape["why"])
    shape["geometry_kind"] = geometry
    diag = diagnose(t, displacement, h0=h0)
    tt, hn = normalized_head(t, displacement, h0=h0)
    return _straight_fit("hvorslev", tt, hn, window, rc * rc * term / (2.0 * L), shape=shape, problems=[],
                         details={"shape_term": term}, h0=diag.h0, diag=diag)


def hvorslev_k_from_t0(t0: float, *, casing_radius: float, screen_length: float, well_radius: float) -> float:
    """K = r_c^2 ln(L/R) / (2 L T0) (Hvorslev's simple form, for L/R > 8).

    >>> round(hvorslev_k_from_t0(300.0, casing_radius=0.0254, screen_length=1.524, well_radius=0.0508), 10)
    2.3997e-06
    """
    rc = _positive("casing_radius", casing_radius)
    L = _positive("screen_length", screen_length)
    R = _positive("well_radius", well_radius)
    t0 = _positive("t0", t0)
    return rc * rc * math.log(L / R) / (2.0 * L * t0)


# --------------------------------------------------------------------------------------------- Bouwer-Rice
def _abc(x):
    """Bouwer-Rice coefficients A, B, C as polynomials in Le/rw.

    from memory: the polynomial fits attributed to Van Rooy (1988), as reproduced with Butler (1998); checked
    against the project's computed case ln(Re/rw) = 2.4391 (VERIFY.md). Used only inside BR_CURVE_RANGE.
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
    screen_length : Le, saturated length of the intake
    lw : Lw, height of the upper constant-head boundary above the bottom of the intake (the static water table
        for an unconfined unit; the top of the unit for the confined variant)
    aquifer_thickness : H, thickness from that boundary down to the base of the unit (H = Lw: fully penetrating)

    ``1 / (1.1 / ln(Lw/rw) + D / (Le/rw))`` with ``D = A + B ln((H - Lw)/rw)`` for a partially penetrating
    intake, ln((H - Lw)/rw) capped at 6, and ``D = C`` for a fully penetrating one. The two forms join
    continuously: D is never taken below C (a partially penetrating intake cannot recover more slowly than a
    fully penetrating one of the same length), so the fully penetrating form applies while
    H - Lw < rw exp((C - A)/B). Refused outside BR_CURVE_RANGE of Le/rw.
    """
    rw = _positive("well_radius", well_radius)
    le = _positive("screen_length", screen_length)
    lw = _positive("lw", lw)
    h = _positive("aquifer_thickness", aquifer_thickness)
    if lw > h * (1 + 1e-12):
        raise ParameterError(f"Lw ({lw:g}) cannot exceed the thickness H ({h:g}) below the upper boundary; for an "
                             "interval isolated below a confining unit use the confined variant")
    if le > lw * (1 + 1e-12):
        raise ParameterError(f"the screen length Le ({le:g}) cannot exceed Lw ({lw:g})")
    x = le / rw
    lo, hi = BR_CURVE_RANGE
    if not lo <= x <= hi:
        raise ParameterError(f"Le/rw = {x:.4g} is outside {lo:g}-{hi:g}, the range in which the Bouwer-Rice A, B, C "
                             "curves are used here; not extrapolated (use Hvorslev)")
    if lw <= rw:
        raise ParameterError(f"Lw ({lw:g}) must exceed the well radius rw ({rw:g})")
    a, b, c = _abc(x)
    first = 1.1 / math.log(lw / rw)
    gap = h - lw
    d = c if gap <= 0 else max(c, a + b * min(math.log(gap / rw), BR_LOG_CAP))
    return 1.0 / (first + d / x)


def bouwer_rice_geometry(*, well_radius: float, screen_length: float, aquifer_thickness: float,
                         lw: float | None = None, confined: bool = False, static_depth: float | None = None,
                         water_table_depth: float | None = None, screen_top_depth: float | None = None,
                         screen_bottom_depth: float | None = None, aquifer_top_depth: float | None = None) -> dict:
    """Lw, the saturated screen length Le and the notes of the Bouwer-Rice geometry.

    Unconfined: Lw = screen bottom depth - water-table depth (``water_table_depth``, else ``static_depth``).
    A screen across the water table counts only its saturated length (Le = Lw, the partially-saturated-screen
    rule; Bouwer 1989, from memory). Confined variant: the upper constant-head boundary of Bouwer and Rice's
    analog is put at the top of the confined unit, which then feeds the interval like a water table (Bouwer and
    Rice 1976, abstract: the method "can also be used for confined aquifers that receive water from the upper
    confining layer"); Lw = screen bottom depth - ``aquifer_top_depth``, and a screen reaching above the top of
    the unit counts only its length inside it.
    """
    le = _positive("screen_length", screen_length)
    h = _positive("aquifer_thickness", aquifer_thickness)
    notes = []
    bottom = _optional(screen_bottom_depth)
    top = _optional(screen_top_depth)
    if bottom is None and top is not None:
        bottom = top + le
    if lw is None:
        if confined:
            upper = _optional(aquifer_top_depth)
            if upper is None or bottom is None:
                raise InsufficientDataError("the confined Bouwer-Rice variant needs the depth of the top of the "
                                            "tested unit (aquifer_top_depth) and the screen depths, or lw")
        else:
            upper = _optional(water_table_depth)
            upper = _optional(static_depth) if upper is None else upper
            if upper is None or bottom is None:
                raise InsufficientDataError("Bouwer and Rice needs the static (water-table) depth and the screen "
                                            "bottom depth, or lw")
        lw = bottom - upper
    lw = float(lw)
    if not lw > 0:
        raise ParameterError(f"the screen bottom lies above the {'top of the unit' if confined else 'water table'} "
                             f"(Lw = {lw:g}); no saturated screen to test")
    le_used = le
    if le > lw:
        le_used = lw
        notes.append(("only the part of the screen inside the confined unit counts" if confined else
                      "screen across the water table: the saturated screen length is used")
                     + f" (Le = {lw:g} instead of {le:g})")
    return {"lw": lw, "le": le_used, "aquifer_thickness": h, "confined": bool(confined),
            "screen_spans_boundary": le > lw, "notes": notes}


def bouwer_rice(t, displacement, *, casing_radius: float, well_radius: float, screen_length: float,
                aquifer_thickness: float, lw: float | None = None, static_depth: float | None = None,
                confined: bool = False, screen_top_depth: float | None = None,
                screen_bottom_depth: float | None = None, water_table_depth: float | None = None,
                aquifer_top_depth: float | None = None, pack_porosity: float | None = None,
                window=BOUWER_RICE_RANGE, h0: float | None = None) -> SlugFit:
    """Bouwer and Rice (1976): K = r_c^2 ln(Re/rw) / (2 Le) * (-slope of ln(H/H0)) over ``window``.

    Geometry as in :func:`bouwer_rice_geometry`. When the screen spans the water table and ``pack_porosity``
    (n) is given, the effective casing radius ``sqrt((1 - n) r_c^2 + n rw^2)`` accounts for drainage of the
    filter pack (Bouwer 1989, from memory).
    """
    rc = _positive("casing_radius", casing_radius)
    rw = _positive("well_radius", well_radius)
    geo = bouwer_rice_geometry(well_radius=rw, screen_length=screen_length, aquifer_thickness=aquifer_thickness,
                               lw=lw, confined=confined, static_depth=static_depth,
                               water_table_depth=water_table_depth, screen_top_depth=screen_top_depth,
                               screen_bottom_depth=screen_bottom_depth, aquifer_top_depth=aquifer_top_depth)
    ln_re = bouwer_rice_ln_re_rw(well_radius=rw, screen_length=geo["le"], lw=geo["lw"],
                                 aquifer_thickness=geo["aquifer_thickness"])
    rc_used = rc
    n = _optional(pack_porosity)
    if n is not None and geo["screen_spans_boundary"] and not confined:
        if not 0 < n < 1:
            raise ParameterError(f"pack_porosity must lie between 0 and 1; got {n!r}")
        rc_used = math.sqrt((1 - n) * rc * rc + n * rw * rw)
    x = geo["le"] / rw
    shape = {"Le/rw": x, "curve_range": list(BR_CURVE_RANGE), "valid": True, "lw": geo["lw"], "le": geo["le"],
             "aquifer_thickness": geo["aquifer_thickness"], "confined": geo["confined"],
             "penetration": "full" if geo["aquifer_thickness"] - geo["lw"] <= 0 else "partial",
             "casing_radius_used": rc_used, "notes": geo["notes"]}
    diag = diagnose(t, displacement, h0=h0)
    tt, hn = normalized_head(t, displacement, h0=h0)
    return _straight_fit("bouwer-rice", tt, hn, window, rc_used * rc_used * ln_re / (2.0 * geo["le"]),
                         shape=shape, problems=[], details={"ln_re_rw": ln_re}, h0=diag.h0, diag=diag)


# --------------------------------------------------------------------------------------------- CBP
_CBP_STEP = 0.01  # trapezoid step in ln(u); checked against mpmath quadrature and Laplace inversion (tests)


def _cbp_nodes(alpha: float):
    from scipy import special

    x = np.arange(math.log(math.sqrt(alpha)) - 10.0, 21.0, _CBP_STEP)
    u = np.exp(x)
    f = (u * special.j0(u) - 2 * alpha * special.j1(u)) ** 2 + (u * special.y0(u) - 2 * alpha * special.y1(u)) ** 2
    return u * u / alpha, (8.0 * alpha / math.pi**2) * _CBP_STEP / f


def cbp_head(alpha: float, beta) -> np.ndarray:
    """Cooper, Bredehoeft and Papadopulos (1967) normalised head H/H0 = F(alpha, beta).

    ``F = (8 alpha / pi^2) * integral_0^inf exp(-beta u^2 / alpha) / (u f(u)) du`` with
    ``f(u) = (u J0(u) - 2 alpha J1(u))^2 + (u Y0(u) - 2 alpha Y1(u))^2``, alpha = rw^2 S / rc^2,
    beta = T t / rc^2. Evaluated with u = exp(x) by the trapezoid rule on a fine grid in x (the integrand is
    smooth and decays at both ends, where the rule converges fast); accurate to about 1e-9 (tests).
    """
    a = _positive("alpha", alpha)
    b = np.asarray(beta, float)
    if (b < 0).any() or not np.isfinite(b).all():
        raise ParameterError("beta must be finite and >= 0")
    e, w = _cbp_nodes(a)
    flat = b.reshape(-1)
    out = np.empty(flat.shape)
    for i0 in range(0, flat.size, 256):  # chunks: a bounded (256 x nodes) work array
        out[i0:i0 + 256] = np.exp(-np.outer(flat[i0:i0 + 256], e)) @ w
    return np.minimum(out, 1.0).reshape(b.shape)


def cbp(t, displacement, *, casing_radius: float, well_radius: float, screen_length: float,
        h0: float | None = None, alpha_range=CBP_ALPHA_RANGE) -> SlugFit:
    """Cooper, Bredehoeft and Papadopulos (1967): fit T and S of a confined interval to the whole record.

    Least squares on H/H0 over log10 T and log10 alpha (alpha in ``alpha_range``): a grid over alpha with the
    best T for each, then a joint refinement. S = alpha rc^2 / rw^2 and K = T / screen_length. S from a slug
    test is poorly determined (the type curves differ little in shape); ``details['alpha_within_2x_sse']``
    gives the alpha range whose misfit is within twice the best.
    """
    from scipy.optimize import least_squares, minimize_scalar

    rc = _positive("casing_radius", casing_radius)
    rw = _positive("well_radius", well_radius)
    b = _positive("screen_length", screen_length)
    a_lo, a_hi = (float(v) for v in alpha_range)
    if not 0 < a_lo < a_hi:
        raise ParameterError(f"alpha_range must satisfy 0 < low < high; got {alpha_range}")
    diag = diagnose(t, displacement, h0=h0)
    tt, hn = normalized_head(t, displacement, h0=h0)
    keep = tt > tt[0]
    tf, hf = tt[keep] - tt[0], hn[keep]
    if len(tf) < MIN_WINDOW_POINTS:
        raise InsufficientDataError(f"only {len(tf)} readings after the start; CBP needs at least "
                                    f"{MIN_WINDOW_POINTS}")
    if len(tf) > 300:  # log-spaced subset keeps the fit quick and weights early and late time alike
        idx = np.unique(np.round(np.geomspace(1, len(tf), 300)).astype(int) - 1)
        tf, hf = tf[idx], hf[idx]
    if hf.min() > 0.8:
        raise InsufficientDataError("the record recovers less than 20 %; the CBP type curve cannot be placed")
    beta_grid = np.logspace(-6, 7, 261)
    log_beta = np.log(beta_grid)
    lt_lo = math.log10(rc * rc / tf.max()) - 7
    lt_hi = math.log10(rc * rc / tf.min()) + 7
    profile = []
    for la in np.arange(math.log10(a_lo), math.log10(a_hi) + 1e-9, 0.25):
        curve = cbp_head(10**la, beta_grid)

        def sse(lt, curve=curve):
            lb = np.log(10**lt * tf / (rc * rc))
            return float(((np.interp(lb, log_beta, curve) - hf) ** 2).sum())
        grid = np.linspace(lt_lo, lt_hi, 57)
        start = grid[int(np.argmin([sse(g) for g in grid]))]
        res = minimize_scalar(sse, bounds=(start - 0.25, start + 0.25), method="bounded",
                              options={"xatol": 1e-6})
        profile.append((float(la), float(res.x), float(res.fun)))
    best = min(profile, key=lambda p: p[2])

    def resid(p):
        return cbp_head(10 ** p[1], 10 ** p[0] * tf / (rc * rc)) - hf
    lo_b = [best[1] - 1.0, math.log10(a_lo)]
    hi_b = [best[1] + 1.0, math.log10(a_hi)]
    x0 = [best[1], min(max(best[0], lo_b[1]), hi_b[1])]
    sol = least_squares(resid, x0, bounds=(lo_b, hi_b), x_scale=[0.1, 1.0], xtol=1e-10, ftol=1e-12)
    log_t, log_a = float(sol.x[0]), float(sol.x[1])
    T, alpha = 10**log_t, 10**log_a
    r = resid(sol.x)
    ss = float(((hf - hf.mean()) ** 2).sum())
    r2 = 1.0 - float((r**2).sum()) / ss if ss > 0 else 1.0
    pattern, stats = _residual_pattern(tf, hf, r, straight=False)
    fine = min(p[2] for p in profile)
    near = [p[0] for p in profile if p[2] <= 2.0 * max(fine, 1e-300)]
    problems = _response_problem(diag)
    if r2 < R2_MIN:
        problems.append(f"r2 = {r2:.3f} of the type-curve fit is below {R2_MIN}")
    if pattern != "random":
        problems.append(f"the residuals of the type-curve fit show a {pattern} pattern (runs test z = "
                        f"{stats['runs_z']:.2f})")
    if log_a <= math.log10(a_lo) + 0.01 or log_a >= math.log10(a_hi) - 0.01:
        problems.append(f"alpha = {alpha:.2g} sits at the edge of the searched range {a_lo:g}-{a_hi:g}: S is not "
                        "determined by this record")
    t_fit = np.geomspace(max(tf.min(), 1e-9), tf.max(), 100)
    h_fit = cbp_head(alpha, T * t_fit / (rc * rc))
    return SlugFit(method="cbp", k=T / b, t_s=T, s=alpha * rc * rc / (rw * rw), n_points=len(tf), r2=r2,
                   residual_pattern=pattern, window=(float(hf.min()), float(hf.max())),
                   t_window=(float(tf.min()), float(tf.max())),
                   shape={"alpha_range": [a_lo, a_hi], "valid": True, "screen_length": b},
                   valid=not problems, problems=tuple(problems), fitted={"t_fit": t_fit + tt[0], "h_fit": h_fit},
                   residual_stats=stats, h0=diag.h0,
                   details={"alpha": alpha, "alpha_within_2x_sse": [10 ** min(near), 10 ** max(near)],
                            "response": diag.response, "s_note": "S from a slug test is poorly determined"})


# --------------------------------------------------------------------------------------------- oscillating
def friction_time_lag(column_length: float, casing_radius: float, *, gravity: float = GRAVITY_M_S2,
                      kinematic_viscosity: float = WATER_VISCOSITY_M2_S) -> float:
    """Laminar friction of the water column in its pipe as a time lag: 8 nu L / (g rc^2), seconds.

    Hagen-Poiseuille head loss h_f = 8 nu L v / (g rc^2) for mean velocity v = dw/dt: the high-K frictional
    correction of Butler (2002, from memory) subtracts it from the damping before K is computed.
    """
    L = _positive("column_length", column_length)
    rc = _positive("casing_radius", casing_radius)
    return 8.0 * _positive("kinematic_viscosity", kinematic_viscosity) * L / (_positive("gravity", gravity) * rc * rc)


def oscillator_head(t, omega0: float, zeta: float) -> np.ndarray:
    """Solution of w'' + 2 zeta omega0 w' + omega0^2 w = 0, w(0) = 1, w'(0) = 0 (a slug released at rest)."""
    t = np.asarray(t, float)
    w0 = _positive("omega0", omega0)
    z = _positive("zeta", zeta)
    if abs(z - 1.0) < 1e-6:
        return np.exp(-w0 * t) * (1 + w0 * t)
    if z < 1:
        wd = w0 * math.sqrt(1 - z * z)
        return np.exp(-z * w0 * t) * (np.cos(wd * t) + z * w0 / wd * np.sin(wd * t))
    s = w0 * math.sqrt(z * z - 1)
    r1, r2 = -z * w0 + s, -z * w0 - s
    return (r2 * np.exp(r1 * t) - r1 * np.exp(r2 * t)) / (r2 - r1)


def oscillating(t, displacement, *, casing_radius: float, well_radius: float, screen_length: float,
                h0: float | None = None, gravity: float = GRAVITY_M_S2,
                kinematic_viscosity: float = WATER_VISCOSITY_M2_S, column_length: float | None = None,
                shape_term: float | None = None) -> SlugFit:
    """Damped-oscillator model of a slug test in a high-K unit: fit K and the effective column length Le.

    The water column obeys (Springer and Gelhar 1991; Butler 1998; Butler, Garnett and Healey 2003; from memory)::

        (Le / g) w'' + (T0 + Tf) w' + w = 0,   T0 = rc^2 F_ln / (2 b K),   Tf = 8 nu Lc / (g rc^2)

    T0 is Hvorslev's time lag of the formation (F_ln the Hvorslev shape term of the interval, or ``shape_term``,
    e.g. ln(Re/rw) of Bouwer-Rice for the Springer-Gelhar form) and Tf the laminar friction of a water column
    of length Lc = ``column_length`` in the pipe (the high-K frictional correction, Butler 2002; when
    ``column_length`` is None, Lc is estimated from the fitted Le as Le - (b/2)(rc/rw)^2). Fitting
    w = A * oscillator(t - t_shift; omega0, zeta) gives ``Le = g / omega0^2`` and ``T0 + Tf = 2 zeta / omega0``.
    ``gravity`` and ``kinematic_viscosity`` must be in the inputs' length unit (defaults: metres).
    With rc different from the intake radius rw, the expected Le is Lc + (b/2)(rc/rw)^2 (from memory: Kipp
    1985, as set out by Butler 1998); it is reported beside the fitted Le when ``column_length`` is given.
    """
    from scipy.optimize import least_squares

    rc = _positive("casing_radius", casing_radius)
    rw = _positive("well_radius", well_radius)
    b = _positive("screen_length", screen_length)
    g = _positive("gravity", gravity)
    term, shape = hvorslev_shape(well_radius=rw, screen_length=b)
    if shape_term is not None:
        term = _positive("shape_term", shape_term)
        shape["form"] = "given shape term"
    diag = diagnose(t, displacement, h0=h0)
    tt, hn = normalized_head(t, displacement, h0=h0)
    tr = tt - tt[0]
    if len(tr) < 8:
        raise InsufficientDataError(f"only {len(tr)} readings; the oscillating method needs at least 8")
    period = diag.evidence.get("period_s")
    z0 = diag.evidence.get("damping_ratio") or 0.3
    if not period:
        # no crossing: start near critical damping on the record's time scale
        below = np.flatnonzero(hn < 0.5)
        t_half = tr[below[0]] if below.size else tr[-1]
        period = 2 * math.pi * t_half / 1.7
        z0 = 1.0
    w0 = 2 * math.pi / period / math.sqrt(max(1 - min(z0, 0.9) ** 2, 0.1))

    def resid(p):
        om, zt, amp, sh = math.exp(p[0]), math.exp(p[1]), p[2], p[3]
        x = np.clip(tr - sh, 0.0, None)
        return amp * oscillator_head(x, om, zt) - hn

    best = None
    for zs in (z0, 0.1, 0.5, 1.5):
        x0 = [math.log(w0), math.log(min(max(zs, 0.01), 4.0)), 1.0, 0.0]
        sol = least_squares(resid, x0, bounds=([-30, math.log(1e-3), 0.3, -0.25 * period],
                                               [30, math.log(20.0), 3.0, 0.25 * period]),
                            x_scale=[0.1, 0.1, 0.1, 0.05 * period], xtol=1e-12, ftol=1e-12)
        if best is None or sol.cost < best.cost:
            best = sol
    om, zt, amp, sh = math.exp(best.x[0]), math.exp(best.x[1]), float(best.x[2]), float(best.x[3])
    r = resid(best.x)
    ss = float(((hn - hn.mean()) ** 2).sum())
    r2 = 1.0 - float((r**2).sum()) / ss if ss > 0 else 1.0
    pattern, stats = _residual_pattern(tr, hn, r, straight=False)
    le = g / (om * om)
    lag_total = 2.0 * zt / om
    problems = []
    screen_part = 0.5 * b * (rc / rw) ** 2
    if column_length is not None:
        col, col_source = _positive("column_length", column_length), "given"
        shape["le_expected"] = col + screen_part
        shape["le_fitted_over_expected"] = le / shape["le_expected"]
    else:
        # Le = Lc + (b/2)(rc/rw)^2 turned round: the column length the fitted Le implies
        col = le - screen_part if le > screen_part else le
        col_source = "estimated from the fitted Le"
    tf = friction_time_lag(col, rc, gravity=g, kinematic_viscosity=kinematic_viscosity)
    lag = lag_total - tf
    k = rc * rc * term / (2.0 * b * lag) if lag > 0 else None
    if lag <= 0:
        problems.append(f"the friction time lag ({tf:.3g} s) explains all the damping ({lag_total:.3g} s): K is "
                        "too high for this record to resolve")
    if zt >= 1.0 and diag.response not in ("underdamped", "critically damped"):
        problems.append(f"the fitted damping ratio is {zt:.2f}: no oscillation or inertial start, Le is not "
                        "determined; use Hvorslev or Bouwer and Rice")
    if r2 < R2_MIN:
        problems.append(f"r2 = {r2:.3f} of the oscillator fit is below {R2_MIN}")
    if pattern != "random":
        problems.append(f"the residuals of the oscillator fit show a {pattern} pattern (runs test z = "
                        f"{stats['runs_z']:.2f})")
    t_fit = np.linspace(0.0, tr.max(), 400)
    h_fit = amp * oscillator_head(np.clip(t_fit - sh, 0.0, None), om, zt)
    shape["valid"] = True
    return SlugFit(method="oscillating", k=k, le=le, n_points=len(tr), r2=r2, residual_pattern=pattern,
                   window=(float(hn.min()), float(hn.max())), t_window=(float(tt[0]), float(tt[-1])),
                   shape=shape, valid=not problems and k is not None, problems=tuple(problems),
                   fitted={"t_fit": t_fit + tt[0], "h_fit": h_fit}, residual_stats=stats, h0=diag.h0,
                   details={"omega0_rad_s": om, "damping_ratio": zt, "amplitude": amp, "t_shift_s": sh,
                            "time_lag_total_s": lag_total, "time_lag_friction_s": tf, "shape_term": term,
                            "column_length": col, "column_length_source": col_source,
                            "gravity": g, "response": diag.response})


# --------------------------------------------------------------------------------------------- choice
def _geo(geometry: dict, key, default=None):
    v = geometry.get(key, default)
    if isinstance(v, float) and not math.isfinite(v):
        return default
    return v


def choose(diagnosis: Diagnosis, geometry: dict) -> tuple[str, str]:
    """The method a record's response and its interval's geometry call for, and why.

    - underdamped or critically damped: 'oscillating' (inertia of the water column; Butler 1998);
    - confined interval screened over (nearly, 90 %) the whole unit: 'cbp' (its assumptions: confined, fully
      penetrating, storage);
    - other confined or packer intervals: 'hvorslev' (an intake in a uniform unit);
    - unconfined with static depth, screen depths and unit thickness: 'bouwer-rice' (water table and partial
      penetration), else 'hvorslev'.
    A double straight line is fitted over the recommended range, which lies on the later, formation segment.
    """
    r = diagnosis.response
    confined = bool(_geo(geometry, "confined", False))
    kind = _geo(geometry, "geometry_kind", "screen") or "screen"
    if r in ("underdamped", "critically damped"):
        what = ("oscillates about static" if r == "underdamped" else "starts slowly and then steepens (concave "
                "downward on a log-linear plot)")
        return "oscillating", (f"the record {what}: {r} response of a high-K unit, where the water column's "
                               "inertia matters; the damped-oscillator model fits K and the effective column "
                               "length (Butler 1998)")
    tail = ""
    if r == "double straight line":
        tail = ("; the record is concave upward (double straight line): the recommended normalised-head range "
                "lies on the later segment, which reflects the formation (Butler 1998)")
    elif r == "incomplete recovery":
        tail = (f"; the record ends at H/H0 = {diagnosis.final_fraction:.2f}, above the recommended ranges: "
                "the straight-line methods will refuse unless the record is extended")
    thick = _optional(_geo(geometry, "aquifer_thickness"))
    length = _optional(_geo(geometry, "screen_length"))
    if confined:
        if thick is not None and length is not None and length >= 0.9 * thick:
            return "cbp", ("confined unit screened over its whole thickness: the Cooper-Bredehoeft-Papadopulos "
                           "type curve fits T and S with storage in the unit" + tail)
        return "hvorslev", (f"confined unit, partially penetrating {kind.replace('_', ' ')} interval: Hvorslev's "
                            "shape factor for an intake in a uniform unit" + tail)
    has_br = thick is not None and (_optional(_geo(geometry, "static_depth")) is not None) and (
        _optional(_geo(geometry, "screen_bottom_depth")) is not None
        or _optional(_geo(geometry, "screen_top_depth")) is not None)
    if kind == "packer":
        return "hvorslev", "packer interval: Hvorslev's shape factor for an intake in a uniform unit" + tail
    if has_br:
        return "bouwer-rice", ("unconfined unit: Bouwer and Rice account for the water table and partial "
                               "penetration" + tail)
    return "hvorslev", ("unconfined unit without static depth, screen depths or unit thickness: Hvorslev (Bouwer "
                        "and Rice needs them)" + tail)


def _refused(method, exc, h0=None) -> SlugFit:
    return SlugFit(method=method, k=None, valid=False, problems=(str(exc),), h0=h0)


def reduce(t, displacement, geometry: dict, *, method: str = "auto") -> tuple[SlugFit, tuple, str]:
    """Reduce one record with every applicable method; return the chosen fit, the alternatives and why.

    Hvorslev always runs; Bouwer-Rice when its geometry is known; CBP for confined intervals; the oscillating
    method for underdamped or critically damped records. A method that refuses gives a SlugFit with
    ``k=None`` and its reason in ``problems``. ``method`` other than 'auto' forces the chosen method.
    """
    if method != "auto" and method not in METHODS:
        raise ParameterError(f"unknown slug-test method {method!r}; expected auto or one of {', '.join(METHODS)}")
    for key in ("casing_radius", "well_radius", "screen_length"):
        if _optional(geometry.get(key)) is None:
            raise ParameterError(f"the slug-test geometry needs {key}")
    diag = diagnose(t, displacement)
    unit = geometry.get("length_unit", "m") or "m"
    if unit not in _LENGTH_TO_M:
        raise ParameterError(f"unknown length unit {unit!r}; expected m or ft")
    to_m = _LENGTH_TO_M[unit]
    common = {"casing_radius": float(geometry["casing_radius"]), "well_radius": float(geometry["well_radius"]),
              "screen_length": float(geometry["screen_length"])}
    kind = _geo(geometry, "geometry_kind", "screen") or "screen"
    confined = bool(_geo(geometry, "confined", False))
    chosen_method, reason = choose(diag, geometry) if method == "auto" else (method, f"asked for {method}")
    runs = {"hvorslev": lambda: hvorslev(t, displacement, geometry=kind,
                                         anisotropy=float(_geo(geometry, "anisotropy", 1.0)),
                                         bounded=bool(_geo(geometry, "bounded", False)), **common)}
    if _optional(_geo(geometry, "aquifer_thickness")) is not None or chosen_method == "bouwer-rice":
        runs["bouwer-rice"] = lambda: bouwer_rice(
            t, displacement, aquifer_thickness=_geo(geometry, "aquifer_thickness"), confined=confined,
            static_depth=_geo(geometry, "static_depth"), screen_top_depth=_geo(geometry, "screen_top_depth"),
            screen_bottom_depth=_geo(geometry, "screen_bottom_depth"),
            aquifer_top_depth=_geo(geometry, "aquifer_top_depth"),
            pack_porosity=_geo(geometry, "pack_porosity"), **common)
    if confined or chosen_method == "cbp":
        runs["cbp"] = lambda: cbp(t, displacement, **common)
    if diag.response in ("underdamped", "critically damped") or chosen_method == "oscillating":
        col = _optional(_geo(geometry, "column_length"))
        runs["oscillating"] = lambda: oscillating(t, displacement, gravity=GRAVITY_M_S2 / to_m,
                                                  kinematic_viscosity=WATER_VISCOSITY_M2_S / to_m**2,
                                                  column_length=col, **common)
    fits = {}
    for name, run in runs.items():
        try:
            fits[name] = run()
        except (InsufficientDataError, ParameterError) as exc:
            fits[name] = _refused(name, exc, diag.h0)
    chosen = fits.pop(chosen_method)
    return chosen, tuple(fits[m] for m in METHODS if m in fits), reason


# --------------------------------------------------------------------------------------------- repeats
def compare_repeat_k(k_values, *, tolerance: float = REPEAT_TOLERANCE) -> dict:
    """Compare the K of repeat tests of one zone; ``disagree`` when max/min - 1 exceeds ``tolerance``."""
    k = np.asarray(k_values, float)
    if k.size < 2:
        return {"n": int(k.size), "spread": 0.0, "disagree": False}
    if not (np.isfinite(k).all() and (k > 0).all()):
        raise ParameterError("K values of repeat tests must be finite and > 0")
    spread = float(k.max() / k.min() - 1.0)
    return {"n": int(k.size), "spread": spread, "disagree": spread > tolerance,
            "geomean": float(np.exp(np.log(k).mean()))}


def compare_repeats(records, *, tolerance: float | None = None) -> dict:
    """Overlay repeat records of one zone as H/H0 against time and flag disagreement.

    ``records`` is a list of (t, displacement) pairs (different H0, slug in and slug out). Each is normalised
    by its own H0 and interpolated onto a common time base from 0 to the end of the shortest record (time
    since each record's first reading). ``disagree`` when max |dH/H0| between any two exceeds ``tolerance``
    (default REPEAT_CURVE_TOLERANCE = 0.10, common practice): linear behaviour makes normalised records
    coincide, so disagreement points to non-linear (high-K, large H0) or skin effects. ``h0_dependence`` is
    'systematic' when, with three or more records, the recovery time to H/H0 = 0.5 changes monotonically with
    |H0| and the curves disagree; 'direction' when slug-in and slug-out records disagree; else 'none' or
    'unclear'.

    A flat sequence of numbers is taken as K values (the earlier form; see :func:`compare_repeat_k`).
    """
    recs = list(records) if not isinstance(records, np.ndarray) else records
    if len(recs) and np.ndim(recs[0]) == 0:
        return compare_repeat_k(recs, tolerance=REPEAT_TOLERANCE if tolerance is None else tolerance)
    tol = REPEAT_CURVE_TOLERANCE if tolerance is None else _positive("tolerance", tolerance)
    curves = []
    for i, rec in enumerate(recs):
        if len(rec) != 2:
            raise ParameterError(f"repeat record {i} must be a (t, displacement) pair")
        t, h = normalized_head(rec[0], rec[1])
        h0 = float(np.asarray(rec[1], float)[np.argsort(np.asarray(rec[0], float), kind="stable")][0])
        curves.append((t - t[0], h, h0))
    out = {"n": len(curves), "h0": [c[2] for c in curves],
           "direction": ["in" if c[2] > 0 else "out" for c in curves], "tolerance": tol,
           "max_difference": 0.0, "disagree": False, "t_half_s": [], "h0_dependence": "none"}
    for t, h, _ in curves:
        below = np.flatnonzero(h <= 0.5)
        if below.size and below[0] > 0:
            j = below[0]
            out["t_half_s"].append(float(t[j - 1] + (t[j] - t[j - 1]) * (h[j - 1] - 0.5) / (h[j - 1] - h[j])))
        else:
            out["t_half_s"].append(float(t[below[0]]) if below.size else None)
    if len(curves) < 2:
        return out
    end = min(c[0][-1] for c in curves)
    if not end > 0:
        raise ParameterError("repeat records share no time span")
    grid = np.linspace(0.0, end, 400)
    stack = np.array([np.interp(grid, t, h) for t, h, _ in curves])
    diff = stack.max(axis=0) - stack.min(axis=0)
    out["max_difference"] = float(diff.max())
    out["at_time_s"] = float(grid[int(diff.argmax())])
    out["disagree"] = out["max_difference"] > tol
    if out["disagree"]:
        th = out["t_half_s"]
        dirs = set(out["direction"])
        if len(curves) >= 3 and all(v is not None for v in th):
            order = np.argsort(np.abs(out["h0"]))
            seq = np.asarray(th, float)[order]
            steps = np.diff(seq)
            out["h0_dependence"] = "systematic" if (steps > 0).all() or (steps < 0).all() else "unclear"
        else:
            out["h0_dependence"] = "unclear"
        if len(dirs) == 2:
            ins = stack[[d == "in" for d in out["direction"]]]
            outs = stack[[d == "out" for d in out["direction"]]]
            gap = np.abs(ins.mean(axis=0) - outs.mean(axis=0)).max()
            if gap > tol and out["h0_dependence"] != "systematic":
                out["h0_dependence"] = "direction"
        out["note"] = ("normalised records of one zone should coincide; they differ by "
                       f"{out['max_difference']:.2f} of H0 (tolerance {tol:g}): look for non-linear (high-K, large "
                       "H0) or skin effects, or an imprecise H0")
    return out


# --------------------------------------------------------------------------------------------- older forms
def hvorslev_k(t, displacement, *, casing_radius: float, screen_length: float, well_radius: float,
               window=HVORSLEV_RANGE, h0: float | None = None) -> dict:
    """Dict form of :func:`hvorslev` (K from the slope; ``t0`` = -1/slope), kept for callers of the older API."""
    fit = hvorslev(t, displacement, casing_radius=casing_radius, well_radius=well_radius,
                   screen_length=screen_length, window=window, h0=h0)
    return {"method": "Hvorslev (1951)", "k": fit.k, "t0": fit.details["time_lag_s"],
            "shape_ok": fit.shape["simple_form_valid"],
            "fit": {"slope": fit.details["slope"], "intercept": fit.details["intercept"], "r2": fit.r2,
                    "n": fit.n_points, "t_from": fit.t_window[0], "t_to": fit.t_window[1],
                    "window": list(fit.window), "residual_pattern": fit.residual_pattern},
            "problems": list(fit.problems)}


def bouwer_rice_k(t, displacement, *, casing_radius: float, well_radius: float, screen_length: float, lw: float,
                  aquifer_thickness: float, window=BOUWER_RICE_RANGE, h0: float | None = None) -> dict:
    """Dict form of :func:`bouwer_rice`, kept for callers of the older API."""
    fit = bouwer_rice(t, displacement, casing_radius=casing_radius, well_radius=well_radius,
                      screen_length=screen_length, lw=lw, aquifer_thickness=aquifer_thickness, window=window, h0=h0)
    return {"method": "Bouwer and Rice (1976)", "k": fit.k, "ln_re_rw": fit.details["ln_re_rw"],
            "fit": {"slope": fit.details["slope"], "intercept": fit.details["intercept"], "r2": fit.r2,
                    "n": fit.n_points, "t_from": fit.t_window[0], "t_to": fit.t_window[1],
                    "window": list(fit.window), "residual_pattern": fit.residual_pattern},
            "problems": list(fit.problems)}
