"""Pumping-well drawdown (hydroatlas.pumping) against published tables, worked examples and analytic facts.

Every check names its source beside it. The well and aquifer values in the
superposition tests are invented (no real place or data).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import exp1

from hydroatlas.errors import ParameterError
from hydroatlas.pumping import (
    DEFAULT_R_MIN,
    EULER_GAMMA,
    _TABLE,
    _U_HI,
    _U_LO,
    _w_table_array,
    cooper_jacob_drawdown,
    full_penetrations,
    history_terms,
    superpose_drawdown,
    superpose_drawdown_grid,
    theis_drawdown,
    thiem_transmissivity,
    well_function,
)

# Exact unit definitions, from memory: international foot (1959) 0.3048 m exactly;
# US gallon 231 in^3 = 0.133680556 ft^3 = 3.785411784e-3 m^3 exactly.
FT = 0.3048
GAL_M3 = 3.785411784e-3
GAL_FT3 = 231.0 / 12.0**3  # 0.13368055...


def w_tab(u):
    """The table-based W(u) that the superposition kernels use."""
    return _w_table_array(np.ascontiguousarray(u, dtype=float), _TABLE)


# ---------------------------------------------------------------------------
# W(u)
# ---------------------------------------------------------------------------

# source: Huisman (1972), Table 4.1 (values of W(u)), as reproduced beside
# Srivastava and Guzman-Guzman (1998), Ground Water 36(5). (u, W, published rounding step)
HUISMAN = [
    (1e-15, 33.9616, 1e-4),
    (1e-10, 22.4486, 1e-4),
    (1e-5, 10.9357, 1e-4),
    (1.0, 0.2194, 1e-4),
    (2.0, 0.04890, 1e-5),
    (5.0, 0.001148, 1e-6),
    (9.9, 4.637e-6, 1e-9),
]


@pytest.mark.parametrize("u, w, step", HUISMAN)
def test_well_function_published_table(u, w, step):
    """source: Huisman (1972), Table 4.1, reproduced beside Srivastava and Guzman-Guzman (1998):
    W(u) agrees with the tabulated value to the published rounding (half a unit of the last digit)."""
    assert abs(well_function(u) - w) <= 0.5 * step * (1 + 1e-9)


@pytest.mark.parametrize("u, w, step", HUISMAN)
def test_table_kernel_published_table(u, w, step):
    """source: Huisman (1972), Table 4.1, as above, for the tabulated W inside the superposition
    kernel (u = 1e-15 falls in its small-u series branch, the others in the interpolation table)."""
    assert abs(w_tab([u])[0] - w) <= 0.5 * step * (1 + 1e-9)


# computed with scipy (scipy.special.exp1), quoted to 6 significant digits.
SCIPY_W = [(1e-4, 8.63322), (1e-3, 6.33154), (1e-2, 4.03793), (0.1, 1.82292), (0.5, 0.559774)]


@pytest.mark.parametrize("u, w", SCIPY_W)
def test_well_function_against_mpmath(u, w):
    """computed with scipy (the quoted values), cross-checked against mpmath.e1 at 30 digits
    (a general-purpose arbitrary-precision library, test-only reference)."""
    mpmath = pytest.importorskip("mpmath")
    with mpmath.workdps(30):
        ref = float(mpmath.e1(u))
    assert well_function(u) == pytest.approx(ref, rel=1e-13)
    assert ref == pytest.approx(w, rel=6e-6)  # the quoted 6 digits


def test_well_function_against_mpmath_wide_range():
    """source: mpmath.e1 (general-purpose reference library) on a log grid of u from 1e-14 to 50."""
    mpmath = pytest.importorskip("mpmath")
    us = np.logspace(-14, math.log10(50.0), 57)
    with mpmath.workdps(30):
        ref = np.array([float(mpmath.e1(u)) for u in us])
    np.testing.assert_allclose(well_function(us), ref, rtol=1e-12)


def test_well_function_series():
    """from memory: the convergent series W(u) = -gamma - ln u - sum_{n>=1} (-u)^n / (n n!)
    (Abramowitz and Stegun 5.1.11), summed here to 60 terms."""
    for u in [1e-8, 1e-3, 0.05, 0.3, 1.0, 3.0]:
        series = -EULER_GAMMA - math.log(u) - sum((-u) ** n / (n * math.factorial(n)) for n in range(1, 60))
        assert well_function(u) == pytest.approx(series, rel=1e-11)


def test_well_function_shapes_and_limits():
    """common practice (no source): scalar in gives a float, arrays keep their shape; W(inf) = 0;
    W falls monotonically."""
    assert isinstance(well_function(0.1), float)
    a = np.full((3, 4), 0.2)
    assert well_function(a).shape == (3, 4)
    assert well_function(np.inf) == 0.0
    w = well_function(np.logspace(-10, 1.5, 200))
    assert np.all(np.diff(w) < 0)


@pytest.mark.parametrize("bad", [0.0, -1.0, np.nan, [0.1, -0.2]])
def test_well_function_refuses_nonpositive(bad):
    with pytest.raises(ParameterError, match="u must be > 0"):
        well_function(bad)


# ---------------------------------------------------------------------------
# Theis and Cooper-Jacob
# ---------------------------------------------------------------------------

def test_theis_kuo_example_3_13_us_units():
    """source: Kuo, Practical Design Calculations for Groundwater and Soil Remediation, 2nd ed.,
    Example 3.13: b = 30 ft, Q = 20 gpm, K = 400 gpd/ft2, S = 0.005, r = 20 ft, t = 1 d give
    T = 12,000 gpd/ft, u = 3.12e-4, W = 7.50; the drawdown computed from these is s = 1.432 ft.
    Worked in ft and d."""
    b, K_gpd_ft2, S, r, t = 30.0, 400.0, 0.005, 20.0, 1.0
    Q = 20.0 * 1440.0 * GAL_FT3  # gal/min -> ft3/d
    T_gpd_ft = K_gpd_ft2 * b
    assert T_gpd_ft == pytest.approx(12_000.0)
    T = T_gpd_ft * GAL_FT3  # gal/d/ft -> ft2/d
    u = r**2 * S / (4.0 * T * t)
    assert float(f"{u:.3g}") == 3.12e-4
    assert round(well_function(u), 2) == 7.50
    s = theis_drawdown(r, t, Q=Q, T=T, S=S)
    assert s == pytest.approx(1.432, rel=0.005)


def test_theis_kuo_example_3_13_si_units():
    """source: Kuo (2nd ed.), Example 3.13, as above, worked in m and d: same drawdown, 1.432 ft."""
    Q = 20.0 * 1440.0 * GAL_M3                  # m3/d
    T = 400.0 * GAL_M3 / FT**2 * 30.0 * FT      # (gal/d/ft2 -> m/d) * b in m = m2/d
    s_m = theis_drawdown(20.0 * FT, 1.0, Q=Q, T=T, S=0.005)
    assert s_m / FT == pytest.approx(1.432, rel=0.005)
    # consistency of the two unit systems (common practice (no source)): the result does not depend on them
    s_ft = theis_drawdown(20.0, 1.0, Q=20.0 * 1440.0 * GAL_FT3, T=12_000.0 * GAL_FT3, S=0.005)
    assert s_m / FT == pytest.approx(s_ft, rel=1e-12)


def test_unit_constants_against_pint():
    """source: pint's unit definitions (general-purpose reference library): the exact gallon and foot used above."""
    pint = pytest.importorskip("pint")
    ureg = pint.UnitRegistry()
    assert (1 * ureg.gallon).to("m**3").magnitude == pytest.approx(GAL_M3, rel=1e-12)
    assert (1 * ureg.gallon).to("ft**3").magnitude == pytest.approx(0.133680556, rel=1e-8)
    assert (1 * ureg.ft).to("m").magnitude == pytest.approx(FT, rel=1e-15)


