"""Springflow: pairing, discharge against head, cease-flow head, trigger levels, recession, spring effects.

Checks against the outside world: the line against scipy.stats.linregress on the same pairs; the power law against
scipy.optimize.curve_fit and scipy.optimize.least_squares; the pooled recession against scipy.stats.linregress and
numpy.linalg.lstsq; interval coverage on synthetic records drawn from a known relation with noise, judged with
binomial acceptance regions from scipy.stats.binom; the drawdown at the index zone against the Theis solution with
scipy.special.exp1. The truth district (tests/truthdistrict.py) is invented data with a known relation.
"""

from __future__ import annotations

import io
import json
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import optimize, special, stats

from hydroatlas import springs as S
from hydroatlas.cli import main
from hydroatlas.errors import InsufficientDataError, ParameterError

sys.path.insert(0, str(Path(__file__).parent))
from truth_fixtures import build_truth_store, copy_store  # noqa: E402
from truthdistrict import FT_M, district_origin, make_district  # noqa: E402

SEEDS = 200


def binomial_region(n: int, p: float = 0.95, level: float = 0.99) -> tuple[int, int]:
    """Two-sided acceptance region of a binomial count (scipy.stats.binom): a correct 95 % interval covers the
    truth in this many of n independent records with probability ``level``."""
    return int(stats.binom.ppf((1 - level) / 2, n, p)), int(stats.binom.isf((1 - level) / 2, n, p))


# -- the line -----------------------------------------------------------------------------------------------------
def test_linear_fit_equals_scipy_linregress():
    """source: scipy.stats.linregress on the same pairs (slope, intercept, their standard errors, r, p)."""
    rng = np.random.default_rng(7)
    h = rng.uniform(400.0, 420.0, 37)
    q = -3000.0 + 8.0 * h + rng.normal(0.0, 15.0, h.size)
    fit = S.fit_linear(h, q)
    ref = stats.linregress(h, q)
    assert fit.b == pytest.approx(ref.slope, rel=1e-12)
    assert fit.a == pytest.approx(ref.intercept, rel=1e-12)
    assert fit.se_b == pytest.approx(ref.stderr, rel=1e-10)
    assert fit.se_a == pytest.approx(ref.intercept_stderr, rel=1e-10)
    assert fit.r2 == pytest.approx(ref.rvalue ** 2, rel=1e-12)
    assert fit.p_slope == pytest.approx(ref.pvalue, rel=1e-6, abs=1e-300)
    assert fit.head_at(0.0) == pytest.approx(-ref.intercept / ref.slope, rel=1e-12)


def test_fieller_bounds_are_where_the_confidence_band_of_the_mean_reaches_the_discharge():
    """source: textbook confidence band of the regression mean, s sqrt(1/n + (h - mean h)^2 / Sxx) (Draper and
    Smith 1998, section 3.2), with scipy.stats.t; Fieller's bounds are the heads where the band's edge is q."""
    rng = np.random.default_rng(11)
    h = rng.uniform(100.0, 110.0, 30)
    q = 2.0 * (h - 95.0) + rng.normal(0.0, 1.0, h.size)
    fit = S.fit_linear(h, q)
    t = stats.t.ppf(0.975, h.size - 2)
    sxx = np.sum((h - h.mean()) ** 2)
    for target in (0.0, 5.0, 15.0):
        lo, hi = fit.fieller(target)
        assert lo < fit.head_at(target) < hi
        for edge in (lo, hi):
            se = fit.sigma * math.sqrt(1.0 / h.size + (edge - h.mean()) ** 2 / sxx)
            assert abs(fit.predict(edge) - target) == pytest.approx(t * se, rel=1e-9)


