"""A self-contained web map (folium/Leaflet) that works with no internet.

Leaflet (and jQuery, which folium's popups call) are inlined from the copies
vendored under ``export/vendor`` (taken from the npm registry, licences kept
beside them); the Leaflet control icons are inlined as data URIs. A basemap
is optional.

Every text that comes from imported files or from the store (ids, names, unit
codes, extra attributes, the vertical-datum label) reaches the page through
:func:`safe_text`, here and only here: the helpers below (:func:`text_tooltip`,
:func:`table_popup`, :func:`label_icon`, :func:`geojson_text`,
:func:`feature_tooltip`, :func:`legend_html` and :func:`write_webmap` for layer
names, title, notes and cautions) take plain text and escape it, so a caller
never writes HTML with imported text in it. Leaflet and folium put tooltip,
popup, layer-switcher and GeoJSON property texts into ``innerHTML`` (and folium
inside JavaScript template literals), so they are escaped whatever their type.

Layout of a map (a board reads it without touching it): the title, the head
window and the pumping scenario in a panel under the zoom buttons (top left);
the layer switcher and, under it, a legend with one entry per layer, symbols
included (top right); the cautions above the attribution (bottom right); the
scale bar in the store's length unit with a north arrow above it (bottom left).
The panels are Leaflet controls, so the corners stack them and none covers the
scale bar; their heights are capped so that a top panel never reaches the
corner below it, and the view is fitted to the district in the space the
panels leave free.

Coordinates are written with :data:`COORD_DECIMALS` decimals of a degree (see
there for the rule), which roughly halves the size of a map with many lines.
"""

from __future__ import annotations

import base64
import html
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from .names import write_text

VENDOR = Path(__file__).resolve().parent / "vendor"

# our own visual language: a dark slate frame, cividis for K, viridis for travel time
K_COLORMAP = "cividis"
TIME_COLORMAP = "viridis"

#: Decimals of a degree kept in the map's coordinates. The rule: round to the largest step that is still finer
#: than both the data and the screen. 1e-6 degree is at most 0.111 m on the ground (a degree of latitude is about
#: 111.3 km, a degree of longitude less), so rounding moves a point by at most 0.08 m (half a step in each
#: coordinate), and a line thinned by :func:`latlon` lies within 0.14 m of the traced one: finer than well and
#: spring locations are known for a district map, finer than the cell of any head surface, and less than one
#: screen pixel at Leaflet's deepest zoom (zoom 19: about 0.3 m per pixel at the equator).
COORD_DECIMALS = 6

#: Wells by kind: the ring (stroke colour, stroke width in px, dash pattern or None) around the K colour, in the
#: web map and in the static map figure alike. Kinds not listed take ``other``.
WELL_KIND_STYLE = {
    "monitoring": ("#1d2b36", 1.0, None),
    "multizone": ("#1d2b36", 3.0, None),
    "pumping": ("#8c2d04", 2.5, None),
    "supply": ("#8c2d04", 2.5, "3 2"),
    "other": ("#5b6770", 1.2, "2 2"),
}
#: Fill of a well without a K test of the mapped unit.
NO_K_FILL = "#9aa3ab"
#: A proposed well of a drawdown scenario: an open square with a cross.
PROPOSED_COLOR = "#b3001b"
PROPOSED_SVG = ("<svg width='18' height='18' viewBox='-10 -10 20 20'><rect x='-7' y='-7' width='14' height='14' "
                f"fill='#ffffff' fill-opacity='0.85' stroke='{PROPOSED_COLOR}' stroke-width='2.2'/>"
                f"<path d='M0,-4.5 V4.5 M-4.5,0 H4.5' stroke='{PROPOSED_COLOR}' stroke-width='2.2'/></svg>")
#: Drawdown contours (red) and recovery contours (blue), dashed.
DRAWDOWN_COLOR, RECOVERY_COLOR = "#b30000", "#2b8cbe"