def test_theis_solves_radial_diffusion_equation():
    """from memory: the Theis drawdown solves S/T ds/dt = d2s/dr2 + (1/r) ds/dr (radial flow in a confined
    aquifer); checked with central finite differences at several (r, t) with u from 0.05 to 2.5 (at
    much smaller u the two sides are near 0 and the difference quotients lose their digits)."""
    Q, T, S = 800.0, 250.0, 2e-4
    for r, t in [(50.0, 0.01), (100.0, 0.01), (300.0, 0.02), (500.0, 0.02)]:
        hr, ht = 1e-3 * r, 1e-3 * t
        s = lambda rr, tt: theis_drawdown(rr, tt, Q=Q, T=T, S=S)  # noqa: E731
        ds_dt = (s(r, t + ht) - s(r, t - ht)) / (2 * ht)
        ds_dr = (s(r + hr, t) - s(r - hr, t)) / (2 * hr)
        d2s_dr2 = (s(r + hr, t) - 2 * s(r, t) + s(r - hr, t)) / hr**2
        lhs = S / T * ds_dt
        rhs = d2s_dr2 + ds_dr / r
        assert lhs == pytest.approx(rhs, rel=1e-4)


def test_theis_well_discharge():
    """from memory: Darcy flow towards the well, 2 pi r T (-ds/dr) = Q exp(-u), tends to Q at the well;
    checked with a central difference in r."""
    Q, T, S, t = 1200.0, 400.0, 1e-3, 0.5
    for r in [0.1, 2.0, 50.0]:
        h = 1e-4 * r
        ds_dr = (theis_drawdown(r + h, t, Q=Q, T=T, S=S) - theis_drawdown(r - h, t, Q=Q, T=T, S=S)) / (2 * h)
        u = r**2 * S / (4 * T * t)
        assert -2 * math.pi * r * T * ds_dr == pytest.approx(Q * math.exp(-u), rel=1e-6)


