"""Slug-test methods against their published definitions, independent evaluations and synthetic records.

Every synthetic record below is made from the model's own equation with a known K (an analytic solution, or
scipy's solve_ivp of the model's ODE) and reduced back; the source of each relation is named beside its check.
"""

import json
import math

import mpmath
import numpy as np
import pytest
from scipy.integrate import solve_ivp

from hydroatlas.errors import InsufficientDataError, ParameterError
from hydroatlas.slug import (BR_CURVE_RANGE, HVORSLEV_RANGE, Diagnosis, SlugFit, bouwer_rice, bouwer_rice_geometry,
                             bouwer_rice_ln_re_rw, cbp, cbp_head, choose, compare_repeat_k, compare_repeats, diagnose,
                             friction_time_lag, hvorslev, hvorslev_shape, oscillating, oscillator_head, reduce)

G = 9.80665  # m/s2, standard gravity (CGPM 1901)
RC, R, L = 0.0254, 0.0508, 1.524  # VERIFY.md's Hvorslev case


def hvorslev_t0(k, *, rc=RC, length=L, radius=R):
    """Hvorslev (1951), L/R > 8: T0 = r_c^2 ln(L/R) / (2 L K) (VERIFY.md)."""
    return rc * rc * math.log(length / radius) / (2 * length * k)


def oscillator_record(k, *, rc, rw, b, lc, h0=0.5, duration=30.0, dt=0.05, nu=1.0e-6, g=G):
    """solve_ivp of (Le/g) w'' + (T0 + Tf) w' + w = 0, w(0) = h0, w'(0) = 0 (Butler 1998 model, from memory),
    T0 = rc^2 ln(b/rw) / (2 b K) (Hvorslev, b/rw > 8), Tf = 8 nu Lc / (g rc^2), Le = Lc + (b/2)(rc/rw)^2."""
    t0 = rc * rc * math.log(b / rw) / (2 * b * k)
    tf = 8 * nu * lc / (g * rc * rc)
    le = lc + 0.5 * b * (rc / rw) ** 2
    sol = solve_ivp(lambda t, y: [y[1], -(g / le) * ((t0 + tf) * y[1] + y[0])], (0.0, duration), [h0, 0.0],
                    t_eval=np.arange(0.0, duration + 1e-9, dt), rtol=1e-11, atol=1e-13, method="DOP853")
    return sol.t, sol.y[0], le, (t0 + tf) * math.sqrt(g / le)


# ------------------------------------------------------------------------------------------------- Hvorslev
@pytest.mark.parametrize("offset", [1.0, 1.1, 0.9])
@pytest.mark.parametrize("h0", [0.8, -0.5])
def test_hvorslev_k_from_the_slope_whatever_the_first_reading(offset, h0):
    """Analytic: H/H0 = exp(-t/T0) (Hvorslev 1951). A first reading 10 % high or low must not change K
    (issue 12 item 1: the intercept convention raised K by 10.5 %). Recovered to 0.5 %."""
    k_true = 3.0e-6
    t0 = hvorslev_t0(k_true)
    t = np.linspace(0, 4 * t0, 80)
    disp = h0 * np.exp(-t / t0)
    disp[0] *= offset
    fit = hvorslev(t, disp, casing_radius=RC, well_radius=R, screen_length=L)
    assert fit.k == pytest.approx(k_true, rel=5e-3)
    assert fit.method == "hvorslev" and fit.valid and fit.problems == ()
    assert fit.window == HVORSLEV_RANGE and fit.n_points >= 5 and fit.r2 == pytest.approx(1.0)
    assert fit.residual_pattern == "random"
    assert fit.shape["L/R"] == pytest.approx(30.0) and fit.shape["simple_form_valid"] is True
    assert fit.details["time_lag_s"] == pytest.approx(t0, rel=5e-3)
    lo, hi = fit.fitted["h_fit"][[0, -1]]
    assert 0.15 <= hi <= 0.25 + 1e-9 and 0.15 - 1e-9 <= lo <= 0.25


