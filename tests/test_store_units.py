"""Units follow the store (issue 10, item 4): a small FEET store on a projected CRS in US survey feet.

The district is invented for these tests (not a check against the outside world); the checks name their
reference: pint (unit conversions), scipy's exp1 (the Theis well function), the Hvorslev (1951) formula
(VERIFY.md). Note ftUS != ft: the store's length unit (ft) is for depths, elevations and heads; the CRS's own
unit (US survey foot, 1200/3937 m) is for x, y and distances.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pint
import pytest
import rasterio
from pyproj import Transformer
from scipy.special import exp1

from hydroatlas import open_store

from conftest import cli, write_csv

ureg = pint.UnitRegistry()
FT_CRS = "EPSG:2246"  # a projected CRS in US survey feet
FTUS_M = 1200 / 3937  # one US survey foot in metres (its definition)
FT_M = 0.3048
K_FTD = 25.0  # every AQ test is 25 ft/d, written in four different units
GRAD = 0.002  # head falls 2 ft per 1000 ftUS toward +x


def _origin():
    return Transformer.from_crs("EPSG:4326", FT_CRS, always_xy=True).transform(-84.8, 38.3)


def head_at(x, x0):
    return 800.0 - GRAD * (x - x0)


@pytest.fixture
def feet_store(store_location, tmp_path, runner):
    """The feet district on each backend (conftest.py: store_backend): a GeoPackage file or a PostGIS URL."""
    path = tmp_path / "feet.gpkg" if store_location == tmp_path / "store.gpkg" else store_location
    res = cli(runner, "init", path, "--crs", FT_CRS, "--length-unit", "ft")
    assert res.exit_code == 0 and "lengths in ft" in res.output, res.output
    x0, y0 = _origin()
    k_as_written = [(K_FTD, "ft/d"), ((K_FTD * ureg("ft/day")).to("gallon/day/ft**2").magnitude, "gal/d/ft2"),
                    ((K_FTD * ureg("ft/day")).to("m/day").magnitude, "m/d"),
                    ((K_FTD * ureg("ft/day")).to("cm/s").magnitude, "cm/s")]
    rows = {
        "units": [["code", "name", "rank", "role"], ["AQ", "upper aquifer", 1, "aquifer"],
                  ["SH", "shale", 2, "aquitard"]],
        "wells": [["well_id", "x", "y", "ground_elev", "total_depth", "kind"]],
        "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
        "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
        "heads": [["well_id", "zone_id", "measured_at", "head"]],
        "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]],
    }
    for i in range(12):
        w = f"W{i:02d}"
        x, y = x0 + 1500.0 * (i % 4) + 137.0 * (i // 4), y0 + 1400.0 * (i // 4) + 91.0 * (i % 4)
        rows["wells"].append([w, f"{x:.3f}", f"{y:.3f}", 850, 150, "monitoring"])
        rows["picks"] += [[w, "AQ", 0, 120], [w, "SH", 120, 150]]
        rows["zones"].append([w, "S", 40, 60])
        rows["heads"].append([w, "S", "2024-03-01", f"{head_at(round(x, 3), x0):.6f}"])
        k, unit = k_as_written[i % 4]
        rows["ktests"].append([w, "S", "2024-03-02", "slug", repr(k), unit])
    # a shale zone with twelve consistent tests and one typed a million times too high (a K outlier)
    rows["zones"].append(["W00", "D", 125, 135])
    rng = np.random.default_rng(3)
    for d, k in enumerate(0.01 * 10 ** rng.normal(0, 0.1, 12)):
        rows["ktests"].append(["W00", "D", f"2024-04-{d + 1:02d}", "packer", f"{k:.6f}", "ft/d"])
    rows["ktests"].append(["W00", "D", "2024-05-01", "packer", "10000", "ft/d"])
    for kind, r in rows.items():
        res = cli(runner, "import", path, kind, write_csv(tmp_path / f"{kind}.csv", r))
        assert res.exit_code == 0, res.output
    return path


def _json(res):
    """The JSON document of a command's output (lines before it, such as notes, are not part of it)."""
    text = res.output
    return json.loads(text[min(i for i in (text.find("["), text.find("{")) if i >= 0):])