def test_line_cease_flow_head_and_trigger_levels_cover_the_truth_in_95_percent_of_records():
    """Synthetic records from Q = 2 (h - 95) with Gaussian noise; Fieller's 95 % interval of h0 and of each
    trigger level (heads of 50, 25, 10 % of the record's median discharge, taken as known) must cover the truth in
    a count inside the 99 % binomial acceptance region of 200 records at p = 0.95 (scipy.stats.binom)."""
    a, b = -190.0, 2.0
    hits_h0, hits = 0, np.zeros(3)
    for seed in range(SEEDS):
        rng = np.random.default_rng(1000 + seed)
        h = rng.uniform(100.0, 110.0, 30)
        q = a + b * h + rng.normal(0.0, 1.0, h.size)
        rel = S.fit_relation(h, q, bootstrap=100, seed=seed)
        lo, hi = rel.linear.fieller(0.0)
        hits_h0 += lo <= -a / b <= hi
        for i, p in enumerate((50.0, 25.0, 10.0)):
            qt = rel.reference_discharge * p / 100.0
            lo, hi = rel.linear.fieller(qt)
            hits[i] += lo <= (qt - a) / b <= hi
        if rel.model == "linear":  # the relation's own intervals are Fieller's
            assert (rel.h0_low, rel.h0_high) == pytest.approx(rel.linear.fieller(0.0))
            assert rel.levels[0].low == pytest.approx(rel.linear.fieller(rel.levels[0].discharge)[0])
    low, high = binomial_region(SEEDS)
    assert low <= hits_h0 <= high, (hits_h0, (low, high))
    for count in hits:
        assert low <= count <= high, (hits, (low, high))


# -- the power law ------------------------------------------------------------------------------------------------
def test_power_law_equals_scipy_curve_fit_and_recovers_a_noise_free_relation():
    """source: scipy.optimize.curve_fit (least squares of the same model, started at the truth) on the same pairs;
    without noise the fit returns the relation it was drawn from."""
    h = np.linspace(100.0, 112.0, 25)
    exact = S.power_law(h, 0.8, 96.5, 1.7)
    fit = S.fit_power(h, exact)
    assert (fit.c, fit.h0, fit.n_exp) == pytest.approx((0.8, 96.5, 1.7), rel=1e-6)
    rng = np.random.default_rng(3)
    q = exact + rng.normal(0.0, 0.4, h.size)
    fit = S.fit_power(h, q)
    ref, _ = optimize.curve_fit(lambda x, c, h0, n: c * (x - h0) ** n, h, q, p0=(0.8, 96.5, 1.7))
    assert (fit.c, fit.h0, fit.n_exp) == pytest.approx(tuple(ref), rel=1e-5)
    assert fit.rss == pytest.approx(float(np.sum((ref[0] * (h - ref[1]) ** ref[2] - q) ** 2)), rel=1e-8)


def test_batched_bootstrap_solver_equals_scipy_least_squares_per_draw():
    """source: scipy.optimize.least_squares (MINPACK Levenberg-Marquardt) on each bootstrap record."""
    rng = np.random.default_rng(5)
    h = rng.uniform(100.0, 110.0, 40)
    q = S.power_law(h, 2.0, 95.0, 1.5) + rng.normal(0.0, 1.0, h.size)
    fit = S.fit_power(h, q)
    draws = S.bootstrap_power(h, q, fit, B=60, seed=9)
    ys = S._resampled(fit.predict(h), q - fit.predict(h), 3, np.random.default_rng(9), 60)
    for i in range(0, 60, 6):
        ref = optimize.least_squares(lambda p, y=ys[i]: p[0] * np.clip(h - p[1], 0, None) ** p[2] - y,
                                     x0=(fit.c, fit.h0, fit.n_exp), method="lm", xtol=1e-14, ftol=1e-14)
        assert draws[i] == pytest.approx(ref.x, rel=1e-5)


def test_power_law_cease_flow_head_and_trigger_levels_cover_the_truth():
    """Synthetic records from Q = 2 (h - 95)^1.5 with Gaussian noise (sd 1, 40 pairs); the bootstrap percentile
    interval (200 draws) of h0 and of each trigger level covers the truth in a count inside the 99 % binomial
    acceptance region of 200 records at p = 0.95 (scipy.stats.binom). Measured: h0 184 of 200 (92 %), the
    percentile interval of a nonlinear parameter runs slightly short; trigger levels 187, 187 and 185."""
    c, h0, n = 2.0, 95.0, 1.5
    hits_h0, hits, chosen = 0, np.zeros(3), 0
    for seed in range(SEEDS):
        rng = np.random.default_rng(1000 + seed)
        h = rng.uniform(100.0, 110.0, 40)
        q = S.power_law(h, c, h0, n) + rng.normal(0.0, 1.0, h.size)
        rel = S.fit_relation(h, q, bootstrap=200, seed=seed)
        chosen += rel.model == "power"
        if rel.model != "power":
            continue
        hits_h0 += rel.h0_low <= h0 <= rel.h0_high
        for i, lv in enumerate(rel.levels):
            hits[i] += lv.low <= h0 + (lv.discharge / c) ** (1.0 / n) <= lv.high
    assert chosen == SEEDS  # the curvature is plain: AIC picks the power law every time
    low, high = binomial_region(SEEDS)
    assert low <= hits_h0 <= high, (hits_h0, (low, high))
    for count in hits:
        assert low <= count <= high, (hits, (low, high))