def test_hvorslev_shape_forms():
    """Hvorslev (1951, from memory): full form ln(x + sqrt(1 + x^2)), x = mL/(2R); simple ln(mL/R) for L/R > 8.
    The two agree within 0.75 % at L/R = 8 (asinh(4) = 2.0947 against ln 8 = 2.0794, computed with math).
    Image method (analytic): an intake against an impermeable boundary has half the shape factor of an
    intake of twice its length, F = 2 pi L / term."""
    full_at_8, shape8 = hvorslev_shape(well_radius=1.0, screen_length=8.0)
    simple_above, shape_above = hvorslev_shape(well_radius=1.0, screen_length=8.0001)
    assert shape8["simple_form_valid"] is False and shape_above["simple_form_valid"] is True
    assert full_at_8 == pytest.approx(math.asinh(4.0)) and simple_above == pytest.approx(math.log(8.0001))
    assert abs(full_at_8 / simple_above - 1) < 0.0075
    for length in (2.0, 5.0, 30.0):
        term_b, _ = hvorslev_shape(well_radius=0.1, screen_length=length, bounded=True)
        term_2l, _ = hvorslev_shape(well_radius=0.1, screen_length=2 * length)
        assert 2 * math.pi * length / term_b == pytest.approx(0.5 * 2 * math.pi * 2 * length / term_2l)
    # anisotropy: Hvorslev's transformed length mL, m = sqrt(Kh/Kv)
    term_m, _ = hvorslev_shape(well_radius=0.1, screen_length=1.0, anisotropy=4.0)
    term_2, _ = hvorslev_shape(well_radius=0.1, screen_length=2.0)
    assert term_m == pytest.approx(term_2)
    with pytest.raises(ParameterError, match="shorter than its radius"):
        hvorslev(np.arange(10.0), np.exp(-np.arange(10.0)), casing_radius=0.02, well_radius=0.1,
                 screen_length=0.05)
    with pytest.raises(ParameterError, match="geometry"):
        hvorslev(np.arange(10.0), np.exp(-np.arange(10.0)), casing_radius=0.02, well_radius=0.1,
                 screen_length=1.0, geometry="casing")


def test_hvorslev_short_intake_uses_the_full_form():
    """L/R = 5 < 8: K from the full shape term, recovered from a record made with it (analytic)."""
    rc, rw, b, k_true = 0.025, 0.1, 0.5, 2e-5
    t0 = rc * rc * math.asinh(b / (2 * rw)) / (2 * b * k_true)
    t = np.linspace(0, 5 * t0, 100)
    fit = hvorslev(t, 0.3 * np.exp(-t / t0), casing_radius=rc, well_radius=rw, screen_length=b, geometry="packer")
    assert fit.k == pytest.approx(k_true, rel=1e-6) and fit.shape["simple_form_valid"] is False
    assert fit.shape["geometry_kind"] == "packer"


def test_fit_window_needs_five_readings():
    """Project rule (issue 12): fewer than 5 readings in the window is refused, not fitted with r2 = 1."""
    t0 = 100.0
    t = np.array([0, 50, 100, 150, 170, 190, 400.0])  # H/H0 0.18 and 0.15 only inside 0.15-0.25
    disp = np.exp(-t / t0)
    with pytest.raises(InsufficientDataError, match="at least 5"):
        hvorslev(t, disp, casing_radius=RC, well_radius=R, screen_length=L)


def test_double_straight_line_gives_the_formation_k():
    """A filter-pack drainage segment then the formation: H/H0 = 0.5 exp(-t/Ts) + 0.5 exp(-t/Tf) with Ts << Tf.
    The recommended ranges (Butler 1998) lie on the later segment, so both methods give the formation's K
    (the intercept convention gave 2x to 12x too high, issue 12 item 1)."""
    tf = hvorslev_t0(1e-6)
    t = np.linspace(0, 4 * tf, 400)
    h = 0.5 * np.exp(-t / (tf / 20)) + 0.5 * np.exp(-t / tf)
    diag = diagnose(t, h)
    assert diag.response == "double straight line" and diag.evidence["slope_ratio"] > 1.5
    fit = hvorslev(t, h, casing_radius=RC, well_radius=R, screen_length=L)
    assert fit.k == pytest.approx(1e-6, rel=5e-3) and fit.valid
    rate = 1 / tf
    ln_re = bouwer_rice_ln_re_rw(well_radius=0.1016, screen_length=3.048, lw=6.0, aquifer_thickness=15.0)
    k_br = RC * RC * ln_re / (2 * 3.048) * rate
    br = bouwer_rice(t, h, casing_radius=RC, well_radius=0.1016, screen_length=3.048, lw=6.0, aquifer_thickness=15.0)
    assert br.k == pytest.approx(k_br, rel=5e-3)
    method, reason = choose(diag, {"confined": False, "aquifer_thickness": 15.0, "static_depth": 2.0,
                                   "screen_bottom_depth": 8.0, "screen_length": 3.048})
    assert method == "bouwer-rice" and "later segment" in reason


