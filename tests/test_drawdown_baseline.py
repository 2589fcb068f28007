"""`hydroatlas drawdown` against the baseline in the measured heads, checked with Theis (W(u) = E1(u), scipy).

A hand-built district (invented values, metre store): a confined aquifer AQ (top 350 m, bottom 268 m, 82 m
thick) under an aquitard CAP and over an aquitard BASE, a planar head surface at 354-360 m, K = 10 m/d, and
pumping wells whose records start and stop around the head window 2024-01-01/2024-01-31:

- PW1 pumps 2000 m3/d since 2020-01-01 (in the baseline);
- PW2 pumped 1000 m3/d from 2015 to 2018 (stopped before the window: not in the baseline);
- PW3 pumped 500 m3/d from 2023-06-01 to 2024-01-20 (stopped inside the window: in the baseline at rate 0);
- PW4 pumps 1500 m3/d since 2024-03-01 (after the window: not in the baseline, a warning).

Four wells stop inside AQ at 114 m depth (64 m of AQ, ending at total depth): they are not full penetrations.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import rasterio
from scipy.special import exp1

from conftest import CRS, cli, write_csv

X0, Y0 = 610000.0, 4100000.0
A = -0.001  # head gradient toward +x (m/m)
K_MD = 10.0
TOP, BOTTOM = 350.0, 268.0  # AQ's top and bottom elevation (ground 400 m, picks 50-132 m)
T_FULL = K_MD * (TOP - BOTTOM)  # 820 m2/d: K x the full-penetration thickness (82 m)
WINDOW = "2024-01-01/2024-01-31"
WINDOW_END = pd.Timestamp("2024-01-31T23:59:59")  # a date-only end includes that whole day
S = 1e-4
DAYS = 365.0

MONITORING = [(f"M{i:02d}", X0 + 600 + 1200 * (i % 5), Y0 + 500 + 1000 * (i // 5)) for i in range(20)]
PARTIAL = [(f"D{i}", X0 + 1200 + 1200 * i, Y0 + 3800) for i in range(4)]
PUMPING = {"PW1": (X0 + 2000, Y0 + 2000), "PW2": (X0 + 4000, Y0 + 1000), "PW3": (X0 + 4500, Y0 + 3000),
           "PW4": (X0 + 1000, Y0 + 300)}
SPRING = ("SP", X0 + 5500, Y0 + 2000)


def plane(x, y):
    return 360.0 + A * (x - X0)


def theis(q, r, t, T=T_FULL):
    """source: Theis (1935), s = Q / (4 pi T) W(u), u = r^2 S / (4 T t), W = E1 from scipy.special.exp1."""
    r = np.maximum(np.asarray(r, float), 0.1)  # the workflow's well radius
    return q / (4 * math.pi * T) * exp1(r * r * S / (4 * T * t))


def build(tmp_path, runner, *, full="all"):
    """The district; ``full``: 'all' (every M and PW well reaches BASE), 'two' (only M00 and M01 do), 'none'."""
    tmp_path.mkdir(parents=True, exist_ok=True)
    store = tmp_path / "dd.gpkg"
    assert cli(runner, "init", store, "--crs", CRS).exit_code == 0
    rows = {
        "units": [["code", "name", "rank", "role"], ["CAP", "cap", 1, "aquitard"], ["AQ", "aquifer", 2, "aquifer"],
                  ["BASE", "base", 3, "aquitard"]],
        "wells": [["well_id", "x", "y", "ground_elev", "total_depth", "kind"]],
        "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
        "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
        "heads": [["well_id", "zone_id", "measured_at", "head"]],
        "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]],
    }

    def add_well(wid, x, y, kind, reaches_base):
        td = 160 if reaches_base else 132  # 132: the AQ pick ends at total depth
        rows["wells"].append([wid, x, y, 400, td, kind])
        rows["picks"] += [[wid, "CAP", 0, 50], [wid, "AQ", 50, 132]]
        if reaches_base:
            rows["picks"].append([wid, "BASE", 132, 150])

    for i, (wid, x, y) in enumerate(MONITORING):
        add_well(wid, x, y, "monitoring", full == "all" or (full == "two" and i < 2))
        rows["zones"].append([wid, "S", 100, 110])
        rows["heads"].append([wid, "S", "2024-01-15", f"{plane(x, y):.6f}"])
        rows["ktests"].append([wid, "S", "2023-05-01", "slug", K_MD, "m/d"])
    for wid, x, y in PARTIAL:  # drilling stopped inside AQ: 64 m of it, the pick ends at total depth
        rows["wells"].append([wid, x, y, 400, 114, "monitoring"])
        rows["picks"] += [[wid, "CAP", 0, 50], [wid, "AQ", 50, 114]]
        rows["zones"].append([wid, "S", 100, 110])
        rows["heads"].append([wid, "S", "2024-01-15", f"{plane(x, y):.6f}"])
    for wid, (x, y) in PUMPING.items():
        add_well(wid, x, y, "pumping", full == "all")
        rows["zones"].append([wid, "P", 60, 120])
    rows["pumping"] = [["well_id", "zone_id", "rate", "rate_unit", "start", "end"],
                       ["PW1", "P", 2000, "m3/d", "2020-01-01", ""],
                       ["PW2", "P", 1000, "m3/d", "2015-01-01", "2018-01-01"],
                       ["PW3", "P", 500, "m3/d", "2023-06-01", "2024-01-20"],
                       ["PW4", "P", 1500, "m3/d", "2024-03-01", ""]]
    sid, sx, sy = SPRING
    rows["springs"] = [["spring_id", "x", "y", "elev", "unit"], [sid, sx, sy, f"{plane(sx, sy):.6f}", "AQ"]]
    for kind in ("units", "wells", "picks", "zones", "heads", "ktests", "pumping", "springs"):
        res = cli(runner, "import", store, kind, write_csv(tmp_path / f"{kind}.csv", rows[kind]))
        assert res.exit_code == 0, res.output
    out = tmp_path / "out"
    res = cli(runner, "surface", store, "--unit", "AQ", "--method", "uk", "--variogram", "exponential",
              "--sill", 1.0, "--range", 3000, "--cell", 50, "--window", WINDOW, "--out", out)
    assert res.exit_code == 0, res.output
    return store, out


@pytest.fixture
def district(tmp_path, runner):
    return build(tmp_path, runner)


def drawdown(runner, store, out, *extra):
    return cli(runner, "drawdown", store, "--unit", "AQ", "--days", DAYS, "-S", S, "--threshold", 0.01,
               "--out", out, *extra)


def raster(path):
    with rasterio.open(path) as r:
        band = r.read(1, masked=True)
        rows, cols = np.nonzero(~band.mask)
        xs, ys = rasterio.transform.xy(r.transform, rows, cols)
    return np.asarray(band[rows, cols], float), np.asarray(xs), np.asarray(ys)


def test_no_change_is_zero_everywhere(district, runner):
    """A scenario that changes nothing adds no drawdown anywhere: the measured heads already hold the
    cones of the baseline wells (PW1 pumping through the window; PW3 stopped inside it)."""
    store, out = district
    res = drawdown(runner, store, out)
    assert res.exit_code == 0, res.output
    dd, _, _ = raster(out / "AQ_drawdown.tif")
    assert dd.size > 1000 and np.all(dd == 0.0)
    before, _, _ = raster(out / "AQ_head.tif")
    after, _, _ = raster(out / "AQ_head_drawdown.tif")
    np.testing.assert_array_equal(after, before)
    side = json.loads((out / "AQ_drawdown.json").read_text())
    assert side["mode"] == "change from baseline" and side["changes"] == []
    window = side["baseline"]["head_window"]
    assert window["text"] == WINDOW and window["to"] == WINDOW_END.isoformat()
    base = {w["well_id"]: w for w in side["baseline"]["wells"]}
    assert set(base) == {"PW1", "PW3"}  # PW2 stopped before the window, PW4 started after it
    assert base["PW1"]["rate"] == pytest.approx(2000.0) and base["PW1"]["rate_unit"] == "m3/d"
    assert base["PW3"]["rate"] == 0.0 and base["PW3"]["stopped_in_window"]
    assert base["PW3"]["records"][0]["end"].startswith("2024-01-20")
    assert "PW4" in res.output and "after the head window" in res.output  # warned, not silently added


def test_added_wells_equal_theis(district, runner):
    """source: Theis (1935) via scipy.special.exp1: the change of a scenario with a proposed well and a
    restarted well (PW2, not in the baseline) is the sum of their Theis drawdowns, at every cell and at the
    spring; T = 820 m2/d (10 m/d x 82 m)."""
    store, out = district
    nx, ny, qn = X0 + 3000.0, Y0 + 1500.0, 3000.0
    res = drawdown(runner, store, out, "--new-well", f"NEW,{nx},{ny},{qn}", "--rate", "PW2=800")
    assert res.exit_code == 0, res.output
    dd, xs, ys = raster(out / "AQ_drawdown.tif")
    p2 = PUMPING["PW2"]
    expected = theis(qn, np.hypot(xs - nx, ys - ny), DAYS) + theis(800.0, np.hypot(xs - p2[0], ys - p2[1]), DAYS)
    np.testing.assert_allclose(dd, expected, rtol=1e-5, atol=1e-6)  # float32 raster
    impacts = pd.read_csv(out / "AQ_drawdown_impacts.csv")
    sid, sx, sy = SPRING
    at_spring = impacts.loc[impacts["id"] == sid, "drawdown"].iloc[0]
    assert at_spring == pytest.approx(theis(qn, math.hypot(sx - nx, sy - ny), DAYS)
                                      + theis(800.0, math.hypot(sx - p2[0], sy - p2[1]), DAYS), rel=1e-6)
    side = json.loads((out / "AQ_drawdown.json").read_text())
    changes = {c["well_id"]: c for c in side["changes"]}
    assert changes["NEW"]["status"] == "proposed" and changes["NEW"]["change"] == pytest.approx(qn)
    assert changes["PW2"]["status"] == "started" and changes["PW2"]["baseline_rate"] == 0.0
    assert "PW1" not in changes  # unchanged baseline wells add nothing


def test_stopped_well_gives_recovery(district, runner):
    """source: Theis (1935) via scipy.special.exp1: stopping PW1 (2000 m3/d in the baseline) gives a recovery
    equal to minus its Theis drawdown over the scenario's duration."""
    store, out = district
    res = drawdown(runner, store, out, "--rate", "PW1=0")
    assert res.exit_code == 0, res.output
    dd, xs, ys = raster(out / "AQ_drawdown.tif")
    p1 = PUMPING["PW1"]
    np.testing.assert_allclose(dd, -theis(2000.0, np.hypot(xs - p1[0], ys - p1[1]), DAYS), rtol=1e-5, atol=1e-6)
    assert dd.max() <= 0.0 and "largest recovery" in res.output
    before, _, _ = raster(out / "AQ_head.tif")
    after, _, _ = raster(out / "AQ_head_drawdown.tif")
    np.testing.assert_allclose(after, before - dd, atol=1e-3)
    side = json.loads((out / "AQ_drawdown.json").read_text())
    assert [(c["well_id"], c["status"], c["change"]) for c in side["changes"]] == [("PW1", "stopped", -2000.0)]


