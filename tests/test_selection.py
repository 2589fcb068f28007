"""One selection policy for every command: poor readings and tests, pumping wells, excluded wells, --at tolerance.

The district here is hand-built (invented, in feet): eight wells screened in one aquifer whose heads lie on a
plane, h = 150 - 0.002 dx - 0.001 dy (ft, dx and dy in metres from M1), so every selected head is known. Into it
go what a real district holds:

- PW, a well of kind pumping, whose level is 30 ft below the plane (cone plus well loss);
- M5, a monitoring well with a whole-well pumping record active when it was read (12 ft below the plane);
- M6, a monitoring well whose pumping record ended before the reading (on the plane: it stays in);
- M4, whose pumping record starts after the reading (stays in); M3, with an active record on its other
  zone, OTHER, which has no readings (its zone S stays in);
- M7, a reading of quality poor 15 ft off the plane;
- K tests in ft/d, one of them poor.

Common practice (no source): a water level in a pumping well (or in a zone being pumped) is the formation head
minus the cone of depression and the well loss, so it is not a head of the aquifer around it.
"""

import json

import pytest
import rasterio
from scipy import stats as sps

from hydroatlas import open_store
from hydroatlas.errors import ParameterError
from hydroatlas.selection import (
    REASON_EXCLUDED, REASON_POOR, REASON_PUMPING_ACTIVE, SelectionPolicy, describe, select_heads, select_ktests,
)

from conftest import CRS, cli, write_csv

X0, Y0 = 600_000.0, 4_100_000.0
WELLS = {  # id: (dx, dy, kind)
    "M1": (0, 0, "monitoring"), "M2": (1000, 0, "monitoring"), "M3": (0, 1000, "monitoring"),
    "M4": (1000, 1000, "monitoring"), "M5": (250, 750, "monitoring"), "M6": (750, 250, "monitoring"),
    "M7": (1000, 500, "monitoring"), "PW": (500, 500, "pumping"),
}
READ_AT = "2024-06-01T12:00:00"
WINDOW = "2024-05-01/2024-06-30"


def plane(dx, dy):
    """The district's regional head (ft)."""
    return 150.0 - 0.002 * dx - 0.001 * dy


def head_of(well):
    dx, dy, _ = WELLS[well]
    return plane(dx, dy)


@pytest.fixture
def district(tmp_path, runner):
    store = tmp_path / "district.gpkg"
    assert cli(runner, "init", store, "--crs", CRS, "--length-unit", "ft").exit_code == 0
    d = tmp_path / "csv"
    d.mkdir()
    files = {
        "units": [["code", "name", "rank", "role"], ["AQ", "Upper aquifer", 1, "aquifer"],
                  ["BASE", "Base shale", 2, "aquitard"]],
        "wells": [["well_id", "x", "y", "ground_elev", "total_depth", "kind"]]
        + [[w, X0 + dx, Y0 + dy, 200, 100, kind] for w, (dx, dy, kind) in WELLS.items()],
        "picks": [["well_id", "unit", "top_depth", "bottom_depth"]]
        + [r for w in WELLS for r in ([w, "AQ", 0, 80], [w, "BASE", 80, 100])],
        "zones": [["well_id", "zone_id", "top_depth", "bottom_depth", "kind"]]
        + [[w, "S", 20, 60, "screen"] for w in WELLS] + [["M3", "OTHER", 65, 75, "screen"]],
        "heads": [["well_id", "zone_id", "measured_at", "head", "quality"]]
        + [[w, "S", READ_AT, head_of(w), "good"] for w in ("M1", "M2", "M3", "M4", "M6")]
        + [["PW", "S", READ_AT, head_of("PW") - 30.0, "good"],
           ["M5", "S", READ_AT, head_of("M5") - 12.0, "good"],
           ["M7", "S", READ_AT, head_of("M7") + 15.0, "poor"]]
        # an earlier round at three wells, a foot higher (for --at)
        + [[w, "S", "2024-03-01T12:00:00", head_of(w) + 1.0, "good"] for w in ("M1", "M2", "M3")],
        "pumping": [["well_id", "zone_id", "rate", "rate_unit", "start", "end"],
                    ["PW", "", 300, "gpm", "2020-01-01", ""],
                    ["M5", "", 50, "gpm", "2024-05-01", ""],
                    ["M6", "", 20, "gpm", "2023-01-01", "2023-12-31"],
                    ["M3", "OTHER", 10, "gpm", "2020-01-01", ""],
                    ["M4", "", 10, "gpm", "2024-07-01", ""]],
        "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit", "quality"],
                   ["M1", "S", "2024-05-01", "slug", 10, "ft/d", "good"],
                   ["M2", "S", "2024-05-01", "slug", 20, "ft/d", "good"],
                   ["M3", "S", "2024-05-01", "slug", 1000, "ft/d", "poor"],
                   ["M4", "S", "2024-05-01", "slug", 40, "ft/d", "fair"]],
    }
    for kind in ("units", "wells", "picks", "zones", "heads", "pumping", "ktests"):
        res = cli(runner, "import", store, kind, write_csv(d / f"{kind}.csv", files[kind]))
        assert res.exit_code == 0, res.output
    return store


