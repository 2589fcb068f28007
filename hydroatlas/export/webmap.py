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
"""

from __future__ import annotations

import base64
import html
import json
from pathlib import Path

import numpy as np
import pandas as pd

from .names import write_text

VENDOR = Path(__file__).resolve().parent / "vendor"

# our own visual language: a dark slate frame, cividis for K, viridis for travel time
K_COLORMAP = "cividis"
TIME_COLORMAP = "viridis"


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
            "<style>.ha-label{font:11px sans-serif;color:#1d2b36;text-shadow:0 0 3px #fff;white-space:nowrap}"
            ".ha-box{background:rgba(255,255,255,.92);border:1px solid #33414d;border-radius:4px;padding:6px 8px;"
            "font:12px sans-serif;color:#1d2b36;max-width:360px}"
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


def label_icon(text, *, size=(40, 14)):
    """A folium DivIcon showing ``text`` as a small map label."""
    import folium

    return folium.DivIcon(html=f"<div class='ha-label'>{safe_text(text)}</div>", icon_size=size,
                          icon_anchor=(size[0] // 2, size[1] // 2))


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
    return (f"<div><b>{safe_text(title)}</b><div style='height:10px;width:200px;margin:3px 0;"
            f"background:linear-gradient(to right, {stops})'></div>"
            f"<span>{safe_text(fmt(vmin))}</span><span style='float:right'>{safe_text(fmt(vmax))}</span></div>")


def arrow_svg(azimuth: float, size: int = 18) -> str:
    """A small arrow pointing along ``azimuth`` (degrees clockwise from north)."""
    return (f"<svg width='{size}' height='{size}' viewBox='-10 -10 20 20' "
            f"style='transform:rotate({float(azimuth):.1f}deg)'><path d='M0,-9 L5,3 L1,1 L1,9 L-1,9 L-1,1 L-5,3 Z' "
            "fill='#0b5563' stroke='#fff' stroke-width='0.8'/></svg>")


def write_webmap(path, *, title: str, center, layers: list, legends: list[str], cautions: list[str],
                 notes: list[str] = (), tiles: str | None = None, attribution: str | None = None) -> Path:
    """Write the map.

    Parameters
    ----------
    title : str
        Plain text (escaped here).
    layers : list of (name, callable)
        Plain layer names (escaped here) and callables that receive a ``folium.FeatureGroup`` and add
        their features to it with the helpers of this module.
    legends : list of str
        HTML snippets made by :func:`legend_html` shown in the legend box.
    cautions, notes : list of str
        Plain texts shown on the map (escaped here); notes come before the legends.
    tiles : str, optional
        URL template of a basemap (for users who are online); none by default.
    """
    import folium

    m = folium.Map(location=list(center), zoom_start=12, tiles=None, control_scale=True, prefer_canvas=False)
    m.default_js = []
    m.default_css = []
    root = m.get_root()
    root.header.add_child(folium.Element(_inline_assets()), name="hydroatlas_assets")
    if tiles:
        folium.TileLayer(tiles=tiles, attr=attribution or "basemap", name="basemap").add_to(m)
    for name, add in layers:
        group = folium.FeatureGroup(name=safe_text(name), show=True)
        add(group)
        group.add_to(m)
    folium.LayerControl(collapsed=False).add_to(m)
    box = ("<div class='ha-box' style='position:fixed;bottom:18px;left:10px;z-index:9999'>"
           f"<div style='font-weight:bold;margin-bottom:4px'>{safe_text(title)}</div>"
           + "".join(f"<p style='margin:0 0 4px 0;font-size:11px'>{safe_text(n)}</p>" for n in notes)
           + "".join(legends)
           + "".join(f"<p style='margin:4px 0 0 0;font-size:11px'>{safe_text(c)}</p>" for c in cautions)
           + "</div>")
    root.html.add_child(folium.Element(box))
    return write_text(path, root.render())


def geojson_text(gdf) -> dict:
    """GeoJSON (as a dict) of a GeoDataFrame in WGS 84, every property that is not a number escaped.

    Text columns have the ``object`` or the ``str`` dtype depending on the pandas version and its
    options, and categories, dates or mixed columns are text on the page too, so every column that is
    not numeric or boolean goes through :func:`safe_text`.
    """
    from pandas.api.types import is_bool_dtype, is_numeric_dtype

    gdf = gdf.to_crs(4326).copy()
    for col in gdf.columns:
        if col == gdf.geometry.name or is_bool_dtype(gdf[col]) or is_numeric_dtype(gdf[col]):
            continue
        gdf[col] = pd.Series([safe_text(v) for v in gdf[col]], index=gdf.index, dtype=object)
    return json.loads(gdf.to_json(na="null"))