def test_stats_default_to_the_store_k_unit(feet_store, runner):
    """Reference library: pint. Tests written in ft/d, gal/d/ft2, m/d and cm/s all come back as 25 ft/d."""
    res = cli(runner, "stats", feet_store, "--format", "json", "--unit", "AQ")
    assert res.exit_code == 0, res.output
    row = _json(res)[0]
    assert row["k_unit"] == "ft/d" and row["n_tests"] == 12
    assert row["k_geomean"] == pytest.approx(K_FTD, rel=1e-9)
    assert row["log10k_var"] == pytest.approx(0.0, abs=1e-12)
    res = cli(runner, "stats", feet_store, "--format", "json", "--unit", "AQ", "--k-unit", "gal/d/ft2")
    row = _json(res)[0]
    assert row["k_unit"] == "gpd/ft2"
    assert row["k_geomean"] == pytest.approx((K_FTD * ureg("ft/day")).to("gallon/day/ft**2").magnitude, rel=1e-9)
    res = cli(runner, "stats", feet_store, "--unit", "AQ")
    assert "K in ft/d" in res.output
    res = cli(runner, "stats", feet_store, "--wells", "--format", "json", "--unit", "AQ")
    prof = _json(res)[0]
    assert prof["k_unit"] == "ft/d" and prof["t_unit"] == "ft2/d"
    assert prof["transmissivity"] == pytest.approx(K_FTD * 20.0, rel=1e-9)  # K times the 20 ft tested interval
    bad = cli(runner, "stats", feet_store, "--k-unit", "furlong/d")
    assert bad.exit_code == 2 and "--k-unit" in bad.output and "furlong/d" in bad.output


def test_logk_surface_is_log10_of_the_store_k_unit(feet_store, tmp_path, runner):
    out = tmp_path / "out"
    res = cli(runner, "surface", feet_store, "--unit", "AQ", "--quantity", "logk", "--method", "idw",
              "--cell", 500, "--out", out)
    assert res.exit_code == 0, res.output
    side = json.loads((out / "AQ_logk.json").read_text())
    assert side["k_unit"] == "ft/d" and side["value_unit"] == "log10(ft/d)"
    assert side["distance_unit"] == "ftUS"
    with rasterio.open(out / "AQ_logk.tif") as src:
        band = src.read(1, masked=True)
        assert "log10(ft/d)" in src.descriptions[0]
    # every test is 25 ft/d, so the surface is log10(25) everywhere, not log10 of the m/d value (7.62)
    assert float(band.min()) == pytest.approx(math.log10(K_FTD), abs=1e-6)
    assert float(band.max()) == pytest.approx(math.log10(K_FTD), abs=1e-6)


def _drawdown(store, runner, surfaces, out, *args):
    res = cli(runner, "drawdown", store, "--unit", "AQ", "--days", 1, "-S", "1e-4", "--surfaces", surfaces,
              "--out", out, *args)
    assert res.exit_code == 0, res.output
    with rasterio.open(out / "AQ_drawdown.tif") as src:
        dd = src.read(1, masked=True).filled(np.nan).astype(float)
        transform = src.transform
    return res, dd, transform