def safe_text(value) -> str:
    """HTML-escape a value for a page and for folium's JavaScript template literals.

    Besides <, >, & and quotes, backticks, dollar signs and backslashes are
    replaced by entities so that a text cannot end a template literal or open
    an interpolation.
    """
    if value is None or (isinstance(value, (float, np.floating)) and not np.isfinite(value)):
        return ""
    if not isinstance(value, (str, list, tuple, dict, np.ndarray)) and pd.isna(value):  # NaT, pd.NA
        return ""
    text = html.escape(str(value), quote=True)
    return text.replace("`", "&#96;").replace("$", "&#36;").replace("\\", "&#92;")


def _inline_assets() -> str:
    css = (VENDOR / "leaflet" / "leaflet.css").read_text(encoding="utf-8")
    for name in ("layers.png", "layers-2x.png"):
        data = base64.b64encode((VENDOR / "leaflet" / "images" / name).read_bytes()).decode()
        css = css.replace(f"url(images/{name})", f"url(data:image/png;base64,{data})")
    js = (VENDOR / "leaflet" / "leaflet.js").read_text(encoding="utf-8")
    jq = (VENDOR / "jquery" / "jquery.min.js").read_text(encoding="utf-8")
    return (f"<style>{css}</style>\n<script>{js}</script>\n<script>{jq}</script>\n"
            "<style>.ha-label{font:11px sans-serif;color:#1d2b36;text-shadow:0 0 3px #fff,0 0 3px #fff;"
            "white-space:nowrap;text-align:center}.ha-label.ha-right{text-align:left}"
            ".ha-box{background:rgba(255,255,255,.94);border:1px solid #33414d;border-radius:4px;padding:6px 8px;"
            "font:12px sans-serif;color:#1d2b36;max-width:360px;box-sizing:border-box;overflow-y:auto}"
            "#ha-info{max-width:min(300px,30vw)}#ha-legend{max-width:min(270px,28vw);min-width:150px}"
            "#ha-caution{max-width:min(380px,36vw);font-size:10px;line-height:1.25}"
            ".leaflet-control-layers{font:12px/1.35 sans-serif;max-width:min(270px,28vw)}"
            ".leaflet-control-layers label{white-space:nowrap;overflow:hidden;text-overflow:ellipsis}"
            ".ha-title{font:bold 15px sans-serif;margin:0 0 3px 0}.ha-sub{font-size:11px;margin:0 0 2px 0}"
            ".ha-sec{margin:5px 0 0 0;font-size:11px}.ha-sec p{margin:0 0 2px 0}"
            ".ha-entry{margin:0 0 6px 0}.ha-entry.ha-off{opacity:.45}.ha-entry-name{font-weight:bold;font-size:11px}"
            ".ha-item{display:flex;align-items:center;gap:6px;font-size:11px;margin:1px 0}"
            ".ha-item svg{flex:none}.ha-north{padding:2px 4px;line-height:0}"
            ".leaflet-control-scale-line{background:rgba(255,255,255,.85);font:11px sans-serif}"
            ".ha-table td,.ha-table th{padding:1px 5px;font:11px sans-serif;text-align:left}</style>")


def hex_colors(values, vmin, vmax, cmap_name: str) -> list[str]:
    """Hex colours of values on a matplotlib colormap (NaN -> grey)."""
    from matplotlib import colormaps
    from matplotlib.colors import to_hex

    cmap = colormaps[cmap_name]
    span = (vmax - vmin) or 1.0
    out = []
    for v in np.asarray(values, float):
        out.append("#9aa3ab" if not np.isfinite(v) else to_hex(cmap(float(np.clip((v - vmin) / span, 0, 1)))))
    return out


def text_tooltip(text):
    """A folium tooltip showing ``text`` as plain text."""
    import folium

    return folium.Tooltip(safe_text(text))