def test_slope_break_inside_the_window_is_flagged():
    """A break of slope at H/H0 = 0.2, inside Hvorslev's window: the fit is called curved and not valid
    (issue 12 item 2: it was stored unflagged with K 8.9x too high)."""
    t_break, t1, t2 = 160.9, 100.0, 600.0  # exp(-160.9/100) = 0.2
    t = np.linspace(0, 1500, 600)
    h = np.where(t < t_break, np.exp(-t / t1), 0.2 * np.exp(-(t - t_break) / t2))
    fit = hvorslev(t, h, casing_radius=RC, well_radius=R, screen_length=L)
    assert fit.residual_pattern == "curved" and not fit.valid
    assert any("slope break" in p for p in fit.problems)
    assert abs(fit.residual_stats["curvature"]) > 0.2


def test_noisy_record_random_residuals():
    """Seeded Gaussian reading noise (0.2 % of H0) on an exact recovery: residuals read as random, K within
    3 % (tolerance: the noise; no source)."""
    rng = np.random.default_rng(12)
    k_true = 3e-6
    t0 = hvorslev_t0(k_true)
    t = np.linspace(0, 4 * t0, 400)
    disp = np.exp(-t / t0) + rng.normal(0, 0.002, t.size)
    fit = hvorslev(t, disp, casing_radius=RC, well_radius=R, screen_length=L)
    assert fit.residual_pattern == "random" and fit.r2 > 0.95 and fit.valid
    assert fit.k == pytest.approx(k_true, rel=0.03)


# ------------------------------------------------------------------------------------------------- Bouwer-Rice
@pytest.mark.parametrize("offset", [1.0, 1.1])
def test_bouwer_rice_recovers_k_whatever_the_first_reading(offset):
    """Bouwer and Rice (1976): ln(H0/Ht) = 2 Le K t / (rc^2 ln(Re/rw)); exact record of known K back to 0.5 %."""
    rc, rw, le, lw, h, k_true = 0.0254, 0.1016, 3.048, 6.0, 15.0, 1e-5
    ln_re = bouwer_rice_ln_re_rw(well_radius=rw, screen_length=le, lw=lw, aquifer_thickness=h)
    assert ln_re == pytest.approx(2.4391, abs=5e-4)  # computed case, VERIFY.md
    rate = 2 * le * k_true / (rc * rc * ln_re)
    t = np.linspace(0, 5 / rate, 300)
    d = -0.5 * np.exp(-rate * t)
    d[0] *= offset
    fit = bouwer_rice(t, d, casing_radius=rc, well_radius=rw, screen_length=le, lw=lw, aquifer_thickness=h)
    assert fit.k == pytest.approx(k_true, rel=5e-3) and fit.valid
    assert fit.window == (0.2, 0.3) and fit.shape["penetration"] == "partial"
    assert fit.shape["curve_range"] == list(BR_CURVE_RANGE)


def test_bouwer_rice_continuous_at_full_penetration():
    """No jump at H = Lw (issue 12 item 4): ln(Re/rw) approaches the fully penetrating value as H -> Lw and
    never decreases as H shrinks towards Lw (a thinner unit below the screen cannot speed recovery)."""
    for le_rw in (10.0, 30.0, 100.0, 500.0):
        rw = 0.05
        le = le_rw * rw
        lw = le + 2.0
        full = bouwer_rice_ln_re_rw(well_radius=rw, screen_length=le, lw=lw, aquifer_thickness=lw)
        gaps = np.geomspace(1e-9, 1e4, 300) * rw
        vals = np.array([bouwer_rice_ln_re_rw(well_radius=rw, screen_length=le, lw=lw, aquifer_thickness=lw + g)
                         for g in gaps])
        assert vals[0] == pytest.approx(full, rel=1e-12)
        assert (np.diff(vals) <= 1e-12).all()  # non-increasing as the unit below thickens
        assert np.abs(np.diff(vals)).max() < 0.01 * full  # no step anywhere along the sweep
        # ln((H - Lw)/rw) capped at 6 (Bouwer and Rice 1976): no change beyond (H - Lw) = rw e^6
        assert vals[-1] == pytest.approx(bouwer_rice_ln_re_rw(well_radius=rw, screen_length=le, lw=lw,
                                                              aquifer_thickness=lw + rw * math.exp(6.0) * 1.0001))