def test_drawdown_transmissivity_and_rates_follow_the_store(feet_store, tmp_path, runner):
    """source: Theis (1935) with W(u) = E1(u) from scipy.special.exp1; Q and T converted by pint.

    In a feet store '-T 2700' is 2700 ft2/d (the same as '-T 2700ft2/d'), not 2700 m2/d.
    """
    heads = tmp_path / "heads"
    res = cli(runner, "surface", feet_store, "--unit", "AQ", "--method", "idw", "--cell", 250, "--out", heads)
    assert res.exit_code == 0, res.output
    x0, y0 = _origin()
    wx, wy = x0 + 2250.0 + 125.0, y0 + 1400.0 + 125.0  # near the middle, on a cell corner
    new = f"PW-9,{wx},{wy},450gpm"
    r_ft, d_ft, t_ft = _drawdown(feet_store, runner, heads, tmp_path / "a", "-T", "2700ft2/d", "--new-well", new)
    r_bare, d_bare, _ = _drawdown(feet_store, runner, heads, tmp_path / "b", "-T", "2700", "--new-well", new)
    r_m, d_m, _ = _drawdown(feet_store, runner, heads, tmp_path / "c", "-T", "2700 m2/d", "--new-well", new)
    assert np.allclose(d_ft, d_bare, equal_nan=True)
    assert np.nanmax(d_bare) > 5 * np.nanmax(d_m)  # 2700 m2/d is 10.8 times 2700 ft2/d
    assert "T = 2700 ft2/d" in r_ft.output and "T = 2700 ft2/d" in r_bare.output
    assert "T = 2.906e+04 ft2/d (2700 m2/d)" in r_m.output
    # a cell centre 1,000 ftUS east of the well: Theis in feet
    q_ft3d = (450 * ureg("gallon/minute")).to("ft**3/day").magnitude
    col, row = ~t_ft * (wx + 1000.0, wy)
    col, row = int(col), int(row)
    cx, cy = t_ft * (col + 0.5, row + 0.5)
    r = math.hypot(cx - wx, cy - wy) * FTUS_M / FT_M  # US survey feet -> feet
    u = r * r * 1e-4 / (4 * 2700.0 * 1.0)
    expected = q_ft3d / (4 * math.pi * 2700.0) * exp1(u)
    assert d_ft[row, col] == pytest.approx(expected, rel=1e-5)
    side = json.loads((tmp_path / "a" / "AQ_drawdown.json").read_text())["in_store_units"]
    assert side["transmissivity"] == pytest.approx(2700.0, rel=1e-12) and side["transmissivity_unit"] == "ft2/d"
    pw9 = next(w for w in side["wells"] if w["well_id"] == "PW-9")
    assert side["rate_unit"] == "ft3/d" and pw9["scenario_rate"] == pytest.approx(q_ft3d, rel=1e-12)
    # the rate in other spellings: a bare number is ft3/d unless --rate-unit says otherwise
    _, d_gpm, _ = _drawdown(feet_store, runner, heads, tmp_path / "d", "-T", "2700", "--new-well",
                            f"PW-9,{wx},{wy},450", "--rate-unit", "gpm")
    _, d_ft3, _ = _drawdown(feet_store, runner, heads, tmp_path / "e", "-T", "2700", "--new-well",
                            f"PW-9,{wx},{wy},{q_ft3d!r}")
    _, d_cfs, _ = _drawdown(feet_store, runner, heads, tmp_path / "f", "-T", "2700", "--new-well",
                            f"PW-9,{wx},{wy},{q_ft3d / 86400!r} cfs")
    for other in (d_gpm, d_ft3, d_cfs):
        assert np.allclose(other, d_ft, rtol=1e-6, equal_nan=True)
    # the threshold: a bare number is in feet; 0.3048m is the same one foot
    r1, _, _ = _drawdown(feet_store, runner, heads, tmp_path / "g", "-T", "2700", "--new-well", new,
                         "--threshold", "1")
    r2, _, _ = _drawdown(feet_store, runner, heads, tmp_path / "h", "-T", "2700", "--new-well", new,
                         "--threshold", "0.3048m")
    assert pd.read_csv(tmp_path / "g" / "AQ_drawdown_impacts.csv").equals(
        pd.read_csv(tmp_path / "h" / "AQ_drawdown_impacts.csv"))
    # --rate on a stored well: a unit in the value, or --rate-unit for a bare number
    _, d_r1, _ = _drawdown(feet_store, runner, heads, tmp_path / "i", "-T", "2700", "--rate", "W05=450gpm")
    _, d_r2, _ = _drawdown(feet_store, runner, heads, tmp_path / "j", "-T", "2700", "--rate", "W05=450",
                           "--rate-unit", "gal/min")
    assert np.nanmax(d_r1) > 0 and np.allclose(d_r1, d_r2, rtol=1e-9, equal_nan=True)
    bad = cli(runner, "drawdown", feet_store, "--unit", "AQ", "--days", 1, "--rate", "W05=450furlongs",
              "--surfaces", heads, "--out", tmp_path / "x")
    assert bad.exit_code == 2 and "--rate" in bad.output and "unknown rate unit 'furlongs'" in bad.output
    bad = cli(runner, "drawdown", feet_store, "--unit", "AQ", "--days", 1, "-T", "2700ft/d", "--surfaces", heads,
              "--out", tmp_path / "x")
    assert bad.exit_code == 2 and bad.output.count("\n") == 1
    assert "-T" in bad.output and "unknown transmissivity unit 'ft/d'" in bad.output