def test_theis_broadcast_sign_and_zero_rate():
    """common practice (no source): r and t broadcast; injection (Q < 0) mirrors pumping; Q = 0 gives 0;
    drawdown grows with t and falls with r."""
    r = np.array([1.0, 10.0, 100.0])[:, None]
    t = np.array([0.1, 1.0, 10.0, 100.0])[None, :]
    s = theis_drawdown(r, t, Q=500.0, T=100.0, S=1e-4)
    assert s.shape == (3, 4)
    assert np.all(np.diff(s, axis=1) > 0) and np.all(np.diff(s, axis=0) < 0)
    np.testing.assert_allclose(theis_drawdown(r, t, Q=-500.0, T=100.0, S=1e-4), -s, rtol=0)
    assert np.all(theis_drawdown(r, t, Q=0.0, T=100.0, S=1e-4) == 0.0)
    assert isinstance(theis_drawdown(5.0, 1.0, Q=1.0, T=1.0, S=1e-4), float)


@pytest.mark.parametrize("kw, name", [
    (dict(r=0.0), "r"), (dict(r=-1.0), "r"), (dict(t=0.0), "t"), (dict(t=-2.0), "t"),
    (dict(T=0.0), "T"), (dict(T=-1.0), "T"), (dict(S=0.0), "S"), (dict(S=-1e-4), "S"),
    (dict(Q=np.nan), "Q"), (dict(r=np.nan), "r"),
])
@pytest.mark.parametrize("fn", [theis_drawdown, cooper_jacob_drawdown])
def test_theis_and_cooper_jacob_refuse_bad_arguments(fn, kw, name):
    args = dict(r=10.0, t=1.0, Q=100.0, T=50.0, S=1e-4)
    args.update(kw)
    with pytest.raises(ParameterError, match=rf"^{name} must be"):
        fn(args.pop("r"), args.pop("t"), **args)


def test_theis_error_message_names_value():
    with pytest.raises(ParameterError, match=r"T must be > 0 and finite; got -1"):
        theis_drawdown(1.0, 1.0, Q=1.0, T=-1, S=1e-4)