def surface(runner, store, out, *args):
    res = cli(runner, "surface", store, "--unit", "AQ", "--quantity", "head", "--method", "idw", "--cell", 50,
              "--buffer", 800, "--out", out, *args)
    assert res.exit_code == 0, res.output
    side = json.loads((out / "AQ_head.json").read_text())
    return res, side


def reasons(side):
    return {(e["well_id"], e["zone_id"]): e["reason"] for e in side["selection"]["left_out"]}


def value_at(tif, well):
    dx, dy, _ = WELLS[well]
    with rasterio.open(tif) as src:
        return float(next(src.sample([(X0 + dx, Y0 + dy)], indexes=1))[0])


# -- pumping wells and pumping records -------------------------------------------------------------------------
def test_pumping_well_level_is_out_of_the_head_surface_by_default(district, runner, tmp_path):
    res, side = surface(runner, district, tmp_path / "default", "--window", WINDOW)
    assert side["n_points"] == 5 and sorted(side["wells"]) == ["M1", "M2", "M3", "M4", "M6"]
    assert reasons(side) == {("PW", "S"): "level in a well of kind pumping", ("M5", "S"): REASON_PUMPING_ACTIVE,
                             ("M7", "S"): REASON_POOR}
    assert all(e["what"] == "heads" and e["count"] == 1 for e in side["selection"]["left_out"])
    assert side["selection"]["policy"] == {"include_poor": False, "include_pumping_wells": False,
                                           "exclude_wells": []}
    assert "note: 3 head readings in 3 wells left out by the selection" in res.stderr
    assert "--include-pumping-wells" in res.stderr and "--include-poor" in res.stderr

    res, full = surface(runner, district, tmp_path / "all", "--window", WINDOW, "--include-pumping-wells")
    assert full["n_points"] == 7 and {"PW", "M5"} <= set(full["wells"])
    assert reasons(full) == {("M7", "S"): REASON_POOR}
    assert full["selection"]["policy"]["include_pumping_wells"] is True
    # IDW is a convex combination of the data (its definition): without the pumping well the head at its
    # location stays within the selected heads; with it, the surface dips towards the pumping level
    selected = [head_of(w) for w in side["wells"]]
    at_pw = value_at(side["files"]["raster"], "PW")
    assert min(selected) - 1e-6 <= at_pw <= max(selected) + 1e-6
    assert value_at(full["files"]["raster"], "PW") < at_pw - 20.0
    # and the levels of pumped wells spoil the leave-one-out check of the surface
    assert full["cross_validation"]["idw"]["rmse"] > side["cross_validation"]["idw"]["rmse"] + 5.0


def test_pumping_records_by_time_and_zone(district):
    """A record is active when start <= measured_at <= end (no end: still pumping); an empty zone_id is the whole
    well; a record of another zone, one that ended before or starts after the reading leave the zone in."""
    with open_store(district) as s:
        zh, left = select_heads(s, None, window=WINDOW)
        heads = zh.set_index("well_id")["head"]
        assert sorted(heads.index) == ["M1", "M2", "M3", "M4", "M6"]
        for w in heads.index:  # exactly the plane: nothing else leaked in
            assert heads[w] == pytest.approx(head_of(w), abs=1e-9)
        assert {e["well_id"]: e["reason"] for e in left}["M5"] == REASON_PUMPING_ACTIVE
        # with the pumping wells back, the levels come back unchanged
        zh, left = select_heads(s, SelectionPolicy(include_pumping_wells=True), window=WINDOW)
        heads = zh.set_index("well_id")["head"]
        assert heads["PW"] == pytest.approx(head_of("PW") - 30.0)
        assert heads["M5"] == pytest.approx(head_of("M5") - 12.0)
        assert [e["well_id"] for e in left] == ["M7"]


