"""Slug-test reduction against the Hvorslev and Bouwer-Rice definitions and synthetic recoveries."""

import math

import numpy as np
import pytest

from hydroatlas.errors import InsufficientDataError, ParameterError
from hydroatlas.slug import (bouwer_rice_k, bouwer_rice_ln_re_rw, compare_repeats, fit_recovery, hvorslev_k,
                             hvorslev_k_from_t0, normalized_head)


def test_hvorslev_computed_case():
    """computed (VERIFY.md, Slug tests): r_c 0.0254 m, R 0.0508 m, L 1.524 m, T0 300 s give K = 2.3997e-6 m/s."""
    k = hvorslev_k_from_t0(300.0, casing_radius=0.0254, screen_length=1.524, well_radius=0.0508)
    assert k == pytest.approx(2.3997e-6, rel=5e-5)


def test_hvorslev_recovers_k_of_a_synthetic_test():
    """Analytic: Hvorslev's model is H/H0 = exp(-t/T0); a record made from a known K gives it back."""
    rc, L, R, k_true = 0.0254, 1.524, 0.0508, 3.0e-6
    t0 = rc * rc * math.log(L / R) / (2 * L * k_true)
    t = np.linspace(0, 4 * t0, 200)
    disp = -0.8 * np.exp(-t / t0)  # a slug-out test: displacement below static
    res = hvorslev_k(t, disp, casing_radius=rc, screen_length=L, well_radius=R)
    assert res["k"] == pytest.approx(k_true, rel=1e-9)
    assert res["t0"] == pytest.approx(t0, rel=1e-9) and res["shape_ok"]
    assert res["fit"]["window"] == [0.15, 0.25] and res["fit"]["r2"] == pytest.approx(1.0)


def test_bouwer_rice_ln_re_rw_computed_case():
    """computed (VERIFY.md, Slug tests): r_w 0.1016 m, Le 3.048 m, Lw 6 m, H 15 m give ln(Re/rw) = 2.4391."""
    v = bouwer_rice_ln_re_rw(well_radius=0.1016, screen_length=3.048, lw=6.0, aquifer_thickness=15.0)
    assert v == pytest.approx(2.4391, abs=5e-4)


def test_bouwer_rice_log_cap_and_full_penetration():
    """from memory (Bouwer and Rice 1976): ln((H - Lw)/rw) is capped at 6; H = Lw uses the C coefficient."""
    deep = bouwer_rice_ln_re_rw(well_radius=0.05, screen_length=3.0, lw=6.0, aquifer_thickness=1e5)
    deeper = bouwer_rice_ln_re_rw(well_radius=0.05, screen_length=3.0, lw=6.0, aquifer_thickness=1e7)
    assert deep == deeper
    full = bouwer_rice_ln_re_rw(well_radius=0.05, screen_length=3.0, lw=6.0, aquifer_thickness=6.0)
    # a unit continuing below the screen speeds recovery: smaller ln(Re/rw) than full penetration
    assert 0 < deep < full


def test_bouwer_rice_recovers_k():
    rc, rw, le, lw, h, k_true = 0.0254, 0.1016, 3.048, 6.0, 15.0, 1e-5
    ln_re = bouwer_rice_ln_re_rw(well_radius=rw, screen_length=le, lw=lw, aquifer_thickness=h)
    rate = 2 * le * k_true / (rc * rc * ln_re)  # (1/t) ln(y0/yt)
    t = np.linspace(0, 5 / rate, 300)
    res = bouwer_rice_k(t, 0.5 * np.exp(-rate * t), casing_radius=rc, well_radius=rw, screen_length=le, lw=lw,
                        aquifer_thickness=h)
    assert res["k"] == pytest.approx(k_true, rel=1e-9)
    assert res["fit"]["window"] == [0.2, 0.3]


def test_fit_window_and_errors():
    t, h = normalized_head([0, 1, 2, 3], [2.0, 1.0, 0.5, 0.25])
    assert h[0] == 1.0
    with pytest.raises(InsufficientDataError, match="recommended fitting range"):
        fit_recovery(t, h, window=(0.15, 0.25))
    with pytest.raises(ParameterError, match="window"):
        fit_recovery(t, h, window=(0.3, 0.2))
    with pytest.raises(ParameterError, match="zero"):
        normalized_head([0, 1, 2], [0.0, 1.0, 2.0])
    with pytest.raises(ParameterError, match="casing_radius"):
        hvorslev_k_from_t0(10.0, casing_radius=0.0, screen_length=1.0, well_radius=0.1)
    with pytest.raises(ParameterError, match="cannot exceed"):
        bouwer_rice_ln_re_rw(well_radius=0.1, screen_length=3.0, lw=8.0, aquifer_thickness=5.0)


def test_repeat_tests_compared():
    """common practice (no source): repeat tests that differ by more than 25 % are flagged."""
    assert compare_repeats([1.0e-5, 1.1e-5])["disagree"] is False
    flagged = compare_repeats([1.0e-5, 1.5e-5, 1.2e-5])
    assert flagged["disagree"] is True and flagged["spread"] == pytest.approx(0.5)
    assert flagged["geomean"] == pytest.approx((1.0e-5 * 1.5e-5 * 1.2e-5) ** (1 / 3))