@pytest.mark.parametrize("le_rw", [2.0, 3000.0, 5000.0])
def test_bouwer_rice_refuses_outside_the_curves(le_rw):
    """Issue 12 item 4: the A, B, C curves are not extrapolated (K was 55 % high at 3000, negative at 5000)."""
    rw = 0.01
    with pytest.raises(ParameterError, match="outside 4-1000"):
        bouwer_rice_ln_re_rw(well_radius=rw, screen_length=le_rw * rw, lw=le_rw * rw + 1, aquifer_thickness=100.0)


def test_bouwer_rice_curve_range_edges_accepted():
    for le_rw in BR_CURVE_RANGE:
        v = bouwer_rice_ln_re_rw(well_radius=0.01, screen_length=le_rw * 0.01, lw=le_rw * 0.01 + 1,
                                 aquifer_thickness=100.0)
        assert 0 < v < 20


def test_screen_across_the_water_table_uses_the_saturated_length():
    """Partially-saturated-screen rule (Bouwer 1989, from memory): Le = Lw when the water table lies in the
    screen; the result equals a screen of that saturated length."""
    rc, rw, k_true = 0.0254, 0.1016, 2e-5
    geo = bouwer_rice_geometry(well_radius=rw, screen_length=6.0, aquifer_thickness=20.0, static_depth=5.0,
                               screen_top_depth=3.0, screen_bottom_depth=9.0)
    assert geo["lw"] == pytest.approx(4.0) and geo["le"] == pytest.approx(4.0) and geo["notes"]
    ln_re = bouwer_rice_ln_re_rw(well_radius=rw, screen_length=4.0, lw=4.0, aquifer_thickness=20.0)
    rate = 2 * 4.0 * k_true / (rc * rc * ln_re)
    t = np.linspace(0, 5 / rate, 200)
    fit = bouwer_rice(t, 0.4 * np.exp(-rate * t), casing_radius=rc, well_radius=rw, screen_length=6.0,
                      aquifer_thickness=20.0, static_depth=5.0, screen_top_depth=3.0, screen_bottom_depth=9.0)
    assert fit.k == pytest.approx(k_true, rel=1e-6) and fit.shape["le"] == pytest.approx(4.0)
    # filter-pack drainage (Bouwer 1989, from memory): rc_eff^2 = (1 - n) rc^2 + n rw^2
    fit_n = bouwer_rice(t, 0.4 * np.exp(-rate * t), casing_radius=rc, well_radius=rw, screen_length=6.0,
                        aquifer_thickness=20.0, static_depth=5.0, screen_top_depth=3.0, screen_bottom_depth=9.0,
                        pack_porosity=0.3)
    assert fit_n.k / fit.k == pytest.approx((0.7 * rc * rc + 0.3 * rw * rw) / (rc * rc))


def test_confined_variant_instead_of_refusal():
    """Issue 12 item 3: a packer interval in a confined unit (static level far above the unit) was refused with
    'Lw cannot exceed H'. The confined variant measures Lw and H from the top of the unit (Bouwer and Rice
    1976: the method applies to confined aquifers that receive water from the upper confining layer)."""
    rc, rw, k_true = 0.02, 0.05, 4e-6
    with pytest.raises(ParameterError, match="confined variant"):
        bouwer_rice_ln_re_rw(well_radius=rw, screen_length=2.0, lw=60.0, aquifer_thickness=25.0)
    ln_re = bouwer_rice_ln_re_rw(well_radius=rw, screen_length=2.0, lw=12.0, aquifer_thickness=25.0)
    rate = 2 * 2.0 * k_true / (rc * rc * ln_re)
    t = np.linspace(0, 5 / rate, 200)
    fit = bouwer_rice(t, np.exp(-rate * t), casing_radius=rc, well_radius=rw, screen_length=2.0,
                      aquifer_thickness=25.0, confined=True, static_depth=3.0, screen_top_depth=60.0,
                      screen_bottom_depth=62.0, aquifer_top_depth=50.0)
    assert fit.k == pytest.approx(k_true, rel=1e-6) and fit.shape["confined"] is True and fit.valid
    with pytest.raises(InsufficientDataError, match="aquifer_top_depth"):
        bouwer_rice(t, np.exp(-rate * t), casing_radius=rc, well_radius=rw, screen_length=2.0,
                    aquifer_thickness=25.0, confined=True, screen_bottom_depth=62.0)