@pytest.mark.parametrize("u, percent, decimals", [(0.01, 0.25, 2), (0.05, 2.0, 1), (0.1, 5.4, 1)])
def test_cooper_jacob_relative_error(u, percent, decimals):
    """from memory: the textbook statement that Cooper-Jacob underestimates the Theis drawdown by about
    0.25 % at u = 0.01, 2 % at u = 0.05 and 5 % at u = 0.1; the digits (0.25, 2.0, 5.4) were computed
    from W(u) and are checked to that rounding. Relative error = (s_theis - s_cj) / s_theis, positive
    because the dropped series remainder u - u^2/4 + ... is positive for small u."""
    T, S, t = 1.0, 1.0, 1.0
    r = 2.0 * math.sqrt(u)  # u = r^2 S / (4 T t)
    s_th = theis_drawdown(r, t, Q=1.0, T=T, S=S)
    s_cj = cooper_jacob_drawdown(r, t, Q=1.0, T=T, S=S)
    err = (s_th - s_cj) / s_th
    assert err > 0
    assert round(100.0 * err, decimals) == percent


def test_cooper_jacob_remainder_is_the_series_tail():
    """from memory: W(u) - (-gamma - ln u) = u - u^2/4 + u^3/18 - u^4/96 + ... (Abramowitz and Stegun
    5.1.11), so s_theis - s_cj = Q / (4 pi T) times that tail."""
    Q, T, S, t = 300.0, 80.0, 5e-4, 2.0
    r = np.array([0.5, 5.0, 20.0, 60.0])
    u = r**2 * S / (4 * T * t)
    tail = sum(-((-u) ** n) / (n * math.factorial(n)) for n in range(1, 40))
    diff = theis_drawdown(r, t, Q=Q, T=T, S=S) - cooper_jacob_drawdown(r, t, Q=Q, T=T, S=S)
    np.testing.assert_allclose(diff, Q / (4 * math.pi * T) * tail, rtol=1e-8, atol=1e-15)
    assert cooper_jacob_drawdown(r, t, Q=Q, T=T, S=S).shape == r.shape


# ---------------------------------------------------------------------------
# Thiem
# ---------------------------------------------------------------------------

def test_thiem_oude_korendijk():
    """source: Kruseman and de Ridder (1994), Analysis and Evaluation of Pumping Test Data, the Oude
    Korendijk test, Thiem's method, as reproduced: Q = 788 m3/d, s = 1.088 m at 30 m and 0.716 m at
    90 m give T = 370.4 m2/d (checked to that rounding)."""
    T = thiem_transmissivity(788.0, 30.0, 1.088, 90.0, 0.716)
    assert abs(T - 370.4) <= 0.05


def test_thiem_recovers_theis_transmissivity_at_late_time():
    """from memory: at large t the Theis drawdown difference between two radii tends to the steady
    Thiem value Q ln(r2/r1) / (2 pi T) (Cooper-Jacob limit), so Thiem recovers T."""
    Q, T, S = 1000.0, 300.0, 1e-4
    t = 1e3  # u ~ 1e-8 at 100 m
    s1 = theis_drawdown(10.0, t, Q=Q, T=T, S=S)
    s2 = theis_drawdown(100.0, t, Q=Q, T=T, S=S)
    assert thiem_transmissivity(Q, 10.0, s1, 100.0, s2) == pytest.approx(T, rel=1e-6)
    # order of the wells does not matter, and injection with rises gives the same T
    assert thiem_transmissivity(Q, 100.0, s2, 10.0, s1) == pytest.approx(T, rel=1e-6)
    assert thiem_transmissivity(-Q, 10.0, -s1, 100.0, -s2) == pytest.approx(T, rel=1e-6)


@pytest.mark.parametrize("args, match", [
    ((788.0, 30.0, 1.0, 30.0, 0.7), "r1 and r2 must differ"),
    ((788.0, 30.0, 1.0, 90.0, 1.0), "s1 and s2 must differ"),
    ((788.0, -30.0, 1.0, 90.0, 0.7), "r1 must be > 0"),
    ((788.0, 30.0, 1.0, 0.0, 0.7), "r2 must be > 0"),
    ((0.0, 30.0, 1.0, 90.0, 0.7), "Q must not be 0"),
    ((788.0, 30.0, 0.7, 90.0, 1.0), "drawdowns must decrease"),
    ((np.inf, 30.0, 1.0, 90.0, 0.7), "Q must be finite"),
])
def test_thiem_refuses_bad_arguments(args, match):
    with pytest.raises(ParameterError, match=match):
        thiem_transmissivity(*args)


