"""`hydroatlas surface`, `verticals`, `threepoint` end to end: rasters reopened with rasterio, layers with pyogrio."""

import json

import numpy as np
import pyogrio
import pytest
import rasterio
from pyproj import CRS as PCRS

from conftest import CRS, cli, write_csv

A, B, C0 = -0.002, 0.001, 300.0  # planar head field h = C0 + A (x - X0) + B (y - Y0)
X0, Y0 = 610000.0, 4100000.0


def plane(x, y):
    return C0 + A * (x - X0) + B * (y - Y0)


@pytest.fixture
def plane_store(empty_store, tmp_path, runner):
    rng = np.random.default_rng(11)
    xs = X0 + rng.uniform(0, 5000, 30)
    ys = Y0 + rng.uniform(0, 4000, 30)
    units = [["code", "name", "rank", "role"], ["AQ", "aquifer", 1, "aquifer"], ["AT", "tight", 2, "aquitard"],
             ["LO", "lower", 3, "aquifer"]]
    wells = [["well_id", "x", "y", "ground_elev", "total_depth"]]
    picks = [["well_id", "unit", "top_depth", "bottom_depth"]]
    zones = [["well_id", "zone_id", "top_depth", "bottom_depth"]]
    heads = [["well_id", "zone_id", "measured_at", "head"]]
    ktests = [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]]
    for i, (x, y) in enumerate(zip(xs, ys)):
        w = f"W{i:02d}"
        wells.append([w, f"{x:.3f}", f"{y:.3f}", 400, 200])
        picks += [[w, "AQ", 0, 100], [w, "AT", 100, 110], [w, "LO", 110, 200]]
        zones.append([w, "S", 40, 50])
        heads.append([w, "S", "2024-03-15", f"{plane(round(x, 3), round(y, 3)):.9f}"])
        heads.append([w, "S", "2025-01-15", f"{plane(round(x, 3), round(y, 3)) + 50:.9f}"])
        ktests.append([w, "S", "2024-01-01", "slug", f"{10 ** rng.normal(0, 0.3):.4f}", "m/d"])
        if i < 5:
            zones.append([w, "D", 150, 160])
            heads.append([w, "D", "2024-03-15", f"{plane(round(x, 3), round(y, 3)) - 12.0:.9f}"])
    zones.append(["W00", "T", 102, 108])
    ktests.append(["W00", "T", "2024-02-01", "packer", "1e-9", "m/s"])
    for kind, rows in (("units", units), ("wells", wells), ("picks", picks), ("zones", zones), ("heads", heads),
                       ("ktests", ktests)):
        res = cli(runner, "import", empty_store, kind, write_csv(tmp_path / f"{kind}.csv", rows))
        assert res.exit_code == 0, res.output
    return empty_store


def test_uk_surface_reproduces_plane(plane_store, tmp_path, runner):
    """Analytic: universal kriging with a linear drift reproduces a planar head field (any variogram)."""
    out = tmp_path / "out"
    res = cli(runner, "surface", plane_store, "--unit", "AQ", "--method", "uk", "--window", "2024-03-01/2024-03-31",
              "--cell", 100, "--variogram", "exponential", "--sill", 1.0, "--range", 2000, "--out", out,
              "--compare-methods")
    assert res.exit_code == 0, res.output
    with rasterio.open(out / "AQ_head.tif") as r:
        assert r.count == 2 and r.nodata == -9999.0
        assert PCRS.from_user_input(r.crs.to_wkt()) == PCRS.from_user_input(CRS)
        est = r.read(1, masked=True)
        std = r.read(2, masked=True)
        rows, cols = np.nonzero(~est.mask)
        xs, ys = rasterio.transform.xy(r.transform, rows, cols)
    assert len(rows) > 100
    assert np.allclose(est[rows, cols], plane(np.asarray(xs), np.asarray(ys)), atol=1e-6)
    assert (std[rows, cols] >= 0).all()
    side = json.loads((out / "AQ_head.json").read_text())
    assert side["method"] == "uk" and side["window"] == "2024-03-01/2024-03-31"
    assert side["variogram"]["model"] == "exponential" and side["variogram_fitted"] is False
    assert set(side["cross_validation"]) == {"kriging", "uk", "idw"}
    assert side["cross_validation"]["uk"]["rmse"] < 1e-6
    assert "licensed professional" in side["caution"]
    with rasterio.open(out / "AQ_gradient.tif") as g:
        mag = g.read(1, masked=True)
        az = g.read(2, masked=True)
    ok = ~mag.mask
    assert np.allclose(mag[ok], np.hypot(A, B), rtol=1e-5)
    assert np.allclose(az[ok], np.degrees(np.arctan2(-A, -B)) % 360, atol=1e-3)
    arrows = pyogrio.read_dataframe(out / "layers.gpkg", layer="flow_arrows")
    assert len(arrows) > 10 and PCRS.from_user_input(arrows.crs) == PCRS.from_user_input(CRS)
    assert np.allclose(arrows["azimuth"], np.degrees(np.arctan2(-A, -B)) % 360, atol=1e-3)