def _spring_and_recharge(store, tmp_path, runner, x0, y0):
    """A spring of AQ on the head plane and a recharge square upstream of it (given in lon/lat)."""
    sx, sy = x0 + 4000.0, y0 + 1500.0
    sp = write_csv(tmp_path / "springs.csv", [["spring_id", "x", "y", "elev", "unit"],
                                              ["SP1", sx, sy, f"{head_at(sx, x0):.4f}", "AQ"]])
    assert cli(runner, "import", store, "springs", sp).exit_code == 0
    tr = Transformer.from_crs(FT_CRS, "EPSG:4326", always_xy=True)
    box = [(x0 + 300, y0 + 1200), (x0 + 900, y0 + 1200), (x0 + 900, y0 + 1800), (x0 + 300, y0 + 1800)]
    ring = [list(tr.transform(x, y)) for x, y in box + box[:1]]
    area = tmp_path / "areas.geojson"
    area.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"area_id": "R1", "kind": "recharge", "unit": "AQ"},
         "geometry": {"type": "Polygon", "coordinates": [ring]}}]}))
    assert cli(runner, "import", store, "areas", area).exit_code == 0


def test_paths_sidecar_names_k_with_its_unit(feet_store, tmp_path, runner):
    x0, y0 = _origin()
    heads = tmp_path / "heads"
    _spring_and_recharge(feet_store, tmp_path, runner, x0, y0)  # first: a surface made before would be stale
    assert cli(runner, "surface", feet_store, "--unit", "AQ", "--method", "idw", "--cell", 250,
               "--out", heads).exit_code == 0
    res = cli(runner, "paths", feet_store, "--unit", "AQ", "--porosity", 0.1, "--surfaces", heads,
              "--capture-radius", "100m", "--out", tmp_path / "p")
    assert res.exit_code == 0, res.output
    side = json.loads((tmp_path / "p" / "AQ_pathways.json").read_text())
    assert side["k"]["k_unit"] == "ft/d" and side["k"]["k"] == pytest.approx(K_FTD, rel=1e-9)
    assert "k_m_per_d" not in json.dumps(side)
    # 100 m is 328.08 US survey feet, the CRS's unit
    assert side["capture_radius"] == pytest.approx(100 / FTUS_M, rel=1e-12)


def test_slug_k_reported_and_stored_in_the_store_k_unit(feet_store, tmp_path, runner):
    """source: Hvorslev (1951), basic time lag (VERIFY.md): K = r_c^2 ln(L/R) / (2 L T0), lengths in feet."""
    rc, radius, length = 0.0833, 0.1667, 5.0  # ft
    k_true_ftd = 3.0
    t0 = rc * rc * math.log(length / radius) / (2 * length * (k_true_ftd / 86400))  # seconds
    rows = [["well_id", "zone_id", "test_id", "t_s", "displacement"]]
    rows += [["W01", "S", "T1", f"{t:.6f}", f"{2.0 * math.exp(-t / t0):.9f}"] for t in np.linspace(0, 4 * t0, 60)]
    geom = [["well_id", "zone_id", "test_id", "casing_radius", "well_radius", "screen_length", "tested_on"],
            ["W01", "S", "T1", rc, radius, length, "2024-06-01"]]
    assert cli(runner, "import", feet_store, "slugtests", write_csv(tmp_path / "s.csv", rows)).exit_code == 0
    assert cli(runner, "import", feet_store, "sluggeometry", write_csv(tmp_path / "g.csv", geom)).exit_code == 0
    res = cli(runner, "slugs", feet_store, "--format", "json")
    assert res.exit_code == 0, res.output
    row = _json(res)[0]
    assert row["k_unit"] == "ft/d" and row["k"] == pytest.approx(k_true_ftd, rel=1e-4)
    assert row["k_ms"] == pytest.approx((k_true_ftd * ureg("ft/day")).to("m/s").magnitude, rel=1e-4)
    table = cli(runner, "slugs", feet_store, "--no-write")
    assert "ft/d" in table.output and "k_ms" not in table.output
    with open_store(feet_store) as s:
        kt = s.read("ktests").set_index("test_id").loc["slug:T1"]
    assert kt["k_unit"] == "ft/d" and kt["k"] == pytest.approx(k_true_ftd, rel=1e-4)