def test_model_choice_by_aic():
    """A straight relation keeps the line; a curved one with a cease-flow head takes the power law; the criterion
    says so."""
    rng = np.random.default_rng(21)
    h = rng.uniform(50.0, 60.0, 40)
    straight = S.fit_relation(h, 3.0 * (h - 40.0) + rng.normal(0.0, 0.5, h.size), bootstrap=100)
    assert straight.model == "linear" and "AIC" in straight.criterion
    curved = S.fit_relation(h, 0.05 * (h - 48.0) ** 2.5 + rng.normal(0.0, 0.5, h.size), bootstrap=100)
    assert curved.model == "power" and curved.power.aic < curved.linear.aic - S.AIC_MARGIN


def test_no_relation_where_the_data_do_not_support_one():
    rng = np.random.default_rng(2)
    h = rng.uniform(50.0, 60.0, 30)
    flat = S.fit_relation(h, 10.0 + rng.normal(0.0, 1.0, h.size), bootstrap=100)
    if flat.linear.p_slope >= S.SLOPE_ALPHA:
        assert flat.model is None and "not significant" in flat.linear_why_not
        assert math.isnan(flat.h0) and flat.levels == ()
    falling = S.fit_relation(h, 200.0 - 2.0 * h + rng.normal(0.0, 0.1, h.size), bootstrap=100)
    assert falling.model is None and "does not rise" in falling.linear_why_not
    few = S.fit_relation(h[:8], 2.0 * h[:8] + rng.normal(0.0, 0.1, 8), bootstrap=100)
    assert few.power_why_not.startswith(f"fewer than {S.MIN_PAIRS_POWER} pairs")
    with pytest.raises(InsufficientDataError, match="at least 5"):
        S.fit_relation(h[:4], h[:4], bootstrap=100)
    with pytest.raises(ParameterError, match="levels="):
        S.fit_relation(h, h, levels=(50, 120))
    with pytest.raises(ParameterError, match="q= must be >= 0"):
        S.fit_relation(h, -h)


# -- pairing ------------------------------------------------------------------------------------------------------
def test_pairing_nearest_and_interpolate_on_a_hand_made_record():
    """Heads 100 on day 0, 104 on day 10, 110 on day 40; discharge on days 3, 10, 26, 50 and -5 (hand computed)."""
    th, hv = [0.0, 10.0, 40.0], [100.0, 104.0, 110.0]
    tq = [3.0, 10.0, 26.0, 50.0, -5.0]
    near = S.pair_readings(tq, th, hv, how="nearest", tolerance_days=10)
    np.testing.assert_allclose(near.head, [100.0, 104.0, np.nan, 110.0, 100.0])
    np.testing.assert_allclose(near.offset_days, [-3.0, 0.0, np.nan, -10.0, 5.0])
    assert "within 10 days (nearest 14.0 days away)" in near.reason[2]
    inter = S.pair_readings(tq, th, hv, how="interpolate", tolerance_days=15)
    # day 3: 100 + 0.3 * 4; day 26: 104 + 16/30 * 6; day 50 and -5: outside the record
    np.testing.assert_allclose(inter.head, [101.2, 104.0, 104.0 + 16.0 / 30.0 * 6.0, np.nan, np.nan])
    np.testing.assert_allclose(inter.offset_days[:3], [3.0, 0.0, 14.0])
    assert inter.reason[3].startswith("outside the head record") and inter.n_paired == 3
    tight = S.pair_readings(tq, th, hv, how="interpolate", tolerance_days=10)
    assert np.isnan(tight.head[2]) and "30.0 days apart, more than 2 x 10 days" in tight.reason[2]
    tie = S.pair_readings([5.0], th, hv, how="nearest", tolerance_days=5)
    assert tie.head[0] == 100.0  # a tie goes to the earlier reading
    with pytest.raises(ParameterError, match="how="):
        S.pair_readings(tq, th, hv, how="closest")
    with pytest.raises(ParameterError, match="tolerance_days="):
        S.pair_readings(tq, th, hv, tolerance_days=-1)


