"""`hydroatlas paths` and `hydroatlas drawdown` end to end on a planar head field with a spring and pumping."""

import json

import numpy as np
import pandas as pd
import pyogrio
import pytest
import rasterio
from pyproj import Transformer

from hydroatlas.pumping import theis_drawdown

from conftest import CRS, cli, write_csv

X0, Y0 = 610000.0, 4100000.0
A, B = -0.004, 0.0  # head falls toward +x: flow east
K_MD, POROSITY = 8.0, 0.05


def plane(x, y):
    return 300.0 + A * (x - X0) + B * (y - Y0)


def polygon_feature(area_id, kind, box, unit=None):
    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    x1, y1, x2, y2 = box
    ring = [list(tr.transform(x, y)) for x, y in [(x1, y1), (x2, y1), (x2, y2), (x1, y2), (x1, y1)]]
    return {"type": "Feature", "properties": {"area_id": area_id, "kind": kind, "unit": unit},
            "geometry": {"type": "Polygon", "coordinates": [ring]}}


@pytest.fixture
def flow_store(empty_store, tmp_path, runner):
    rng = np.random.default_rng(2)
    xs, ys = X0 + rng.uniform(0, 6000, 25), Y0 + rng.uniform(0, 4000, 25)
    rows = {
        # BASE under AQ: every well goes through AQ into it, so AQ's picks hold its full thickness (150 m)
        "units": [["code", "name", "rank", "role"], ["AQ", "aquifer", 1, "aquifer"], ["BASE", "base", 2, "aquitard"]],
        "wells": [["well_id", "x", "y", "ground_elev", "total_depth", "kind"]],
        "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
        "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
        "heads": [["well_id", "zone_id", "measured_at", "head"]],
        "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]],
    }
    for i, (x, y) in enumerate(zip(xs, ys)):
        w = f"W{i:02d}"
        rows["wells"].append([w, f"{x:.3f}", f"{y:.3f}", 400, 170, "monitoring"])
        rows["picks"].append([w, "AQ", 0, 150])
        rows["picks"].append([w, "BASE", 150, 170])
        rows["zones"].append([w, "S", 50, 60])
        rows["heads"].append([w, "S", "2024-01-01", f"{plane(round(x, 3), round(y, 3)):.9f}"])
        rows["ktests"].append([w, "S", "2024-01-01", "slug", K_MD, "m/d"])
    for kind, r in rows.items():
        assert cli(runner, "import", empty_store, kind, write_csv(tmp_path / f"{kind}.csv", r)).exit_code == 0
    return empty_store


def add_spring_and_recharge(store, tmp_path, runner):
    sx, sy = X0 + 5000.0, Y0 + 2000.0
    sp = write_csv(tmp_path / "springs.csv", [["spring_id", "x", "y", "elev", "unit"],
                                              ["SPR", sx, sy, f"{plane(sx, sy):.9f}", "AQ"]])
    assert cli(runner, "import", store, "springs", sp).exit_code == 0
    fc = {"type": "FeatureCollection", "features": [
        polygon_feature("REC", "recharge", (X0 + 800, Y0 + 1700, X0 + 1400, Y0 + 2300), "AQ")]}
    path = tmp_path / "areas.geojson"
    path.write_text(json.dumps(fc))
    assert cli(runner, "import", store, "areas", path).exit_code == 0
    return sx, sy


def make_surface(store, out, runner):
    res = cli(runner, "surface", store, "--unit", "AQ", "--method", "uk", "--variogram", "exponential",
              "--sill", 1.0, "--range", 3000, "--cell", 50, "--out", out)
    assert res.exit_code == 0, res.output


