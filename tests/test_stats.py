"""Unit statistics against scipy.stats, and effective K against the layered-profile definitions."""

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from hydroatlas.errors import ParameterError
from hydroatlas.stats import effective_k, log_k_summary, transmissivity, unit_statistics, well_profiles

from conftest import cli

RNG = np.random.default_rng(7)


def test_summary_against_scipy():
    """Reference library: scipy.stats.gmean, numpy var (ddof=1), scipy.stats.t interval (VERIFY.md, Statistics)."""
    k = 10 ** RNG.normal(-4, 0.8, size=37)
    s = log_k_summary(k)
    lg = np.log10(k)
    assert s["k_geomean"] == pytest.approx(sps.gmean(k), rel=1e-12)
    assert s["log10k_var"] == pytest.approx(np.var(lg, ddof=1), rel=1e-12)
    assert s["lnk_var"] == pytest.approx(np.var(np.log(k), ddof=1), rel=1e-12)
    assert s["lnk_std"] == pytest.approx(np.std(np.log(k), ddof=1), rel=1e-12)
    lo, hi = sps.t.interval(0.95, len(k) - 1, loc=lg.mean(), scale=sps.sem(lg))
    assert s["k_geomean_ci95"][0] == pytest.approx(10**lo, rel=1e-12)
    assert s["k_geomean_ci95"][1] == pytest.approx(10**hi, rel=1e-12)
    assert s["k_median"] == pytest.approx(np.median(k))
    assert (s["k_min"], s["k_max"]) == (k.min(), k.max())


def test_single_value_has_no_variance():
    s = log_k_summary([3.0])
    assert s["k_geomean"] == pytest.approx(3.0)
    assert math.isnan(s["log10k_var"]) and math.isnan(s["k_geomean_ci95"][0])


def test_bad_k_refused():
    with pytest.raises(ParameterError, match="greater than zero"):
        log_k_summary([1.0, 0.0])
    with pytest.raises(ParameterError):
        log_k_summary([])


def test_two_layer_example():
    """source: VERIFY.md, Statistics: two equal layers K = 1 and 100 give K_h = 50.5 and K_v = 1.980."""
    kh, kv = effective_k([1.0, 100.0], [5.0, 5.0])
    assert kh == pytest.approx(50.5)
    assert round(kv, 3) == 1.980
    assert transmissivity([1.0, 100.0], [5.0, 5.0]) == pytest.approx(505.0)


def test_effective_k_unequal_layers():
    """common practice (no source): the definitions K_h = sum(K b)/sum(b), K_v = sum(b)/sum(b/K)."""
    k, b = np.array([3.0, 0.01, 20.0]), np.array([2.0, 1.0, 7.0])
    kh, kv = effective_k(k, b)
    assert kh == pytest.approx((k * b).sum() / b.sum())
    assert kv == pytest.approx(b.sum() / (b / k).sum())
    assert kv < kh


def _tests_frame():
    return pd.DataFrame({
        "well_id": ["A", "A", "A", "B", "C", "C"],
        "zone_id": ["1", "1", "2", "1", "1", "1"],
        "unit": ["U", "U", "U", "U", "U", "U"],
        "k_ms": [1e-5, 4e-5, 1e-4, 1e-6, 2e-5, 8e-5],
        "quality": ["good", "good", "poor", "good", "fair", None],
        "straddles": [False, False, True, False, False, False],
    })


UNITS = pd.DataFrame({"code": ["U", "SUB"], "name": ["Unit", "Sub"], "rank": [1, 2], "role": ["aquifer"] * 2,
                      "parent": [None, "U"]})


def test_per_zone_and_per_well_declustering():
    """Reference: scipy.stats.gmean of the per-zone / per-well geometric means."""
    t = _tests_frame()
    zone_gm = [sps.gmean([1e-5, 4e-5]), 1e-4, 1e-6, sps.gmean([2e-5, 8e-5])]
    well_gm = [sps.gmean([1e-5, 4e-5, 1e-4]), 1e-6, sps.gmean([2e-5, 8e-5])]
    per_test = unit_statistics(t, UNITS, per="test", k_unit="m/s")[0]
    per_zone = unit_statistics(t, UNITS, per="zone", k_unit="m/s")[0]
    per_well = unit_statistics(t, UNITS, per="well", k_unit="m/s")[0]
    assert per_test["k_geomean"] == pytest.approx(sps.gmean(t["k_ms"]))
    assert per_zone["k_geomean"] == pytest.approx(sps.gmean(zone_gm))
    assert per_zone["log10k_var"] == pytest.approx(np.var(np.log10(zone_gm), ddof=1))
    assert per_well["k_geomean"] == pytest.approx(sps.gmean(well_gm))
    assert (per_zone["n_tests"], per_zone["n_zones"], per_zone["n_wells"], per_zone["n_values"]) == (6, 4, 3, 4)


def test_exclusions_and_parent_rollup():
    t = _tests_frame()
    no_poor = unit_statistics(t, UNITS, exclude_poor=True, k_unit="m/s")[0]
    assert no_poor["n_tests"] == 5
    no_straddle = unit_statistics(t, UNITS, exclude_straddles=True, k_unit="m/s")[0]
    assert no_straddle["n_tests"] == 5 and no_straddle["k_max"] == pytest.approx(8e-5)
    t.loc[5, "unit"] = "SUB"
    rows = unit_statistics(t, UNITS, k_unit="m/s")
    assert rows[0]["n_tests"] == 6  # the parent includes its sub-unit's tests
    assert rows[1]["n_tests"] == 1 and rows[1]["k_geomean"] == pytest.approx(8e-5)