def test_from_unpumped_is_the_sum_of_all_wells(district, runner):
    """source: Theis (1935) via scipy.special.exp1, with superposition in time: --from-unpumped gives the
    drawdown of every well of the scenario (PW1 at its baseline rate plus the proposed well), and the
    starting surface is the measured one plus the baseline records' drawdown at the window's end: PW1 since
    2020-01-01, PW3 from 2023-06-01 less its recovery since 2024-01-20."""
    store, out = district
    nx, ny, qn = X0 + 3000.0, Y0 + 1500.0, 3000.0
    res = drawdown(runner, store, out, "--new-well", f"NEW,{nx},{ny},{qn}", "--from-unpumped", "--name", "total")
    assert res.exit_code == 0, res.output
    dd, xs, ys = raster(out / "AQ_drawdown_total.tif")
    p1, p3 = PUMPING["PW1"], PUMPING["PW3"]
    r1 = np.hypot(xs - p1[0], ys - p1[1])
    total = theis(2000.0, r1, DAYS) + theis(qn, np.hypot(xs - nx, ys - ny), DAYS)
    np.testing.assert_allclose(dd, total, rtol=1e-5, atol=1e-6)
    day = pd.Timedelta(days=1)
    t1 = (WINDOW_END - pd.Timestamp("2020-01-01")) / day
    t3_on = (WINDOW_END - pd.Timestamp("2023-06-01")) / day
    t3_off = (WINDOW_END - pd.Timestamp("2024-01-20")) / day
    r3 = np.hypot(xs - p3[0], ys - p3[1])
    adjust = theis(2000.0, r1, t1) + theis(500.0, r3, t3_on) - theis(500.0, r3, t3_off)
    before, _, _ = raster(out / "AQ_head.tif")
    after, _, _ = raster(out / "AQ_head_total.tif")
    np.testing.assert_allclose(after, before + adjust - total, atol=2e-3)  # float32 rasters near 360 m
    side = json.loads((out / "AQ_drawdown_total.json").read_text())
    assert side["mode"] == "from unpumped" and "unpumped" in side["result"]
    assert side["adjustment_to_unpumped"]["max"] == pytest.approx(float(np.max(adjust)), rel=0.05)