def test_check_names_the_unit_of_log10_k(feet_store, runner):
    res = cli(runner, "check", feet_store, "--json")
    found = [f for f in _json(res) if f["kind"] == "k_outlier"]
    assert len(found) == 1
    assert "log10 K = 4.00 (K in ft/d)" in found[0]["message"]


def test_discharge_in_cfs_mgd_and_acre_feet(feet_store, tmp_path, runner):
    """Reference library: pint (acre-foot here: 43 560 international ft3; the Julian year)."""
    x0, y0 = _origin()
    sp = write_csv(tmp_path / "springs.csv", [["spring_id", "x", "y", "elev"], ["SP1", x0 + 10, y0 + 10, 790]])
    assert cli(runner, "import", feet_store, "springs", sp).exit_code == 0
    rows = [["spring_id", "measured_at", "discharge", "rate_unit"], ["SP1", "2024-01-01", "2.5", "cfs"],
            ["SP1", "2024-02-01", "1.2", "MGD"], ["SP1", "2024-03-01", "900", "acre-ft/yr"],
            ["SP1", "2024-04-01", "300", "gpm"]]
    res = cli(runner, "import", feet_store, "discharge", write_csv(tmp_path / "q.csv", rows))
    assert res.exit_code == 0, res.output
    with open_store(feet_store) as s:
        q = s.read("discharge").set_index("measured_at")
    expected = {"2024-01-01": 2.5 * ureg("ft**3/s"), "2024-02-01": 1.2 * ureg("megagallon/day"),
                "2024-03-01": 900 * 43560 * ureg("ft**3/year"), "2024-04-01": 300 * ureg("gallon/minute")}
    for day, value in expected.items():
        row = q[q.index.astype(str).str.startswith(day)].iloc[0]
        assert row["discharge_m3d"] == pytest.approx(value.to("m**3/day").magnitude, rel=1e-12), day
    assert set(q["rate_unit"]) == {"ft3/s", "MGD", "acre-ft/yr", "gpm"}


def test_point_files_with_lon_lat_columns(feet_store, tmp_path, runner):
    """Reference library: pyproj transforms WGS 84 longitude/latitude to the store CRS."""
    to_store = Transformer.from_crs("EPSG:4326", FT_CRS, always_xy=True)
    for header in (["lon", "lat"], ["longitude", "latitude"]):
        path = write_csv(tmp_path / "wells_ll.csv", [["well_id", *header, "ground_elev"],
                                                     ["LL1", -84.79, 38.31, 845]])
        res = cli(runner, "import", feet_store, "wells", path)
        assert res.exit_code == 0, res.output
        with open_store(feet_store) as s:
            w = s.read("wells").set_index("well_id").loc["LL1"]
        x, y = to_store.transform(-84.79, 38.31)
        assert w["x"] == pytest.approx(x, abs=1e-6) and w["y"] == pytest.approx(y, abs=1e-6)
        assert w["input_crs"] == "EPSG:4326" and w["x_input"] == -84.79
    both = write_csv(tmp_path / "both.csv", [["well_id", "x", "y", "lon", "lat", "ground_elev"],
                                             ["LL2", 1, 2, -84.79, 38.31, 845]])
    res = cli(runner, "import", feet_store, "wells", both)
    assert res.exit_code == 2 and "two sets of coordinates (x/y and lon/lat)" in res.output
    neither = write_csv(tmp_path / "neither.csv", [["well_id", "ground_elev"], ["LL3", 845]])
    res = cli(runner, "import", feet_store, "wells", neither)
    assert res.exit_code == 2 and "missing coordinate columns" in res.output
    half = write_csv(tmp_path / "half.csv", [["spring_id", "lon", "elev"], ["SP9", -84.79, 845]])
    res = cli(runner, "import", feet_store, "springs", half)
    assert res.exit_code == 2 and "missing column lat" in res.output
    with open_store(feet_store) as s:
        assert set(s.read("wells")["well_id"]) >= {"LL1"} and "LL2" not in set(s.read("wells")["well_id"])