def test_k_unit_conversion_in_output():
    t = _tests_frame()
    ms = unit_statistics(t, UNITS, k_unit="m/s")[0]
    md = unit_statistics(t, UNITS, k_unit="m/d")[0]
    assert md["k_geomean"] == pytest.approx(ms["k_geomean"] * 86400)
    assert md["log10k_var"] == pytest.approx(ms["log10k_var"])  # a change of unit shifts log K only


def test_bad_per_refused():
    with pytest.raises(ParameterError, match="'per' parameter"):
        unit_statistics(_tests_frame(), UNITS, per="county")


def test_well_profiles_layers():
    zones = pd.DataFrame({"well_id": ["A", "A"], "zone_id": ["1", "2"], "unit": ["U", "V"],
                          "thickness": [5.0, 5.0], "k_ms": [1.0 / 86400, 100.0 / 86400]})
    prof = well_profiles(zones, k_unit="m/d", length_unit="m").set_index("unit")
    assert prof.loc["*", "kh"] == pytest.approx(50.5)
    assert prof.loc["*", "kv"] == pytest.approx(1.980198, rel=1e-6)
    assert prof.loc["*", "transmissivity"] == pytest.approx(505.0)


def test_cli_stats_json_matches_scipy(mini_store, runner):
    """The CLI's JSON numbers agree with scipy.stats on the same K values (converted by the exact definitions)."""
    res = cli(runner, "stats", mini_store, "--format", "json", "--k-unit", "m/s")
    assert res.exit_code == 0, res.output
    rows = {r["unit"]: r for r in json.loads(res.stdout)}  # stdout: a note on stderr says what was left out
    # TOP tests: W1/P1 2 and 8 m/d, W2/S1 5 m/d, W4/S1 4 m/d (W4 has no picks: inferred)
    top_k = np.array([2.0, 8.0, 5.0, 4.0]) / 86400.0
    assert rows["TOP"]["n_tests"] == 4
    assert rows["TOP"]["k_geomean"] == pytest.approx(sps.gmean(top_k), rel=1e-9)
    assert rows["TOP"]["log10k_var"] == pytest.approx(np.var(np.log10(top_k), ddof=1), rel=1e-9)
    assert rows["TOP"]["lnk_var"] == pytest.approx(np.var(np.log(top_k), ddof=1), rel=1e-9)
    lo, hi = sps.t.interval(0.95, 3, loc=np.log10(top_k).mean(), scale=sps.sem(np.log10(top_k)))
    assert rows["TOP"]["k_geomean_ci95"] == pytest.approx([10**lo, 10**hi], rel=1e-9)
    for key in ("unit", "n_tests", "n_zones", "n_wells", "k_unit", "k_geomean", "k_geomean_ci95", "k_median",
                "k_min", "k_max", "log10k_mean", "log10k_var", "log10k_std", "lnk_var"):
        assert key in rows["TOP"]
    assert rows["TOP"]["k_unit"] == "m/s"
    # LOW: 10 ft/d, and 50 gpd/ft2 by the W3 override
    low_k = np.array([10 * 0.3048 / 86400, 50 * 3.785411784e-3 / 0.09290304 / 86400])
    assert rows["LOW"]["k_geomean"] == pytest.approx(sps.gmean(low_k), rel=1e-9)
    # MID: W1/P2 (good) and W2/S2 (poor: left out by default, counted in n_left_out)
    assert (rows["MID"]["n_tests"], rows["MID"]["n_left_out"]) == (1, 1)
    assert rows["TOP"]["n_left_out"] == 0


def test_cli_stats_table_csv_and_wells(mini_store, runner):
    res = cli(runner, "stats", mini_store, "--k-unit", "ft/d")
    assert res.exit_code == 0 and "TOP" in res.output and "ft/d" in res.output
    res = cli(runner, "stats", mini_store, "--format", "csv", "--per", "well", "--unit", "TOP")
    lines = res.stdout.strip().splitlines()
    assert lines[0].startswith("unit,") and len(lines) == 2
    res = cli(runner, "stats", mini_store, "--wells", "--format", "json")
    profiles = json.loads(res.stdout)
    w1 = {p["unit"]: p for p in profiles if p["well_id"] == "W1"}
    assert set(w1) == {"TOP", "MID", "LOW", "*"}
    res = cli(runner, "stats", mini_store, "--unit", "NOPE")
    assert res.exit_code == 2 and "NOPE" in res.output


def test_cli_stats_wells_follow_the_selection(mini_store, runner):
    """Per-well profiles use the same selection: the poor test of W2/S2 (0.001 cm/s) is out by default."""
    res = cli(runner, "stats", mini_store, "--wells", "--format", "json")
    w2 = {p["unit"] for p in json.loads(res.stdout) if p["well_id"] == "W2"}
    assert w2 == {"TOP"} and "1 quality poor" in res.stderr  # one unit left: no '*' profile row
    res = cli(runner, "stats", mini_store, "--wells", "--format", "json", "--include-poor")
    w2 = {p["unit"]: p for p in json.loads(res.stdout) if p["well_id"] == "W2"}
    assert set(w2) == {"TOP", "MID", "*"} and w2["*"]["n_zones"] == 2 and res.stderr == ""