# ---------------------------------------------------------------------------
# Superposition and the tabulated W(u)
# ---------------------------------------------------------------------------

def test_table_against_scipy_random_u():
    """source: scipy.special.exp1 (general-purpose reference library): the tabulated W has relative
    error < 1e-6 wherever W > 1e-4, on 200,000 log-uniform random u in 1e-10..30, and an absolute
    error < 1e-9 everywhere."""
    rng = np.random.default_rng(11)
    u = 10.0 ** rng.uniform(-10, math.log10(30.0), 200_000)
    ref = exp1(u)
    w = w_tab(u)
    big = ref > 1e-4
    assert big.sum() > 100_000
    assert np.max(np.abs(w[big] - ref[big]) / ref[big]) < 1e-6
    assert np.max(np.abs(w - ref)) < 1e-9


def test_table_edges():
    """source: scipy.special.exp1: the small-u series below the table, both sides of the lower table
    edge and of interval and octave boundaries, and W = 0 from u = 64 on (where exp1 < 3e-30)."""
    assert 1e-13 < _U_LO <= 1e-12 and 60.0 <= _U_HI <= 64.0
    u = np.array([1e-300, 1e-20, _U_LO * (1 - 1e-12), _U_LO, _U_LO * (1 + 1e-12), 1e-11,
                  0.5, np.nextafter(0.5, 0), np.nextafter(0.5, 1), 1.0 + 1 / 128, np.nextafter(1.0 + 1 / 128, 0),
                  59.0, np.nextafter(_U_HI, 0)])
    np.testing.assert_allclose(w_tab(u), exp1(u), rtol=1e-8, atol=1e-29)
    assert exp1(_U_HI) < 3e-30
    np.testing.assert_array_equal(w_tab(np.array([_U_HI, 65.0, 1e6, np.inf])), 0.0)


def test_superpose_one_well_equals_theis():
    """source: scipy.special.exp1 via theis_drawdown: one well through the kernel equals the Theis
    drawdown to 1e-6 relative at random distances."""
    rng = np.random.default_rng(3)
    dist = 10.0 ** rng.uniform(-2, math.log10(400.0), 5000)
    ang = rng.uniform(0, 2 * math.pi, 5000)
    pts = np.column_stack([dist * np.cos(ang), dist * np.sin(ang)])
    Q, T, S, t = 1500.0, 50.0, 0.1, 1.0  # u = 1 at r = 44.7
    s = superpose_drawdown(pts, [[0.0, 0.0]], [Q], t, T=T, S=S)
    ref = theis_drawdown(np.hypot(pts[:, 0], pts[:, 1]), t, Q=Q, T=T, S=S)
    assert ref.min() < 1e-6 < 1e-1 < ref.max()  # the points span far and near field
    np.testing.assert_allclose(s, ref, rtol=1e-6, atol=1e-12)


def test_superpose_two_wells_is_sum_of_theis():
    """from memory: the flow equation is linear, so drawdowns from several wells add (superposition);
    two wells (one injecting) at a set of points."""
    wells = np.array([[100.0, 200.0], [-350.0, 40.0]])
    rates = np.array([900.0, -400.0])
    pts = np.array([[0.0, 0.0], [100.0, 210.0], [-300.0, 0.0], [1000.0, -800.0], [-20.0, 500.0]])
    T, S, t = 120.0, 3e-4, 0.75
    s = superpose_drawdown(pts, wells, rates, t, T=T, S=S)
    ref = sum(theis_drawdown(np.hypot(*(pts - w).T), t, Q=q, T=T, S=S) for w, q in zip(wells, rates))
    np.testing.assert_allclose(s, ref, rtol=1e-6)
    assert s.shape == (5,)