def test_ranking_puts_the_zone_that_drives_the_spring_first():
    rng = np.random.default_rng(4)
    t = np.arange(0.0, 600.0, 30.0)
    driver = 100.0 + 3.0 * np.sin(t / 90.0)
    q = 5.0 * (driver - 95.0) + rng.normal(0.0, 0.5, t.size)
    cands = {"A/1": (t, driver + rng.normal(0.0, 0.05, t.size)), "B/1": (t, rng.normal(100.0, 3.0, t.size)),
             "C/1": (t[:3], driver[:3])}
    ranked = S.rank_candidates(cands, t + 2.0, q, tolerance_days=5)
    assert [r["label"] for r in ranked][0] == "A/1" and ranked[0]["supported"]
    assert ranked[-1]["label"] == "C/1" and "fewer than 5 pairs (3)" in ranked[-1]["why_not"]


# -- recession ----------------------------------------------------------------------------------------------------
def test_recession_constant_recovered_from_a_synthetic_exponential_recession():
    """Q = 40 exp(-0.012 t) with 2 % multiplicative noise: one segment's fit equals scipy.stats.linregress of ln Q
    on t (slope -a, its standard error); the Student-t interval of a covers 0.012 in a count inside the 99 %
    binomial region of 200 records (scipy.stats.binom); the days from Q1 to Q2 are ln(Q1 / Q2) / a."""
    t = np.arange(0.0, 120.0, 4.0)
    hits = 0
    for seed in range(SEEDS):
        rng = np.random.default_rng(seed)
        q = 40.0 * np.exp(-0.012 * t) * (1.0 + rng.normal(0.0, 0.02, t.size))
        fit = S.fit_recession(t, q, [(0, t.size - 1)])
        hits += fit.a_low <= 0.012 <= fit.a_high
    ref = stats.linregress(t, np.log(q))
    assert fit.a == pytest.approx(-ref.slope, rel=1e-10) and fit.se_a == pytest.approx(ref.stderr, rel=1e-8)
    assert fit.q0[0] == pytest.approx(math.exp(ref.intercept), rel=1e-10)
    low, high = binomial_region(SEEDS)
    assert low <= hits <= high
    days = S.recession_days(30.0, 10.0, fit)
    assert days["days"] == pytest.approx(math.log(3.0) / fit.a)
    assert days["low"] < days["days"] < days["high"]
    assert days["days"] == pytest.approx(math.log(3.0) / 0.012, rel=0.05)


def test_segments_and_a_pooled_recession_with_one_constant():
    """Two falls with one constant and their own starting discharges: the pooled fit equals numpy.linalg.lstsq
    on the design (segment intercepts, -t) written out here; runs shorter than min_readings are left out."""
    t = np.arange(0.0, 20.0)
    q = np.array([5, 6, 9, 8, 7, 6.5, 6.1, 5.5, 7, 8, 12, 11, 10, 9.2, 8.1, 7.4, 9, 8, 7.9, 10], float)
    segs = S.recession_segments(t, q, min_readings=4)
    assert segs == [(2, 7), (10, 15)]
    assert S.recession_segments(t, q, min_readings=4, min_days=6) == []
    assert S.recession_segments(t, q, min_readings=3, windows=[(16.0, 19.0)]) == [(16, 19)]
    fit = S.fit_recession(t, q, segs)
    idx = np.r_[2:8, 10:16]
    X = np.zeros((idx.size, 3))
    X[:6, 0], X[6:, 1] = 1.0, 1.0
    X[:, 2] = -np.r_[t[2:8] - 2.0, t[10:16] - 10.0]
    coef, *_ = np.linalg.lstsq(X, np.log(q[idx]), rcond=None)
    assert fit.a == pytest.approx(coef[2], rel=1e-10)
    assert fit.q0 == pytest.approx(tuple(np.exp(coef[:2])), rel=1e-10)
    assert fit.df == idx.size - 3
    with pytest.raises(InsufficientDataError, match="no recession segment"):
        S.fit_recession(t, q, [])
    with pytest.raises(ParameterError, match="q_from= must exceed q_to="):
        S.recession_days(5.0, 6.0, fit)


