"""Web map, GIS layers: escaping, RFC 7946 GeoJSON, contours, and the map in a real headless browser."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
from pyproj import CRS as PCRS, Transformer

from hydroatlas.export.webmap import geojson_text, safe_text

from conftest import CRS, cli, require_all, write_csv

ROOT = Path(__file__).resolve().parent.parent
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


def _payload(n: int, where: str) -> str:
    """A hostile text with a unique marker: if it ever becomes markup, element ``pwn<n>`` exists or a dialog opens."""
    return f"<img src=x id=pwn{n} onerror=alert({n})>{where}"


# one payload per text field that reaches the map, so that each can be found on the page as literal text
HOSTILE = {
    "well_ids": [_payload(1, "w"), "</script><script id=pwn2>alert(2)</script>", "`${alert(3)}`\\",
                 "\"><svg id=pwn4 onload=alert(4)>'"],
    "well_name": _payload(5, "name"), "zone_id": _payload(6, "zone"), "unit_name": _payload(7, "unit"),
    "well_attr": _payload(8, "well attr"), "spring_id": _payload(10, "spring"),
    "spring_name": _payload(11, "spring name"), "spring_attr": _payload(12, "spring attr"),
    "area_id": _payload(13, "area"), "area_attr": _payload(14, "area attr"), "datum": _payload(15, "datum"),
}
EVIL = HOSTILE["well_ids"]


def test_safe_text_escapes_html_and_template_literals():
    assert safe_text("<img src=x onerror=alert(1)>") == "&lt;img src=x onerror=alert(1)&gt;"
    out = safe_text("`${alert(3)}`\\")
    assert "`" not in out and "$" not in out and "\\" not in out
    assert safe_text(None) == "" and safe_text(float("nan")) == "" and safe_text("O'Neil & Co") == "O&#x27;Neil &amp; Co"
    assert safe_text(pd.NA) == "" and safe_text(pd.NaT) == ""


@pytest.mark.parametrize("dtype", ["object", "str", "string", "category"])
def test_geojson_text_escapes_text_of_any_dtype(dtype):
    """Text columns are ``object`` or ``str`` depending on the pandas version; both, and others, are escaped."""
    import geopandas as gpd

    gdf = gpd.GeoDataFrame({"area_id": pd.Series([EVIL[0], "plain"], dtype=dtype), "n": [1, 2],
                            "share": [0.5, np.nan], "ok": [True, False]},
                           geometry=[shapely.Point(0, 0), shapely.Point(1, 1)], crs="EPSG:4326")
    props = [f["properties"] for f in geojson_text(gdf)["features"]]
    assert props[0]["area_id"] == safe_text(EVIL[0]) and "<" not in props[0]["area_id"]
    assert props[1]["area_id"] == "plain"
    assert [p["n"] for p in props] == [1, 2] and props[0]["share"] == 0.5 and props[1]["share"] is None
    assert [p["ok"] for p in props] == [True, False]


@pytest.fixture
def map_store(tmp_path, runner):
    """A small district where every text that reaches the map is hostile: well ids, names, zone ids, the unit
    name, extra attributes, springs, areas and the vertical-datum label; a planar head field, pumping, a spring
    and a recharge area, with forward and backward paths."""
    store = tmp_path / "hostile.gpkg"
    res = cli(runner, "init", store, "--crs", CRS, "--vertical-datum", HOSTILE["datum"])
    assert res.exit_code == 0, res.output
    rng = np.random.default_rng(4)
    xs, ys = 610000 + rng.uniform(0, 4000, 12), 4100000 + rng.uniform(0, 3000, 12)
    rows = {"units": [["code", "name", "rank", "role"], ["AQ", HOSTILE["unit_name"], 1, "aquifer"]],
            "wells": [["well_id", "x", "y", "ground_elev", "total_depth", "name", "owner_note"]],
            "picks": [["well_id", "unit", "top_depth", "bottom_depth"]],
            "zones": [["well_id", "zone_id", "top_depth", "bottom_depth"]],
            "heads": [["well_id", "zone_id", "measured_at", "head"]],
            "ktests": [["well_id", "zone_id", "tested_on", "method", "k", "k_unit"]],
            "pumping": [["well_id", "zone_id", "rate", "rate_unit", "start"]]}
    for i, (x, y) in enumerate(zip(xs, ys)):
        w = EVIL[i] if i < len(EVIL) else f"W{i}"
        z = HOSTILE["zone_id"] if i < 2 else "S"
        rows["wells"].append([w, f"{x:.2f}", f"{y:.2f}", 300, 100, HOSTILE["well_name"] if i < 2 else "",
                              HOSTILE["well_attr"] if i < 2 else ""])
        rows["picks"].append([w, "AQ", 0, 100])
        rows["zones"].append([w, z, 20, 30])
        rows["heads"].append([w, z, "2024-01-01", f"{250 - 0.003 * (x - 610000):.6f}"])
        rows["ktests"].append([w, z, "2024-01-01", "slug", f"{10 ** rng.normal(0, 0.3):.3f}", "m/d"])
    rows["pumping"].append([EVIL[1], "", 200, "m3/d", "2024-01-01"])
    for kind, r in rows.items():
        res = cli(runner, "import", store, kind, write_csv(tmp_path / f"{kind}.csv", r))
        assert res.exit_code == 0, res.output
    sp = write_csv(tmp_path / "sp.csv", [["spring_id", "x", "y", "elev", "name", "flow_note"],
                                         [HOSTILE["spring_id"], 613900, 4101500, 238.3, HOSTILE["spring_name"],
                                          HOSTILE["spring_attr"]]])
    res = cli(runner, "import", store, "springs", sp)
    assert res.exit_code == 0, res.output
    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    ring = [list(tr.transform(x, y)) for x, y in [(610200, 4101000), (610800, 4101000), (610800, 4102000),
                                                  (610200, 4102000), (610200, 4101000)]]
    fc = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {
        "area_id": HOSTILE["area_id"], "kind": "recharge", "cover": HOSTILE["area_attr"]},
        "geometry": {"type": "Polygon", "coordinates": [ring]}}]}
    (tmp_path / "areas.geojson").write_text(json.dumps(fc))
    res = cli(runner, "import", store, "areas", tmp_path / "areas.geojson")
    assert res.exit_code == 0, res.output
    out = tmp_path / "out"
    res = cli(runner, "surface", store, "--unit", "AQ", "--method", "uk", "--sill", 1, "--range", 2000,
              "--variogram", "exponential", "--cell", 50, "--out", out)
    assert res.exit_code == 0, res.output
    for direction in ([], ["--backward"]):
        res = cli(runner, "paths", store, "--unit", "AQ", "--porosity", 0.1, "--capture-radius", 150, "--out", out,
                  *direction)
        assert res.exit_code == 0, res.output
    return store, out


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
    assert "licensed professional" in page and "karst" in page
    # whether hostile texts stay text is checked on the rendered page (test_hostile_texts_stay_text): JSON
    # writes "<" as \u003c, so searching the HTML source for a payload proves nothing


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


# Runs in the page: hover (mouseover), then click every marker, circle marker, polygon and polyline of the map
# through Leaflet's own event API (events propagate to the groups, as a real mouse's do), and after each event
# look for an injected element and collect the texts of the open tooltips and popups.
INTERACT_JS = """async () => {
  const map = Object.keys(window).filter(k => /^map_[0-9a-f]+$/.test(k)).map(k => window[k])
                    .find(v => v instanceof L.Map);
  const injected = () => document.querySelector('[id^="pwn"]') !== null;
  const texts = [], problems = [];
  const note = what => { if (problems.length < 10) problems.push(what); };
  const grab = sel => document.querySelectorAll(sel).forEach(e => texts.push(e.textContent));
  if (injected()) note('on load');
  const features = [];
  map.eachLayer(l => { if (l instanceof L.Marker || l instanceof L.Path) features.push(l); });
  let hovered = 0, clicked = 0;
  for (const l of features) {
    const at = l.getLatLng ? l.getLatLng() : l.getBounds().getCenter();
    const ev = {latlng: at, layerPoint: map.latLngToLayerPoint(at), containerPoint: map.latLngToContainerPoint(at)};
    l.fire('mouseover', ev, true); hovered++;
    grab('.leaflet-tooltip');
    if (injected()) note('hover ' + hovered);
    l.fire('click', ev, true); clicked++;
    grab('.leaflet-popup-content');
    if (injected()) note('click ' + clicked);
    l.fire('mouseout', ev, true);
    map.closePopup();
  }
  await new Promise(r => setTimeout(r, 400));  // image errors and other handlers run asynchronously
  if (injected()) note('after the interactions');
  grab('.ha-box'); grab('.leaflet-control-layers-overlays');
  const circles = [];
  map.eachLayer(l => { if (l instanceof L.CircleMarker) {
    const p = map.latLngToContainerPoint(l.getLatLng()), r = map.getContainer().getBoundingClientRect();
    circles.push([r.left + p.x, r.top + p.y]); } });
  return {features: features.length, hovered, clicked, texts, problems, circles};
}"""

# before any page script: count dialogs (and still let them open, so that page.on("dialog") sees them too)
COUNT_DIALOGS_JS = """window.__dialogs = [];
for (const name of ['alert', 'confirm', 'prompt']) {
  const original = window[name].bind(window);
  window[name] = (...args) => { window.__dialogs.push(name + ': ' + args.join(' ')); return original(...args); };
}"""
FIND_INJECTED_JS = "Array.from(document.querySelectorAll('[id^=\"pwn\"]'), e => e.id)"


def _open(page_path: Path, screenshot: Path | None = None):
    """Open a map in headless chromium, hover and click every feature; report what happened."""
    sync_playwright = _browser()
    report = {"requests": [], "console": [], "errors": [], "dialogs": []}
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=[
            "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync"])
        page = browser.new_page(viewport={"width": 1280, "height": 900})
        page.on("request", lambda r: report["requests"].append(r.url))
        page.on("console", lambda m: report["console"].append((m.type, m.text)))
        page.on("pageerror", lambda e: report["errors"].append(str(e)))

        def on_dialog(d):
            report["dialogs"].append(d.message)
            d.dismiss()
        page.on("dialog", on_dialog)
        page.add_init_script(COUNT_DIALOGS_JS)
        page.goto(page_path.resolve().as_uri())
        page.wait_for_selector(".leaflet-container")
        page.wait_for_timeout(800)
        report["overlays"] = [t.strip() for t in page.locator(".leaflet-control-layers-overlays label").all_inner_texts()]
        report["markers"] = page.locator(".leaflet-interactive").count()
        report["paths"] = page.locator("path.leaflet-interactive").count()
        if screenshot is not None:
            page.screenshot(path=str(screenshot))
        report.update(page.evaluate(INTERACT_JS))
        # a real mouse over every circle marker (wells, pumping wells): the tooltips it opens; the other
        # overlays are switched off first (with the layer switcher) so that they do not cover the wells
        for label in page.locator(".leaflet-control-layers-overlays label").all():
            if not label.inner_text().strip().startswith(("Wells", "Pumping wells")):
                label.locator("input").uncheck()
        report["mouse_tooltips"] = []
        for x, y in report["circles"]:
            page.mouse.move(x, y)
            page.wait_for_timeout(40)
            report["mouse_tooltips"] += page.locator(".leaflet-tooltip").all_text_contents()
            if page.evaluate(FIND_INJECTED_JS):
                report["problems"].append(f"mouse at {x:.0f},{y:.0f}")
        page.mouse.move(2, 2)
        page.wait_for_timeout(300)
        report["page_dialogs"] = page.evaluate("window.__dialogs")
        report["injected"] = page.evaluate(FIND_INJECTED_JS)
        browser.close()
    return report


@pytest.mark.browser
def test_hostile_texts_stay_text(map_store, runner):
    """Every hostile text is shown as literal text on hover and on click, and none becomes markup or script."""
    store, out = map_store
    res = cli(runner, "map", store, "--surfaces", out, "--out", out / "map.html")
    assert res.exit_code == 0, res.output
    rep = _open(out / "map.html")
    assert rep["features"] > 30 and rep["hovered"] == rep["clicked"] == rep["features"]
    assert rep["problems"] == [] and rep["injected"] == []
    assert rep["dialogs"] == [] and rep["page_dialogs"] == [] and rep["errors"] == []
    shown = "\n".join(rep["texts"])
    for field, value in HOSTILE.items():
        for text in (value if isinstance(value, list) else [value]):
            assert text in shown, f"{field} {text!r} is not shown as text"
    hovered = "\n".join(rep["mouse_tooltips"])
    assert all(w in hovered for w in EVIL), rep["mouse_tooltips"]
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
                "Pathlines (colour by travel time)", "Contributing areas"}
    assert expected <= set(rep["overlays"]), rep["overlays"]
    # the demo's named scenario, found in the store's product registry
    assert "Scenario proposed-wellfield: drawdown change" in rep["overlays"], rep["overlays"]
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
