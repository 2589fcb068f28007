"""Maps, GIS layers, figures and model grids (SPEC 2.10, 2.12)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .. import assign
from ..errors import ParameterError
from ..modelbuild import CONTACT_METHOD, MODEL_MAX_CELLS  # noqa: F401 (MODEL_MAX_CELLS: re-exported)
from ..export.names import ensure_folder, file_stem, output_path
from ..store import Store
from ..cautions import caution_text, caution_texts
from ..study import Study, metres_per_crs_unit
from .store_jobs import tests_with_units, unit_stats, zone_assignment
from .surfaces import (
    make_interpolator, read_grid, surface_points, unit_intervals, unit_presence_of,
    verticals,
)
from .pathways import active_pumping, drawdown_layers
from ..selection import (
    DEFAULT_TOLERANCE_DAYS, SelectionPolicy, describe, select_ktests, selection_record,
    sidecar_selection,
)
from .store_jobs import store_k_unit


# -- maps and GIS layers (SPEC 2.12) ------------------------------------------------
SPRING_SVG = ("<svg width='18' height='18' viewBox='-10 -10 20 20'><path d='M0,-9 L9,0 L0,9 L-9,0 Z' "
              "fill='#6baed6' stroke='#08306b' stroke-width='2'/></svg>")


def _nice_levels(values, target: int = 12) -> np.ndarray:
    v = np.asarray(values, float)
    v = v[np.isfinite(v)]
    if v.size == 0 or np.ptp(v) == 0:
        return np.array([])
    raw = np.ptp(v) / target
    mag = 10 ** np.floor(np.log10(raw))
    step = min((s * mag for s in (1, 2, 2.5, 5, 10) if s * mag >= raw), default=10 * mag)
    return np.arange(np.ceil(v.min() / step) * step, v.max() + step * 1e-9, step)


def contour_lines(grid, values, levels, crs):
    """Contour lines of a grid as a GeoDataFrame (store CRS) with a ``level`` column."""
    import contourpy
    import geopandas as gpd
    import shapely

    z = np.ma.masked_invalid(np.asarray(values, float))
    gen = contourpy.contour_generator(grid.x_centers(), grid.y_centers(), z, line_type="Separate")
    rows = []
    for level in levels:
        for line in gen.lines(float(level)):
            if len(line) >= 2:
                rows.append({"level": float(level), "geometry": shapely.LineString(line)})
    return gpd.GeoDataFrame(rows, columns=["level", "geometry"], geometry="geometry", crs=crs)


def _rate_text(q_m3d: float, rate_unit: str) -> str:
    """A pumping rate for a map label in the store's rate unit; a feet store also shows gpm."""
    from ..quantities import convert

    def shown(v):
        return f"{v:,.0f}" if abs(v) >= 100 else f"{v:.3g}"

    text = f"{shown(convert(q_m3d, 'm3/d', rate_unit, 'rate'))} {rate_unit}"
    if rate_unit == "ft3/d":
        text += f" ({shown(convert(q_m3d, 'm3/d', 'gpm', 'rate'))} gpm)"
    return text