def label_icon(text, *, size=(40, 14), color: str | None = None, beside: bool = False):
    """A folium DivIcon showing ``text`` as a small map label (``color``: a CSS colour).

    Centred on its point, or with ``beside`` to the right of it, clear of a symbol drawn there.
    """
    import folium

    style = f" style='color:{_css_color(color)}'" if color else ""
    cls = "ha-label ha-right" if beside else "ha-label"
    anchor = (-12, size[1] // 2) if beside else (size[0] // 2, size[1] // 2)
    return folium.DivIcon(html=f"<div class='{cls}'{style}>{safe_text(text)}</div>", icon_size=size,
                          icon_anchor=anchor)


def _css_color(color: str) -> str:
    """A colour of our own visual language (``#rrggbb`` or a colour name), checked before it reaches a style."""
    import re

    if not isinstance(color, str) or not re.fullmatch(r"#[0-9a-fA-F]{3,8}|[a-z]{3,20}", color):
        raise ValueError(f"not a CSS colour: {color!r}")
    return color


def attribute_pairs(attrs) -> list[tuple[str, str]]:
    """(name, value) pairs of a record's extra attributes (the store's ``attrs`` JSON text); [] when none."""
    if attrs is None or (isinstance(attrs, float) and not np.isfinite(attrs)) or attrs == "":
        return []
    try:
        obj = json.loads(attrs) if isinstance(attrs, str) else attrs
    except ValueError:
        return [("attributes", str(attrs))]
    if not isinstance(obj, dict):
        return [("attributes", str(obj))]
    return [(str(k), "" if v is None else str(v)) for k, v in obj.items()]


def table_popup(heading: list[str], header: list[str] | None = None, rows=(), *, attributes=(),
                max_width: int = 420):
    """A folium popup: heading lines, an optional table, then extra attributes; every text escaped here.

    Parameters
    ----------
    heading : list of str
        Lines shown first; the first in bold.
    header : list of str, optional
        Column titles of the table.
    rows : iterable of sequences
        Table rows (plain values; None and NaN show as empty cells).
    attributes : iterable of (name, value)
        Extra attributes, shown as a two-column table.
    """
    import folium

    heading = [line for line in heading if safe_text(line)]
    lines = [f"<b>{safe_text(line)}</b>" if i == 0 else safe_text(line) for i, line in enumerate(heading)]
    parts = ["<br>".join(lines)]
    if header:
        body = "".join("<tr>" + "".join(f"<td>{safe_text(v)}</td>" for v in row) + "</tr>" for row in rows)
        parts.append("<table class='ha-table'><tr>" + "".join(f"<th>{safe_text(h)}</th>" for h in header)
                     + f"</tr>{body}</table>")
    attributes = list(attributes)
    if attributes:
        parts.append("<table class='ha-table'>" + "".join(
            f"<tr><th>{safe_text(k)}</th><td>{safe_text(v)}</td></tr>" for k, v in attributes) + "</table>")
    return folium.Popup("".join(parts), max_width=max_width)


def feature_tooltip(fields: list[str], aliases: list[str]):
    """A folium GeoJsonTooltip; the values must come from :func:`geojson_text` (escaped there)."""
    import folium

    return folium.GeoJsonTooltip(fields=list(fields), aliases=[safe_text(a) for a in aliases])


def legend_html(title: str, vmin: float, vmax: float, cmap_name: str, fmt=lambda v: f"{v:.3g}") -> str:
    stops = ", ".join(hex_colors(np.linspace(vmin, vmax, 8), vmin, vmax, cmap_name))
    return (f"<div style='max-width:200px;font-size:11px;overflow:hidden'><div>{safe_text(title)}</div>"
            f"<div style='height:10px;margin:2px 0;background:linear-gradient(to right, {stops})'></div>"
            f"<span>{safe_text(fmt(vmin))}</span><span style='float:right'>{safe_text(fmt(vmax))}</span></div>")


def arrow_svg(azimuth: float, size: int = 18) -> str:
    """A small arrow pointing along ``azimuth`` (degrees clockwise from north)."""
    return (f"<svg width='{size}' height='{size}' viewBox='-10 -10 20 20' "
            f"style='transform:rotate({float(azimuth):.1f}deg)'><path d='M0,-9 L5,3 L1,1 L1,9 L-1,9 L-1,1 L-5,3 Z' "
            "fill='#0b5563' stroke='#fff' stroke-width='0.8'/></svg>")


# -- legend symbols: small inline SVGs of our own, made of numbers and checked colours only ----------------
def _dash_attr(dash) -> str:
    if not dash:
        return ""
    parts = str(dash).split()
    if not all(part.replace(".", "", 1).isdigit() for part in parts):
        raise ValueError(f"not a dash pattern: {dash!r}")
    return f" stroke-dasharray='{' '.join(parts)}'"


def symbol_circle(fill: str, stroke: str, *, radius: float = 6, weight: float = 1, dash=None,
                  fill_opacity: float = 0.95) -> str:
    """A legend symbol: a filled circle with a ring (as a CircleMarker draws it)."""
    size = int(2 * (radius + weight) + 4)
    c = size / 2
    return (f"<svg width='{size}' height='{size}'><circle cx='{c:g}' cy='{c:g}' r='{float(radius):g}' "
            f"fill='{_css_color(fill)}' fill-opacity='{float(fill_opacity):g}' stroke='{_css_color(stroke)}' "
            f"stroke-width='{float(weight):g}'{_dash_attr(dash)}/></svg>")


def symbol_line(color: str, *, weight: float = 2, dash=None, width: int = 26) -> str:
    """A legend symbol: a short line (contours, pathlines)."""
    return (f"<svg width='{width}' height='12'><line x1='1' y1='6' x2='{width - 1}' y2='6' "
            f"stroke='{_css_color(color)}' stroke-width='{float(weight):g}'{_dash_attr(dash)}/></svg>")


def symbol_area(stroke: str, fill: str | None = None, *, fill_opacity: float = 0.15, weight: float = 2,
                dash=None) -> str:
    """A legend symbol: a small rectangle with an outline (areas, extents, contributing areas)."""
    fill_attr = f"fill='{_css_color(fill)}' fill-opacity='{float(fill_opacity):g}'" if fill else "fill='none'"
    return (f"<svg width='26' height='14'><rect x='2' y='2' width='22' height='10' {fill_attr} "
            f"stroke='{_css_color(stroke)}' stroke-width='{float(weight):g}'{_dash_attr(dash)}/></svg>")


def symbol_ramp(cmap_name: str, *, width: int = 26) -> str:
    """A legend symbol: a small colour ramp (rasters coloured by value)."""
    stops = ", ".join(hex_colors(np.linspace(0, 1, 6), 0, 1, cmap_name))
    return f"<span style='display:inline-block;width:{width}px;height:10px;background:linear-gradient(to right, " \
           f"{stops})'></span>"


@dataclass(frozen=True)
class MapLayer:
    """One switchable layer of a web map and its legend entry.

    Parameters
    ----------
    name : str
        Plain text, shown in the layer switcher and as the legend entry's heading (escaped here).
    add : callable
        Receives a ``folium.FeatureGroup`` and adds the layer's features to it with the helpers of this module.
    symbols : tuple of (svg, text)
        Legend items: a symbol made by ``symbol_*`` (or an icon SVG of this module) and its plain text.
    ramp : str, optional
        A colour ramp made by :func:`legend_html`, shown under the items.
    show : bool
        Whether the layer is on when the map opens.
    """

    name: str
    add: Callable
    symbols: tuple = ()
    ramp: str | None = None
    show: bool = True

    def __post_init__(self):
        if not callable(self.add):
            raise TypeError(f"MapLayer {self.name!r}: add must be callable")
        object.__setattr__(self, "symbols", tuple((str(svg), text) for svg, text in self.symbols))


def legend_entry(layer: MapLayer, index: int) -> str:
    """The legend entry of a layer: its name, its symbols with their texts, and its colour ramp."""
    items = "".join(f"<div class='ha-item'>{svg}<span>{safe_text(text)}</span></div>" for svg, text in layer.symbols)
    return (f"<div class='ha-entry' data-i='{int(index)}'><div class='ha-entry-name'>{safe_text(layer.name)}</div>"
            f"{items}{layer.ramp or ''}</div>")


NORTH_ARROW_SVG = ("<svg width='26' height='40' viewBox='-13 -22 26 40' role='img' aria-label='north'>"
                   "<text x='0' y='-10' text-anchor='middle' font-family='sans-serif' font-size='11' "
                   "font-weight='bold' fill='#1d2b36'>N</text>"
                   "<path d='M0,-6 L7,16 L0,11 Z' fill='#1d2b36'/><path d='M0,-6 L-7,16 L0,11 Z' fill='#ffffff' "
                   "stroke='#1d2b36' stroke-width='1'/></svg>")

# The map's own script: panels into Leaflet corners, the scale bar, legend entries dimmed while their layer is off,
# panel heights capped above the corner below, and the view fitted to the district in the space the panels leave.
_PANELS_JS = """
(function () {
  var map = %(map)s;
  var groups = [%(groups)s];
  L.control.scale({position: 'bottomleft', metric: %(metric)s, imperial: %(imperial)s, maxWidth: 160}).addTo(map);
  function panel(id, position) {
    var el = document.getElementById(id);
    if (!el) { return null; }
    var Panel = L.Control.extend({onAdd: function () {
      L.DomEvent.disableClickPropagation(el);
      L.DomEvent.disableScrollPropagation(el);
      el.style.display = '';
      return el;
    }});
    new Panel({position: position}).addTo(map);
    return el;
  }
  var north = panel('ha-north', 'bottomleft');
  var info = panel('ha-info', 'topleft');
  var legend = panel('ha-legend', 'topright');
  var caution = panel('ha-caution', 'bottomright');
  var box = map.getContainer();
  function limit() {
    var outer = box.getBoundingClientRect();
    [[info, '.leaflet-bottom.leaflet-left'], [legend, '.leaflet-bottom.leaflet-right']].forEach(function (p) {
      if (!p[0]) { return; }
      var below = box.querySelector(p[1]);
      var reserve = below ? below.getBoundingClientRect().height : 0;
      var top = p[0].getBoundingClientRect().top;
      p[0].style.maxHeight = Math.max(40, outer.bottom - top - reserve - 16) + 'px';
    });
  }
  function dim() {
    if (!legend) { return; }
    legend.querySelectorAll('.ha-entry[data-i]').forEach(function (e) {
      var g = groups[+e.getAttribute('data-i')];
      if (g) { e.classList.toggle('ha-off', !map.hasLayer(g)); }
    });
  }
  function fit() {
    %(fit)s
  }
  limit();
  fit();
  limit();
  dim();
  map.on('overlayadd overlayremove', dim);
  map.on('resize', limit);
})();
"""

_FIT_JS = """var bounds = L.latLngBounds(%(bounds)s);
    var size = map.getSize();
    var left = info ? info.offsetWidth + 20 : 10, right = 10;
    [legend, box.querySelector('.leaflet-control-layers')].forEach(function (e) {
      if (e) { right = Math.max(right, e.offsetWidth + 20); }
    });
    if (size.x - left - right < Math.min(320, size.x / 2)) { left = 10; right = 10; }
    map.fitBounds(bounds, {paddingTopLeft: [left, 20], paddingBottomRight: [right, 40], animate: false});"""


def _panels_element(map_name: str, group_names: list[str], *, length_unit: str, bounds):
    """A folium element whose script lays out the panels (see :data:`_PANELS_JS`); no text from the store in it."""
    import re

    from branca.element import MacroElement
    from jinja2 import Template

    names = [map_name, *group_names]
    if not all(re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", n) for n in names):
        raise ValueError("folium element names must be JavaScript identifiers")
    if bounds is not None:
        (s_, w_), (n_, e_) = bounds
        corners = [[round(float(s_), COORD_DECIMALS), round(float(w_), COORD_DECIMALS)],
                   [round(float(n_), COORD_DECIMALS), round(float(e_), COORD_DECIMALS)]]
        if not np.isfinite(np.asarray(corners)).all():
            raise ValueError(f"map bounds must be finite; got {bounds}")
        fit = _FIT_JS % {"bounds": json.dumps(corners)}
    else:
        fit = "return;"
    imperial = length_unit in ("ft", "ft_us")
    script = _PANELS_JS % {"map": map_name, "groups": ", ".join(group_names), "fit": fit,
                           "metric": "false" if imperial else "true", "imperial": "true" if imperial else "false"}

    class _Panels(MacroElement):
        _template = Template("{% macro script(this, kwargs) %}{% raw %}" + script + "{% endraw %}{% endmacro %}")

    return _Panels()


def write_webmap(path, *, title: str, center, layers: list, cautions: list[str], notes: list[str] = (),
                 legends: list[str] = (), subtitle: list[str] = (), sections: list = (), bounds=None,
                 length_unit: str = "m", tiles: str | None = None, attribution: str | None = None) -> Path:
    """Write the map (see the module's docstring for its layout).

    Parameters
    ----------
    title : str
        Plain text (escaped here), the first line of the information panel.
    layers : list of MapLayer
        In drawing order; each is a switcher entry and a legend entry. A ``(name, add)`` pair is taken as a
        layer without symbols.
    cautions, notes, subtitle : list of str
        Plain texts (escaped here): the cautions in their own panel, the subtitle under the title, the notes
        at the foot of the information panel.
    sections : list of (heading, list of str)
        Plain texts (escaped here) of the information panel, e.g. the head window and the pumping scenario.
    legends : list of str
        Extra HTML snippets made by :func:`legend_html`, shown at the foot of the legend.
    bounds : ((south, west), (north, east)), optional
        Degrees (WGS 84); the view opens fitted to them in the space the panels leave free.
    length_unit : str
        The store's length unit: ``ft`` gives a scale bar in feet and miles, else metres and kilometres.
    tiles : str, optional
        URL template of a basemap (for users who are online); none by default.
    """
    import folium

    layers = [layer if isinstance(layer, MapLayer) else MapLayer(*layer) for layer in layers]
    m = folium.Map(location=[round(float(c), COORD_DECIMALS) for c in center], zoom_start=12, tiles=None,
                   control_scale=False, prefer_canvas=False, zoom_snap=0.25)
    m.default_js = []
    m.default_css = []
    root = m.get_root()
    root.header.add_child(folium.Element(_inline_assets()), name="hydroatlas_assets")
    if tiles:
        folium.TileLayer(tiles=tiles, attr=attribution or "basemap", name="basemap").add_to(m)
    groups = []
    for layer in layers:
        group = folium.FeatureGroup(name=safe_text(layer.name), show=bool(layer.show))
        layer.add(group)
        group.add_to(m)
        groups.append(group)
    folium.LayerControl(collapsed=False).add_to(m)
    _panels_element(m.get_name(), [g.get_name() for g in groups], length_unit=length_unit,
                    bounds=bounds).add_to(m)
    info = ("<div id='ha-info' class='ha-box' style='display:none'>"
            f"<div class='ha-title'>{safe_text(title)}</div>"
            + "".join(f"<p class='ha-sub'>{safe_text(line)}</p>" for line in subtitle)
            + "".join(f"<div class='ha-sec'><b>{safe_text(head)}</b>"
                      + "".join(f"<p>{safe_text(line)}</p>" for line in lines) + "</div>"
                      for head, lines in sections)
            + ("<div class='ha-sec'>" + "".join(f"<p>{safe_text(n)}</p>" for n in notes) + "</div>" if notes else "")
            + "</div>")
    legend = ("<div id='ha-legend' class='ha-box' style='display:none'>"
              + "".join(legend_entry(layer, i) for i, layer in enumerate(layers))
              + "".join(legends) + "</div>")
    caution = ("<div id='ha-caution' class='ha-box' style='display:none'>"
               + "".join(f"<p style='margin:0 0 3px 0'>{safe_text(c)}</p>" for c in cautions) + "</div>")
    north = f"<div id='ha-north' class='ha-box ha-north' style='display:none' title='north'>{NORTH_ARROW_SVG}</div>"
    root.html.add_child(folium.Element(info + legend + caution + north))
    return write_text(path, root.render())


def raster_overlay(values, grid, crs, vmin: float, vmax: float, cmap_name: str, *, alpha: float = 0.6):
    """A grid coloured for a Leaflet image overlay: (RGBA array in WGS 84, [[south, west], [north, east]]).

    ``values`` (nrows, ncols) on ``grid`` (a north-up :class:`hydroatlas.interp.grid.GridSpec` in ``crs``) are
    warped to WGS 84 (bilinear), coloured on ``cmap_name`` between ``vmin`` and ``vmax`` with opacity ``alpha``;
    no-data (NaN) is transparent.
    """
    from matplotlib import colormaps
    from rasterio.warp import Resampling, calculate_default_transform, reproject

    values = np.asarray(values, float)
    if values.shape != (grid.nrows, grid.ncols):
        raise ValueError(f"values must have the grid's shape {(grid.nrows, grid.ncols)}; got {values.shape}")
    dst = "EPSG:4326"
    transform, width, height = calculate_default_transform(crs, dst, grid.ncols, grid.nrows, *grid.bounds)
    warped = np.full((height, width), np.nan, dtype="float32")
    reproject(values.astype("float32"), warped, src_transform=grid.transform, src_crs=crs, dst_transform=transform,
              dst_crs=dst, resampling=Resampling.bilinear, src_nodata=np.nan, dst_nodata=np.nan)
    w_, n_ = transform @ (0, 0)
    e_, s_ = transform @ (width, height)
    rgba = colormaps[cmap_name](np.clip((warped - vmin) / ((vmax - vmin) or 1.0), 0, 1))
    rgba[..., 3] = np.where(np.isfinite(warped), float(alpha), 0.0)
    return rgba, [[round(float(s_), COORD_DECIMALS), round(float(w_), COORD_DECIMALS)],
                  [round(float(n_), COORD_DECIMALS), round(float(e_), COORD_DECIMALS)]]


def latlon(geom, decimals: int = COORD_DECIMALS):
    """[lat, lon] of a point, or a list of them for a line, in degrees rounded to ``decimals`` (WGS 84 input).

    A line first loses the vertices that lie within half a unit of the last kept decimal of the line through
    their neighbours (Douglas-Peucker, no more than the rounding moves a vertex), then is rounded: it stays
    within 1.21e-6 degree (0.5e-6 for the thinning plus 0.5e-6 times the square root of 2 for the rounding;
    0.14 m) of the traced line, less than a screen pixel at any zoom, and densely traced pathlines and contours
    shrink several times.
    """
    if geom.geom_type == "Point":
        return [round(float(geom.y), decimals), round(float(geom.x), decimals)]
    if len(geom.coords) > 2:
        import shapely

        geom = shapely.simplify(geom, 0.5 * 10.0 ** -decimals, preserve_topology=False)
    xy = np.round(np.asarray(geom.coords, float)[:, :2], decimals)
    keep = np.ones(len(xy), bool)
    keep[1:] = np.any(xy[1:] != xy[:-1], axis=1)  # vertices made equal by the rounding are dropped
    return [[float(y), float(x)] for x, y in xy[keep]]


def geojson_text(gdf, decimals: int = COORD_DECIMALS) -> dict:
    """GeoJSON (as a dict) of a GeoDataFrame in WGS 84, every property that is not a number escaped.

    Text columns have the ``object`` or the ``str`` dtype depending on the pandas version and its
    options, and categories, dates or mixed columns are text on the page too, so every column that is
    not numeric or boolean goes through :func:`safe_text`. Coordinates are rounded to ``decimals``
    decimals of a degree (:data:`COORD_DECIMALS`).
    """
    import shapely
    from pandas.api.types import is_bool_dtype, is_numeric_dtype

    gdf = gdf.to_crs(4326).copy()
    gdf[gdf.geometry.name] = shapely.transform(gdf.geometry.to_numpy(), lambda c: np.round(c, decimals))
    for col in gdf.columns:
        if col == gdf.geometry.name or is_bool_dtype(gdf[col]) or is_numeric_dtype(gdf[col]):
            continue
        gdf[col] = pd.Series([safe_text(v) for v in gdf[col]], index=gdf.index, dtype=object)
    return json.loads(gdf.to_json(na="null"))