# ------------------------------------------------------------------------------------------------- CBP
def _cbp_mp_integral(alpha, beta):
    """Cooper, Bredehoeft and Papadopulos (1967) real integral by mpmath quadrature (independent of scipy)."""
    a, b = mpmath.mpf(alpha), mpmath.mpf(beta)

    def g(u):
        f = ((u * mpmath.besselj(0, u) - 2 * a * mpmath.besselj(1, u)) ** 2
             + (u * mpmath.bessely(0, u) - 2 * a * mpmath.bessely(1, u)) ** 2)
        return mpmath.exp(-b * u * u / a) / (u * f)
    pts = [0, mpmath.sqrt(a) / 10, mpmath.sqrt(a), 0.1, 1, 10, 100, mpmath.inf]
    return float(8 * a / mpmath.pi**2 * mpmath.quad(g, pts))


def _cbp_mp_laplace(alpha, beta):
    """Numerical Laplace inversion (Talbot) of the Laplace-domain solution, derived from the same problem:
    F(p) = K0(q) / (p K0(q) + 2 q K1(q)), q = sqrt(alpha p) (radial flow with wellbore storage)."""
    a = mpmath.mpf(alpha)

    def fp(p):
        q = mpmath.sqrt(a * p)
        k0 = mpmath.besselk(0, q)
        return k0 / (p * k0 + 2 * q * mpmath.besselk(1, q))
    return float(mpmath.invertlaplace(fp, beta, method="talbot"))


@pytest.mark.parametrize("alpha", [1e-10, 1e-5, 1e-3, 1e-1])
@pytest.mark.parametrize("beta", [1e-3, 1.0, 100.0])
def test_cbp_type_curve_against_two_independent_evaluations(alpha, beta):
    """CBP H/H0 against mpmath quadrature of the real integral and mpmath Laplace inversion (computed with
    mpmath, 20 digits: at 15 the quadrature loses 5e-8 at alpha = 1e-10); the production trapezoid rule in ln(u)
    agrees to 2e-9."""
    ours = float(cbp_head(alpha, beta))
    with mpmath.workdps(20):
        quad = _cbp_mp_integral(alpha, beta)
        lap = _cbp_mp_laplace(alpha, beta)
    assert quad == pytest.approx(lap, abs=1e-12)
    assert ours == pytest.approx(quad, abs=2e-9)


def test_cbp_type_curve_properties():
    """F(alpha, 0) = 1 (initial condition); F falls with beta; for fixed beta a smaller alpha recovers more
    slowly early on (Cooper et al. 1967 type curves, from memory of their order)."""
    assert cbp_head(1e-3, 0.0) == pytest.approx(1.0, abs=1e-8)
    f = cbp_head(1e-3, np.geomspace(1e-3, 1e3, 50))
    assert (np.diff(f) < 0).all()
    assert cbp_head(1e-8, 0.1) > cbp_head(1e-2, 0.1)
    with pytest.raises(ParameterError, match="beta"):
        cbp_head(1e-3, -1.0)


def _cbp_scipy_quad(alpha, beta):
    """The CBP real integral by scipy's adaptive quad in x = ln u (a different rule from the fitted evaluation's
    fixed trapezoid; checked against mpmath above)."""
    from scipy import integrate, special

    def g(x):
        u = math.exp(x)
        f = (u * special.j0(u) - 2 * alpha * special.j1(u)) ** 2 + (u * special.y0(u) - 2 * alpha * special.y1(u)) ** 2
        return math.exp(-beta * u * u / alpha) / f
    lo, hi = math.log(math.sqrt(alpha)) - 12, math.log(math.sqrt(alpha / beta)) + 4
    knots = np.linspace(lo, hi, 25)
    return 8 * alpha / math.pi**2 * sum(integrate.quad(g, a, b, epsabs=1e-13, epsrel=1e-11, limit=200)[0]
                                        for a, b in zip(knots[:-1], knots[1:]))