# -- spring effect of a drawdown ----------------------------------------------------------------------------------
def test_discharge_change_of_a_drawdown():
    """Line: the change is b s (hand computed) until the head falls below h0, then all of Q(h); power law: the
    formula; the interval comes from the draws."""
    draws = np.column_stack([np.full(50, -190.0), np.linspace(1.9, 2.1, 50)])
    eff = S.discharge_change("linear", (-190.0, 2.0), draws, head=105.0, drawdown=3.0)
    assert eff["before"] == pytest.approx(20.0) and eff["change"] == pytest.approx(6.0)
    assert eff["change_low"] < 6.0 < eff["change_high"] and eff["percent"] == pytest.approx(30.0)
    dry = S.discharge_change("linear", (-190.0, 2.0), draws, head=105.0, drawdown=20.0)
    assert dry["after"] == 0.0 and dry["change"] == pytest.approx(20.0) and dry["ceases"]
    pw = S.discharge_change("power", (2.0, 95.0, 1.5), np.empty((0, 3)), head=104.0, drawdown=2.0)
    assert pw["change"] == pytest.approx(2.0 * 9.0 ** 1.5 - 2.0 * 7.0 ** 1.5)
    assert math.isnan(pw["change_low"])
    assert float(S.equivalent_recharge(1000.0, 2.0e6)) == pytest.approx(5e-4)


# -- workflow and command line on the truth district (feet store) ----------------------------------------------------
runner = CliRunner()


def cli(*args):
    return runner.invoke(main, [str(a) for a in args])


@pytest.fixture(scope="module")
def cease_truth(tmp_path_factory):
    """The truth district with a cease-flow spring: Q = 1.8 cfs ((h - h0) / 12 ft)^1.5, discharge file in cfs."""
    return make_district(tmp_path_factory.mktemp("cease_district"), cease_flow_depth=12.0, discharge_unit="cfs")


@pytest.fixture(scope="module")
def cease_store(cease_truth, tmp_path_factory):
    return build_truth_store(cease_truth, tmp_path_factory.mktemp("cease_store") / "cease.gpkg")


def test_cli_recovers_the_cease_flow_head_in_feet_and_cfs(cease_truth, cease_store, tmp_path):
    index = "UD-20/S1"
    res = cli("springflow", cease_store, "--spring", "SP-1", "--index", index, "--out", tmp_path, "--format", "json")
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    assert {"spring_id", "index", "units", "model", "criterion", "cease_flow_head", "trigger_levels",
            "reference_discharge", "recession", "fits", "pairing", "selection", "caution", "files",
            "warnings"} <= set(out)
    assert out["units"]["head"] == "ft" and out["units"]["discharge"] == "ft3/s"
    assert out["cease_flow_head"]["unit"] == "ft"
    assert all(lv["length_unit"] == "ft" and lv["rate_unit"] == "ft3/s" for lv in out["trigger_levels"])
    assert out["recession"]["recession_constant_unit"] == "1/d"
    assert out["model"] == "power" and out["pairing"]["n_paired"] == 60
    assert "licensed professional" in out["caution"]
    x, y = cease_truth.well_xy["UD-20"]
    h0 = float(cease_truth.spring_cease_flow_head(x, y))
    cf = out["cease_flow_head"]
    assert cf["low"] <= h0 <= cf["high"] and cf["high"] - cf["low"] < 5.0
    for lv in out["trigger_levels"]:  # Q = 1.8 ((h - h0) / 12)^1.5 cfs, solved for h
        truth = h0 + 12.0 * (lv["discharge"] / 1.8) ** (1.0 / 1.5)
        assert lv["low"] - 0.2 <= truth <= lv["high"] + 0.2  # 0.2 ft: the heads' reading noise
    table = pd.read_csv(out["files"]["table"])
    assert set(table["rate_unit"]) == {"ft3/s"} and set(table["length_unit"]) == {"ft"}
    assert len(table) == 60 and table["paired"].all()
    side = json.loads(Path(out["files"]["sidecar"]).read_text())
    assert side["relation"]["model"] == "power" and len(side["relation"]["draws"]) == 999
    import matplotlib.image

    assert matplotlib.image.imread(out["files"]["figure_png"]).shape[1] > 1000
    assert "SP-1" in Path(out["files"]["figure_svg"]).read_text()