def test_paths_forward_and_backward(flow_store, tmp_path, runner):
    """Analytic (uniform gradient): straight paths east at v = K i / n; travel time = distance / v."""
    out = tmp_path / "out"
    sx, sy = add_spring_and_recharge(flow_store, tmp_path, runner)
    make_surface(flow_store, out, runner)
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", POROSITY, "--capture-radius", 200,
              "--seed-spacing", 50, "--out", out)
    assert res.exit_code == 0, res.output
    assert "Caution" in res.output and "karst" in res.output
    lines = pyogrio.read_dataframe(out / "layers.gpkg", layer="pathlines")
    table = pd.read_csv(out / "AQ_pathways.csv")
    assert table["share"].sum() == pytest.approx(1.0)
    v = K_MD * abs(A) / POROSITY  # m/d
    to_spring = lines[lines["end_kind"] == "sink"]
    assert len(to_spring) > 0 and set(to_spring["end_id"]) == {"SPR"}
    for geom, days in zip(to_spring.geometry, to_spring["travel_days"]):
        start = np.array(geom.coords[0])
        end = np.array(geom.coords[-1])
        assert abs(end[1] - start[1]) < 1e-6  # due east
        assert (end[0] - start[0]) / v == pytest.approx(days, rel=1e-6)
        assert np.hypot(end[0] - sx, end[1] - sy) <= 200 + 1e-6
    side = json.loads((out / "AQ_pathways.json").read_text())
    assert "karst" in side["karst_warning"] and side["porosity"] == POROSITY
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", POROSITY, "--capture-radius", 200,
              "--backward", "--out", out)
    assert res.exit_code == 0, res.output
    ca = pyogrio.read_dataframe(out / "layers.gpkg", layer="contributing_areas")
    spr = ca[ca["spring_id"] == "SPR"].geometry.iloc[0]
    # in uniform flow the spring's catchment is the band of the capture radius upgradient of it
    assert spr.bounds[1] == pytest.approx(sy - 200, abs=60) and spr.bounds[3] == pytest.approx(sy + 200, abs=60)
    assert spr.bounds[2] <= sx + 260
    back = pd.read_csv(out / "AQ_pathways_backward.csv")
    assert back.loc[back["recharge_area"] == "REC", "share"].iloc[0] > 0.4
    # the backward run has its own table and sidecar; the forward ones are still there, unchanged
    pd.testing.assert_frame_equal(pd.read_csv(out / "AQ_pathways.csv"), table)
    assert json.loads((out / "AQ_pathways.json").read_text())["direction"] == "forward"
    assert json.loads((out / "AQ_pathways_backward.json").read_text())["direction"] == "backward"
    kept = pyogrio.read_dataframe(out / "layers.gpkg", layer="pathlines")
    assert set(kept["direction"]) == {"forward", "backward"}


def test_paths_bad_input(flow_store, tmp_path, runner):
    out = tmp_path / "out"
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", 0.1, "--out", out)
    assert res.exit_code == 2 and "hydroatlas surface" in res.output and "--quantity head" in res.output
    make_surface(flow_store, out, runner)
    for porosity in (0, 1.5, -0.1):
        res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", porosity, "--out", out)
        assert res.exit_code == 2 and "porosity" in res.output
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", 0.1, "--out", out)
    assert res.exit_code == 2 and "no spring" in res.output
    sp = write_csv(tmp_path / "sp.csv", [["spring_id", "x", "y", "elev"], ["S1", X0 + 5000, Y0 + 2000, 280]])
    cli(runner, "import", flow_store, "springs", sp)
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", 0.1, "--out", out)
    # the head surface counts springs of the unit as heads: made before the spring, it is stale now
    assert res.exit_code == 2 and "AQ_head" in res.output and "springs" in res.output, res.output
    make_surface(flow_store, out, runner)
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", 0.1, "--out", out)
    assert res.exit_code == 2 and "no recharge area" in res.output
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", 0.1, "--k-source", "surface", "--out", out)
    assert res.exit_code == 2 and "--quantity logk" in res.output


def test_drawdown_scenario(flow_store, tmp_path, runner):
    """The drawdown raster equals Theis (scipy exp1) at each cell; head after pumping = head - drawdown."""
    out = tmp_path / "out"
    wx, wy, q, T, S, days = X0 + 3000.0, Y0 + 2000.0, 1500.0, 400.0, 1e-3, 100.0
    sp = write_csv(tmp_path / "sp.csv", [["spring_id", "x", "y", "elev"], ["S1", wx + 500, wy, 280]])
    cli(runner, "import", flow_store, "springs", sp)
    make_surface(flow_store, out, runner)  # after the import: a surface made before it would be stale
    res = cli(runner, "drawdown", flow_store, "--unit", "AQ", "--days", days, "-S", S, "-T", T,
              "--new-well", f"P1,{wx},{wy},{q}", "--threshold", 0.01, "--out", out)
    assert res.exit_code == 0, res.output
    with rasterio.open(out / "AQ_drawdown.tif") as r:
        dd = r.read(1, masked=True)
        rows, cols = np.nonzero(~dd.mask)
        xs, ys = rasterio.transform.xy(r.transform, rows, cols)
    with rasterio.open(out / "AQ_head.tif") as r:
        head = r.read(1, masked=True)
    with rasterio.open(out / "AQ_head_drawdown.tif") as r:
        after = r.read(1, masked=True)
    dist = np.hypot(np.asarray(xs) - wx, np.asarray(ys) - wy)
    expected = theis_drawdown(np.maximum(dist, 0.1), days, Q=q, T=T, S=S)
    assert np.allclose(dd[rows, cols], expected, rtol=1e-5, atol=1e-6)
    assert np.allclose(after[rows, cols], head[rows, cols] - dd[rows, cols], atol=1e-3)  # float32 rasters
    impacts = pd.read_csv(out / "AQ_drawdown_impacts.csv")
    s1 = impacts[impacts["id"] == "S1"]["drawdown"].iloc[0]
    assert s1 == pytest.approx(theis_drawdown(500.0, days, Q=q, T=T, S=S), rel=1e-6)
    side = json.loads((out / "AQ_drawdown.json").read_text())
    assert "licensed professional" in side["caution"] and side["transmissivity"]["source"] == "given"
    # T from the unit: geometric-mean K times the mean picked thickness (8 m/d x 150 m)
    res = cli(runner, "drawdown", flow_store, "--unit", "AQ", "--days", days, "-S", S,
              "--new-well", f"{wx},{wy},{q}", "--out", out)
    assert res.exit_code == 0 and "T = 1200 m2/d" in res.output