def test_map_and_layers_show_store_units(feet_store, tmp_path, runner):
    x0, y0 = _origin()
    pump = write_csv(tmp_path / "pumping.csv", [["well_id", "zone_id", "rate", "rate_unit", "start"],
                                                ["W05", "S", "450", "gpm", "2023-01-01"]])
    assert cli(runner, "import", feet_store, "pumping", pump).exit_code == 0
    res = cli(runner, "map", feet_store, "--out", tmp_path / "map.html")
    assert res.exit_code == 0, res.output
    page = (tmp_path / "map.html").read_text(encoding="utf-8")
    q_ft3d = (450 * ureg("gallon/minute")).to("ft**3/day").magnitude
    assert f"W05: {q_ft3d:,.0f} ft3/d (450 gpm)" in page
    assert "m3/d" not in page
    assert "K (ft/d)" in page and "per well (ft/d, log scale)" in page
    res = cli(runner, "layers", feet_store, "--out", tmp_path / "layers")
    assert res.exit_code == 0, res.output
    wells = json.loads((tmp_path / "layers" / "geojson" / "wells.geojson").read_text())
    props = {f["properties"]["well_id"]: f["properties"] for f in wells["features"]}
    assert props["W00"]["k_unit"] == "ft/d" and props["W00"]["k_AQ"] == pytest.approx(K_FTD, rel=1e-9)


def test_logk_surface_read_back_in_its_unit_by_paths_and_grid(feet_store, tmp_path, runner):
    """A log-K surface holds log10 of K in ft/d here; paths and the model grid read it back as 25 ft/d, the
    same K the unit's geometric mean gives (travel times and grid K agree to rounding)."""
    import xarray as xr

    x0, y0 = _origin()
    surf = tmp_path / "surf"
    _spring_and_recharge(feet_store, tmp_path, runner, x0, y0)  # first: surfaces made before would be stale
    for quantity in ("head", "logk"):
        res = cli(runner, "surface", feet_store, "--unit", "AQ", "--quantity", quantity, "--method", "idw",
                  "--cell", 250, "--out", surf)
        assert res.exit_code == 0, res.output
    tables = {}
    for source in ("mean", "surface"):
        out = tmp_path / source
        res = cli(runner, "paths", feet_store, "--unit", "AQ", "--porosity", 0.1, "--k-source", source,
                  "--surfaces", surf, "--out", out)
        assert res.exit_code == 0, res.output
        tables[source] = pd.read_csv(out / "AQ_pathways.csv")
        side = json.loads((out / "AQ_pathways.json").read_text())
        assert side["k"]["k_unit"] == "ft/d"
    assert side["k"]["surface_values"] == "log10 of K in ft/d"
    assert tables["mean"]["median_days"].to_numpy() == pytest.approx(tables["surface"]["median_days"].to_numpy(),
                                                                     rel=1e-6)
    nc = tmp_path / "model.nc"
    res = cli(runner, "grid", feet_store, "--cell", 1000, "--layers", "AQ", "--k-source", "surface",
              "--surfaces", surf, "--min-thickness", "0.5m", "--out", nc)
    assert res.exit_code == 0, res.output
    with xr.open_dataset(nc) as ds:
        assert ds["k"].attrs["units"] == "ft day-1"
        assert np.allclose(ds["k"].values[0], K_FTD, rtol=1e-6)  # the surface is float32
        manifest = json.loads((tmp_path / "manifest.json").read_text())
    assert manifest["grid"]["min_thickness"] == pytest.approx(0.5 / FT_M, rel=1e-12)  # 0.5 m in feet


def test_figures_label_store_and_crs_units(feet_store, tmp_path, runner):
    out = tmp_path / "figs"
    res = cli(runner, "surface", feet_store, "--unit", "AQ", "--method", "kriging", "--cell", 250, "--out", out)
    assert res.exit_code == 0, res.output
    assert "RMSE" in res.output and res.output.split("\n")[0].rstrip().endswith(" ft")
    res = cli(runner, "figures", feet_store, "--out", out)
    assert res.exit_code == 0, res.output
    logk = (out / "logk_by_unit.svg").read_text(encoding="utf-8")
    assert "log10 K (K in ft/d)" in logk
    vario = (out / "variogram_AQ_head.svg").read_text(encoding="utf-8")
    assert "Lag distance (ftUS)" in vario and "Semivariance γ(h) (ft²)" in vario
    assert "map units" not in vario