def test_fitted_kriging_and_idw_and_logk(plane_store, tmp_path, runner):
    out = tmp_path / "o"
    for args in (["--quantity", "head", "--method", "kriging", "--window", "2024-03-01/2024-03-31"],
                 ["--quantity", "logk", "--method", "idw"],
                 ["--quantity", "dhead", "--method", "idw", "--at", "2024-03-15"]):
        res = cli(runner, "surface", plane_store, "--unit", "AQ", "--cell", 250, "--out", out, *args)
        assert res.exit_code == 0, res.output
    side = json.loads((out / "AQ_head.json").read_text())
    assert side["variogram_fitted"] is True and side["variogram"]["experimental"]["counts"]
    with rasterio.open(out / "AQ_logk.tif") as r:
        assert r.count == 1  # IDW has no standard deviation band
    with rasterio.open(out / "AQ_dhead.tif") as r:
        d = r.read(1, masked=True)
    assert np.allclose(d.compressed(), 12.0)  # the lower unit's heads are 12 below everywhere
    assert json.loads((out / "AQ_dhead.json").read_text())["lower_unit"] == "LO"


def test_surface_bad_input(plane_store, tmp_path, runner):
    out = tmp_path / "bad"
    cases = [
        (["--unit", "AT"], "has no head values"),
        (["--unit", "LO", "--method", "uk", "--window", "2025-01-01/2025-02-01"], "no head values"),
        (["--unit", "AQ", "--window", "2030-01-01/2030-02-01"], "no head readings inside"),
        (["--unit", "AQ", "--cell", 0.01], "more than the maximum"),
        (["--unit", "NOPE"], "not in the store"),
        (["--unit", "AQ", "--window", "2024-03-01"], "ISO 8601 interval"),
        (["--unit", "AQ", "--sill", 1.0], "both --sill and --range"),
    ]
    for args, message in cases:
        res = cli(runner, "surface", plane_store, "--out", out, *args)
        assert res.exit_code == 2, (args, res.output)
        assert message in res.output, (args, res.output)