def test_a_record_on_the_zone_itself_counts(district, runner, tmp_path):
    path = write_csv(tmp_path / "p.csv", [["well_id", "zone_id", "rate", "rate_unit", "start", "end"],
                                          ["M1", "S", 5, "gpm", "2024-06-01", "2024-06-01T12:00:00"]])
    assert cli(runner, "import", district, "pumping", path).exit_code == 0
    with open_store(district) as s:
        zh, left = select_heads(s, None, window=WINDOW)
    assert "M1" not in set(zh["well_id"])  # the reading is at the record's end: start <= t <= end
    assert ("M1", "S", REASON_PUMPING_ACTIVE) in {(e["well_id"], e["zone_id"], e["reason"]) for e in left}


# -- quality ----------------------------------------------------------------------------------------------------
def test_poor_reading_is_out_and_back_with_include_poor(district, runner, tmp_path):
    _, side = surface(runner, district, tmp_path / "a", "--window", WINDOW)
    assert "M7" not in side["wells"]
    _, side = surface(runner, district, tmp_path / "b", "--window", WINDOW, "--include-poor")
    assert "M7" in side["wells"] and side["n_points"] == 6
    assert ("M7", "S") not in reasons(side)


def test_poor_k_test_is_out_of_stats_and_back(district, runner):
    """Reference: scipy.stats.gmean of the kept K values (ft/d as imported)."""
    res = cli(runner, "stats", district, "--format", "json", "--k-unit", "ft/d", "--unit", "AQ")
    assert res.exit_code == 0, res.output
    (row,) = json.loads(res.stdout)
    assert (row["n_tests"], row["n_left_out"]) == (3, 1)
    assert row["k_geomean"] == pytest.approx(sps.gmean([10, 20, 40]), rel=1e-9)
    assert res.stderr == ("note: 1 K test in 1 well left out by the selection: 1 quality poor; "
                          "--include-poor brings them back\n")
    res = cli(runner, "stats", district, "--format", "json", "--k-unit", "ft/d", "--unit", "AQ", "--include-poor")
    (row,) = json.loads(res.stdout)
    assert (row["n_tests"], row["n_left_out"]) == (4, 0)
    assert row["k_geomean"] == pytest.approx(sps.gmean([10, 20, 40, 1000]), rel=1e-9)
    assert res.stderr == ""
    # the old option is still accepted (it is the default now), but not together with its opposite
    old = cli(runner, "stats", district, "--format", "json", "--k-unit", "ft/d", "--unit", "AQ", "--exclude-poor")
    assert old.exit_code == 0 and json.loads(old.stdout)[0]["n_tests"] == 3
    both = cli(runner, "stats", district, "--include-poor", "--exclude-poor")
    assert both.exit_code == 2 and both.output == "hydroatlas: error: give --include-poor or --exclude-poor, not both\n"
    assert "now the default" in " ".join(cli(runner, "stats", "--help").output.split())


# -- excluded wells -----------------------------------------------------------------------------------------------
def test_exclude_wells_on_stats_and_surface(district, runner, tmp_path):
    res = cli(runner, "stats", district, "--format", "json", "--k-unit", "ft/d", "--unit", "AQ",
              "--exclude-wells", "M1")
    (row,) = json.loads(res.stdout)
    assert (row["n_tests"], row["n_left_out"]) == (2, 2)
    assert row["k_geomean"] == pytest.approx(sps.gmean([20, 40]), rel=1e-9)
    assert "1 well left out by exclude_wells" in res.stderr and "1 quality poor" in res.stderr
    _, side = surface(runner, district, tmp_path / "x", "--window", WINDOW, "--exclude-wells", "M2,M3",
                      "--exclude-wells", "M4")
    assert sorted(side["wells"]) == ["M1", "M6"]
    assert side["selection"]["policy"]["exclude_wells"] == ["M2", "M3", "M4"]
    assert {w for (w, _), r in reasons(side).items() if r == REASON_EXCLUDED} == {"M2", "M3", "M4"}
    # M2 has two readings, one inside the window: the count is of the readings the window would have used
    count = {e["well_id"]: e["count"] for e in side["selection"]["left_out"]}
    assert count["M2"] == 1 and count["M4"] == 1
    _, side = surface(runner, district, tmp_path / "y", "--exclude-wells", "M2")  # no window: all readings
    assert {e["well_id"]: e["count"] for e in side["selection"]["left_out"]}["M2"] == 2