def test_grid_equals_points():
    """common practice (no source): the grid function is the point function at (x_centers[j], y_centers[i])."""
    rng = np.random.default_rng(7)
    x = np.linspace(-500, 1500, 37)
    y = np.linspace(900, -300, 23)  # north first
    wells = rng.uniform(-400, 1400, (6, 2))
    wells[0] = (x[4], y[5])  # one well exactly on a cell centre: r_min clamping in both paths
    rates = rng.uniform(-300, 1200, 6)
    kw = dict(T=220.0, S=1e-3, r_min=0.15)
    g = superpose_drawdown_grid(x, y, wells, rates, 2.0, **kw)
    xx, yy = np.meshgrid(x, y)
    p = superpose_drawdown(np.column_stack([xx.ravel(), yy.ravel()]), wells, rates, 2.0, **kw)
    assert g.shape == (23, 37)
    np.testing.assert_allclose(g, p.reshape(23, 37), rtol=1e-12, atol=1e-15)


def test_grid_symmetry_and_reciprocity():
    """from memory: a single well in a homogeneous isotropic aquifer gives a radially symmetric cone, and
    drawdown depends only on the well-point distance (swapping well and point changes nothing)."""
    x = np.linspace(-1000, 1000, 41)
    g = superpose_drawdown_grid(x, x, [[0.0, 0.0]], [1000.0], 1.0, T=100.0, S=1e-4)
    np.testing.assert_allclose(g, g[::-1, :], rtol=1e-13)
    np.testing.assert_allclose(g, g[:, ::-1], rtol=1e-13)
    np.testing.assert_allclose(g, g.T, rtol=1e-13)
    a, b = np.array([[12.0, -40.0]]), np.array([[310.0, 95.0]])
    s_ab = superpose_drawdown(a, b, [700.0], 0.2, T=90.0, S=2e-4)
    s_ba = superpose_drawdown(b, a, [700.0], 0.2, T=90.0, S=2e-4)
    assert s_ab[0] == pytest.approx(s_ba[0], rel=1e-14) and s_ab[0] > 0
    # two equal wells placed symmetrically: the field is mirror-symmetric about their bisector
    g2 = superpose_drawdown_grid(x, x, [[-300.0, 100.0], [300.0, 100.0]], [500.0, 500.0], 1.0, T=100.0, S=1e-4)
    np.testing.assert_allclose(g2, g2[:, ::-1], rtol=1e-12)


def test_r_min_clamping():
    """common practice (no source): inside r_min (at the well included) the drawdown is the Theis
    drawdown at r_min, the well-face value when r_min is the well radius; default 1e-3 length units."""
    Q, T, S, t = 1000.0, 150.0, 1e-4, 1.0
    rw = 0.1
    pts = np.array([[0.0, 0.0], [0.05, 0.0], [0.0, 0.0999], [0.3, 0.0]])
    s = superpose_drawdown(pts, [[0.0, 0.0]], [Q], t, T=T, S=S, r_min=rw)
    s_rw = theis_drawdown(rw, t, Q=Q, T=T, S=S)
    np.testing.assert_allclose(s[:3], s_rw, rtol=1e-6)
    assert s[3] == pytest.approx(theis_drawdown(0.3, t, Q=Q, T=T, S=S), rel=1e-6)
    s0 = superpose_drawdown(pts[:1], [[0.0, 0.0]], [Q], t, T=T, S=S)
    assert s0[0] == pytest.approx(theis_drawdown(DEFAULT_R_MIN, t, Q=Q, T=T, S=S), rel=1e-6)
    # one radius per well
    wells = np.array([[0.0, 0.0], [500.0, 0.0]])
    s2 = superpose_drawdown(wells, wells, [Q, Q], t, T=T, S=S, r_min=[0.1, 0.3])
    ref0 = theis_drawdown(0.1, t, Q=Q, T=T, S=S) + theis_drawdown(500.0, t, Q=Q, T=T, S=S)
    ref1 = theis_drawdown(0.3, t, Q=Q, T=T, S=S) + theis_drawdown(500.0, t, Q=Q, T=T, S=S)
    np.testing.assert_allclose(s2, [ref0, ref1], rtol=1e-6)
    g = superpose_drawdown_grid([0.0, 0.2], [0.0], [[0.0, 0.0]], [Q], t, T=T, S=S, r_min=0.3)
    np.testing.assert_allclose(g, np.full((1, 2), theis_drawdown(0.3, t, Q=Q, T=T, S=S)), rtol=1e-6)