@pytest.mark.parametrize("alpha", [1e-6, 1e-3, 1e-2])
def test_cbp_fit_recovers_t(alpha):
    """A CBP record of known T (made by scipy quad, independent of the fitted evaluation) gives T back to
    0.5 %; S is reported (poorly determined, as Butler 1998 warns, from memory) within a factor 3 here."""
    rc, rw, b, k_true = 0.0127, 0.048, 10.0, 2e-6
    T = k_true * b
    S = alpha * rc * rc / (rw * rw)
    beta = np.geomspace(1e-3, 50.0, 60)
    t = np.concatenate([[0.0], beta * rc * rc / T])
    h = np.concatenate([[1.0], [_cbp_scipy_quad(alpha, x) for x in beta]])
    assert h[1:] == pytest.approx(cbp_head(alpha, beta), abs=1e-8)
    fit = cbp(t, 0.7 * h, casing_radius=rc, well_radius=rw, screen_length=b)
    assert fit.method == "cbp" and fit.t_s == pytest.approx(T, rel=5e-3)
    assert fit.k == pytest.approx(k_true, rel=5e-3)
    assert S / 3 < fit.s < S * 3
    assert fit.r2 > 0.999 and fit.fitted["h_fit"].shape == fit.fitted["t_fit"].shape


def test_cbp_refuses_a_record_that_hardly_moves():
    t = np.linspace(0, 100, 50)
    with pytest.raises(InsufficientDataError, match="20 %"):
        cbp(t, 1 - 0.001 * t, casing_radius=0.02, well_radius=0.05, screen_length=5.0)


# ------------------------------------------------------------------------------------------------- oscillating
@pytest.mark.parametrize("zeta", [0.2, 1.0, 3.0])
def test_oscillator_closed_form_matches_the_ode(zeta):
    """The damped harmonic oscillator w'' + 2 zeta w0 w' + w0^2 w = 0 (any mechanics text): closed form against
    scipy solve_ivp, underdamped, critical and overdamped."""
    w0 = 1.3
    t = np.linspace(0, 20, 200)
    sol = solve_ivp(lambda _, y: [y[1], -2 * zeta * w0 * y[1] - w0 * w0 * y[0]], (0, 20), [1.0, 0.0],
                    t_eval=t, rtol=1e-11, atol=1e-13, method="DOP853")
    assert oscillator_head(t, w0, zeta) == pytest.approx(sol.y[0], abs=1e-8)


def test_friction_term_is_hagen_poiseuille():
    """Laminar pipe loss (Hagen-Poiseuille): h_f = 32 mu L v / (rho g D^2); as a time lag per unit velocity
    with nu = mu / rho and D = 2 rc it is 8 nu L / (g rc^2)."""
    mu, rho, length, rc = 1.002e-3, 998.2, 12.0, 0.0127
    assert friction_time_lag(length, rc, kinematic_viscosity=mu / rho) == pytest.approx(
        32 * mu * length / (rho * G * (2 * rc) ** 2), rel=1e-12)


@pytest.mark.parametrize("k_true", [2e-3, 1e-3])
def test_oscillating_recovers_k_and_le(k_true):
    """solve_ivp records of the high-K model with known K, Le and friction: K and Le back to 0.5 %, the damping
    ratio equals C_D / 2 (Butler 1998: C_D the dimensionless damping)."""
    rc, rw, b, lc = 0.025, 0.025, 1.5, 10.0
    t, w, le, c_d = oscillator_record(k_true, rc=rc, rw=rw, b=b, lc=lc)
    diag = diagnose(t, w)
    assert diag.response == "underdamped" and diag.evidence["zero_crossings"] >= 1
    assert diag.evidence["damping_ratio"] == pytest.approx(c_d / 2, abs=0.05)
    fit = oscillating(t, w, casing_radius=rc, well_radius=rw, screen_length=b, column_length=lc)
    assert fit.k == pytest.approx(k_true, rel=5e-3) and fit.le == pytest.approx(le, rel=5e-3)
    assert fit.details["damping_ratio"] == pytest.approx(c_d / 2, rel=5e-3)
    assert fit.shape["le_fitted_over_expected"] == pytest.approx(1.0, rel=5e-3)
    assert fit.valid and fit.residual_pattern == "random"
    # the straight-line method refuses or is flagged on the same record (issue 12 item 2)
    chosen, alternatives, reason = reduce(t, w, {"casing_radius": rc, "well_radius": rw, "screen_length": b,
                                                  "column_length": lc})
    assert chosen.method == "oscillating" and "oscillat" in reason
    hv = [a for a in alternatives if a.method == "hvorslev"][0]
    assert hv.k is None or not hv.valid


