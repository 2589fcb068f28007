"""`hydroatlas check` finds straddles, gaps, orphans and outliers."""

import json

import numpy as np

from conftest import MINI, cli, write_csv


def kinds(runner, store):
    res = cli(runner, "check", store, "--json")
    assert res.exit_code == 0, res.output
    return json.loads(res.output)


def test_findings_on_mini(mini_store, runner):
    found = kinds(runner, mini_store)
    by_kind = {}
    for f in found:
        by_kind.setdefault(f["kind"], []).append(f)
    assert [(f["well_id"], f["zone_id"]) for f in by_kind["straddle"]] == [("W2", "S2")]
    assert [f["well_id"] for f in by_kind["well_without_picks"]] == ["W4"]
    assert [(f["well_id"], f["zone_id"]) for f in by_kind["inferred_unit"]] == [("W4", "S1")]
    # W4/S1 has a K test but no head: it is measured, so no zone is an orphan
    assert "zone_without_data" not in by_kind
    res = cli(runner, "check", mini_store)
    assert "straddle" in res.output and "well_without_picks: 1" in res.output


def test_pick_gap_overlap_and_outliers(mini_store, tmp_path, runner):
    picks = [MINI["picks.csv"][0], ["W2", "MID", 46, 55]]  # gap between TOP (0-45) and MID
    cli(runner, "import", mini_store, "picks", write_csv(tmp_path / "picks.csv", picks))
    rng = np.random.default_rng(3)
    rows = [MINI["ktests.csv"][0]]
    for d, k in enumerate(10 ** rng.normal(0, 0.1, 12)):
        rows.append(["W1", "P1", f"2023-01-{d + 1:02d}", "slug", f"{k:.4f}", "m/d", "good", ""])
    rows.append(["W1", "P1", "2023-02-01", "slug", "1e-6", "m/d", "good", "typo"])  # six orders low
    cli(runner, "import", mini_store, "ktests", write_csv(tmp_path / "k.csv", rows))
    heads = [MINI["heads.csv"][0], ["W1", "P1", "2024-06-02T10:00:00", 1.0, "", "", ""],
             ["W1", "P1", "2024-06-03T10:00:00", 1.0, "", "", ""]]
    cli(runner, "import", mini_store, "heads", write_csv(tmp_path / "h.csv", heads))
    found = kinds(runner, mini_store)
    got = {f["kind"] for f in found}
    assert {"pick_gap", "k_outlier", "head_below_zone"} <= got
    outlier = [f for f in found if f["kind"] == "k_outlier"]
    assert len(outlier) == 1 and "2023-02-01" in outlier[0]["message"]
    assert any(f["kind"] == "unit_without_tests" for f in found) is False


def test_head_outlier_against_unit(empty_store, tmp_path, runner):
    units = [["code", "name", "rank", "role"], ["A", "a", 1, "aquifer"]]
    wells = [["well_id", "x", "y", "ground_elev", "total_depth"]]
    picks = [["well_id", "unit", "top_depth", "bottom_depth"]]
    zones = [["well_id", "zone_id", "top_depth", "bottom_depth"]]
    heads = [["well_id", "zone_id", "measured_at", "head"]]
    for i in range(8):
        wells.append([f"W{i}", 610000 + 100 * i, 4100000, 500, 200])
        picks.append([f"W{i}", "A", 0, 200])
        zones.append([f"W{i}", "S", 100, 110])
        heads.append([f"W{i}", "S", "2024-01-01", 450 + i * 0.5 if i < 7 else 395])
    for kind, rows in (("units", units), ("wells", wells), ("picks", picks), ("zones", zones), ("heads", heads)):
        assert cli(runner, "import", empty_store, kind, write_csv(tmp_path / f"{kind}.csv", rows)).exit_code == 0
    found = [f for f in kinds(runner, empty_store) if f["kind"] == "head_outlier"]
    assert [f["well_id"] for f in found] == ["W7"]


def test_orphan_zone_and_well(mini_store, tmp_path, runner):
    wells = [MINI["wells.csv"][0], ["W5", 613000, 4100000, 300, 50, "", ""]]
    cli(runner, "import", mini_store, "wells", write_csv(tmp_path / "w.csv", wells))
    zones = [MINI["zones.csv"][0], ["W1", "P4", 90, 95, "port", ""]]
    cli(runner, "import", mini_store, "zones", write_csv(tmp_path / "z.csv", zones))
    found = kinds(runner, mini_store)
    assert ("W1", "P4") in {(f["well_id"], f["zone_id"]) for f in found if f["kind"] == "zone_without_data"}
    assert "W5" in {f["well_id"] for f in found if f["kind"] == "well_without_zones"}


def test_overlapping_zones_of_one_well(mini_store, runner):
    """Mini: W2 has screens S1 at 35-45 and S2 at 41-51, overlapping by 4."""
    found = [f for f in kinds(runner, mini_store) if f["kind"] == "zone_overlap"]
    assert len(found) == 1
    f = found[0]
    assert (f["severity"], f["well_id"], f["zone_id"], f["other_zone_id"]) == ("warning", "W2", "S1", "S2")
    assert f["overlap"] == 4.0
    assert "S1 (depth 35-45)" in f["message"] and "S2 (depth 41-51)" in f["message"]
    assert "overlap by 4" in f["message"]
    res = cli(runner, "check", mini_store)
    assert res.exit_code == 0
    row = [line for line in res.output.splitlines() if line.lstrip().startswith("zone_overlap ")]
    assert len(row) == 1 and "W2" in row[0] and "overlap by 4" in row[0]
    assert "zone_overlap: 1" in res.output


def test_nested_duplicate_and_touching_zones(mini_store, tmp_path, runner):
    zones = [MINI["zones.csv"][0],
             ["W1", "P5", 72, 75.5, "port", ""],     # inside P3 (70-80): overlap 3.5
             ["W1", "P6", 70, 80, "port", ""],       # the same interval as P3: overlap 10, and 3.5 with P5
             ["W3", "S2", 30, 40, "screen", ""],     # touches S1 (20-30) at 30: no overlap
             ["W4", "S2", 25.005, 30, "screen", ""]]  # within the tolerance of S1 (15-25): ignored
    assert cli(runner, "import", mini_store, "zones", write_csv(tmp_path / "z.csv", zones)).exit_code == 0
    found = {(f["well_id"], f["zone_id"], f["other_zone_id"]): f["overlap"]
             for f in kinds(runner, mini_store) if f["kind"] == "zone_overlap"}
    assert found == {("W1", "P3", "P6"): 10.0, ("W1", "P3", "P5"): 3.5, ("W1", "P6", "P5"): 3.5,
                     ("W2", "S1", "S2"): 4.0}


def test_overlap_names_the_length_unit(mini_store):
    from hydroatlas import quality, workflows
    from hydroatlas.store import open_store

    with open_store(mini_store) as s:
        found = quality.find_issues(
            wells=s.read("wells"), zones=s.read("zones"), picks=s.read("picks"), units=s.read("units"),
            ktests=s.read("ktests", ["well_id", "zone_id", "test_id", "k_ms"]),
            heads=s.read("heads", ["well_id", "zone_id", "head"]), assignment=workflows.zone_assignment(s),
            length_unit="ft")
    (f,) = [f for f in found if f["kind"] == "zone_overlap"]
    assert f["message"].endswith("overlap by 4 ft")