def test_superpose_empty_and_far():
    """common practice (no source): no wells gives zero drawdown; points far beyond the cone (u > 60) get 0."""
    assert np.all(superpose_drawdown([[0.0, 0.0], [1.0, 1.0]], np.empty((0, 2)), [], 1.0, T=1.0, S=1e-4) == 0)
    assert superpose_drawdown(np.empty((0, 2)), [[0.0, 0.0]], [1.0], 1.0, T=1.0, S=1e-4).shape == (0,)
    far = superpose_drawdown([[1e5, 0.0]], [[0.0, 0.0]], [1e3], 1.0, T=10.0, S=0.1)  # u = 2.5e7
    assert far[0] == 0.0


WELLS = [[0.0, 0.0], [10.0, 0.0]]


@pytest.mark.parametrize("kw, match", [
    (dict(T=0.0), "T must be > 0"),
    (dict(T=-5.0), "T must be > 0"),
    (dict(S=0.0), "S must be > 0"),
    (dict(S=-1e-4), "S must be > 0"),
    (dict(t=0.0), "t must be > 0"),
    (dict(t=-1.0), "t must be > 0"),
    (dict(t=[1.0, 2.0, 3.0]), r"t must be one number or have shape \(2,\)"),
    (dict(T=[10.0, 10.0, 10.0]), r"T must be one number or have shape \(2,\)"),
    (dict(T=[10.0, -1.0]), "T must be > 0"),
    (dict(rates=[1.0]), r"rates must have shape \(2,\)"),
    (dict(rates=[1.0, 2.0, 3.0]), r"rates must have shape \(2,\)"),
    (dict(rates=[1.0, np.nan]), "rates must be finite"),
    (dict(wells_xy=[0.0, 0.0]), r"wells_xy must have shape \(k, 2\)"),
    (dict(wells_xy=[[0.0, 0.0], [np.inf, 0.0]]), "wells_xy must be finite"),
    (dict(r_min=0.0), "r_min must be > 0"),
    (dict(r_min=[0.1, 0.1, 0.1]), r"r_min must be one number or have shape \(2,\)"),
])
def test_superpose_refuses_bad_arguments(kw, match):
    args = dict(wells_xy=WELLS, rates=[100.0, 50.0], t=1.0, T=10.0, S=1e-4, r_min=None)
    args.update(kw)
    with pytest.raises(ParameterError, match=match):
        superpose_drawdown([[1.0, 1.0]], args.pop("wells_xy"), args.pop("rates"), args.pop("t"), **args)
    args = dict(wells_xy=WELLS, rates=[100.0, 50.0], t=1.0, T=10.0, S=1e-4, r_min=None)
    args.update(kw)
    with pytest.raises(ParameterError, match=match):
        superpose_drawdown_grid([0.0, 1.0], [0.0], args.pop("wells_xy"), args.pop("rates"), args.pop("t"), **args)


def test_superpose_refuses_bad_points():
    with pytest.raises(ParameterError, match=r"xy must have shape \(m, 2\)"):
        superpose_drawdown([1.0, 2.0, 3.0], WELLS, [1.0, 1.0], 1.0, T=1.0, S=1e-4)
    with pytest.raises(ParameterError, match="xy must be finite"):
        superpose_drawdown([[np.nan, 0.0]], WELLS, [1.0, 1.0], 1.0, T=1.0, S=1e-4)
    with pytest.raises(ParameterError, match="x_centers must be 1-D"):
        superpose_drawdown_grid([[0.0, 1.0]], [0.0], WELLS, [1.0, 1.0], 1.0, T=1.0, S=1e-4)
    with pytest.raises(ParameterError, match="y_centers must be 1-D"):
        superpose_drawdown_grid([0.0, 1.0], [[0.0]], WELLS, [1.0, 1.0], 1.0, T=1.0, S=1e-4)