def well_summaries(store: Store, *, k_unit: str | None = None,
                   policy: SelectionPolicy | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per well and unit: geometric-mean K and test count; per zone: unit, elevations, K and latest head.

    K tests and head readings follow the selection policy (None: the default); the per-zone frame's
    ``attrs["selection"]`` holds the policy and what it left out. K in ``k_unit`` (default: the store's).
    """
    from ..quantities import k_from_ms

    study = Study.of(store, policy)
    k_unit = store_k_unit(study, k_unit)
    asg = study.assignment
    tests, tests_out = study.select_ktests()
    lg = np.log10(tests["k_ms"].to_numpy(float))
    per_zone = pd.DataFrame({"well_id": tests["well_id"], "zone_id": tests["zone_id"], "lg": lg}) \
        .groupby(["well_id", "zone_id"]).agg(lg=("lg", "mean"), n_tests=("lg", "size")).reset_index()
    heads, heads_out = study.select_readings()
    latest = heads.sort_values("measured_at").groupby(["well_id", "zone_id"]).tail(1) \
        .rename(columns={"measured_at": "latest_head_at", "head": "latest_head"})
    zones = asg.merge(per_zone, on=["well_id", "zone_id"], how="left").merge(latest, on=["well_id", "zone_id"],
                                                                           how="left")
    zones["k"] = k_from_ms(10 ** zones["lg"].to_numpy(float), k_unit)
    zones["k_unit"] = k_unit
    per_unit = zones.dropna(subset=["lg", "unit"]).groupby(["well_id", "unit"]).agg(
        lg=("lg", "mean"), n_tests=("n_tests", "sum")).reset_index()
    per_unit["k"] = k_from_ms(10 ** per_unit["lg"].to_numpy(float), k_unit)
    zones = zones.drop(columns=["lg"])
    zones.attrs["selection"] = study.selection_record(tests_out + heads_out)
    return per_unit, zones


def export_layers(store: Store, *, out=".", surfaces=None, k_unit: str | None = None,
                  policy: SelectionPolicy | None = None, allow_stale: bool = False,
                  warnings: list | None = None) -> dict:
    """Vector layers to OUT/layers.gpkg and OUT/geojson/<layer>.geojson (RFC 7946, WGS 84).

    wells (with per-unit geometric-mean K and test counts as columns), zones (points at
    mid-depth), head contours of the latest head surface of each unit recorded in the store, and the
    flow_arrows, pathlines and contributing_areas of the latest gradient and pathway products of each unit
    (and direction and scenario). ``surfaces`` (a folder) narrows the search to products whose files lie
    there. Layers already in OUT/layers.gpkg because `surface` or `paths` wrote them there are left as they
    are; the GeoJSON files hold the recorded products' rows. A product made from store rows that changed
    since is refused unless ``allow_stale`` (then ``warnings``, when given, receives the texts). K and latest
    heads follow the selection policy (None: the default). The export is recorded in the registry (kind
    ``layers``).
    """
    import geopandas as gpd

    from .. import products
    from ..export.layers import write_geojson, write_layer

    out = Path(out)
    # the registry: the store must take the record, and the digests come before any row is read
    digests = products.input_digests(store, "layers")
    products.ensure_writable(store)
    store = Study.of(store, policy)  # the tables are read once for the whole export
    crs = store.settings.crs
    k_unit = store_k_unit(store, k_unit)  # default: the store's K unit
    per_unit, zones = well_summaries(store, k_unit=k_unit, policy=policy)
    wells = store.read("wells", ["well_id", "x", "y", "ground_elev", "total_depth", "kind", "name"])
    codes = list(store.read("units").sort_values("rank")["code"])
    for code in codes:
        sub = per_unit[per_unit["unit"] == code].set_index("well_id")
        wells[f"k_{code}"] = wells["well_id"].map(sub["k"])
        wells[f"n_tests_{code}"] = wells["well_id"].map(sub["n_tests"]).fillna(0).astype(int)
    wells["k_unit"] = k_unit
    layers = {"wells": gpd.GeoDataFrame(wells, geometry=gpd.points_from_xy(wells["x"], wells["y"]), crs=crs)}
    z = zones[["well_id", "zone_id", "unit", "assigned_by", "overlap_fraction", "straddles", "top_elev",
               "bottom_elev", "mid_elev", "k", "k_unit", "n_tests", "latest_head", "latest_head_at", "x", "y"]].copy()
    z["straddles"] = z["straddles"].astype(bool)
    layers["zones"] = gpd.GeoDataFrame(z, geometry=gpd.points_from_xy(z["x"], z["y"]), crs=crs)
    found = _layer_products(store, codes, folder=surfaces)
    stale = products.check_fresh(store, found["used"], allow_stale=allow_stale)
    contours = []
    for unit, prod in found["heads"].items():
        grid, head = read_grid(prod.file("head.tif"))
        c = contour_lines(grid, head, _nice_levels(head), crs)
        c["unit"] = unit
        contours.append(c)
    if contours:
        layers["head_contours"] = gpd.GeoDataFrame(pd.concat(contours, ignore_index=True), crs=crs)
    gpkg = out / "layers.gpkg"
    for name, gdf in layers.items():
        write_layer(gpkg, name, gdf)
    for name, (gdf, sources) in found["layers"].items():
        if not any(Path(f).resolve() == gpkg.resolve() for f in sources):  # else `surface`/`paths` wrote it there
            write_layer(gpkg, name, gdf)
        layers[name] = gdf
    gj = ensure_folder(out / "geojson")
    files = {"gpkg": str(gpkg)}
    for name, gdf in layers.items():
        files[name] = str(write_geojson(output_path(gj, f"{name}.geojson"), gdf))
    if warnings is not None:
        warnings.extend(stale)
    command = products.command_line("layers", store, ("--k-unit", k_unit), *products.policy_args(policy),
                                    ("--out", str(out)))
    products.record_product(store, kind="layers", name=products.product_name(store, "layers", gpkg),
                            files=list(files.values()), parameters={"layers": sorted(layers), "k_unit": k_unit},
                            selection=zones.attrs["selection"], inputs=[p.name for p in found["used"]],
                            command=command, digests=digests)
    return files


def _layer_products(store: Store, codes, *, folder=None) -> dict:
    """The recorded products whose layers `layers` exports (their files checked): per unit the latest head
    surface and its gradient (flow arrows), and the latest pathways and contributing areas of each unit,
    direction and scenario. Returns ``heads`` {unit: product}, ``layers`` {layer: (rows, source files)} and
    ``used`` (every product)."""
    import geopandas as gpd

    from .. import products

    heads, used, parts = {}, [], {"flow_arrows": [], "pathlines": [], "contributing_areas": []}
    for unit in codes:
        head = products.find_product(store, kind="surface", unit=unit, quantity="head", folder=folder,
                                     required=False)
        if head is None:
            continue
        heads[unit] = head
        used.append(head)
        grad = products.find_product(store, kind="gradient", unit=unit, required=False,
                                     match=lambda p, h=head.name: h in p.inputs)
        if grad is not None:
            used.append(grad)
            parts["flow_arrows"].append((grad, {"unit": unit}))
        for kind in ("pathways", "contributing_areas"):
            latest = {}
            for prod in products.list_products(store, kind=kind, unit=unit):
                if folder is None or all(Path(f).resolve().is_relative_to(Path(folder).resolve())
                                         for f in prod.files):
                    latest[prod.parameters.get("scenario") or ""] = prod  # oldest first: the last one wins
            for scenario, prod in latest.items():
                used.append(prod)
                direction = prod.parameters.get("direction", "forward")
                parts["pathlines"].append((prod, {"unit": unit, "direction": direction, "scenario": scenario}))
                if kind == "contributing_areas":
                    parts["contributing_areas"].append((prod, {"unit": unit, "scenario": scenario}))
    for prod in used:
        products.check_files(prod)
    layers = {}
    for name, items in parts.items():
        frames, sources = [], []
        for prod, key in items:
            gdf = _product_layer(prod, name)
            if gdf is None:
                continue
            keep = np.ones(len(gdf), bool)
            for col, value in key.items():
                column = gdf[col].fillna("") if col in gdf.columns else pd.Series("", index=gdf.index)
                keep &= (column == value).to_numpy()
            frames.append(gdf[keep].to_crs(store.settings.crs))
            sources += [f for f in prod.files if f.endswith(".gpkg")]
        if frames:
            layers[name] = (gpd.GeoDataFrame(pd.concat(frames, ignore_index=True), crs=store.settings.crs),
                            sources)
    return {"heads": heads, "layers": layers, "used": used}


def unit_extent_outline(store: Store, unit: str, units: pd.DataFrame | None = None):
    """The extent of a unit from the picks as a one-row GeoDataFrame (store CRS), or None where it is everywhere.

    Clipped to the domain polygon when there is one, else to the wells' bounding box grown by a tenth
    of its larger side. An empty extent (no well shows the unit) gives None as well.
    """
    import geopandas as gpd
    import shapely

    pres = unit_presence_of(store, unit, units)
    domain = Study.of(store).domain(unit)
    if domain is not None:
        clip = domain.union_all()
    elif len(pres):
        x0, y0 = pres[["x", "y"]].min().to_numpy(float)
        x1, y1 = pres[["x", "y"]].max().to_numpy(float)
        pad = 0.1 * max(x1 - x0, y1 - y0, 1.0)
        clip = shapely.box(x0 - pad, y0 - pad, x1 + pad, y1 + pad)
    else:
        return None
    geom = assign.presence_extent(pres, clip=clip)
    if geom is None or geom.is_empty:
        return None
    rule = "nearest well with picks has the unit"
    return gpd.GeoDataFrame({"unit": [unit], "rule": [rule]}, geometry=[geom], crs=store.settings.crs)


def default_map_unit(store: Store, units: pd.DataFrame | None = None) -> str:
    """The unit a map shows when none is named: the aquifer with the most zones with heads.

    Ties go to the upper aquifer; with no heads in any aquifer, the top aquifer; with no aquifer, the
    top unit. A unit on top that is present in part of the area (and so has few heads) is not chosen
    just because it is on top.
    """
    units = (store.read("units") if units is None else units).sort_values("rank")
    aquifers = [c for c in units.loc[units["role"] == "aquifer", "code"]]
    if not aquifers:
        return units["code"].iloc[0]
    with_heads = store.read("heads", ["well_id", "zone_id"]).drop_duplicates()
    zones = with_heads.merge(zone_assignment(store)[["well_id", "zone_id", "unit"]], on=["well_id", "zone_id"])
    counts = {c: int(zones["unit"].isin(assign.unit_members(units, c)).sum()) for c in aquifers}
    return max(aquifers, key=lambda c: (counts[c], -aquifers.index(c)))


def build_map(store: Store, *, unit: str | None = None, out="map.html", surfaces=None, k_unit: str | None = None,
              tiles: str | None = None, policy: SelectionPolicy | None = None, surface: str | None = None,
              scenarios=None, allow_stale: bool = False, warnings: list | None = None, title: str | None = None,
              spring_notes: dict | None = None) -> Path:
    """One self-contained HTML map of the store and of the products recorded in it.

    A map a board can read (:mod:`hydroatlas.export.webmap` lays it out): ``title`` (default: the district and
    the unit), the head window and the newest scenario (wells, rates, days, S, T) in a panel, a legend entry per
    layer, the view fitted to the district, labelled drawdown contours, the scenario's proposed wells, springs
    with their discharge and, from ``spring_notes`` (spring id -> plain lines; default: what the springflow
    sidecars say, where any), their trigger levels.

    The products come from the store's registry (:mod:`hydroatlas.products`): the unit's head surface (the one
    named ``surface``, else the latest) with its gradient's flow arrows, its latest pathways and contributing
    areas, and its drawdown scenarios (those named in ``scenarios``, by scenario or product name; None: every
    one recorded). ``surfaces`` (a folder) narrows the search to products whose files lie there. A product made
    from store rows that changed since is refused (StaleProductError) unless ``allow_stale``: it is then
    shown, and the map's notes and the list ``warnings`` (when given) say so. The map is recorded in the
    registry (kind ``map``).

    Well K and latest heads follow the selection policy (None: the default); the map's notes say what it
    left out.

    Imported texts (ids, names, codes, extra attributes, the vertical datum) are handed to the helpers of
    :mod:`hydroatlas.export.webmap` as plain text; they escape them. No HTML is written here.
    """
    import folium
    import geopandas as gpd
    import rasterio
    from rasterio.warp import Resampling, calculate_default_transform, reproject

    from ..export.webmap import (DRAWDOWN_COLOR, K_COLORMAP, NO_K_FILL, PROPOSED_SVG, RECOVERY_COLOR, TIME_COLORMAP,
                                WELL_KIND_STYLE, MapLayer, arrow_svg, attribute_pairs, feature_tooltip, geojson_text,
                                hex_colors, label_icon, latlon, legend_html, symbol_area, symbol_circle, symbol_line,
                                symbol_ramp, table_popup, text_tooltip, write_webmap)
    from ..quantities import store_units
    from . import board

    k_unit = store_k_unit(store, k_unit)  # default: the store's K unit
    rate_unit = store_units(store.settings.length_unit).rate
    crs = store.settings.crs
    units = store.read("units").sort_values("rank")
    if unit is None:
        unit = default_map_unit(store, units)
    assign.unit_members(units, unit)
    out = Path(out)
    from .. import products

    # the registry: the store must take the record, and the digests come before any row is read
    digests = products.input_digests(store, "map")
    products.ensure_writable(store)
    store = Study.of(store, policy)  # the tables are read once for the whole map
    found = _map_products(store, unit, surface=surface, scenarios=scenarios, folder=surfaces)
    stale = products.check_fresh(store, found["used"], allow_stale=allow_stale)
    L = store.settings.length_unit
    datum = store.settings.vertical_datum
    per_unit, zones = well_summaries(store, k_unit=k_unit, policy=policy)
    wells = store.read("wells", ["well_id", "x", "y", "kind", "name", "attrs"])
    wells = wells.merge(per_unit[per_unit["unit"] == unit][["well_id", "k", "n_tests"]], on="well_id", how="left")
    wgs = gpd.GeoDataFrame(wells, geometry=gpd.points_from_xy(wells["x"], wells["y"]), crs=crs).to_crs(4326)
    center = (float(wgs.geometry.y.mean()), float(wgs.geometry.x.mean())) if len(wgs) else (0.0, 0.0)
    lgk = np.log10(wells["k"].to_numpy(float))
    finite = lgk[np.isfinite(lgk)]
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
    colors = hex_colors(lgk, lo, hi, K_COLORMAP)
    layers, legends = [], []

    def add_wells(group):
        header = ["zone", "unit", f"K ({k_unit})", f"latest head ({L} above {datum})", "on"]
        for (_, w), geom, color in zip(wells.iterrows(), wgs.geometry, colors):
            zs = zones[zones["well_id"] == w["well_id"]]
            rows = [(z.zone_id, z.unit, f"{z.k:.3g}" if np.isfinite(z.k) else None,
                     f"{z.latest_head:.2f}" if np.isfinite(z.latest_head) else None, z.latest_head_at)
                    for z in zs.itertuples()]
            name = w["name"] if isinstance(w["name"], str) else ""
            popup = table_popup([f"{w['well_id']} {name}".strip(), w["kind"]], header, rows,
                                attributes=attribute_pairs(w["attrs"]))
            has_k = np.isfinite(w["k"])
            stroke, weight, dash = WELL_KIND_STYLE.get(w["kind"], WELL_KIND_STYLE["other"])
            folium.CircleMarker(latlon(geom), radius=7 if has_k else 4, color=stroke, weight=weight,
                                dash_array=dash, fill=True, fill_color=color, fill_opacity=0.95,
                                tooltip=text_tooltip(w["well_id"]), popup=popup).add_to(group)
    kinds_here = {k if k in WELL_KIND_STYLE else "other" for k in wells["kind"]}
    mid_k = hex_colors([0.5], 0, 1, K_COLORMAP)[0]
    well_symbols = [(symbol_circle(mid_k, s_, weight=w_, dash=d_), f"{kind} well")
                    for kind, (s_, w_, d_) in WELL_KIND_STYLE.items() if kind in kinds_here]
    if (~np.isfinite(lgk)).any():
        well_symbols.append((symbol_circle(NO_K_FILL, "#1d2b36", radius=4), f"no K test of {unit}"))
    layers.append(MapLayer(f"Wells: K of {unit}", add_wells, symbols=well_symbols,
                           ramp=legend_html(f"Geometric-mean K per well ({k_unit}, log scale)", lo, hi, K_COLORMAP,
                                            fmt=lambda v: f"{10 ** v:.3g}") if finite.size else None))
    head_tif = found["head"].file("head.tif") if found["head"] is not None else None
    if head_tif is not None:
        grid, head = read_grid(head_tif)
        cont = contour_lines(grid, head, _nice_levels(head), crs).to_crs(4326)

        def add_contours(group):
            for geom, level in zip(cont.geometry, cont["level"]):
                coords = latlon(geom)
                folium.PolyLine(coords, color="#0b5563", weight=1.5, opacity=0.9,
                                tooltip=text_tooltip(f"head {level:g} {L} above {datum}")).add_to(group)
                text = f"{level:g} {L}"
                folium.Marker(coords[len(coords) // 2], icon=label_icon(text, size=(8 + 7 * len(text), 14))
                              ).add_to(group)
        layers.append(MapLayer(f"Head contours of {unit} ({L})", add_contours, symbols=[
            (symbol_line("#0b5563", weight=1.5), f"head, {L} above {datum} (labelled)")]))
        with rasterio.open(head_tif) as src:
            if src.count >= 2:
                std = src.read(2, masked=True).filled(np.nan)
                dst_crs = "EPSG:4326"
                transform, width, height = calculate_default_transform(src.crs, dst_crs, src.width, src.height,
                                                                       *src.bounds)
                warped = np.full((height, width), np.nan, dtype="float32")
                reproject(std.astype("float32"), warped, src_transform=src.transform, src_crs=src.crs,
                          dst_transform=transform, dst_crs=dst_crs, resampling=Resampling.bilinear,
                          src_nodata=np.nan, dst_nodata=np.nan)
                w_, n_ = transform @ (0, 0)
                e_, s_ = transform @ (width, height)
                fin = warped[np.isfinite(warped)]
                if fin.size:
                    from matplotlib import colormaps

                    s0, s1 = float(fin.min()), float(fin.max())
                    rgba = colormaps["Greys"]((warped - s0) / ((s1 - s0) or 1.0))
                    rgba[..., 3] = np.where(np.isfinite(warped), 0.35, 0.0)

                    def add_std(group, rgba=rgba, bounds=np.round([[s_, w_], [n_, e_]], 6).tolist()):
                        folium.raster_layers.ImageOverlay(image=rgba, bounds=bounds, mercator_project=True,
                                                          opacity=1.0).add_to(group)
                    layers.append(MapLayer(f"Kriging standard deviation of {unit} head", add_std, show=False,
                                           ramp=legend_html(f"Kriging standard deviation ({L})", s0, s1, "Greys")))
    logk_prod = products.find_product(store, kind="surface", unit=unit, quantity="logk", folder=surfaces,
                                      required=False)
    if logk_prod is not None:  # the latest log-K surface of the unit, on the wells' colour ramp
        from ..export.webmap import raster_overlay
        from ..quantities import convert
        from .surfaces import read_logk_m_per_d

        products.check_files(logk_prod)
        stale += products.check_fresh(store, logk_prod, allow_stale=allow_stale)
        found["used"].append(logk_prod)
        lgrid, k_md, _ = read_logk_m_per_d(logk_prod, unit, store)
        lk_map = np.log10(convert(k_md, "m/d", k_unit, "hydraulic conductivity"))
        fin_lk = lk_map[np.isfinite(lk_map)]
        if fin_lk.size:
            l0, l1 = float(fin_lk.min()), float(fin_lk.max())
            logk_img, logk_bounds = raster_overlay(lk_map, lgrid, crs, l0, l1, K_COLORMAP, alpha=0.6)

            def add_logk(group, image=logk_img, bounds=logk_bounds):
                folium.raster_layers.ImageOverlay(image=image, bounds=bounds, mercator_project=True,
                                                  opacity=1.0).add_to(group)
            layers.append(MapLayer(f"Log-K surface of {unit}", add_logk, show=False, symbols=[
                (symbol_ramp(K_COLORMAP), f"kriged log10 K ({logk_prod.name})")],
                ramp=legend_html(f"K ({k_unit}, log scale)", l0, l1, K_COLORMAP, fmt=lambda v: f"{10 ** v:.3g}")))
    arrows = _product_layer(found["gradient"], "flow_arrows")
    if arrows is not None:
        arrows = arrows[arrows["unit"] == unit].to_crs(4326)

        def add_arrows(group):
            for geom, az, grad in zip(arrows.geometry, arrows["azimuth"], arrows["gradient"]):
                folium.Marker(latlon(geom), tooltip=text_tooltip(f"flow {az:.0f} deg, gradient {grad:.2g}"),
                              icon=folium.DivIcon(html=arrow_svg(az), icon_size=(18, 18),
                                                  icon_anchor=(9, 9))).add_to(group)
        if len(arrows):
            layers.append(MapLayer("Flow arrows", add_arrows, show=False,
                                   symbols=[(arrow_svg(90, size=14), "direction of flow (-grad h)")]))
    pump = active_pumping(store, unit).merge(store.read("wells", ["well_id", "x", "y"]), on="well_id")
    if not pump.empty:
        pg = gpd.GeoDataFrame(pump, geometry=gpd.points_from_xy(pump["x"], pump["y"]), crs=crs).to_crs(4326)
        qmax = float(pump["rate_m3d"].max()) or 1.0

        def add_pumping(group):
            for geom, wid, q in zip(pg.geometry, pg["well_id"], pg["rate_m3d"]):
                folium.CircleMarker(latlon(geom), radius=float(5 + 14 * np.sqrt(q / qmax)), color="#8c2d04",
                                    weight=2, fill=True, fill_color="#fdae6b", fill_opacity=0.6,
                                    tooltip=text_tooltip(f"{wid}: {_rate_text(q, rate_unit)}")).add_to(group)
        layers.append(MapLayer("Pumping wells (size by rate)", add_pumping, symbols=[
            (symbol_circle("#fdae6b", "#8c2d04", radius=9, weight=2, fill_opacity=0.6),
             f"largest {_rate_text(qmax, rate_unit)}"),
            (symbol_circle("#fdae6b", "#8c2d04", radius=5, weight=2, fill_opacity=0.6), "smaller rates")]))
    springs = store.read("springs")
    if not springs.empty:
        sg = gpd.GeoDataFrame(springs, geometry=gpd.points_from_xy(springs["x"], springs["y"]), crs=crs).to_crs(4326)
        flow_lines = board.spring_discharge_lines(store)
        if spring_notes is None:  # the springflow sidecars beside the surfaces, the map or the head surface
            spring_notes = board.springflow_lines(store, [surfaces, out.parent] + (
                [Path(found["head"].file("head.tif")).parent] if found["head"] is not None else []))

        def add_springs(group):
            for geom, s in zip(sg.geometry, sg.itertuples(index=False)):
                icon = folium.DivIcon(html=SPRING_SVG, icon_size=(18, 18), icon_anchor=(9, 9))
                name = s.name if isinstance(s.name, str) else ""
                popup = table_popup([f"{s.spring_id} {name}".strip(), f"spring at {s.elev:g} {L} above {datum}"]
                                    + ([f"issues from unit {s.unit}"] if isinstance(s.unit, str) else [])
                                    + flow_lines.get(str(s.spring_id), ["no discharge readings"])
                                    + [str(v) for v in (spring_notes or {}).get(str(s.spring_id), [])],
                                    attributes=attribute_pairs(s.attrs))
                latest = flow_lines.get(str(s.spring_id), [""])[0].split(" on ")[0]
                folium.Marker(latlon(geom), icon=icon, popup=popup,
                              tooltip=text_tooltip(f"{s.spring_id} {name} ({s.elev:g} {L})"
                                                   + (f"; {latest.lower()}" if latest else ""))).add_to(group)
        layers.append(MapLayer("Springs", add_springs, symbols=[
            (SPRING_SVG, "spring (click: discharge and trigger levels)")]))
    areas = store.read_geometries("areas")
    rech = areas[areas["kind"] == "recharge"] if not areas.empty else areas
    if not rech.empty:
        rech = rech.assign(details=["; ".join(f"{k}: {v}" for k, v in attribute_pairs(a)) for a in rech["attrs"]])
        data = geojson_text(rech[["area_id", "kind", "details", "geometry"]])

        def add_recharge(group, data=data):
            folium.GeoJson(data, style_function=lambda f: {"color": "#238b45", "weight": 2, "fillOpacity": 0.15},
                           tooltip=feature_tooltip(["area_id", "details"], ["recharge area", "attributes"])
                           ).add_to(group)
        layers.append(MapLayer("Recharge areas", add_recharge, symbols=[
            (symbol_area("#238b45", "#238b45"), "recharge area")]))
    extent = unit_extent_outline(store, unit, units)
    if extent is not None:
        data = geojson_text(extent)

        def add_extent(group, data=data):
            folium.GeoJson(data, style_function=lambda f: {"color": "#7a4a12", "weight": 2.5, "dashArray": "8 4",
                                                           "fill": False},
                           tooltip=feature_tooltip(["unit", "rule"], ["extent of unit", "from the picks"])
                           ).add_to(group)
        layers.append(MapLayer(f"Extent of {unit} (from the picks)", add_extent, symbols=[
            (symbol_area("#7a4a12", weight=2.5, dash="8 4"), f"edge of {unit} (nearest well with picks has it)")]))
    pl = _product_layer(found["pathways"], "pathlines")
    if pl is not None:
        pl = pl[(pl["unit"] == unit) & (pl["direction"] == "forward")]
        if "scenario" in pl.columns:  # the baseline's pathlines; a scenario's are in its own table and layer rows
            pl = pl[pl["scenario"].fillna("") == ""]
        pl = pl.to_crs(4326)
        if len(pl):
            years = pl["travel_years"].to_numpy(float)
            t0, t1 = float(np.nanmin(years)), float(np.nanmax(years))
            pcol = hex_colors(years, t0, t1, TIME_COLORMAP)

            def add_paths(group):
                for geom, color, yrs, end in zip(pl.geometry, pcol, years, pl["end_kind"]):
                    folium.PolyLine(latlon(geom), color=color, weight=2, opacity=0.85,
                                    tooltip=text_tooltip(f"{yrs:.1f} years, ends at {end}")).add_to(group)
            layers.append(MapLayer("Pathlines (colour by travel time)", add_paths, symbols=[
                (symbol_line(hex_colors([0.5], 0, 1, TIME_COLORMAP)[0], weight=2), "path from a recharge area")],
                ramp=legend_html("Travel time (years; Darcy, upper bound in karst)", t0, t1, TIME_COLORMAP)))
    ca = _product_layer(found["contributing_areas"], "contributing_areas")
    if ca is not None:
        ca = ca[(ca["unit"] == unit) & ~ca.geometry.is_empty]
        if "scenario" in ca.columns:
            ca = ca[ca["scenario"].fillna("") == ""]
        if len(ca):
            data = geojson_text(ca[["spring_id", "geometry"]])

            def add_ca(group, data=data):
                folium.GeoJson(data, style_function=lambda f: {"color": "#54278f", "weight": 1.5, "dashArray": "4 3",
                                                               "fillOpacity": 0.08},
                               tooltip=feature_tooltip(["spring_id"], ["contributing area of"])).add_to(group)
            layers.append(MapLayer("Contributing areas", add_ca, symbols=[
                (symbol_area("#54278f", "#54278f", fill_opacity=0.08, weight=1.5, dash="4 3"),
                 "likely source area of a spring")]))
    sections = [("Head surface", board.head_window_lines(store, unit, found["head"]))] \
        if found["head"] is not None else []
    proposed = []
    for i_dd, (label, prod) in enumerate(found["drawdown"]):  # the scenarios recorded (or asked for), newest first
        side = board.scenario_sidecar(prod)
        if side is not None:
            if i_dd == 0:  # the panel tells the scenario shown when the map opens
                sections.append((board.scenario_heading(side), board.scenario_lines(side, length_unit=L)))
            proposed += [(w.well_id, w.x, w.y, w.scenario_rate_m3d, side.get("scenario") or prod.name)
                         for w in board.proposed_wells(side).itertuples(index=False)]
        dgrid, dd = read_grid(prod.files[0])
        steps = (0.1, 0.25, 0.5, 1, 2, 5, 10, 20, 50)
        levels = [v for v in steps if np.nanmax(dd) > v] + [-v for v in steps if np.nanmin(dd) < -v]
        dcont = contour_lines(dgrid, dd, levels, crs).to_crs(4326)

        def add_dd(group, dcont=dcont):
            for geom, level in zip(dcont.geometry, dcont["level"]):
                text = f"drawdown {level:g} {L}" if level > 0 else f"recovery {-level:g} {L}"
                color = DRAWDOWN_COLOR if level > 0 else RECOVERY_COLOR
                coords = latlon(geom)
                folium.PolyLine(coords, color=color, weight=1.5, dash_array="6 4",
                                tooltip=text_tooltip(text)).add_to(group)
                if len(coords) >= 2:  # a permanent label on each line, in the store's unit
                    short = f"{level:g} {L}" if level > 0 else f"rise {-level:g} {L}"
                    folium.Marker(coords[len(coords) // 2], icon=label_icon(short, size=(8 + 7 * len(short), 14),
                                                                            color=color)).add_to(group)
        if len(dcont):
            layers.append(MapLayer(label, add_dd, show=i_dd == 0, symbols=[
                (symbol_line(DRAWDOWN_COLOR, weight=1.5, dash="6 4"), f"drawdown, {L} (labelled)"),
                (symbol_line(RECOVERY_COLOR, weight=1.5, dash="6 4"), f"recovery (head rise), {L}")]))
    if proposed:
        def add_proposed(group, proposed=proposed):
            pts = gpd.GeoDataFrame({"q": [q for *_, q, _ in proposed]},
                                   geometry=gpd.points_from_xy([x for _, x, *_ in proposed],
                                                               [y for _, _, y, *_ in proposed]), crs=crs).to_crs(4326)
            for geom, (wid, _, _, q, scen) in zip(pts.geometry, proposed):
                folium.Marker(latlon(geom), icon=folium.DivIcon(html=PROPOSED_SVG, icon_size=(18, 18),
                                                                icon_anchor=(9, 9)),
                              tooltip=text_tooltip(f"{wid}: proposed, {_rate_text(q, rate_unit)} (scenario {scen})"),
                              popup=table_popup([f"{wid}", f"proposed well of scenario {scen}",
                                                 f"rate {_rate_text(q, rate_unit)}"])).add_to(group)
                folium.Marker(latlon(geom), icon=label_icon(str(wid), size=(12 + 7 * len(str(wid)), 14),
                                                            beside=True)).add_to(group)
        layers.append(MapLayer("Proposed wells (scenarios)", add_proposed,
                               symbols=[(PROPOSED_SVG, "proposed well of a drawdown scenario")]))
    cautions = caution_texts("map")
    shown_title, subtitle = board.map_title(store, unit, units, title)
    notes = []
    notes += [f"Well K and latest heads: {text}" for _, text in describe(zones.attrs["selection"]["left_out"])]
    notes += [f"Stale input: {text}" for text in stale]
    if warnings is not None:
        warnings.extend(stale)
    path = write_webmap(out, title=shown_title, center=center, layers=layers, legends=legends, cautions=cautions,
                        notes=notes, tiles=tiles, subtitle=subtitle, sections=sections, length_unit=L,
                        bounds=board.bounds_latlon(store, board.district_bounds(store)))
    command = products.command_line(
        "map", store, ("--unit", unit), ("--surface", surface),
        *[("--scenario", n) for n in ([scenarios] if isinstance(scenarios, str) else (scenarios or ()))],
        ("--k-unit", k_unit), ("--tiles", tiles), ("--title", title), *products.policy_args(policy),
        ("--out", str(out)))
    products.record_product(store, kind="map", name=products.product_name(store, f"map_{unit}", path), unit=unit,
                            files=[path], parameters={"tiles": tiles, "k_unit": k_unit,
                                                      "scenarios": [p.name for _, p in found["drawdown"]]},
                            selection=zones.attrs["selection"], inputs=[p.name for p in found["used"]],
                            command=command, digests=digests)
    return path


def _map_products(store: Store, unit: str, *, surface=None, scenarios=None, folder=None) -> dict:
    """The recorded products a map of ``unit`` shows (their files checked): head surface, gradient, pathways,
    contributing areas (the baseline's, not a scenario's) and drawdown scenarios; ``used`` lists them all."""
    from .. import products

    head = products.find_product(store, kind="surface", unit=unit, quantity="head", name=surface, folder=folder,
                                 required=surface is not None)
    gradient = None
    if head is not None:  # the gradient made with this head surface, else none
        gradient = products.find_product(store, kind="gradient", unit=unit, required=False,
                                         match=lambda p: head.name in p.inputs)
    baseline = (lambda p: not p.parameters.get("scenario"))
    pathways = products.find_product(store, kind="pathways", unit=unit, folder=folder, required=False,
                                     match=baseline)
    areas = products.find_product(store, kind="contributing_areas", unit=unit, folder=folder, required=False,
                                  match=baseline)
    drawdown = drawdown_layers(store, unit, scenarios=scenarios, folder=folder)
    used = [p for p in (head, gradient, pathways, areas) if p is not None] + [p for _, p in drawdown]
    for prod in used:
        products.check_files(prod)
    return {"head": head, "gradient": gradient, "pathways": pathways, "contributing_areas": areas,
            "drawdown": drawdown, "used": used}


def _product_layer(prod, layer: str):
    """The layer ``layer`` of the GeoPackage among a product's files (None when there is none)."""
    import pyogrio

    if prod is None:
        return None
    for f in prod.files:
        if f.endswith(".gpkg") and layer in {n for n, _ in pyogrio.list_layers(f)}:
            return pyogrio.read_dataframe(f, layer=layer)
    return None


def make_figures(store: Store, *, out=".", surfaces=None, k_unit: str | None = None,
                 policy: SelectionPolicy | None = None, allow_stale: bool = False,
                 warnings: list | None = None, board_map: bool = False, unit: str | None = None,
                 title: str | None = None) -> list[Path]:
    """PNG and SVG figures: head profiles of multi-zone wells, log K per unit, variogram fits, cross-validation.

    With ``board_map``, also the static map of ``unit`` for reports (PNG, SVG and PDF; ``title`` as the web
    map's): :func:`hydroatlas.workflows.board.board_map_figure`.

    Profiles and K distributions follow the selection policy (None: the default); the cross-validation of a
    surface uses the policy recorded in that surface's sidecar, so its points are those the surface used.
    The surfaces are the latest of each unit and quantity recorded in the store's product registry
    (``surfaces``, a folder, narrows the search to products whose files lie there); one made from store rows
    that changed since is refused unless ``allow_stale`` (then ``warnings``, when given, receives the texts).
    The figures are recorded in the registry (kind ``figures``).
    """
    import json

    from ..export import figures
    from ..interp import Variogram, crossval

    from ..quantities import crs_unit_label

    k_unit = store_k_unit(store, k_unit)  # default: the store's K unit
    distance_unit = crs_unit_label(store.settings.crs.axis_info[0].unit_name)
    from .. import products

    if board_map and unit is not None:  # refused before any figure is drawn
        assign.unit_members(store.read("units"), unit)
    out = ensure_folder(out)
    # the registry: the store must take the record, and the digests come before any row is read
    digests = products.input_digests(store, "figures")
    products.ensure_writable(store)
    store = Study.of(store, policy)  # the tables are read once for the whole figures
    latest = {}
    for prod in products.list_products(store, kind="surface"):  # oldest first: the latest of each one wins
        if surfaces is None or all(Path(f).resolve().is_relative_to(Path(surfaces).resolve()) for f in prod.files):
            latest[(prod.unit, prod.quantity)] = prod
    used = sorted(latest.values(), key=lambda p: p.name)
    for prod in used:
        products.check_files(prod)
    stale = products.check_fresh(store, used, allow_stale=allow_stale)
    written: list[Path] = []
    units = store.read("units")
    pairs, profiles = verticals(store, policy=policy)
    if not profiles.empty:
        allp = unit_intervals(store, units).merge(units[["code", "role"]].rename(columns={"code": "unit"}),
                                                  on="unit")
        for well, zones in profiles.groupby("well_id"):
            written += figures.head_profile(output_path(out, f"profile_{file_stem(well)}"), well, zones,
                                            allp[allp["well_id"] == well], pairs[pairs["well_id"] == well],
                                            length_unit=store.settings.length_unit)
    tests = tests_with_units(store, policy=policy)
    tests = tests[tests["unit"].notna()]
    if not tests.empty:
        from ..quantities import k_from_ms

        values = pd.DataFrame({"unit": tests["unit"], "log10k": np.log10(k_from_ms(tests["k_ms"].to_numpy(float),
                                                                                    k_unit))})
        rows = [r for r in unit_stats(store, k_unit=k_unit, policy=policy) if r["n_tests"]]
        written += figures.logk_distribution(out / "logk_by_unit", values, rows, k_unit=k_unit)
    if not store.read("slug_records", ["well_id"]).empty:  # one figure per slug test, by the method last asked
        from .slug_jobs import reduce_slug_tests, slug_method_asked

        slugs = reduce_slug_tests(store, method=slug_method_asked(store), write=False,
                                  figures=output_path(out, "slugs"))
        written += [Path(p) for p in slugs.attrs["figures"]]
    for prod in used:
        side_path = prod.file(f"{prod.quantity}.json")
        side = json.loads(side_path.read_text())
        if "variogram" not in side or "quantity" not in side:
            continue
        v = side["variogram"]
        stem = file_stem(side_path.stem)
        if v.get("experimental"):
            written += figures.variogram_fit(output_path(out, f"variogram_{stem}"), v["experimental"], v,
                                             title=f"{side['unit']} {side['quantity']}",
                                             distance_unit=side.get("distance_unit") or distance_unit,
                                             value_unit=side.get("value_unit") or "")
        xy, z, _, info = surface_points(store, side["unit"], side["quantity"], window=side.get("window"),
                                        at=side.get("at"), lower_unit=side.get("lower_unit"),
                                        baseline=side.get("baseline"),
                                        policy=SelectionPolicy.from_dict((side.get("selection") or {}).get("policy")),
                                        tolerance_days=(DEFAULT_TOLERANCE_DAYS if side.get("tolerance_days") is None
                                                        else side["tolerance_days"]))
        vario = Variogram(v["model"], nugget=v["nugget"], sill=v["sill"], range=v["range"], angle=v.get("angle", 0),
                          ratio=v.get("ratio", 1))
        model, _ = make_interpolator(side["method"], xy, z, variogram=v["model"], nugget=vario.nugget,
                                     sill=vario.sill, range_=vario.range, neighbors=side.get("neighbors"))
        cv = crossval.leave_one_out(model, xy, z)
        written += figures.cross_validation(output_path(out, f"crossval_{stem}"), z, cv["estimate"],
                                            std=cv["std"], unit=info["value_unit"],
                                            label=f"{side['unit']} {side['quantity']} ({side['method']})")
    if board_map:  # the static map for reports, from the products the web map shows
        from .board import board_map_figure

        map_used: list = []
        written += board_map_figure(store, out=out, unit=unit, surfaces=surfaces, title=title, k_unit=k_unit,
                                    policy=policy, allow_stale=allow_stale, warnings=stale, used=map_used)
        used = used + [p for p in map_used if p.name not in {u.name for u in used}]
    if warnings is not None:
        warnings.extend(stale)
    if written:
        command = products.command_line("figures", store, ("--k-unit", k_unit), ("--map", bool(board_map)),
                                        ("--unit", unit if board_map else None), ("--title", title),
                                        *products.policy_args(policy), ("--out", str(out)))
        products.record_product(store, kind="figures", name=products.product_name(store, "figures", written[0]),
                                files=written, parameters={"k_unit": k_unit, "n_figures": len(written)},
                                selection={"policy": (policy or SelectionPolicy()).to_dict()},
                                inputs=[p.name for p in used],
                                command=command, digests=digests)
    return written


# -- model grid (SPEC 2.10) ----------------------------------------------------------
def model_grid(store: Store, *, cell: float, out="model.nc", origin=None, shape=None, rotation: float = 0.0,
               layers: list[str] | None = None, kv_ratio: float = 10.0, k_source: str = "mean",
               min_thickness: float = 1.0, merge_down: bool = False, base: float | None = None,
               base_thickness: float | None = None, surfaces=None, max_cells: int | None = None,
               policy: SelectionPolicy | None = None, mf6=None, spring_conductance: float | None = None,
               surface=None, allow_stale: bool = False) -> dict:
    """A regular model grid with one layer per unit: geometry, idomain, K_h, K_v, starting heads, icelltype.

    Reads the units, picks, wells, domain polygon and the K tests that pass the selection policy (None: the
    default) from the store and the head (and, with ``k_source='surface'``, log-K) surfaces of the layers,
    builds the layers with :func:`hydroatlas.modelbuild.build_model_layers` (in the store's units: elevations
    and heads in its length unit, K in that unit per day) and writes them with
    :func:`hydroatlas.export.modelgrid.write_model_grid` (NetCDF, plain arrays, manifest.json) and, with
    ``mf6``, as a MODFLOW 6 simulation (:func:`hydroatlas.export.mf6.write_mf6`). manifest.json holds the K
    selection under ``selection`` and the selections of the head surfaces used under
    ``head_surface_selections``.

    Parameters
    ----------
    cell, origin, shape, rotation, layers, kv_ratio, k_source, min_thickness, merge_down, base, base_thickness,
    max_cells
        See :class:`hydroatlas.modelbuild.ModelGridOptions` (cell and origin in CRS units, thicknesses and
        elevations in the store's length unit).
    surfaces : path, optional
        Only surfaces whose files lie in this folder. The head (and log-K) surfaces of the layers come from the
        store's product registry: the latest of each layer's unit, or those named in ``surface``.
    surface : str or list of str, optional
        Names of head or log-K surface products to use for their units instead of the latest.
    allow_stale : bool
        Use surfaces made from store rows that changed since (refused by default, StaleProductError); the
        manifest and the result list them under ``stale_inputs_used``.
    mf6 : path, optional
        Folder for a MODFLOW 6 simulation (flopy needed).
    spring_conductance : float, optional
        Drain conductance of a spring cell in the MODFLOW 6 simulation (store length unit squared per day).
    """
    from datetime import datetime, timezone

    from .. import layering, modelbuild, products
    from ..export.modelgrid import write_model_grid
    from .surfaces import read_logk_m_per_d

    # the registry: the store must take the record, and the digests come before any row is read
    digests = products.input_digests(store, "model_grid")
    products.ensure_writable(store)
    store = Study.of(store, policy)  # the tables are read once for the whole grid

    options = modelbuild.ModelGridOptions(
        cell=cell, origin=origin, shape=shape, rotation=rotation, layers=layers, kv_ratio=kv_ratio,
        k_source=k_source, min_thickness=min_thickness, merge_down=merge_down, base=base,
        base_thickness=base_thickness, max_cells=max_cells)
    metres_per_crs_unit(store.settings)  # refuses a geographic store CRS
    L = store.settings.length_unit
    units = store.read("units").sort_values("rank").reset_index(drop=True)
    for code in options.layers or ():
        assign.unit_members(units, code)  # an unknown code: named with the store's units
    picks = store.read("picks")
    plan = modelbuild.plan_layers(units, picks, layers=options.layers, merge_down=merge_down)
    domain = Study.of(store).domain(plan.layers[0])
    tests, k_left_out = select_ktests(store, policy, zone_assignment(store))
    k_selection = selection_record(policy, k_left_out)
    orient = store.read("ktests", ["well_id", "zone_id", "test_id", "orientation"])
    tests = tests.merge(orient, on=["well_id", "zone_id", "test_id"], how="left")
    named = {}
    for name in ([surface] if isinstance(surface, str) else list(surface or ())):
        prod = products.find_product(store, kind="surface", name=name)
        if prod.quantity not in ("head", "logk") or prod.unit not in plan.layers:
            raise ParameterError(f"surface= names {prod.describe()}; give head or log-K surfaces of the layers "
                                 f"({', '.join(plan.layers)})", param="surface")
        named[(prod.unit, prod.quantity)] = name
    head_prods = {code: products.find_product(store, kind="surface", unit=code, quantity="head", folder=surfaces,
                                              name=named.get((code, "head")), required=False)
                  for code in plan.layers}
    head_prods = {code: p for code, p in head_prods.items() if p is not None}
    if not head_prods:
        raise ParameterError(f"no head surface of any layer ({', '.join(plan.layers)}) is recorded in the store"
                             + (f" with its files in {surfaces}" if surfaces is not None else "")
                             + f"; make one with 'hydroatlas surface {store.location} --unit {plan.layers[0]} "
                             "--quantity head'")
    logk_prods = ({code: products.find_product(store, kind="surface", unit=code, quantity="logk", folder=surfaces,
                                               name=named.get((code, "logk")))
                   for code in plan.layers} if k_source == "surface" else {})
    used = list(head_prods.values()) + list(logk_prods.values())
    for prod in used:
        products.check_files(prod)
    stale = products.check_fresh(store, used, allow_stale=allow_stale)
    heads = {code: read_grid(p.file("head.tif")) for code, p in head_prods.items()}
    k_surfaces = ({code: read_logk_m_per_d(p, code, store)[:2] for code, p in logk_prods.items()}
                  if k_source == "surface" else None)  # the surface's K unit -> m/d
    built = modelbuild.build_model_layers(
        options, units=units, picks=picks, wells=store.read("wells", ["well_id", "x", "y", "ground_elev",
                                                                      "total_depth"]),
        tests=tests, head_surfaces=heads, k_surfaces=k_surfaces,
        domain=None if domain is None else domain.union_all(), length_unit=L, crs=store.settings.crs, plan=plan,
        heads_from="the store's product registry")
    model = built.model
    history = (f"{datetime.now(timezone.utc).isoformat(timespec='seconds')} hydroatlas model_grid(cell={cell}, "
               f"origin={origin}, shape={shape}, rotation={rotation}, layers={list(plan.layers)}, "
               f"kv_ratio={kv_ratio}, k_source={k_source}, min_thickness={min_thickness}, merge_down={merge_down}, "
               f"base={base}, base_thickness={base_thickness})")
    source = f"hydroatlas store {store.location} (length unit {L}, vertical datum {store.settings.vertical_datum})"
    extra = {"grid": built.grid_info, "geometry_method": CONTACT_METHOD, "k_sources": built.k_info,
             "strt_sources": {str(c): w for c, w in layering.STRT_SOURCES.items()},
             "selection": k_selection,
             "head_surface_selections": {code: sidecar_selection(p.file("head.json"))
                                         for code, p in head_prods.items()},
             "input_products": [p.name for p in used], "stale_inputs_used": stale}
    mf6_summary = None
    if mf6 is not None:  # written first, so that the manifest can say what it holds (wells, springs, conductance)
        from ..export.mf6 import model_name, pumping_now, write_mf6

        pumped = pumping_now(store.read("pumping"), store.read("zones"), store.read("wells"))
        springs = store.read("springs", ["spring_id", "x", "y", "elev"])
        mf6_summary = write_mf6(mf6, model, wells=pumped, springs=springs, spring_conductance=spring_conductance,
                                name=model_name(Path(out).stem))
        extra["mf6"] = mf6_summary
    files = write_model_grid(out, model, history=history, source=source, caution=caution_text("model_grid"), manifest_extra=extra)
    if mf6_summary is not None:
        files["mf6"] = mf6_summary["folder"]
    command = products.command_line(
        "grid", store, ("--cell", cell), ("--origin", origin), ("--shape", shape), ("--rotation", rotation or None),
        ("--layers", None if layers is None else list(layers)), ("--kv-ratio", None if kv_ratio == 10.0 else kv_ratio),
        ("--k-source", None if k_source == "mean" else k_source),
        ("--min-thickness", None if min_thickness == 1.0 else min_thickness), ("--merge-down", bool(merge_down)),
        ("--base", base), ("--base-thickness", base_thickness), ("--max-cells", max_cells),
        *[("--surface", n) for n in named.values()], ("--mf6", None if mf6 is None else str(mf6)),
        ("--spring-conductance", spring_conductance), *products.policy_args(policy), ("--out", str(out)))
    products.record_product(store, kind="model_grid",
                            name=products.product_name(store, f"grid_{Path(out).stem}", files["netcdf"]),
                            files=[files["netcdf"], files["manifest"], files["arrays"]]
                            + ([files["mf6"]] if "mf6" in files else []),
                            parameters={"layers": list(plan.layers), "cell": cell, "shape": list(model.top.shape),
                                        "k_source": k_source, "rotation": rotation},
                            selection=k_selection, inputs=[p.name for p in used], command=command, digests=digests)
    return {"files": files, "mf6": mf6_summary, "layers": list(plan.layers),
            "shape": (model.nlay, model.nrow, model.ncol), "model_layers": model,
            "arrays": {"top": model.top, "botm": model.botm, "idomain": model.idomain, "k": model.k,
                       "k33": model.k33, "strt": model.strt, "icelltype": model.icelltype,
                       "thickness": built.thickness},
            "active": built.active, "x": built.x, "y": built.y, "grid": built.grid_info, "merged": plan.merged,
            "notes": list(model.notes), "selection": k_selection, "stale_inputs_used": stale}
