"""The change of head between two windows (``surface --quantity change``) on the truth district
(tests/truthdistrict.py).

The district's heads are a fixed plane per unit plus a time term shared by every place: a seasonal sine and a
drought that lowers heads by ``drought_drop`` across the drought window. So the true change of a zone between
the normal window (the baseline) and the drought window is the unit's factor times the difference of the mean
time term over the reading dates inside the two windows, the same at every well; each reading carries
independent noise of ``reading_noise`` (0.2 ft) standard deviation, so a change of two means carries
0.2 * sqrt(1/n_window + 1/n_baseline) ft.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import rasterio

from hydroatlas.heads import TimeWindow
from hydroatlas.workflows.head_change import head_changes
from truth_fixtures import copy_store, ok, run
from truthdistrict import DROUGHT_DROP_FT, _time_term

CELL = 250.0  # grid cell, CRS units (US survey feet)
#: a zone's change may lie this many of its noise standard deviations from the truth (two-sided normal tail
#: 7e-6 per zone; about 60 zones are checked)
Z_MAX = 4.5




@pytest.fixture(scope="module")
def change_store(truth_store, tmp_path_factory):
    """A copy of the session's truth store: making a surface records a product in its store, and the session's
    store is shared by other test modules."""
    return copy_store(truth_store, tmp_path_factory.mktemp("change_store") / "truth.gpkg")


def dates_in(truth, window: str) -> list[str]:
    w = TimeWindow.parse(window)
    return [d for d in truth.reading_dates if w.start <= pd.Timestamp(d) <= w.end]


def true_change(truth, unit: str) -> float:
    """The unit's true change from the normal window to the drought window, from the generator's own time term:
    factor * (mean term over the drought window's reading dates - mean over the normal window's), with the
    factor drought_drop / DROUGHT_DROP_FT (the term of a unit of factor 1 falls by DROUGHT_DROP_FT)."""
    factor = truth.drought_drop[unit] / DROUGHT_DROP_FT
    window = _time_term(pd.DatetimeIndex(dates_in(truth, truth.drought_window)))
    baseline = _time_term(pd.DatetimeIndex(dates_in(truth, truth.normal_window)))
    return float(factor * (window.mean() - baseline.mean()))


@pytest.fixture(scope="module")
def change_ud(truth, change_store, tmp_path_factory):
    out = tmp_path_factory.mktemp("change_ud")
    res = ok("surface", change_store, "--unit", "UD", "--quantity", "change", "--window", truth.drought_window,
             "--baseline", truth.normal_window, "--cell", CELL, "--out", out)
    return out, res


def test_true_change_is_the_drought_drop_plus_the_seasonal_difference(truth):
    """The expectation itself, two ways: from the time term, and from the district's head function at a well
    (the head's plane cancels); the drought part dominates it."""
    x, y = truth.well_xy["UD-01"]
    for unit in ("UB", "UD", "UF"):
        by_head = (np.mean([truth.head(unit, x, y, d) for d in dates_in(truth, truth.drought_window)])
                   - np.mean([truth.head(unit, x, y, d) for d in dates_in(truth, truth.normal_window)]))
        if unit == "UB" and not np.isfinite(by_head):
            continue  # the upper sand is absent at UD-01
        assert by_head == pytest.approx(true_change(truth, unit), abs=1e-9)
        assert true_change(truth, unit) < -0.3 * truth.drought_drop[unit]


def test_per_zone_change_equals_the_truth_within_the_noise(truth, change_store, tmp_path):
    """Every zone of UB, UD and UF: the change in the table lies within Z_MAX noise standard deviations of the
    true change, and the unit's mean change within 3 standard errors."""
    for unit in ("UB", "UD", "UF"):
        ok("surface", change_store, "--unit", unit, "--quantity", "change", "--window", truth.drought_window,
           "--baseline", truth.normal_window, "--cell", 500, "--out", tmp_path)
        table = pd.read_csv(tmp_path / f"{unit}_change_zones.csv", dtype={"well_id": str, "zone_id": str})
        assert list(table.columns) == ["well_id", "zone_id", "unit", "x", "y", "baseline_mean", "baseline_count",
                                       "window_mean", "window_count", "change", "length_unit"]
        assert set(table["length_unit"]) == {"ft"} and set(table["unit"]) == {unit}
        assert set(zip(table["well_id"], table["zone_id"])) == set(truth.monitored_zones[unit])
        assert (table["window_count"] <= 7).all() and (table["window_count"] >= 6).all()
        assert (table["baseline_count"] <= 3).all() and (table["baseline_count"] >= 2).all()
        np.testing.assert_allclose(table["change"], table["window_mean"] - table["baseline_mean"], atol=1e-9)
        sd = truth.reading_noise * np.sqrt(1.0 / table["window_count"] + 1.0 / table["baseline_count"])
        z = (table["change"] - true_change(truth, unit)) / sd
        assert (np.abs(z) < Z_MAX).all(), (unit, z.abs().max())
        se = float(np.sqrt(np.sum(sd ** 2)) / len(table))
        assert abs(table["change"].mean() - true_change(truth, unit)) < 3 * se


def test_means_of_each_window_are_the_readings_means(truth, change_ud):
    """baseline_mean and window_mean are plain means of the district file's readings (numpy), poor readings and
    pumping wells left out as the default policy does."""
    out, _ = change_ud
    table = pd.read_csv(out / "UD_change_zones.csv", dtype={"well_id": str, "zone_id": str})
    h = pd.read_csv(truth.files["heads"], dtype={"well_id": str, "zone_id": str})
    h = h[h["quality"] != "poor"]
    t = pd.to_datetime(h["measured_at"])
    for name, window in (("baseline", truth.normal_window), ("window", truth.drought_window)):
        w = TimeWindow.parse(window)
        inside = h[(t >= w.start) & (t <= w.end)]
        for row in table.itertuples(index=False):
            values = inside[(inside["well_id"] == row.well_id) & (inside["zone_id"] == row.zone_id)]["head"]
            assert getattr(row, f"{name}_count") == len(values)
            assert getattr(row, f"{name}_mean") == pytest.approx(float(np.mean(values)), abs=1e-9)


def test_kriged_change_at_the_wells_matches_the_table(truth, change_ud):
    """The raster at each well's cell against the well's change in the table: the change field is flat plus
    noise, so the kriged value may differ from one well's change by its noise (Z_MAX standard deviations), and
    on average not at all (3 standard errors)."""
    out, _ = change_ud
    table = pd.read_csv(out / "UD_change_zones.csv", dtype={"well_id": str, "zone_id": str})
    per_well = table.groupby("well_id").agg(x=("x", "first"), y=("y", "first"), change=("change", "mean"),
                                            nw=("window_count", "min"), nb=("baseline_count", "min"))
    with rasterio.open(out / "UD_change.tif") as src:
        values = np.array([v[0] for v in src.sample(zip(per_well["x"], per_well["y"]), masked=True)])
        assert src.descriptions[0] == "change estimate (ft)"
    assert np.isfinite(values).all()
    sd = truth.reading_noise * np.sqrt(1.0 / per_well["nw"] + 1.0 / per_well["nb"])
    diff = values - per_well["change"].to_numpy()
    assert (np.abs(diff) < Z_MAX * sd.to_numpy()).all(), np.abs(diff).max()
    assert abs(diff.mean()) < 3 * float(np.sqrt(np.sum(sd ** 2))) / len(sd)
    # and the map as a whole shows the drought decline of the truth
    assert float(np.mean(values)) == pytest.approx(true_change(truth, "UD"), abs=3 * float(sd.max()))


def test_sidecar_names_both_windows_and_the_table(truth, change_ud):
    out, res = change_ud
    side = json.loads((out / "UD_change.json").read_text())
    assert side["quantity"] == "change" and side["value_unit"] == "ft"
    assert side["window"] == truth.drought_window and side["baseline"] == truth.normal_window
    assert side["change"]["n_zones"] == len(truth.monitored_zones["UD"])
    assert side["change"]["zones_left_out"] == []
    assert side["files"]["zones"].endswith("UD_change_zones.csv")
    assert "licensed professional" in side["caution"]
    assert side["selection"]["left_out"]  # pumping-well levels and poor readings in the two windows
    assert "UD_change_zones.csv" in res.stdout


def test_change_surface_is_masked_to_the_units_extent_like_its_head_surface(truth, change_store, tmp_path):
    """The partial unit UB: the change surface has data exactly where its head surface of the same grid has."""
    args = ["--unit", "UB", "--window", truth.drought_window, "--cell", CELL, "--out", tmp_path]
    ok("surface", change_store, "--quantity", "change", "--baseline", truth.normal_window, *args)
    ok("surface", change_store, "--quantity", "head", *args)
    with rasterio.open(tmp_path / "UB_change.tif") as a, rasterio.open(tmp_path / "UB_head.tif") as b:
        ma, mb = np.ma.getmaskarray(a.read(1, masked=True)), np.ma.getmaskarray(b.read(1, masked=True))
        assert a.transform == b.transform
    assert ma.any() and (~ma).any()
    np.testing.assert_array_equal(ma, mb)
    side = json.loads((tmp_path / "UB_change.json").read_text())
    assert side["extent"]["applied"] and side["extent"]["cells_removed"] > 0


def test_zone_without_baseline_readings_is_left_out_with_the_reason(truth, change_store, tmp_path):
    """Retire a zone's three baseline readings: the zone leaves the table and is listed with the reason and its
    seven drought-window readings; the command warns on stderr."""
    store = copy_store(change_store, tmp_path / "store.gpkg")
    ids = [f"MZ-02/P2/{d}" for d in dates_in(truth, truth.normal_window)]
    assert len(ids) == 3
    ok("retire", store, "heads", *ids, "--reason", "test: no baseline")
    res = ok("surface", store, "--unit", "UD", "--quantity", "change", "--window", truth.drought_window,
             "--baseline", truth.normal_window, "--cell", 500, "--out", tmp_path)
    side = json.loads((tmp_path / "UD_change.json").read_text())
    assert side["change"]["zones_left_out"] == [{
        "well_id": "MZ-02", "zone_id": "P2", "unit": "UD", "count": 7,
        "reason": f"no reading in the baseline {truth.normal_window} after the selection"}]
    table = pd.read_csv(tmp_path / "UD_change_zones.csv", dtype={"well_id": str, "zone_id": str})
    assert ("MZ-02", "P2") not in set(zip(table["well_id"], table["zone_id"]))
    assert "MZ-02" not in side["wells"]
    assert "zone P2 of well MZ-02 left out of the change" in res.stderr


@pytest.mark.parametrize("args, names", [
    (["--window", "2022-06-01/2022-12-31"], ["--baseline"]),
    (["--baseline", "2021-03-01/2021-05-31"], ["--window"]),
    ([], ["--window", "--baseline"]),
    (["--window", "2022-06-01/2022-12-31", "--baseline", "2021-03-01/2021-05-31", "--at", "2022-01-01"], ["--at"]),
    (["--window", "2022-06-01/2022-12-31", "--baseline", "2022-12-01/2023-03-31"], ["--window", "--baseline"]),
])
def test_change_needs_two_separate_windows(change_store, tmp_path, args, names):
    """Exit 2 with one line that names the option(s) to fix; nothing written."""
    res = run("surface", change_store, "--unit", "UD", "--quantity", "change", *args, "--out", tmp_path)
    assert res.exit_code == 2, res.output
    assert all(n in res.stderr for n in names) and "Traceback" not in res.output
    assert len(res.stderr.strip().splitlines()) == 1
    assert not list(tmp_path.iterdir())


def test_baseline_without_change_is_refused(change_store, tmp_path):
    res = run("surface", change_store, "--unit", "UD", "--baseline", "2021-03-01/2021-05-31", "--out", tmp_path)
    assert res.exit_code == 2 and "--baseline" in res.stderr


def test_head_changes_by_hand():
    """Hand-made readings: means and counts computed here with plain arithmetic; the zone with readings in one
    window only is reported with the reason and its count."""
    rows = pd.DataFrame({
        "well_id": ["A", "A", "A", "A", "B", "B", "C"],
        "zone_id": ["1", "1", "1", "1", "1", "1", "1"],
        "measured_at": ["2020-01-10", "2020-01-20", "2021-01-05", "2021-01-25T12:00", "2020-01-15", "2021-01-15",
                        "2021-01-10"],
        "head": [10.0, 12.0, 7.0, 8.0, 20.0, 15.5, 3.0]})
    base, win = TimeWindow.parse("2020-01-01/2020-01-31"), TimeWindow.parse("2021-01-01/2021-01-31")
    table, out = head_changes(rows, rows, win, base)
    a = table.set_index("well_id").loc["A"]
    assert a["baseline_mean"] == 11.0 and a["window_mean"] == 7.5 and a["change"] == -3.5
    assert a["baseline_count"] == 2 and a["window_count"] == 2
    assert table.set_index("well_id").loc["B", "change"] == -4.5
    assert out == [{"well_id": "C", "zone_id": "1", "count": 1,
                    "reason": "no reading in the baseline 2020-01-01/2020-01-31 after the selection"}]
    assert math.isclose(table["change"].sum(), -8.0)