def test_cli_ranks_index_zones_of_the_springs_unit_and_shows_gpm(truth, truth_store, tmp_path):
    """The default truth district: discharge in gpm, Q = 1.8 cfs exp((h - h_regional) / 6 ft); every UD zone
    follows the same time terms, so the ranking picks a UD monitoring zone with all 60 readings paired."""
    res = cli("springflow", truth_store, "--spring", "SP-1", "--out", tmp_path, "--format", "csv")
    assert res.exit_code == 0, res.output
    rows = pd.read_csv(io.StringIO(res.stdout))
    assert list(rows["what"]) == ["cease-flow head", "trigger level", "trigger level", "trigger level"]
    assert set(rows["rate_unit"]) == {"gpm"} and set(rows["length_unit"]) == {"ft"}
    side = json.loads((tmp_path / "SP-1_springflow.json").read_text())
    assert side["index"]["chosen_by"].startswith("ranking of")
    well = side["index"]["well_id"]
    assert well in {w for w, _ in truth.monitored_zones["UD"]}
    assert side["candidates"][0]["r2"] >= side["candidates"][-1]["r2"]
    # the median discharge over 10 % of it is the lowest trigger; the exponential law gives ln(10) x 6 ft apart
    levels = {lv["percent"]: lv["head"] for lv in side["trigger_levels"]}
    assert levels[50.0] - levels[10.0] == pytest.approx(6.0 * math.log(5.0), abs=1.5)
    shown = cli("springflow", truth_store, "--spring", "SP-1", "--out", tmp_path)
    assert shown.exit_code == 0 and "discharge in gpm" in shown.stdout and "caution:" in shown.stdout


def test_cli_errors_exit_2_and_leave_the_store_unchanged(truth_store, tmp_path):
    from hydroatlas.store import open_store

    store = copy_store(truth_store, tmp_path / "copy.gpkg")
    with open_store(str(store)) as s:
        before = s.snapshot()
    bad = {("--spring", "SP-9"): "--spring 'SP-9' is not a spring of the store",
           ("--spring", "SP-1", "--index", "UD-01/S9"): "--index UD-01/S9 is not a zone of the store",
           ("--spring", "SP-1", "--index", "PW-1/OH1"): "the index zone PW-1/OH1 has no head readings",
           ("--spring", "SP-1", "--tolerance", "1"): "widen --tolerance",
           ("--spring", "SP-1", "--levels", "50,0"): "--levels must be > 0 and < 100",
           ("--spring", "SP-1", "--index", "nozone"): "--index must be WELL/ZONE",
           ("--spring", "SP-1", "--window", "2030-01-01/2030-12-31"): "no discharge readings inside the window"}
    for args, message in bad.items():
        res = cli("springflow", store, *args, "--out", tmp_path / "o")
        assert res.exit_code == 2, (args, res.output)
        assert message in res.stderr, (args, res.stderr)
    springs = tmp_path / "springs.csv"
    x0, y0 = district_origin()
    springs.write_text(f"spring_id,x,y,elev,name,unit\nSP-2,{x0 + 100.0},{y0 + 100.0},900,Dry spring,UD\n")
    assert cli("import", store, "springs", springs).exit_code == 0
    with open_store(str(store)) as s:
        before = s.snapshot()
    res = cli("springflow", store, "--spring", "SP-2")
    assert res.exit_code == 2 and "spring SP-2 has no discharge readings" in res.stderr
    with open_store(str(store)) as s:
        assert s.snapshot() == before


def theis_ft(q_m3d, r_m, t_d, T_m2d, S_):
    """Theis drawdown (m) with scipy.special.exp1 (W(u) = E1(u), Theis 1935)."""
    return q_m3d / (4.0 * math.pi * T_m2d) * special.exp1(r_m ** 2 * S_ / (4.0 * T_m2d * t_d))


