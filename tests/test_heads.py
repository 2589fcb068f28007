"""Head selection, profiles and vertical differences with Darcy leakage across aquitards."""

import numpy as np
import pandas as pd
import pytest

from hydroatlas.errors import InsufficientDataError, ParameterError
from hydroatlas.heads import TimeWindow, darcy_leakage, select_heads, vertical_differences

HEADS = pd.DataFrame({
    "well_id": ["A"] * 5 + ["B"] * 2,
    "zone_id": ["1"] * 5 + ["1"] * 2,
    "measured_at": ["2024-03-01T00:00:00", "2024-03-10T12:00:00", "2024-03-31T23:00:00", "2024-04-01T00:00:00",
                    "2024-02-01T00:00:00", "2024-03-05T00:00:00", "2024-06-01T00:00:00"],
    "head": [10.0, 11.0, 15.0, 99.0, -5.0, 7.0, 8.0],
})


def test_window_median_per_zone():
    w = TimeWindow.parse("2024-03-01/2024-03-31")
    sel = select_heads(HEADS, window=w).set_index("well_id")
    assert sel.loc["A", "head"] == 11.0 and sel.loc["A", "n_readings"] == 3  # 2024-03-31T23:00 is inside
    assert sel.loc["B", "head"] == 7.0


def test_nearest_to_date():
    sel = select_heads(HEADS, at="2024-05-20").set_index("well_id")
    assert sel.loc["A", "head"] == 99.0 and sel.loc["B", "head"] == 8.0
    assert sel.loc["B", "offset_days"] == pytest.approx(12.0)


def test_window_errors():
    with pytest.raises(ParameterError, match="ISO 8601 interval"):
        TimeWindow.parse("2024-03-01")
    with pytest.raises(ParameterError, match="ends before"):
        TimeWindow.parse("2024-03-31/2024-03-01")
    with pytest.raises(ParameterError):
        TimeWindow.parse("March/April")
    with pytest.raises(ParameterError, match="ISO 8601 date"):
        select_heads(HEADS, at="next Tuesday")
    with pytest.raises(InsufficientDataError, match="no head readings inside"):
        select_heads(HEADS, window=TimeWindow.parse("2030-01-01/2030-12-31"))


def test_darcy_leakage_verify_example():
    """computed (VERIFY.md, Flow): K' = 1e-9 m/s, dh = 5 m, b' = 10 m give q = 5e-10 m/s."""
    assert darcy_leakage(1e-9, 5.0, 10.0) == pytest.approx(5e-10)
    with pytest.raises(ParameterError):
        darcy_leakage(1e-9, 5.0, 0.0)


UNITS = pd.DataFrame({"code": ["UP", "AQT", "LOW"], "rank": [1, 2, 3], "role": ["aquifer", "aquitard", "aquifer"]})


def test_vertical_differences_across_aquitard():
    """Darcy (common practice): q = dh / (b'/K'), b' the aquitard part between the zone midpoints."""
    profiles = pd.DataFrame({"well_id": ["W"] * 3, "zone_id": ["a", "b", "c"], "unit": ["UP", "UP", "LOW"],
                             "head": [120.0, 119.0, 100.0], "mid_elev": [90.0, 70.0, 30.0]})
    intervals = pd.DataFrame({"well_id": ["W"] * 3, "unit": ["UP", "AQT", "LOW"],
                              "top_elev": [100.0, 60.0, 50.0], "bottom_elev": [60.0, 50.0, 0.0]})
    k = {"UP": 1e-4, "AQT": 1e-9, "LOW": 1e-5}
    out = vertical_differences(profiles, UNITS, k, intervals, length_to_m=1.0)
    first, second = out.iloc[0], out.iloc[1]
    assert first["dhead"] == pytest.approx(1.0) and first["vertical_gradient"] == pytest.approx(1.0 / 20)
    assert np.isnan(first["leakage_flux"]) and pd.isna(first["aquitards"])
    assert second["dhead"] == pytest.approx(19.0) and second["aquitards"] == "AQT"
    assert second["leakage_flux"] == pytest.approx(1e-9 * 86400 * 19.0 / 10.0)  # m/d