@pytest.mark.parametrize("command", ["stats", "surface", "verticals", "grid"])
def test_unknown_excluded_well_is_exit_2(district, runner, tmp_path, command):
    needs = {"surface": ["--unit", "AQ", "--out", tmp_path], "grid": ["--cell", 250, "--out", tmp_path / "m.nc"]}
    res = cli(runner, command, district, *needs.get(command, []), "--exclude-wells", "M1,NOPE")
    assert res.exit_code == 2
    assert res.output == "hydroatlas: error: --exclude-wells names well(s) not in the store: NOPE\n"


def test_empty_well_id_is_refused_while_reading_the_options(district, runner):
    res = cli(runner, "stats", district, "--exclude-wells", "M1,,M2")
    assert res.exit_code == 2 and len(res.output.strip().splitlines()) == 1
    assert res.output.startswith("hydroatlas: error: ") and "empty well id" in res.output


def test_exclude_wells_keeps_pumping_tests(district):
    """K tests in pumping wells are valid tests: only quality and exclude_wells apply to them."""
    with open_store(district) as s:
        frame, left = select_ktests(s, SelectionPolicy(exclude_wells="M2"))
    assert sorted(frame["well_id"]) == ["M1", "M4"]
    assert sorted((e["well_id"], e["reason"]) for e in left) == [("M2", REASON_EXCLUDED), ("M3", REASON_POOR)]


# -- --at and its tolerance ----------------------------------------------------------------------------------------
def test_at_uses_readings_within_the_tolerance_only(district, runner, tmp_path):
    # 2024-03-10: the March round is 8.5 days away at M1-M3; M4 and M6 were read only in June (82.5 days)
    with open_store(district) as s:
        zh, left = select_heads(s, None, at="2024-03-10", tolerance_days=31)
        assert sorted(zh["well_id"]) == ["M1", "M2", "M3"]
        assert zh.set_index("well_id")["head"]["M2"] == pytest.approx(head_of("M2") + 1.0)
        far = [e for e in left if e["reason"] == "no reading within 31 days of 2024-03-10"]
        assert sorted(e["well_id"] for e in far) == ["M4", "M6"] and all(e["count"] == 1 for e in far)
        zh, left = select_heads(s, None, at="2024-03-10", tolerance_days=90)
        assert sorted(zh["well_id"]) == ["M1", "M2", "M3", "M4", "M6"]
        assert not [e for e in left if e["reason"].startswith("no reading within")]
        with pytest.raises(ParameterError, match="tolerance"):
            select_heads(s, None, at="2024-03-10", tolerance_days=-1)
    res, side = surface(runner, district, tmp_path / "at", "--at", "2024-03-10")
    assert side["n_points"] == 3 and side["at"] == "2024-03-10" and side["tolerance_days"] == 31
    assert ("warning: 2 zones left out: no reading within 31 days of 2024-03-10 (--tolerance DAYS widens the "
            "search)") in res.stderr
    res, side = surface(runner, district, tmp_path / "wide", "--at", "2024-03-10", "--tolerance", "90")
    assert side["n_points"] == 5 and "warning" not in res.stderr
    res = cli(runner, "surface", district, "--unit", "AQ", "--method", "idw", "--cell", 50, "--out", tmp_path / "n",
              "--at", "2024-03-10", "--tolerance", "48h")
    assert res.exit_code == 2 and "no zone has a head reading within 2 days of 2024-03-10" in res.output
    res = cli(runner, "surface", district, "--unit", "AQ", "--at", "2024-03-10", "--tolerance", "-1",
              "--out", tmp_path / "n")
    assert res.exit_code == 2 and res.output.startswith("hydroatlas: error: --tolerance")


@pytest.mark.parametrize("command", ["verticals", "surface", "threepoint"])
def test_every_command_with_at_has_tolerance(runner, command):
    res = cli(runner, command, "--help")
    assert "--at" in res.output and "--tolerance" in res.output


@pytest.mark.parametrize("command", ["stats", "verticals", "surface", "paths", "drawdown", "grid", "map", "layers",
                                     "figures"])
def test_every_command_has_the_selection_options(runner, command):
    res = cli(runner, command, "--help")
    for option in ("--include-poor", "--include-pumping-wells", "--exclude-wells"):
        assert option in res.output, (command, option)