def test_oscillating_in_feet_gives_the_same_k():
    """Units follow the inputs: the same record in feet (g = 32.174 ft/s2) gives K in ft/s = K(m/s) / 0.3048."""
    rc, rw, b, lc, k_true = 0.025, 0.025, 1.5, 10.0, 2e-3
    t, w, le, _ = oscillator_record(k_true, rc=rc, rw=rw, b=b, lc=lc)
    ft = 0.3048
    geo = {"casing_radius": rc / ft, "well_radius": rw / ft, "screen_length": b / ft, "column_length": lc / ft,
           "length_unit": "ft"}
    chosen, _, _ = reduce(t, w / ft, geo)
    assert chosen.k == pytest.approx(k_true / ft, rel=5e-3) and chosen.le == pytest.approx(le / ft, rel=5e-3)


def test_critically_damped_record():
    """Near-critical damping (C_D = 2): no zero crossing but a slow, inertial start; diagnosed as critically
    damped and reduced by the oscillating method with K within 2 %."""
    rc, rw, b, lc = 0.025, 0.025, 1.5, 10.0
    le = lc + 0.5 * b
    tf = 8e-6 * lc / (G * rc * rc)
    t0 = 2.0 * math.sqrt(le / G) - tf  # C_D = (T0 + Tf) sqrt(g/Le) = 2
    k_true = rc * rc * math.log(b / rw) / (2 * b * t0)
    t, w, _, c_d = oscillator_record(k_true, rc=rc, rw=rw, b=b, lc=lc, duration=40.0)
    assert c_d == pytest.approx(2.0)
    diag = diagnose(t, w)
    assert diag.response == "critically damped" and diag.evidence["slope_ratio"] < 0.67
    chosen, _, reason = reduce(t, w, {"casing_radius": rc, "well_radius": rw, "screen_length": b,
                                      "column_length": lc})
    assert chosen.method == "oscillating" and "critically damped" in reason
    assert chosen.k == pytest.approx(k_true, rel=0.02)


def test_oscillator_model_reduces_to_hvorslev_when_inertia_is_negligible():
    """Butler (1998, from memory): with a short water column the oscillator model becomes Hvorslev's
    first-order recovery; Hvorslev on such a record gives the model's K within 0.5 %."""
    rc, rw, b, k_true = 0.0254, 0.0508, 1.524, 3e-6
    t0 = hvorslev_t0(k_true, rc=rc, length=b, radius=rw)
    le = 0.01
    sol = solve_ivp(lambda _, y: [y[1], -(G / le) * (t0 * y[1] + y[0])], (0, 4 * t0), [0.6, 0.0],
                    t_eval=np.linspace(0, 4 * t0, 200), rtol=1e-10, atol=1e-13, method="Radau")
    fit = hvorslev(sol.t, sol.y[0], casing_radius=rc, well_radius=rw, screen_length=b)
    assert fit.k == pytest.approx(k_true, rel=5e-3) and fit.valid


# ------------------------------------------------------------------------------------------------- diagnosis, choice
def test_diagnose_overdamped_and_incomplete():
    t0 = hvorslev_t0(3e-6)
    t = np.linspace(0, 4 * t0, 60)
    d = diagnose(t, 0.8 * np.exp(-t / t0))
    assert isinstance(d, Diagnosis) and d.response == "overdamped" and d.h0 == 0.8
    assert d.evidence["slope_ratio"] == pytest.approx(1.0, rel=1e-6) and d.n_points == 60
    short = t < 0.8 * t0  # ends at H/H0 = 0.45
    inc = diagnose(t[short], 0.8 * np.exp(-t[short] / t0))
    assert inc.response == "incomplete recovery" and inc.final_fraction > 0.4
    method, reason = choose(inc, {"confined": False})
    assert method == "hvorslev" and "above the recommended ranges" in reason
    chosen, alternatives, _ = reduce(t[short], 0.8 * np.exp(-t[short] / t0),
                                     {"casing_radius": RC, "well_radius": R, "screen_length": L})
    assert chosen.k is None and not chosen.valid and "at least 5" in chosen.problems[0]
    assert alternatives == ()
    json.dumps(chosen.as_dict())