# ---------------------------------------------------------------------------
# per-well times and transmissivities, pumping histories, full penetrations
# ---------------------------------------------------------------------------

def test_superpose_per_well_time_and_transmissivity():
    """source: scipy.special.exp1 via theis_drawdown: with one t and one T per well, the sum is the sum of
    each well's own Theis drawdown (superposition; the wells and values are invented)."""
    wells = np.array([[0.0, 0.0], [400.0, -150.0], [-250.0, 300.0]])
    rates = np.array([800.0, 1200.0, -300.0])
    t = np.array([30.0, 2.5, 400.0])
    T = np.array([150.0, 900.0, 60.0])
    S = 2e-4
    pts = np.array([[10.0, 5.0], [380.0, -100.0], [-1000.0, 700.0], [2000.0, 0.0]])
    ref = sum(theis_drawdown(np.hypot(*(pts - w).T), tk, Q=q, T=Tk, S=S)
              for w, q, tk, Tk in zip(wells, rates, t, T))
    np.testing.assert_allclose(superpose_drawdown(pts, wells, rates, t, T=T, S=S), ref, rtol=1e-6)
    x = np.linspace(-500, 500, 11)
    g = superpose_drawdown_grid(x, x[::-1], wells, rates, t, T=T, S=S)
    xx, yy = np.meshgrid(x, x[::-1])
    ref_g = sum(theis_drawdown(np.maximum(np.hypot(xx - w[0], yy - w[1]), DEFAULT_R_MIN), tk, Q=q, T=Tk, S=S)
                for w, q, tk, Tk in zip(wells, rates, t, T))
    np.testing.assert_allclose(g, ref_g, rtol=1e-6, atol=1e-12)


def test_history_terms_recovery_is_superposition_in_time():
    """source: Theis (1935) with superposition in time (a stop is an injection of the same rate from then on),
    values from scipy.special.exp1: a well that pumped Q for 100 d and stopped 20 d ago leaves
    Q/(4 pi T) [W(u(120 d)) - W(u(20 d))]; a record not yet started gives no term."""
    idx, q, t = history_terms([500.0, 300.0, 200.0], [120.0, 50.0, -5.0], [20.0, np.nan, np.nan])
    assert idx.tolist() == [0, 1, 0] and q.tolist() == [500.0, 300.0, -500.0] and t.tolist() == [120.0, 50.0, 20.0]
    r, T, S = 75.0, 250.0, 1e-3
    s = superpose_drawdown([[r, 0.0]], np.zeros((3, 2)), q, t, T=T, S=S)[0]
    u = lambda days: r * r * S / (4 * T * days)  # noqa: E731
    expected = (500.0 * (exp1(u(120.0)) - exp1(u(20.0))) + 300.0 * exp1(u(50.0))) / (4 * math.pi * T)
    assert s == pytest.approx(expected, rel=1e-6)
    with pytest.raises(ParameterError, match="stops before it starts"):
        history_terms([1.0], [5.0], [6.0])
    with pytest.raises(ParameterError, match="one shape"):
        history_terms([1.0, 2.0], [5.0], None)


def test_full_penetrations():
    """common practice (no source): a pick shows the bottom of a unit only where the well went on below it (a
    lower unit picked, or a total depth below the pick); a bottom at the well's total depth is where drilling
    stopped, and a well without total depth or lower pick has not shown its bottom."""
    bottom = np.array([82.0, 64.0, 82.0, 79.98, 70.0, 70.0, 70.0])
    td = np.array([100.0, 64.0, np.nan, 80.0, 90.0, np.nan, 70.03])
    below = np.array([True, True, True, True, False, False, False])
    assert full_penetrations(bottom, td, below, tolerance=0.05).tolist() == [True, False, True, False, True, False,
                                                                             False]
    assert full_penetrations(bottom, td, below, tolerance=0.0).tolist() == [True, False, True, True, True, False,
                                                                            True]
    with pytest.raises(ParameterError, match="tolerance"):
        full_penetrations(bottom, td, below, tolerance=-1.0)
    with pytest.raises(ParameterError, match="one shape"):
        full_penetrations(bottom, td[:2], below, tolerance=0.1)