def test_leakage_in_feet():
    """Same case in a feet store: K in m/s becomes ft/d through 0.3048 m/ft (exact definition)."""
    profiles = pd.DataFrame({"well_id": ["W"] * 2, "zone_id": ["a", "c"], "unit": ["UP", "LOW"],
                             "head": [120.0, 100.0], "mid_elev": [70.0, 30.0]})
    intervals = pd.DataFrame({"well_id": ["W"], "unit": ["AQT"], "top_elev": [60.0], "bottom_elev": [50.0]})
    out = vertical_differences(profiles, UNITS, {"AQT": 1e-9}, intervals, length_to_m=0.3048)
    assert out.iloc[0]["leakage_flux"] == pytest.approx(1e-9 * 86400 / 0.3048 * 20.0 / 10.0)


@pytest.mark.parametrize("text", ["2024/2025", "2024-03/2024-04", "2024-03-01/2024", "2024/2024-03-31",
                                  "20240301/20240331", "2024-03-01T25:00/2024-03-31", "2024-02-30/2024-03-01"])
def test_window_needs_full_dates(text):
    with pytest.raises(ParameterError, match="YYYY-MM-DD"):
        TimeWindow.parse(text)


@pytest.mark.parametrize("at", ["2024", "2024-05", "05/20/2024", "2024-05-20T"])
def test_date_needs_year_month_day(at):
    with pytest.raises(ParameterError, match="YYYY-MM-DD"):
        select_heads(HEADS, at=at)


def test_full_iso_8601_date_times():
    w = TimeWindow.parse("2024-03-01T00:00:00Z/2024-03-10T12:00")
    assert w.start == pd.Timestamp("2024-03-01") and w.end == pd.Timestamp("2024-03-10T12:00")  # not widened
    w = TimeWindow.parse("2024-03-01T02:00+02:00/2024-03-31")
    assert w.start == pd.Timestamp("2024-03-01T00:00") and w.end == pd.Timestamp("2024-03-31T23:59:59")
    w = TimeWindow.parse("2024-03-01 00:00:00.5/2024-03-02T00:00:00,25")
    assert w.end == pd.Timestamp("2024-03-02T00:00:00.25")
    # an offset on the date asked for is converted to UTC like the window (no mixing of naive and aware times)
    sel = select_heads(HEADS, at="2024-03-10T14:00:00+02:00").set_index("well_id")
    assert sel.loc["A", "head"] == 11.0 and sel.loc["A", "offset_days"] == pytest.approx(0.0)


def test_parse_instant_names_what_it_read():
    from hydroatlas.heads import parse_instant

    assert parse_instant("2024-03-01") == (pd.Timestamp("2024-03-01"), False)
    assert parse_instant("2024-03-01T06:30") == (pd.Timestamp("2024-03-01T06:30"), True)
    with pytest.raises(ParameterError, match=r"^--at '2024' is not an ISO 8601 date"):
        parse_instant("2024", name="--at")


def test_nearest_to_date_within_a_tolerance():
    # 2024-05-20: A's nearest reading is 2024-04-01 (49 days), B's 2024-06-01 (12 days)
    sel = select_heads(HEADS, at="2024-05-20", tolerance_days=31).set_index("well_id")
    assert list(sel.index) == ["B"] and sel.loc["B", "head"] == 8.0
    sel = select_heads(HEADS, at="2024-05-20", tolerance_days=49)  # the bound is inclusive
    assert sorted(sel["well_id"]) == ["A", "B"]
    assert len(select_heads(HEADS, at="2024-05-20", tolerance_days=None)) == 2  # no limit
    with pytest.raises(InsufficientDataError, match=r"within 5 days of 2024-05-20 \(the nearest is 12 days away\)"):
        select_heads(HEADS, at="2024-05-20", tolerance_days=5)
    for bad in (-1.0, float("nan"), float("inf"), "31"):
        with pytest.raises(ParameterError, match="tolerance"):
            select_heads(HEADS, at="2024-05-20", tolerance_days=bad)