def test_drawdown_scenario_reports_the_spring_effect(cease_truth, cease_store, tmp_path):
    """A proposed well near the spring: the drawdown at the index zone equals Theis (scipy.special.exp1) at its
    distance; the discharge change equals the recorded relation evaluated at the reference head and that head
    less the drawdown; the table, the sidecar and the units say so."""
    store = copy_store(cease_store, tmp_path / "s.gpkg")
    out = tmp_path / "out"
    assert cli("surface", store, "--unit", "UD", "--quantity", "head", "--cell", "500", "--out", out).exit_code == 0
    res = cli("springflow", store, "--spring", "SP-1", "--index", "UD-20/S1", "--out", out, "--bootstrap", "200")
    assert res.exit_code == 0, res.output
    sx, sy = cease_truth.spring_xy
    nx, ny = sx - 1500.0, sy
    res = cli("drawdown", store, "--unit", "UD", "--days", "365", "-S", "0.001", "-T", "5000ft2/d",
              "--new-well", f"NEW,{nx},{ny},400gpm", "--name", "trial", "--out", out)
    assert res.exit_code == 0, res.output
    fx = pd.read_csv(out / "UD_drawdown_trial_spring_effects.csv")
    assert len(fx) == 1
    row = fx.iloc[0]
    assert (row["spring_id"], row["index_well"], row["index_zone"]) == ("SP-1", "UD-20", "S1")
    assert row["length_unit"] == "ft" and row["rate_unit"] == "ft3/s" and row["recharge_unit"] == "in/yr"
    ix, iy = cease_truth.well_xy["UD-20"]
    us_ft = 1200.0 / 3937.0  # the CRS is in US survey feet
    s_m = theis_ft(400 * 3.785411784e-3 * 1440, math.hypot(ix - nx, iy - ny) * us_ft, 365.0, 5000 * FT_M ** 2,
                   0.001)
    assert row["drawdown_at_index"] == pytest.approx(s_m / FT_M, rel=1e-6)
    side = json.loads((out / "SP-1_springflow.json").read_text())["relation"]
    before, after = S.model_discharge("power", [side["params"][k] for k in ("c", "h0", "n")],
                                      [side["reference_head"], side["reference_head"] - row["drawdown_at_index"]])
    assert row["discharge_change"] == pytest.approx(before - after, rel=1e-9)
    assert row["discharge_change_low"] <= row["discharge_change"] <= row["discharge_change_high"]
    # 1 cfs over 1 ft2 is 86400 x 365.25 x 12 in/yr
    assert row["equivalent_recharge_before"] == pytest.approx(
        row["discharge_before"] / row["contributing_area"] * 86400 * 365.25 * 12, rel=1e-9)
    scenario = json.loads((out / "UD_drawdown_trial.json").read_text())
    assert scenario["spring_effects"][0]["discharge_change"] == pytest.approx(row["discharge_change"])
    assert scenario["files"]["spring_effects"].endswith("UD_drawdown_trial_spring_effects.csv")


def test_interpolated_pairing_and_a_stored_recharge_rate_beside_the_equivalent_rate(truth, truth_store, tmp_path):
    """--pairing interpolate pairs every reading (monthly heads on the 15th, discharge on the 20th); a recharge
    rate stored with the recharge area (attributes recharge_rate, recharge_unit) is reported beside the equivalent
    rate, which is the median discharge over the area: gpm to ft3/d with 1 gal = 231 in3 (exact), in/yr with
    1 yr = 365.25 d."""
    store = copy_store(truth_store, tmp_path / "s.gpkg")
    areas = json.loads(Path(truth.files["areas"]).read_text())
    for f in areas["features"]:
        if f["properties"]["kind"] == "recharge":
            f["properties"].update(recharge_rate=10.0, recharge_unit="in/yr")
    (tmp_path / "areas.geojson").write_text(json.dumps(areas))
    assert cli("import", store, "areas", tmp_path / "areas.geojson").exit_code == 0
    res = cli("springflow", store, "--spring", "SP-1", "--index", "UD-20/S1", "--pairing", "interpolate",
              "--out", tmp_path, "--format", "json")
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    assert out["pairing"]["how"] == "interpolate" and out["pairing"]["n_paired"] == 59  # the last is after the heads
    assert out["pairing"]["unpaired"][0]["reason"].startswith("outside the head record")
    bal = out["contributing_area_balance"]
    assert bal["stored_recharge"]["value"] == pytest.approx(10.0) and bal["stored_recharge"]["unit"] == "in/yr"
    assert bal["recharge_unit"] == "in/yr" and bal["area_source"].startswith("recharge areas of unit UD")
    q_ft3d = out["reference_discharge"]["value"] * 231.0 / 1728.0 * 1440.0
    assert out["reference_discharge"]["unit"] == "gpm"
    assert bal["equivalent_recharge"] == pytest.approx(q_ft3d / bal["area"] * 12.0 * 365.25, rel=1e-9)
