"""The board map (issue 14, item 5): the web map in Debian's chromium and the static map figure for reports.

Checked on the truth district (tests/truthdistrict.py), a feet store: a head and a log-K surface of UD, pathlines
and contributing areas, and a named drawdown scenario with a proposed well. In chromium: the title, one legend
entry (with its symbol) per layer of the layer switcher, a scale bar in feet or miles that no panel covers (at two
window sizes), the view holding the whole district, permanent drawdown labels, the proposed well, the spring's
discharge in its popup, the default layers; a screenshot is kept. The figure is opened back: PNG with Pillow, SVG
as XML (title, legend and scale bar texts), PDF by its header.
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import shapely
from pyproj import CRS, Geod, Proj, Transformer

from hydroatlas.export.figures import scale_bar_length
from hydroatlas.export.webmap import COORD_DECIMALS, latlon
from hydroatlas.workflows.board import north_angle

from conftest import require_all
from truth_fixtures import copy_store, ok, run

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
TITLE = "Board map of an invented district"
CELL = 400.0  # US survey feet
FT, MI = 0.3048, 1609.344  # metres, exact definitions (VERIFY.md: 1 ft = 0.3048 m; 1 mi = 5280 ft)



@pytest.fixture(scope="module")
def board(truth, truth_store, tmp_path_factory):
    """A copy of the truth store with surfaces, pathways, the spring's discharge-head relation, a scenario with a
    proposed well, and its web map."""
    folder = tmp_path_factory.mktemp("board")
    store = copy_store(truth_store, folder / "board.gpkg")
    out = folder / "out"
    ok("surface", store, "--unit", "UD", "--window", truth.normal_window, "--cell", CELL, "--out", out)
    ok("surface", store, "--unit", "UD", "--quantity", "logk", "--cell", CELL, "--out", out)
    ok("paths", store, "--unit", "UD", "--porosity", 0.05, "--out", out)
    ok("paths", store, "--unit", "UD", "--porosity", 0.05, "--backward", "--out", out)
    ok("springflow", store, "--spring", truth.spring_id, "--out", out)  # the spring's relation: trigger levels
    x0, y0, x1, y1 = truth.domain.bounds
    ok("drawdown", store, "--unit", "UD", "--days", 365, "-S", 0.001, "--name", "plan-a", "--out", out,
       "--new-well", f"NEW-1,{x0 + 0.45 * (x1 - x0):.1f},{y0 + 0.5 * (y1 - y0):.1f},500gpm")
    page = folder / "board_map.html"
    ok("map", store, "--unit", "UD", "--title", TITLE, "--out", page)
    return SimpleNamespace(store=store, out=out, page=page, folder=folder)


# -- in chromium -----------------------------------------------------------------------------------------------
def _playwright():
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


# Runs in the page: what a reader sees, with the boxes of the scale bar and of every other control (panel).
SURVEY_JS = """() => {
  const map = Object.keys(window).filter(k => /^map_[0-9a-f]+$/.test(k)).map(k => window[k])
                    .find(v => v instanceof L.Map);
  const box = e => { const r = e.getBoundingClientRect(); return [r.left, r.top, r.right, r.bottom]; };
  const scale = document.querySelector('.leaflet-control-scale');
  const line = scale.querySelector('.leaflet-control-scale-line');
  const y = map.getSize().y / 2, w = parseFloat(line.style.width);
  const p0 = map.containerPointToLatLng([0, y]), p1 = map.containerPointToLatLng([w, y]);
  const b = map.getBounds();
  const shown = e => { const r = e.getBoundingClientRect(); return r.width > 0 && r.height > 0; };
  return {
    title: document.querySelector('#ha-info .ha-title').textContent,
    info: document.querySelector('#ha-info').textContent,
    overlays: [...document.querySelectorAll('.leaflet-control-layers-overlays label')].map(l => ({
      name: l.textContent.trim(), on: l.querySelector('input').checked})),
    entries: [...document.querySelectorAll('#ha-legend .ha-entry')].map(e => ({
      name: e.querySelector('.ha-entry-name').textContent, text: e.textContent,
      symbols: e.querySelectorAll('svg, span[style*="gradient"], div[style*="gradient"]').length,
      dimmed: e.classList.contains('ha-off')})),
    legend: document.querySelector('#ha-legend').textContent,
    scale: {box: box(scale), text: line.textContent.trim(), from: [p0.lat, p0.lng], to: [p1.lat, p1.lng],
            lines: scale.querySelectorAll('.leaflet-control-scale-line').length},
    panels: [...document.querySelectorAll('.leaflet-control')].filter(e => e !== scale && shown(e))
              .map(e => ({what: (e.id || e.className), box: box(e)})),
    north: !!document.querySelector('#ha-north svg'),
    caution: document.querySelector('#ha-caution').textContent,
    view: [b.getSouth(), b.getWest(), b.getNorth(), b.getEast()],
    labels: [...document.querySelectorAll('.ha-label')].filter(shown).map(e => ({
      text: e.textContent, color: getComputedStyle(e).color})),
    proposed: [...document.querySelectorAll('.leaflet-marker-icon rect[stroke="#b3001b"]')].filter(shown).length,
  };
}"""

# Opens each spring's popup through Leaflet (as a click does) and returns the popup texts.
SPRING_POPUPS_JS = """() => {
  const map = Object.keys(window).filter(k => /^map_[0-9a-f]+$/.test(k)).map(k => window[k])
                    .find(v => v instanceof L.Map);
  const texts = [];
  map.eachLayer(l => {
    if (l instanceof L.Marker && l.options.icon && String(l.options.icon.options.html || '').includes('#6baed6')) {
      l.fire('click', {latlng: l.getLatLng()});
      const p = document.querySelector('.leaflet-popup-content');
      if (p) { texts.push(p.textContent); }
      map.closePopup();
    }
  });
  return texts;
}"""


def _look(page_path: Path, viewport, screenshot: Path | None = None) -> dict:
    sync_playwright = _playwright()
    seen = {"requests": [], "errors": []}
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=[
            "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
            "--disable-component-update", "--disable-sync"])
        page = browser.new_page(viewport={"width": viewport[0], "height": viewport[1]})
        page.on("request", lambda r: seen["requests"].append(r.url))
        page.on("pageerror", lambda e: seen["errors"].append(str(e)))
        page.on("console", lambda m: seen["errors"].append(m.text) if m.type == "error" else None)
        page.goto(page_path.resolve().as_uri())
        page.wait_for_selector("#ha-legend.leaflet-control")
        page.wait_for_timeout(500)
        if screenshot is not None:
            page.screenshot(path=str(screenshot))
        seen.update(page.evaluate(SURVEY_JS))
        seen["spring_popups"] = page.evaluate(SPRING_POPUPS_JS)
        browser.close()
    return seen


def _keep(shot: Path) -> None:
    """Copy a screenshot to $HYDROATLAS_ARTIFACTS when it is set (CI keeps that folder)."""
    where = os.environ.get("HYDROATLAS_ARTIFACTS")
    if where:
        Path(where).mkdir(parents=True, exist_ok=True)
        shutil.copy2(shot, Path(where) / shot.name)


@pytest.fixture(scope="module")
def seen(board):
    """The board map in chromium at 1280 x 900 (screenshot kept) and at 900 x 650."""
    shot = board.folder / "board_map_screenshot.png"
    big = _look(board.page, (1280, 900), screenshot=shot)
    _keep(shot)
    small = _look(board.page, (900, 650))
    return SimpleNamespace(big=big, small=small, shot=shot)


def _overlap(a, b) -> bool:
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


@pytest.mark.browser
def test_title_info_panel_and_caution(seen):
    big = seen.big
    assert big["title"] == TITLE
    assert "Unit UD" in big["info"] and "Heads of 2021-03-01 to 2021-05-31" in big["info"]
    # the scenario from its sidecar: the proposed well and its rate (500 gpm = 96,250 ft3/d: 1 US gal =
    # 231 in3 exactly, so 500 gpm x 1440 min/d x 231/1728 ft3/gal = 96,250 ft3/d), days, S and T
    assert "Pumping scenario plan-a" in big["info"]
    assert "NEW-1: proposed, 96,250 ft3/d (500 gpm)" in big["info"]
    assert "365 days of pumping, storativity S = 0.001" in big["info"]
    assert re.search(r"Transmissivity T = [0-9.e+]+ ft2/d", big["info"])
    # the spring effect the scenario's sidecar reports (a spring with a discharge-head relation)
    fx = re.search(r"Spring SP-1: discharge ([0-9,.]+) to ([0-9,.]+) gpm \(loss ([0-9.e+-]+) gpm, 95 % interval",
                   big["info"])
    assert fx, big["info"]
    before, after, loss = (float(v.replace(",", "")) for v in fx.groups())
    assert after < before and loss == pytest.approx(before - after, rel=0.01, abs=1.0)  # a drawdown takes flow
    assert "licensed professional" in big["caution"] and "karst" in big["caution"]
    assert big["north"]
    assert big["errors"] == []
    assert [u for u in big["requests"] if not u.startswith(("file:", "data:"))] == []


@pytest.mark.browser
def test_one_legend_entry_with_a_symbol_per_layer(seen):
    big = seen.big
    names = [o["name"] for o in big["overlays"]]
    assert len(names) >= 11, names
    assert [e["name"] for e in big["entries"]] == names
    assert all(e["symbols"] >= 1 for e in big["entries"]), [e for e in big["entries"] if not e["symbols"]]
    # an entry is dimmed exactly when its layer is off
    assert [e["dimmed"] for e in big["entries"]] == [not o["on"] for o in big["overlays"]]
    by_name = {o["name"]: o["on"] for o in big["overlays"]}
    for name in ("Wells: K of UD", "Head contours of UD (ft)", "Springs", "Scenario plan-a: drawdown change",
                 "Proposed wells (scenarios)", "Pumping wells (size by rate)", "Recharge areas"):
        assert by_name.get(name) is True, (name, by_name)
    for name in ("Kriging standard deviation of UD head", "Log-K surface of UD"):
        assert by_name.get(name) is False, (name, by_name)


@pytest.mark.browser
@pytest.mark.parametrize("size", ["big", "small"])
def test_scale_bar_is_in_feet_and_no_panel_covers_it(seen, size):
    look = getattr(seen, size)
    scale = look["scale"]
    assert scale["lines"] == 1 and re.fullmatch(r"\d+ (ft|mi)", scale["text"]), scale
    assert len(look["panels"]) >= 6  # zoom, info, layer switcher, legend, north arrow, caution, attribution
    covering = [p["what"] for p in look["panels"] if _overlap(scale["box"], p["box"])]
    assert covering == []
    # the panels do not cover one another either
    boxes = look["panels"]
    pairs = [(a["what"], b["what"]) for i, a in enumerate(boxes) for b in boxes[i + 1:] if _overlap(a["box"], b["box"])]
    assert pairs == []


@pytest.mark.browser
def test_scale_bar_length_is_the_geodesic_distance(seen):
    """The scale bar's width on the ground (pyproj's geodesic on WGS 84, a reference library) is the length its
    label says, within 1.5 % (Leaflet measures on a sphere and rounds the bar to whole pixels)."""
    scale = seen.big["scale"]
    number, unit = scale["text"].split()
    said = float(number) * (MI if unit == "mi" else FT)
    (lat0, lon0), (lat1, lon1) = scale["from"], scale["to"]
    _, _, ground = Geod(ellps="WGS84").inv(lon0, lat0, lon1, lat1)
    assert ground == pytest.approx(said, rel=0.015)


@pytest.mark.browser
def test_view_holds_the_district(seen, truth):
    """The opening view contains the whole domain polygon (its corners in WGS 84 by pyproj) at both sizes, and
    the district is not lost in it (it spans at least a third of the view's width or height)."""
    tr = Transformer.from_crs(truth.crs, "EPSG:4326", always_xy=True)
    w, s, e, n = tr.transform_bounds(*truth.domain.bounds, densify_pts=21)
    for look in (seen.big, seen.small):
        vs, vw, vn, ve = look["view"]
        assert vs <= s and vw <= w and vn >= n and ve >= e, (look["view"], (s, w, n, e))
        assert max((e - w) / (ve - vw), (n - s) / (vn - vs)) > 1 / 3


@pytest.mark.browser
def test_drawdown_contours_labelled_and_proposed_well_drawn(seen):
    """Labels shown without hovering: drawdown contours in the drawdown red (#b30000) with their value in feet,
    head contours in feet, and the proposed well's id."""
    labels = seen.big["labels"]
    red = [lb["text"] for lb in labels if lb["color"] == "rgb(179, 0, 0)"]
    assert red and all(re.fullmatch(r"\d+(\.\d+)? ft", t) for t in red), labels
    head = [lb["text"] for lb in labels if lb["color"] != "rgb(179, 0, 0)"]
    assert sum(bool(re.fullmatch(r"\d{3,4} ft", t)) for t in head) >= 3
    assert "NEW-1" in [lb["text"] for lb in labels]
    assert seen.big["proposed"] == 1


@pytest.mark.browser
def test_spring_popup_shows_discharge_and_trigger_levels(seen, truth, board):
    """The popup holds the spring's latest and median discharge (the file's unit) and, from the springflow
    sidecar, the cease-flow head and each trigger level with its interval, as the sidecar states them."""
    popups = seen.big["spring_popups"]
    assert len(popups) == 1 and truth.spring_id in popups[0]
    text = popups[0]
    unit = truth.discharge_unit  # the unit the discharge file used (gpm)
    assert re.search(rf"Discharge [0-9,.]+ {unit} on \d{{4}}-\d\d-\d\d \(latest reading\)", text), text
    assert re.search(rf"Median [0-9,.]+ {unit} of \d+ readings", text)
    side = json.loads((board.out / f"{truth.spring_id}_springflow.json").read_text())
    cf = side["cease_flow_head"]
    assert f"Cease-flow head {cf['value']:.2f} ft" in text
    assert f"interval {cf['low']:.2f} to {cf['high']:.2f} ft" in text
    levels = [lv for lv in side["trigger_levels"] if lv["head"] is not None]
    assert len(levels) == 3
    for lv in levels:
        assert f"discharge {lv['percent']:g} % of the median" in text
        assert f"at head {lv['head']:.2f} ft ({lv['low']:.2f} to {lv['high']:.2f})" in text


@pytest.mark.browser
def test_screenshot_kept_and_not_blank(seen):
    from PIL import Image

    img = np.asarray(Image.open(seen.shot).convert("RGB"))
    assert img.shape == (900, 1280, 3)
    assert len(np.unique(img.reshape(-1, 3), axis=0)) > 200


def test_feet_store_says_feet(board):
    """Every length the legend and the panel name is in feet; K in ft/d."""
    page = board.page.read_text(encoding="utf-8")
    legend = page[page.index("<div id='ha-legend'"):page.index("<div id='ha-caution'")]
    assert "Head contours of UD (ft)" in legend and "ft/d" in legend and "ft3/d" in legend
    assert not re.search(r"\(m\)|\bm/d\b|\bm3/d\b|\bm2/d\b", legend)
    assert "metric: false, imperial: true" in page


def test_map_coordinates_have_six_decimals(board):
    """Every latitude/longitude pair written for the map's layers has at most COORD_DECIMALS decimals."""
    page = board.page.read_text(encoding="utf-8")
    script = page[page.index("L.map("):]  # the map's own script, after the inlined libraries
    pairs = re.findall(r"\[\s*(-?\d+\.\d+),\s*(-?\d+\.\d+)\s*\]", script)
    assert len(pairs) > 500
    assert max(len(v.split(".")[1]) for pair in pairs for v in pair) <= COORD_DECIMALS


# -- the coordinate rule, the scale bar rule and the north arrow ------------------------------------------------
def test_rounding_moves_a_line_by_less_than_the_stated_bound():
    """The rule of COORD_DECIMALS: 1e-6 degree is at most 0.111 m (pyproj's geodesic on WGS 84: a degree of
    latitude is the longest), and the written line lies within 1.21e-6 degree (thinning 0.5e-6, rounding
    0.5e-6 x sqrt 2), hence 0.14 m, of the traced one (Hausdorff distance), while a densely traced line loses most
    of its vertices."""
    geod = Geod(ellps="WGS84")
    step = max(geod.inv(0, lat, 0, lat + 1e-6)[2] for lat in (0, 45, 89))  # metres per 1e-6 deg of latitude
    assert 0.110 < step < 0.112
    t = np.linspace(0, 2 * np.pi, 20_000)
    lon0, lat0 = -88.36, 40.02
    traced = shapely.LineString(np.column_stack([lon0 + 0.02 * np.cos(t), lat0 + 0.015 * np.sin(t)]))
    written = latlon(traced)
    assert len(written) < len(traced.coords) / 5
    kept = shapely.LineString([(lon, lat) for lat, lon in written])
    off = kept.hausdorff_distance(traced)  # degrees
    assert off <= (0.5 + 0.5 * math.sqrt(2)) * 1e-6
    assert off * step / 1e-6 < 0.14  # metres


def test_scale_bar_lengths():
    """1-2-5 lengths of about a quarter of the map's width, in exact feet, miles, metres (VERIFY.md: 1 ft =
    0.3048 m; a mile is 5280 ft)."""
    assert scale_bar_length(10_000, "ft") == (pytest.approx(5000 * FT), "5,000 ft", 5000)  # 2,500 m = 8,202 ft
    assert scale_bar_length(100_000, "ft") == (pytest.approx(10 * MI), "10 mi", 10)  # 25 km = 15.5 mi
    assert scale_bar_length(400, "ft") == (pytest.approx(200 * FT), "200 ft", 200)  # 100 m = 328 ft
    assert scale_bar_length(10_000, "m") == (2000, "2 km", 2)
    assert scale_bar_length(3_000, "m") == (500, "500 m", 500)
    with pytest.raises(ValueError):
        scale_bar_length(0, "m")


@pytest.mark.parametrize("crs, lon, lat", [("EPSG:3435", -88.36, 40.02), ("EPSG:32616", -84.2, 36.0),
                                           ("EPSG:32616", -89.9, 44.0)])
def test_north_arrow_turns_by_the_grid_convergence(crs, lon, lat):
    """The static map's north arrow points to true north: its angle from grid north is the meridian convergence
    that PROJ computes analytically (pyproj Proj.get_factors), with PROJ's sign reversed (PROJ gives grid north
    from true north; from memory: its sign convention, confirmed by the values agreeing in size)."""
    x, y = Transformer.from_crs("EPSG:4326", crs, always_xy=True).transform(lon, lat)
    store = SimpleNamespace(settings=SimpleNamespace(crs=CRS(crs)))
    ours = north_angle(store, x, y)
    theirs = Proj(CRS(crs)).get_factors(lon, lat).meridian_convergence
    assert ours == pytest.approx(-theirs, abs=2e-3)
    if crs == "EPSG:32616":
        assert abs(ours) > 1.0  # 3 degrees from the central meridian: a visible turn


# -- the static figure -------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def figure(board):
    figs = board.folder / "figs"
    res = ok("figures", board.store, "--map", "--unit", "UD", "--title", TITLE, "--out", figs, "--format", "json")
    return SimpleNamespace(folder=figs, files=json.loads(res.stdout)["files"])


def _svg_texts(path: Path, gid: str | None = None) -> str:
    root = ET.parse(path).getroot()
    ns = "{http://www.w3.org/2000/svg}"
    scope = root if gid is None else next(e for e in root.iter() if e.get("id") == gid)
    return " ".join(" ".join("".join(t.itertext()).split()) for t in scope.iter(f"{ns}text"))


def test_static_map_files_open(figure):
    from PIL import Image

    stems = {Path(f).name for f in figure.files}
    assert {"map_UD.png", "map_UD.svg", "map_UD.pdf"} <= stems
    with Image.open(figure.folder / "map_UD.png") as img:
        img.load()
        assert img.size == (1650, 1275)  # 11 x 8.5 in at 150 dpi
        assert len(np.unique(np.asarray(img.convert("RGB")).reshape(-1, 3), axis=0)) > 100
    pdf = (figure.folder / "map_UD.pdf").read_bytes()
    assert pdf.startswith(b"%PDF-") and pdf.rstrip().endswith(b"%%EOF")


def test_static_map_has_title_legend_scale_north_and_caution(figure, seen):
    svg = figure.folder / "map_UD.svg"
    assert _svg_texts(svg, "map-title") == TITLE
    legend = _svg_texts(svg, "legend")
    everything = _svg_texts(svg)
    # the same content: every layer the web map shows when it opens is in the figure's legend or colour bars
    for layer in [o["name"] for o in seen.big["overlays"] if o["on"]]:
        assert layer in everything, layer
    for kind in ("monitoring", "multizone", "pumping", "supply"):
        assert f"Well, {kind}" in legend
    assert re.fullmatch(r"[0-9,]+ (ft|mi)", _svg_texts(svg, "scale-bar"))
    assert _svg_texts(svg, "north-arrow") == "N"
    assert "licensed professional" in _svg_texts(svg, "caution")
    assert "Cease-flow head" in everything and "Trigger level" in everything  # the springs' section
    assert "(ft/d, geometric mean per well, log scale)" in everything and "Head contours of UD (ft)" in legend
    assert not re.search(r"\(m\)|\bm/d\b", everything)


def test_title_without_map_is_refused(board):
    res = run("figures", board.store, "--title", "x", "--out", board.folder / "nothing")
    assert res.exit_code == 2 and "--map" in res.output


def test_unknown_unit_of_the_map_figure_is_refused(board):
    figs = board.folder / "refused"
    res = run("figures", board.store, "--map", "--unit", "NOPE", "--out", figs)
    assert res.exit_code == 2 and "unit 'NOPE' is not in the store" in res.output
    assert not figs.exists()  # refused before any figure is drawn or the folder made