def test_transmissivity_from_full_penetrations(district, runner):
    """T = geometric-mean K x the thickness of the unit from wells that penetrate it fully (82 m), not the
    mean of all picks (the four wells ending inside the unit at 64 m would pull it down): 820 m2/d."""
    store, out = district
    res = drawdown(runner, store, out, "--new-well", f"N,{X0 + 3000},{Y0 + 1500},100")
    assert res.exit_code == 0, res.output
    side = json.loads((out / "AQ_drawdown.json").read_text())
    assert side["transmissivity_m2_per_d"] == pytest.approx(T_FULL, rel=1e-9)
    th = side["transmissivity"]["thickness"]
    assert th["n_full_penetrations"] == 24 and not {"D0", "D1", "D2", "D3"} & set(th["full_penetration_wells"])
    assert th["mean_thickness_of_all_picks"] < 80.0  # what the old rule used
    assert all(w["transmissivity_m2_per_d"] == pytest.approx(T_FULL) for w in side["wells"])


def test_few_or_no_full_penetrations(tmp_path, runner):
    """Fewer than three full penetrations: a warning (stderr and sidecar) and their mean; none: refused unless
    -T is given."""
    store, out = build(tmp_path / "two", runner, full="two")
    res = drawdown(runner, store, out, "--new-well", f"N,{X0 + 3000},{Y0 + 1500},100")
    assert res.exit_code == 0, res.output
    assert "warning: only 2 well(s) penetrate unit AQ fully" in res.output
    side = json.loads((out / "AQ_drawdown.json").read_text())
    assert any("only 2 well(s)" in w for w in side["warnings"])
    assert side["transmissivity_m2_per_d"] == pytest.approx(T_FULL)
    store, out = build(tmp_path / "none", runner, full="none")
    res = drawdown(runner, store, out, "--new-well", f"N,{X0 + 3000},{Y0 + 1500},100")
    assert res.exit_code == 2
    assert "no well penetrates unit AQ fully" in res.output and "--transmissivity" in res.output
    res = drawdown(runner, store, out, "--new-well", f"N,{X0 + 3000},{Y0 + 1500},100", "-T", 500)
    assert res.exit_code == 0, res.output


