"""A self-contained web map (folium/Leaflet) that works with no internet.

Leaflet (and jQuery, which folium's popups call) are inlined from the copies
vendored under ``export/vendor`` (taken from the npm registry, licences kept
beside them); the Leaflet control icons are inlined as data URIs. A basemap
is optional. Every text that comes from imported files is escaped with
:func:`safe_text` before it reaches the page.
"""

from __future__ import annotations

import base64
import html
import json
from pathlib import Path

import numpy as np

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
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
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
                 tiles: str | None = None, attribution: str | None = None) -> Path:
    """Write the map.

    Parameters
    ----------
    layers : list of (name, callable)
        Each callable receives a ``folium.FeatureGroup`` and adds its features to it.
    legends : list of str
        HTML snippets (already safe) shown in the legend box.
    cautions : list of str
        Plain texts shown on the map (escaped here).
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
           + "".join(legends)
           + "".join(f"<p style='margin:4px 0 0 0;font-size:11px'>{safe_text(c)}</p>" for c in cautions)
           + "</div>")
    root.html.add_child(folium.Element(box))
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    page = root.render()
    path.write_text(page, encoding="utf-8")
    return path


def geojson_text(gdf) -> str:
    """GeoJSON of a GeoDataFrame in WGS 84 with every text property escaped."""
    gdf = gdf.to_crs(4326).copy()
    for col in gdf.columns:
        if col != gdf.geometry.name and gdf[col].dtype == object:
            gdf[col] = gdf[col].map(safe_text)
    return json.loads(gdf.to_json(na="null"))