# -- retired records -------------------------------------------------------------------------------------------------
def test_retired_records_stay_out_and_are_not_listed_as_left_out(district, runner, tmp_path):
    assert cli(runner, "retire", district, "wells", "M2", "--reason", "casing failure").exit_code == 0
    assert cli(runner, "retire", district, "heads", f"M1/S/{READ_AT}", "--reason", "logger drift").exit_code == 0
    _, side = surface(runner, district, tmp_path / "r", "--window", WINDOW)
    assert sorted(side["wells"]) == ["M3", "M4", "M6"]  # M1 has no reading left in the window
    assert not {"M1", "M2"} & {e["well_id"] for e in side["selection"]["left_out"]}
    with open_store(district) as s:
        frame, left = select_ktests(s, None)
    assert "M2" not in set(frame["well_id"]) and "M2" not in {e["well_id"] for e in left}
    # a retired well is known: excluding it is no error
    res = cli(runner, "stats", district, "--exclude-wells", "M2", "--format", "json")
    assert res.exit_code == 0, res.output


# -- the other outputs record the selection ---------------------------------------------------------------------------
def test_grid_manifest_and_verticals_record_the_selection(district, runner, tmp_path):
    out = tmp_path / "g"
    surface(runner, district, out, "--window", WINDOW)
    res = cli(runner, "grid", district, "--cell", 250, "--layers", "AQ", "--surfaces", out, "--out", out / "m.nc")
    assert res.exit_code == 0, res.output
    manifest = json.loads((out / "manifest.json").read_text())
    assert [(e["what"], e["well_id"], e["reason"]) for e in manifest["selection"]["left_out"]] == [
        ("ktests", "M3", REASON_POOR)]
    assert {e["well_id"] for e in manifest["head_surface_selections"]["AQ"]["left_out"]} == {"PW", "M5", "M7"}
    with open_store(district) as s:
        from hydroatlas import workflows

        pairs, _ = workflows.verticals(s, window=WINDOW)
        rows = workflows.unit_stats(s, k_unit="ft/d")
    assert {e["well_id"] for e in pairs.attrs["selection"]["left_out"] if e["what"] == "heads"} == {"PW", "M5", "M7"}
    assert [e["well_id"] for e in rows.selection["left_out"]] == ["M3"]


# -- the policy object -------------------------------------------------------------------------------------------------
def test_policy_checks_itself_and_round_trips():
    p = SelectionPolicy(include_poor=True, exclude_wells=" W1, W2 ,W1")
    assert p.exclude_wells == ("W1", "W2")
    assert SelectionPolicy.from_dict(p.to_dict()) == p
    assert SelectionPolicy.from_dict(None) == SelectionPolicy()
    with pytest.raises(ParameterError, match="'include_poor' parameter"):
        SelectionPolicy(include_poor="yes")
    with pytest.raises(ParameterError, match="empty well id"):
        SelectionPolicy(exclude_wells=["W1", ""])
    with pytest.raises(AttributeError):
        p.include_poor = False  # frozen


def test_nothing_left_is_a_clear_error(district, runner):
    res = cli(runner, "verticals", district, "--exclude-wells", ",".join(WELLS))
    assert res.exit_code == 2
    assert res.output.startswith("hydroatlas: error: no head readings are left after the selection: 11 head readings")


def test_describe_counts_and_hints():
    left = [{"what": "heads", "well_id": "A", "zone_id": "1", "reason": REASON_POOR, "count": 2},
            {"what": "heads", "well_id": "B", "zone_id": "1", "reason": REASON_EXCLUDED, "count": 1},
            {"what": "heads", "well_id": "C", "zone_id": "2", "reason": "no reading within 5 days of 2024-01-01",
             "count": 4}]
    assert describe(left) == [  # the library names Python parameters
        ("note", "3 head readings in 2 wells left out by the selection: 2 quality poor, 1 well left out by "
                 "exclude_wells; include_poor=True brings them back"),
        ("warning", "1 zone left out: no reading within 5 days of 2024-01-01 (tolerance_days=DAYS widens the "
                    "search)")]
    options = {"include_poor": "--include-poor", "tolerance_days": "--tolerance"}  # as the command line spells them
    assert describe(left, names=options) == [
        ("note", "3 head readings in 2 wells left out by the selection: 2 quality poor, 1 well left out by "
                 "exclude_wells; --include-poor brings them back"),
        ("warning", "1 zone left out: no reading within 5 days of 2024-01-01 (--tolerance DAYS widens the search)")]
    assert describe([]) == []
