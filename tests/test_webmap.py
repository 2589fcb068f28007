"""Web map, GIS layers: escaping, RFC 7946 GeoJSON, contours, and the map in a real headless browser."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pyogrio
import pytest
import shapely
from pyproj import CRS as PCRS, Transformer

from hydroatlas.export.webmap import safe_text

from conftest import CRS, cli, require_all, write_csv

ROOT = Path(__file__).resolve().parent.parent
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
EVIL = ["<img src=x onerror=alert(1)>", "</script><script>alert(2)</script>", "`${alert(3)}`\\"]


def test_safe_text_escapes_html_and_template_literals():
    assert safe_text("<img src=x onerror=alert(1)>") == "&lt;img src=x onerror=alert(1)&gt;"
    out = safe_text("`${alert(3)}`\\")
    assert "`" not in out and "$" not in out and "\\" not in out
    assert safe_text(None) == "" and safe_text(float("nan")) == "" and safe_text("O'Neil & Co") == "O&#x27;Neil &amp; Co"


@pytest.fixture
def map_store(empty_store, tmp_path, runner):
    """A small district with hostile well names, a planar head field, a spring and a recharge area."""
    rng = np.random.default_rng(4)
    xs, ys = 610000 + rng.uniform(0, 4000, 12), 4100000 + rng.uniform(0, 3000, 12)
    names = EVIL + [""] * 9
    rows = {"units": [["code", "name", "rank", "role"], ["AQ", "aquifer <b>bold</b>", 1, "aquifer"]],
            "wells": [["well_id", "x", "y", "ground_elev", "total_depth", "name"]],
            "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
            "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
            "heads": [["well_id", "zone_id", "measured_at", "head"]],
            "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]]}
    for i, (x, y) in enumerate(zip(xs, ys)):
        w = EVIL[i] if i < len(EVIL) else f"W{i}"
        rows["wells"].append([w, f"{x:.2f}", f"{y:.2f}", 300, 100, names[i]])
        rows["picks"].append([w, "AQ", 0, 100])
        rows["zones"].append([w, "S", 20, 30])
        rows["heads"].append([w, "S", "2024-01-01", f"{250 - 0.003 * (x - 610000):.6f}"])
        rows["ktests"].append([w, "S", "2024-01-01", "slug", f"{10 ** rng.normal(0, 0.3):.3f}", "m/d"])
    for kind, r in rows.items():
        res = cli(runner, "import", empty_store, kind, write_csv(tmp_path / f"{kind}.csv", r))
        assert res.exit_code == 0, res.output
    sp = write_csv(tmp_path / "sp.csv", [["spring_id", "x", "y", "elev", "name"],
                                         ["S<1>", 613900, 4101500, 238.3, EVIL[1]]])
    assert cli(runner, "import", empty_store, "springs", sp).exit_code == 0
    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    ring = [list(tr.transform(x, y)) for x, y in [(610200, 4101000), (610800, 4101000), (610800, 4102000),
                                                  (610200, 4102000), (610200, 4101000)]]
    fc = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {
        "area_id": EVIL[0], "kind": "recharge"}, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}
    (tmp_path / "areas.geojson").write_text(json.dumps(fc))
    assert cli(runner, "import", empty_store, "areas", tmp_path / "areas.geojson").exit_code == 0
    out = tmp_path / "out"
    res = cli(runner, "surface", empty_store, "--unit", "AQ", "--method", "uk", "--sill", 1, "--range", 2000,
              "--variogram", "exponential", "--cell", 50, "--out", out)
    assert res.exit_code == 0, res.output
    res = cli(runner, "paths", empty_store, "--unit", "AQ", "--porosity", 0.1, "--capture-radius", 150, "--out", out)
    assert res.exit_code == 0, res.output
    return empty_store, out


def test_layers_geojson_rfc7946_and_gpkg(map_store, runner):
    store, out = map_store
    res = cli(runner, "layers", store, "--surfaces", out, "--out", out)
    assert res.exit_code == 0, res.output
    back = Transformer.from_crs("EPSG:4326", CRS, always_xy=True)
    wells_gj = json.loads((out / "geojson" / "wells.geojson").read_text())
    assert "crs" not in wells_gj  # RFC 7946: WGS 84 longitude/latitude, no crs member
    gpkg_wells = pyogrio.read_dataframe(out / "layers.gpkg", layer="wells").set_index("well_id")
    assert PCRS.from_user_input(pyogrio.read_info(out / "layers.gpkg", layer="wells")["crs"]) == \
        PCRS.from_user_input(CRS)
    for f in wells_gj["features"]:
        lon, lat = f["geometry"]["coordinates"]
        assert -180 <= lon <= 180 and -90 <= lat <= 90
        x, y = back.transform(lon, lat)
        g = gpkg_wells.loc[f["properties"]["well_id"]].geometry
        assert abs(x - g.x) < 0.05 and abs(y - g.y) < 0.05  # 7 decimals of a degree ~ 1 cm
        assert "k_AQ" in f["properties"] and f["properties"]["k_unit"] == "m/d"
    zones = json.loads((out / "geojson" / "zones.geojson").read_text())
    assert {"unit", "mid_elev", "k", "latest_head"} <= set(zones["features"][0]["properties"])
    for name in ("pathlines", "head_contours", "flow_arrows"):
        assert (out / "geojson" / f"{name}.geojson").is_file(), name
    ca = json.loads((out / "geojson" / "contributing_areas.geojson").read_text()) \
        if (out / "geojson" / "contributing_areas.geojson").exists() else None
    polys = [shapely.geometry.shape(f["geometry"]) for f in (ca or {"features": []})["features"]]
    for poly in polys:
        for part in getattr(poly, "geoms", [poly]):
            assert part.exterior.is_ccw  # RFC 7946: counter-clockwise exterior rings


def test_contour_values_match_raster(map_store, runner):
    """Contour vertices sampled back on the head raster (bilinear) equal their level."""
    import rasterio

    store, out = map_store
    cli(runner, "layers", store, "--surfaces", out, "--out", out)
    cont = pyogrio.read_dataframe(out / "layers.gpkg", layer="head_contours")
    assert len(cont) > 3
    with rasterio.open(out / "AQ_head.tif") as r:
        head = r.read(1, masked=True).filled(np.nan)
        t = r.transform
    from scipy.interpolate import RegularGridInterpolator  # reference library: linear interpolation, NaN-strict

    xc = t.c + (np.arange(head.shape[1]) + 0.5) * t.a
    yc = t.f + (np.arange(head.shape[0]) + 0.5) * t.e
    interp = RegularGridInterpolator((yc[::-1], xc), head[::-1], bounds_error=False, fill_value=np.nan)
    worst, checked = 0.0, 0
    for geom, level in zip(cont.geometry, cont["level"]):
        xy = np.asarray(geom.coords)
        vals = interp(np.column_stack([xy[:, 1], xy[:, 0]]))
        ok = np.isfinite(vals)
        checked += int(ok.sum())
        worst = max(worst, float(np.abs(vals[ok] - level).max()) if ok.any() else 0.0)
    assert checked > 50 and worst < 1e-4


def test_map_html_is_self_contained(map_store, runner):
    store, out = map_store
    res = cli(runner, "map", store, "--surfaces", out, "--out", out / "map.html")
    assert res.exit_code == 0, res.output
    page = (out / "map.html").read_text()
    import re

    loads = re.findall(r'<(?:script|link|img)[^>]+(?:src|href)="(https?:[^"]+)"', page)
    assert loads == []
    for evil in EVIL[:2]:
        assert evil not in page
    assert "licensed professional" in page and "karst" in page


def _browser():
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        if require_all():
            pytest.fail("playwright is not installed (pip install -e '.[test]')")
        pytest.skip("playwright is not installed")
    if CHROMIUM is None:
        if require_all():
            pytest.fail("Debian's chromium is not installed (.ci/run installs it)")
        pytest.skip("chromium is not installed")
    return sync_playwright


def _open(page_path: Path, screenshot: Path | None = None):
    sync_playwright = _browser()
    report = {"requests": [], "console": [], "errors": [], "dialogs": []}
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=[
            "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
            "--disable-component-update", "--disable-sync"])
        page = browser.new_page(viewport={"width": 1280, "height": 900})
        page.on("request", lambda r: report["requests"].append(r.url))
        page.on("console", lambda m: report["console"].append((m.type, m.text)))
        page.on("pageerror", lambda e: report["errors"].append(str(e)))

        def on_dialog(d):
            report["dialogs"].append(d.message)
            d.dismiss()
        page.on("dialog", on_dialog)
        page.goto(page_path.resolve().as_uri())
        page.wait_for_selector(".leaflet-container")
        page.wait_for_timeout(800)
        report["overlays"] = [t.strip() for t in page.locator(".leaflet-control-layers-overlays label").all_inner_texts()]
        report["markers"] = page.locator(".leaflet-interactive").count()
        report["paths"] = page.locator("path.leaflet-interactive").count()
        # open every popup so that hostile names are rendered, then look for injected nodes
        for marker in page.locator("path.leaflet-interactive").all()[:40]:
            try:
                marker.click(timeout=500, force=True)
            except Exception:  # noqa: BLE001 - some paths are covered by others
                pass
        page.wait_for_timeout(300)
        report["injected_imgs"] = page.evaluate("document.querySelectorAll('img[src=\"x\"]').length")
        report["popup_texts"] = page.locator(".leaflet-popup-content").all_inner_texts()
        if screenshot is not None:
            page.keyboard.press("Escape")
            page.screenshot(path=str(screenshot))
        browser.close()
    return report


@pytest.mark.browser
def test_hostile_names_do_not_run(map_store, runner):
    store, out = map_store
    cli(runner, "map", store, "--surfaces", out, "--out", out / "map.html")
    rep = _open(out / "map.html")
    assert rep["dialogs"] == [] and rep["errors"] == []
    assert rep["injected_imgs"] == 0
    outside = [u for u in rep["requests"] if not u.startswith(("file:", "data:"))]
    assert outside == []


@pytest.mark.browser
def test_demo_map_in_browser(tmp_path):
    """The demo map: every layer in the switcher, markers and contours in the DOM, nothing loaded from outside,
    no console errors, and a screenshot that is not blank (kept in demo_out/)."""
    from matplotlib.image import imread

    from hydroatlas.demo import run_demo

    run_demo(tmp_path / "demo", echo=lambda *_: None)
    shot_dir = ROOT / "demo_out"
    shot_dir.mkdir(exist_ok=True)
    shot = shot_dir / "map_screenshot.png"
    rep = _open(tmp_path / "demo" / "map.html", screenshot=shot)
    expected = {"Wells: K of ULS", "Head contours of ULS (m)", "Kriging standard deviation of ULS head",
                "Flow arrows", "Pumping wells (size by rate)", "Springs", "Recharge areas",
                "Pathlines (colour by travel time)", "Contributing areas", "Drawdown of the last scenario"}
    assert expected <= set(rep["overlays"]), rep["overlays"]
    assert rep["markers"] > 50 and rep["paths"] > 50
    assert [u for u in rep["requests"] if not u.startswith(("file:", "data:"))] == []
    assert [m for m in rep["console"] if m[0] == "error"] == [] and rep["errors"] == []
    img = imread(shot)
    colours = np.unique((img[..., :3] * 255).astype(np.uint8).reshape(-1, 3), axis=0)
    assert len(colours) > 200


def test_figures_command(map_store, runner):
    store, out = map_store
    res = cli(runner, "figures", store, "--surfaces", out, "--out", out / "figs")
    assert res.exit_code == 0, res.output
    names = {p.name for p in (out / "figs").iterdir()}
    assert {"logk_by_unit.png", "logk_by_unit.svg", "crossval_AQ_head.png", "crossval_AQ_head.svg"} <= names
    # a fixed variogram has no experimental variogram to draw; a fitted one would
    assert "variogram_AQ_head.png" not in names