def test_named_scenario_files(district, runner):
    """--name puts the name in every output file; without it the earlier names stay."""
    store, out = district
    res = drawdown(runner, store, out, "--new-well", f"N,{X0 + 3000},{Y0 + 1500},100", "--name", "planA")
    assert res.exit_code == 0, res.output
    for name in ("AQ_drawdown_planA.tif", "AQ_head_planA.tif", "AQ_drawdown_planA.json",
                 "AQ_drawdown_planA_impacts.csv"):
        assert (out / name).is_file(), name
    assert not (out / "AQ_drawdown.tif").exists()
    assert json.loads((out / "AQ_drawdown_planA.json").read_text())["scenario"] == "planA"
    res = cli(runner, "map", store, "--unit", "AQ", "--surfaces", out, "--out", out / "map.html")
    assert res.exit_code == 0, res.output
    assert "Scenario planA: drawdown change" in (out / "map.html").read_text(encoding="utf-8")
    res = drawdown(runner, store, out, "--new-well", f"N,{X0 + 3000},{Y0 + 1500},100", "--name", "drawdown")
    assert res.exit_code == 2 and "reserved" in res.output
    res = drawdown(runner, store, out, "--new-well", f"PW1,{X0 + 3000},{Y0 + 1500},100")
    assert res.exit_code == 2 and "--rate PW1=Q" in res.output


def test_head_below_unit_top_and_bottom_flagged(district, runner):
    """A strong proposed well 5 m from M00: the head there falls below the unit's bottom (268 m), farther out
    below its top (350 m: confined to unconfined); each flag follows head after = head before - Theis."""
    store, out = district
    _, mx, my = MONITORING[0]
    nx, ny, qn = mx + 5.0, my, 60000.0
    res = drawdown(runner, store, out, "--new-well", f"BIG,{nx},{ny},{qn}")
    assert res.exit_code == 0, res.output
    assert "below the top of unit AQ" in res.output
    impacts = pd.read_csv(out / "AQ_drawdown_impacts.csv").set_index("id")
    expected = theis(qn, np.hypot(impacts["x"] - nx, impacts["y"] - ny), DAYS)
    np.testing.assert_allclose(impacts["drawdown"], expected, rtol=1e-6)
    np.testing.assert_allclose(impacts["head_after"], impacts["head_before"] - impacts["drawdown"], atol=1e-9)
    np.testing.assert_allclose(impacts["unit_top_elev"], TOP, atol=1e-9)
    np.testing.assert_allclose(impacts["unit_bottom_elev"], BOTTOM, atol=1e-9)
    assert (impacts["below_unit_top"] == (impacts["head_after"] < TOP)).all()
    assert (impacts["below_unit_bottom"] == (impacts["head_after"] < BOTTOM)).all()
    assert impacts.loc["M00", "below_unit_bottom"]
    assert impacts["below_unit_top"].sum() > impacts["below_unit_bottom"].sum() >= 1
    cells = json.loads((out / "AQ_drawdown.json").read_text())["cells"]
    assert cells["taken_below_unit_top"] > cells["below_unit_bottom"] > 0