def test_drawdown_bad_input(flow_store, tmp_path, runner):
    out = tmp_path / "out"
    args = ["drawdown", flow_store, "--unit", "AQ", "--days", 10, "--out", out]
    res = cli(runner, *args, "-S", 1e-3, "--new-well", f"{X0},{Y0},10")
    assert res.exit_code == 2 and "hydroatlas surface" in res.output
    make_surface(flow_store, out, runner)
    cases = [(["-S", 0, "--new-well", f"{X0 + 10},{Y0 + 10},10"], "S must be > 0"),
             (["-S", 1e-3, "-T", -5, "--new-well", f"{X0 + 10},{Y0 + 10},10"], "T must be > 0"),
             (["-S", 1e-3, "--new-well", f"{X0 - 90000},{Y0},10"], "outside the head surface grid"),
             (["-S", 1e-3], "no pumping well"),
             (["-S", 1e-3, "--rate", "NOPE=5"], "not in the store"),
             (["-S", 1e-3, "--rate", "W01"], "WELL=Q")]
    for extra, message in cases:
        res = cli(runner, *args, *extra)
        assert res.exit_code == 2, (extra, res.output)
        assert message in res.output, (extra, res.output)


def test_defaults_are_announced(flow_store, tmp_path, runner):
    """SPEC section 3 lists --porosity and the storage coefficient as optional: a default is used, and said."""
    from click.testing import CliRunner

    from hydroatlas.cli import main

    out = tmp_path / "out"
    add_spring_and_recharge(flow_store, tmp_path, runner)
    make_surface(flow_store, out, runner)
    loud = CliRunner()
    res = loud.invoke(main, ["paths", str(flow_store), "--unit", "AQ", "--out", str(out)])
    assert res.exit_code == 0 and "--porosity not given" in res.output
    assert json.loads((out / "AQ_pathways.json").read_text())["porosity"] == 0.1
    res = loud.invoke(main, ["drawdown", str(flow_store), "--unit", "AQ", "--days", "10", "--new-well",
                             f"{X0 + 2000},{Y0 + 2000},500", "--out", str(out)])
    assert res.exit_code == 0 and "--storativity not given" in res.output
    assert json.loads((out / "AQ_drawdown.json").read_text())["storativity"] == 1e-4


def add_pumping_well(store, tmp_path, runner, wid, x, y, records):
    """A well open to AQ (zone P) with pumping records (rate_m3d, start, end)."""
    tables = {
        "wells": [["well_id", "x", "y", "ground_elev", "total_depth", "kind"], [wid, x, y, 400, 170, "pumping"]],
        "picks": [["well_id", "unit", "top_depth", "bottom_depth"], [wid, "AQ", 0, 150], [wid, "BASE", 150, 170]],
        "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"], [wid, "P", 50, 120]],
        "pumping": [["well_id", "zone_id", "rate", "rate_unit", "start", "end"]]
        + [[wid, "P", q, unit, start, end] for q, unit, start, end in records],
    }
    for kind, rows in tables.items():
        res = cli(runner, "import", store, kind, write_csv(tmp_path / f"{wid}_{kind}.csv", rows))
        assert res.exit_code == 0, res.output


def forward_share(out, table="AQ_pathways.csv"):
    t = pd.read_csv(out / table)
    return dict(zip(t["destination"], t["share"]))