def test_choose_by_geometry():
    over = Diagnosis("overdamped", 1.0, 0.01, 50)
    assert choose(over, {"confined": True, "aquifer_thickness": 10.0, "screen_length": 10.0})[0] == "cbp"
    m, why = choose(over, {"confined": True, "aquifer_thickness": 30.0, "screen_length": 3.0,
                           "geometry_kind": "packer"})
    assert m == "hvorslev" and "packer" in why
    assert choose(over, {"confined": False, "aquifer_thickness": 30.0, "static_depth": 3.0,
                         "screen_bottom_depth": 12.0, "screen_length": 3.0})[0] == "bouwer-rice"
    assert choose(over, {"confined": False, "screen_length": 3.0})[0] == "hvorslev"


def test_reduce_keeps_alternatives_and_refuses_bad_input():
    rc, rw, le, k_true = 0.0254, 0.1016, 3.048, 1e-5
    geometry = {"casing_radius": rc, "well_radius": rw, "screen_length": le, "aquifer_thickness": 15.0,
                "static_depth": 2.0, "screen_top_depth": 4.952, "screen_bottom_depth": 8.0, "confined": False,
                "geometry_kind": "screen"}
    ln_re = bouwer_rice_ln_re_rw(well_radius=rw, screen_length=le, lw=6.0, aquifer_thickness=15.0)
    rate = 2 * le * k_true / (rc * rc * ln_re)
    t = np.linspace(0, 5 / rate, 300)
    chosen, alternatives, reason = reduce(t, 0.5 * np.exp(-rate * t), geometry)
    assert chosen.method == "bouwer-rice" and chosen.k == pytest.approx(k_true, rel=1e-6)
    assert [a.method for a in alternatives] == ["hvorslev"] and alternatives[0].k > 0
    assert "water table" in reason
    forced, alts, why = reduce(t, 0.5 * np.exp(-rate * t), geometry, method="hvorslev")
    assert forced.method == "hvorslev" and [a.method for a in alts] == ["bouwer-rice"] and "hvorslev" in why
    with pytest.raises(ParameterError, match="method"):
        reduce(t, 0.5 * np.exp(-rate * t), geometry, method="fast")
    with pytest.raises(ParameterError, match="casing_radius"):
        reduce(t, 0.5 * np.exp(-rate * t), {"well_radius": rw, "screen_length": le})
    with pytest.raises(ParameterError, match="method"):
        SlugFit(method="other", k=1.0)


# ------------------------------------------------------------------------------------------------- repeats
def test_repeats_that_agree():
    """Linear response: records of different H0, slug in and out, coincide once normalised."""
    t0 = 120.0
    recs = [(np.linspace(0, 600, 61), h0 * np.exp(-np.linspace(0, 600, 61) / t0)) for h0 in (0.3, 0.9, -0.6)]
    out = compare_repeats(recs)
    assert out["disagree"] is False and out["max_difference"] < 1e-12 and out["h0"] == [0.3, 0.9, -0.6]
    assert out["direction"] == ["in", "in", "out"] and out["h0_dependence"] == "none"
    assert out["t_half_s"][0] == pytest.approx(t0 * math.log(2), rel=1e-2)


def test_repeats_with_systematic_h0_dependence():
    """A non-linear well (recovery slower at larger H0) is flagged: max |dH/H0| > 0.1 (common practice)."""
    recs = []
    for h0 in (0.2, 0.5, 1.0):
        t = np.linspace(0, 600, 121)
        recs.append((t, h0 * np.exp(-t / (100.0 * (1 + h0)))))
    out = compare_repeats(recs)
    assert out["disagree"] is True and out["max_difference"] > 0.1 and out["tolerance"] == 0.1
    assert out["h0_dependence"] == "systematic" and "non-linear" in out["note"]
    direction = compare_repeats([(recs[0][0], recs[0][1]), (recs[2][0], -recs[2][1])])
    assert direction["disagree"] is True and direction["h0_dependence"] == "direction"


def test_repeat_k_comparison_kept():
    """common practice (no source): repeat K values that differ by more than 25 % are flagged."""
    assert compare_repeat_k([1.0e-5, 1.1e-5])["disagree"] is False
    assert compare_repeats([1.0e-5, 1.5e-5])["disagree"] is True