def test_all_equal_values_need_fallback(empty_store, tmp_path, runner):
    rows = {"units": [["code", "name", "rank", "role"], ["AQ", "a", 1, "aquifer"]],
            "wells": [["well_id", "x", "y", "ground_elev"]] + [[f"W{i}", 610000 + 300 * i, 4100000 + 170 * (i % 3), 50]
                                                             for i in range(8)],
            "picks": [["well_id", "unit", "top_depth", "bottom_depth"]] + [[f"W{i}", "AQ", 0, 40] for i in range(8)],
            "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]] + [[f"W{i}", "S", 10, 20] for i in range(8)],
            "heads": [["well_id", "zone_id", "measured_at", "head"]] + [[f"W{i}", "S", "2024-01-01", 42.0]
                                                                      for i in range(8)]}
    for kind, r in rows.items():
        assert cli(runner, "import", empty_store, kind, write_csv(tmp_path / f"{kind}.csv", r)).exit_code == 0
    few = [["well_id", "zone_id", "measured_at", "head"], ["W0", "S", "2024-02-01", 40.0],
           ["W1", "S", "2024-02-01", 41.0]]
    assert cli(runner, "import", empty_store, "heads", write_csv(tmp_path / "few.csv", few)).exit_code == 0
    res = cli(runner, "surface", empty_store, "--unit", "AQ", "--at", "2024-02-01", "--window", "2024-02-01/2024-02-02")
    assert res.exit_code == 2 and "not both" in res.output
    res = cli(runner, "surface", empty_store, "--unit", "AQ", "--window", "2024-02-01/2024-02-02",
              "--out", tmp_path / "o")
    assert res.exit_code == 2 and "needs at least 3 wells" in res.output
    res = cli(runner, "surface", empty_store, "--unit", "AQ", "--window", "2024-01-01/2024-01-02",
              "--out", tmp_path / "o")
    assert res.exit_code == 2 and "all values are equal" in res.output and "--fallback-idw" in res.output
    res = cli(runner, "surface", empty_store, "--unit", "AQ", "--fallback-idw", "--window", "2024-01-01/2024-01-02",
              "--out", tmp_path / "o")
    assert res.exit_code == 0, res.output
    side = json.loads((tmp_path / "o" / "AQ_head.json").read_text())
    assert side["method"] == "idw" and side["fallback_from"] == "kriging"


def test_domain_polygon_must_overlap(plane_store, tmp_path, runner):
    from pyproj import Transformer

    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    far = [(X0 + 50000, Y0 + 50000), (X0 + 51000, Y0 + 50000), (X0 + 51000, Y0 + 51000), (X0 + 50000, Y0 + 51000)]
    ring = [list(tr.transform(x, y)) for x, y in far + far[:1]]
    fc = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {"area_id": "D", "kind": "domain"},
                                                     "geometry": {"type": "Polygon", "coordinates": [ring]}}]}
    path = tmp_path / "areas.geojson"
    path.write_text(json.dumps(fc))
    assert cli(runner, "import", plane_store, "areas", path).exit_code == 0
    res = cli(runner, "surface", plane_store, "--unit", "AQ", "--out", tmp_path / "o")
    assert res.exit_code == 2 and "does not overlap" in res.output


def test_geographic_store_refused(tmp_path, runner):
    store = tmp_path / "geo.gpkg"
    assert cli(runner, "init", store, "--crs", "EPSG:4326").exit_code == 0
    write_csv(tmp_path / "u.csv", [["code", "name", "rank", "role"], ["AQ", "a", 1, "aquifer"]])
    cli(runner, "import", store, "units", tmp_path / "u.csv")
    res = cli(runner, "surface", store, "--unit", "AQ", "--out", tmp_path / "o")
    assert res.exit_code == 2 and "projected" in res.output


def test_verticals_and_threepoint(plane_store, runner):
    res = cli(runner, "verticals", plane_store, "--window", "2024-03-01/2024-03-31", "--format", "json")
    assert res.exit_code == 0, res.output
    pairs = json.loads(res.output)
    assert len(pairs) == 5
    for p in pairs:
        assert p["dhead"] == pytest.approx(12.0) and p["aquitards"] == "AT"
        assert p["vertical_gradient"] == pytest.approx(12.0 / 110.0)
        # Darcy across the 10 m aquitard (geometric-mean K of its one test, 1e-9 m/s): q = K dh / b
        assert p["leakage_flux"] == pytest.approx(1e-9 * 86400 * 12.0 / 10.0, rel=1e-9)
        assert p["leakage_unit"] == "m/d"
    res = cli(runner, "verticals", plane_store, "--profiles", "--format", "csv")
    assert res.exit_code == 0 and res.output.count("\n") == 11
    res = cli(runner, "threepoint", plane_store, "--unit", "AQ", "--wells", "W00,W01,W02", "--at", "2024-03-15",
              "--format", "json")
    out = json.loads(res.output)
    assert out["gradient"] == pytest.approx(np.hypot(A, B), rel=1e-6)
    res = cli(runner, "threepoint", plane_store, "--unit", "AQ", "--wells", "W00,W01")
    assert res.exit_code == 2 and "exactly three" in res.output