def test_stopped_weak_well_is_not_a_sink(flow_store, tmp_path, runner):
    """A well that pumped 1 gpm and stopped decades before the heads is not a sink: every particle that reached
    the spring still does. The same well pumping now captures only within its stagnation distance
    Q / (2 pi b K i) (Javandel and Tsang 1986; here 0.18 m, raised to a quarter cell), not two cells."""
    out = tmp_path / "out"
    add_spring_and_recharge(flow_store, tmp_path, runner)
    wx, wy = X0 + 3000.0, Y0 + 2000.0  # on the line from the recharge area to the spring
    add_pumping_well(flow_store, tmp_path, runner, "OLD", wx, wy, [(1, "gpm", "1990-01-01", "1995-01-01")])
    make_surface(flow_store, out, runner)
    args = ["paths", flow_store, "--unit", "AQ", "--porosity", POROSITY, "--seed-spacing", 50, "--out", out]
    res = cli(runner, *args)
    assert res.exit_code == 0, res.output
    side = json.loads((out / "AQ_pathways.json").read_text())
    assert [s["id"] for s in side["sinks"]] == ["SPR"]
    # the spring (no discharge readings: 2 cells, 100 m) takes the 4 of 12 seed rows within 100 m of its line
    assert forward_share(out) == {"spring SPR": pytest.approx(4 / 12), "edge": pytest.approx(8 / 12)}
    add_pumping_well(flow_store, tmp_path, runner, "OLD", wx, wy, [(1, "gpm", "2023-06-01", "")])
    res = cli(runner, *args)
    assert res.exit_code == 2 and "pumping" in res.output  # the head surface predates the new record
    make_surface(flow_store, out, runner)
    res = cli(runner, *args)
    assert res.exit_code == 0, res.output
    side = json.loads((out / "AQ_pathways.json").read_text())
    sink = {s["id"]: s for s in side["sinks"]}["OLD"]
    q = 1 * 3.785411784e-3 * 1440  # 1 gpm in m3/d (exact definitions)
    assert sink["stagnation_distance"] == pytest.approx(q / (2 * np.pi * 150.0 * K_MD * abs(A)), rel=0.02)
    assert sink["capture_radius"] == pytest.approx(0.25 * 50.0)  # the lower bound: a quarter of a 50 m cell
    # the nearest seed rows pass 25 m from the well: the spring keeps all of its particles
    assert forward_share(out) == {"spring SPR": pytest.approx(4 / 12), "edge": pytest.approx(8 / 12)}


def test_paths_on_a_drawdown_scenario(flow_store, tmp_path, runner):
    """paths --scenario traces on the head surface of 'drawdown --name': a proposed well of 2000 m3/d between
    the recharge area and the spring captures the particles of a band of about Q / (b K i) = 417 m (Javandel and
    Tsang 1986) of the 600 m wide recharge area: with seeds every 50 m, 8 of 12 rows (2/3)."""
    out = tmp_path / "out"
    add_spring_and_recharge(flow_store, tmp_path, runner)
    make_surface(flow_store, out, runner)
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", POROSITY, "--seed-spacing", 50, "--out", out)
    assert res.exit_code == 0, res.output
    baseline = {"spring SPR": pytest.approx(4 / 12), "edge": pytest.approx(8 / 12)}
    assert forward_share(out) == baseline
    wx, wy, q = X0 + 3000.0, Y0 + 2000.0, 2000.0
    res = cli(runner, "drawdown", flow_store, "--unit", "AQ", "--days", 3650, "-S", 1e-4, "-T", 1200,
              "--new-well", f"P1,{wx},{wy},{q}", "--name", "plan", "--out", out)
    assert res.exit_code == 0, res.output
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", POROSITY, "--seed-spacing", 50,
              "--scenario", "plan", "--out", out)
    assert res.exit_code == 0, res.output
    share = forward_share(out, "AQ_pathways_plan.csv")
    assert share["proposed well P1"] == pytest.approx(8 / 12)
    # rows outside the capture zone close in behind the well, which takes a band of width W = Q / (b K i) out of
    # the flow: far downstream a row from offset y0 runs at y0 - W / 2 (225 -> 17 m, 275 -> 67 m), inside the
    # spring's 100 m
    assert share["spring SPR"] == pytest.approx(4 / 12)
    side = json.loads((out / "AQ_pathways_plan.json").read_text())
    assert side["scenario"] == "plan" and side["head_surface"].endswith("AQ_head_plan.tif")
    assert forward_share(out) == baseline  # the baseline table is untouched
    lines = pyogrio.read_dataframe(out / "layers.gpkg", layer="pathlines")
    assert set(lines["scenario"]) == {"", "plan"}
    res = cli(runner, "paths", flow_store, "--unit", "AQ", "--porosity", POROSITY, "--scenario", "nope", "--out", out)
    assert res.exit_code == 2 and "no drawdown scenario 'nope'" in res.output and "--name nope" in res.output
