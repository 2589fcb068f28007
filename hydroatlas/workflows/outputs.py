"""Maps, GIS layers, figures and model grids (SPEC 2.10, 2.12)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .. import assign
from ..errors import InsufficientDataError, ParameterError
from ..export.names import ensure_folder, file_stem, output_path, unit_path
from ..store import Store
from .store_jobs import (
    CAUTION, _crs_to_m, _length_to_m, _unit_members, tests_with_units, unit_stats, zone_assignment,
)
from .surfaces import (
    _domain_polygons, make_interpolator, read_surface, surface_points, unit_intervals, unit_presence_of, verticals,
)
from .pathways import KARST_WARNING, active_pumping, drawdown_layers
from ..selection import (
    DEFAULT_TOLERANCE_DAYS, SelectionPolicy, describe, select_ktests, select_readings, selection_record,
    sidecar_selection,
)
from .store_jobs import unit_stats_selected
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

    k_unit = store_k_unit(store, k_unit)
    asg = zone_assignment(store)
    tests, tests_out = select_ktests(store, policy, asg)
    lg = np.log10(tests["k_ms"].to_numpy(float))
    per_zone = pd.DataFrame({"well_id": tests["well_id"], "zone_id": tests["zone_id"], "lg": lg}) \
        .groupby(["well_id", "zone_id"]).agg(lg=("lg", "mean"), n_tests=("lg", "size")).reset_index()
    heads, heads_out = select_readings(store, policy)
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
    zones.attrs["selection"] = selection_record(policy, tests_out + heads_out)
    return per_unit, zones


def export_layers(store: Store, *, out=".", surfaces=None, k_unit: str | None = None,
                  policy: SelectionPolicy | None = None) -> dict:
    """Vector layers to OUT/layers.gpkg and OUT/geojson/<layer>.geojson (RFC 7946, WGS 84).

    wells (with per-unit geometric-mean K and test counts as columns), zones (points at
    mid-depth), head contours of every head surface found, and the flow_arrows, pathlines and
    contributing_areas layers already written by `surface` and `paths`. K and latest heads follow the
    selection policy (None: the default).
    """
    import geopandas as gpd
    import pyogrio

    from ..export.layers import write_geojson, write_layer

    out = Path(out)
    folder = Path(surfaces) if surfaces is not None else out
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
    contours = []
    for unit in codes:  # found under the names `surface` gives them, whatever the code holds
        if not unit_path(folder, unit, "head.tif").is_file():
            continue
        grid, head = read_surface(folder, unit, "head", store.location)
        c = contour_lines(grid, head, _nice_levels(head), crs)
        c["unit"] = unit
        contours.append(c)
    if contours:
        layers["head_contours"] = gpd.GeoDataFrame(pd.concat(contours, ignore_index=True), crs=crs)
    gpkg = out / "layers.gpkg"
    for name, gdf in layers.items():
        write_layer(gpkg, name, gdf)
    src = folder / "layers.gpkg"
    existing = {n for n, _ in pyogrio.list_layers(src)} if src.exists() else set()
    for name in ("flow_arrows", "pathlines", "contributing_areas"):
        if name in existing:
            gdf = pyogrio.read_dataframe(src, layer=name)
            if src.resolve() != gpkg.resolve():
                write_layer(gpkg, name, gdf)
            layers[name] = gdf
    gj = ensure_folder(out / "geojson")
    files = {"gpkg": str(gpkg)}
    for name, gdf in layers.items():
        files[name] = str(write_geojson(output_path(gj, f"{name}.geojson"), gdf))
    return files


def unit_extent_outline(store: Store, unit: str, units: pd.DataFrame | None = None):
    """The extent of a unit from the picks as a one-row GeoDataFrame (store CRS), or None where it is everywhere.

    Clipped to the domain polygon when there is one, else to the wells' bounding box grown by a tenth
    of its larger side. An empty extent (no well shows the unit) gives None as well.
    """
    import geopandas as gpd
    import shapely

    pres = unit_presence_of(store, unit, units)
    domain = _domain_polygons(store, unit)
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
    counts = {c: int(zones["unit"].isin(_unit_members(units, c)).sum()) for c in aquifers}
    return max(aquifers, key=lambda c: (counts[c], -aquifers.index(c)))


def build_map(store: Store, *, unit: str | None = None, out="map.html", surfaces=None, k_unit: str | None = None,
              tiles: str | None = None, policy: SelectionPolicy | None = None) -> Path:
    """One self-contained HTML map of the store and of the results found in ``surfaces``.

    Well K and latest heads follow the selection policy (None: the default); the map's notes say what it
    left out.

    Imported texts (ids, names, codes, extra attributes, the vertical datum) are handed to the helpers of
    :mod:`hydroatlas.export.webmap` as plain text; they escape them. No HTML is written here.
    """
    import folium
    import geopandas as gpd
    import pyogrio
    import rasterio
    from rasterio.warp import Resampling, calculate_default_transform, reproject

    from ..export.webmap import (K_COLORMAP, TIME_COLORMAP, arrow_svg, attribute_pairs, feature_tooltip,
                                geojson_text, hex_colors, label_icon, legend_html, table_popup, text_tooltip,
                                write_webmap)
    from ..quantities import store_units

    k_unit = store_k_unit(store, k_unit)  # default: the store's K unit
    rate_unit = store_units(store.settings.length_unit).rate
    crs = store.settings.crs
    units = store.read("units").sort_values("rank")
    if unit is None:
        unit = default_map_unit(store, units)
    _unit_members(units, unit)
    out = Path(out)
    folder = Path(surfaces) if surfaces is not None else out.parent
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
            folium.CircleMarker([geom.y, geom.x], radius=7 if has_k else 4, color="#1d2b36", weight=1,
                                fill=True, fill_color=color, fill_opacity=0.95,
                                tooltip=text_tooltip(w["well_id"]), popup=popup).add_to(group)
    layers.append((f"Wells: K of {unit}", add_wells))
    if finite.size:
        legends.append(legend_html(f"Geometric-mean K of {unit} per well ({k_unit}, log scale)", lo, hi, K_COLORMAP,
                                   fmt=lambda v: f"{10 ** v:.3g}"))
    head_tif = unit_path(folder, unit, "head.tif")
    if head_tif.is_file():
        grid, head = read_surface(folder, unit, "head", store.location)
        cont = contour_lines(grid, head, _nice_levels(head), crs).to_crs(4326)

        def add_contours(group):
            for geom, level in zip(cont.geometry, cont["level"]):
                coords = [(y, x) for x, y in geom.coords]
                folium.PolyLine(coords, color="#0b5563", weight=1.5, opacity=0.9,
                                tooltip=text_tooltip(f"head {level:g} {L} above {datum}")).add_to(group)
                folium.Marker(coords[len(coords) // 2], icon=label_icon(f"{level:g}")).add_to(group)
        layers.append((f"Head contours of {unit} ({L})", add_contours))
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

                    def add_std(group, rgba=rgba, bounds=[[s_, w_], [n_, e_]]):
                        folium.raster_layers.ImageOverlay(image=rgba, bounds=bounds, mercator_project=True,
                                                          opacity=1.0).add_to(group)
                    layers.append((f"Kriging standard deviation of {unit} head", add_std))
                    legends.append(legend_html(f"Kriging standard deviation ({L})",
                                               s0, s1, "Greys"))
    gpkg = folder / "layers.gpkg"
    have = {n for n, _ in pyogrio.list_layers(gpkg)} if gpkg.exists() else set()
    if "flow_arrows" in have:
        arrows = pyogrio.read_dataframe(gpkg, layer="flow_arrows")
        arrows = arrows[arrows["unit"] == unit].to_crs(4326)

        def add_arrows(group):
            for geom, az, grad in zip(arrows.geometry, arrows["azimuth"], arrows["gradient"]):
                folium.Marker([geom.y, geom.x], tooltip=text_tooltip(f"flow {az:.0f} deg, gradient {grad:.2g}"),
                              icon=folium.DivIcon(html=arrow_svg(az), icon_size=(18, 18),
                                                  icon_anchor=(9, 9))).add_to(group)
        if len(arrows):
            layers.append(("Flow arrows", add_arrows))
    pump = active_pumping(store, unit).merge(store.read("wells", ["well_id", "x", "y"]), on="well_id")
    if not pump.empty:
        pg = gpd.GeoDataFrame(pump, geometry=gpd.points_from_xy(pump["x"], pump["y"]), crs=crs).to_crs(4326)
        qmax = float(pump["rate_m3d"].max()) or 1.0

        def add_pumping(group):
            for geom, wid, q in zip(pg.geometry, pg["well_id"], pg["rate_m3d"]):
                folium.CircleMarker([geom.y, geom.x], radius=float(5 + 14 * np.sqrt(q / qmax)), color="#8c2d04",
                                    weight=2, fill=True, fill_color="#fdae6b", fill_opacity=0.6,
                                    tooltip=text_tooltip(f"{wid}: {_rate_text(q, rate_unit)}")).add_to(group)
        layers.append(("Pumping wells (size by rate)", add_pumping))
    springs = store.read("springs")
    if not springs.empty:
        sg = gpd.GeoDataFrame(springs, geometry=gpd.points_from_xy(springs["x"], springs["y"]), crs=crs).to_crs(4326)

        def add_springs(group):
            for geom, s in zip(sg.geometry, sg.itertuples(index=False)):
                icon = folium.DivIcon(html=SPRING_SVG, icon_size=(18, 18), icon_anchor=(9, 9))
                name = s.name if isinstance(s.name, str) else ""
                popup = table_popup([f"{s.spring_id} {name}".strip(), f"spring at {s.elev:g} {L} above {datum}"]
                                    + ([f"issues from unit {s.unit}"] if isinstance(s.unit, str) else []),
                                    attributes=attribute_pairs(s.attrs))
                folium.Marker([geom.y, geom.x], icon=icon, popup=popup,
                              tooltip=text_tooltip(f"{s.spring_id} {name} ({s.elev:g})")).add_to(group)
        layers.append(("Springs", add_springs))
    areas = store.read_geometries("areas")
    rech = areas[areas["kind"] == "recharge"] if not areas.empty else areas
    if not rech.empty:
        rech = rech.assign(details=["; ".join(f"{k}: {v}" for k, v in attribute_pairs(a)) for a in rech["attrs"]])
        data = geojson_text(rech[["area_id", "kind", "details", "geometry"]])

        def add_recharge(group, data=data):
            folium.GeoJson(data, style_function=lambda f: {"color": "#238b45", "weight": 2, "fillOpacity": 0.15},
                           tooltip=feature_tooltip(["area_id", "details"], ["recharge area", "attributes"])
                           ).add_to(group)
        layers.append(("Recharge areas", add_recharge))
    extent = unit_extent_outline(store, unit, units)
    if extent is not None:
        data = geojson_text(extent)

        def add_extent(group, data=data):
            folium.GeoJson(data, style_function=lambda f: {"color": "#7a4a12", "weight": 2.5, "dashArray": "8 4",
                                                           "fill": False},
                           tooltip=feature_tooltip(["unit", "rule"], ["extent of unit", "from the picks"])
                           ).add_to(group)
        layers.append((f"Extent of {unit} (from the picks)", add_extent))
    if "pathlines" in have:
        pl = pyogrio.read_dataframe(gpkg, layer="pathlines")
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
                    folium.PolyLine([(y, x) for x, y in geom.coords], color=color, weight=2, opacity=0.85,
                                    tooltip=text_tooltip(f"{yrs:.1f} years, ends at {end}")).add_to(group)
            layers.append(("Pathlines (colour by travel time)", add_paths))
            legends.append(legend_html("Pathline travel time (years; Darcy, upper bound in karst)", t0, t1,
                                       TIME_COLORMAP))
    if "contributing_areas" in have:
        ca = pyogrio.read_dataframe(gpkg, layer="contributing_areas")
        ca = ca[(ca["unit"] == unit) & ~ca.geometry.is_empty]
        if "scenario" in ca.columns:
            ca = ca[ca["scenario"].fillna("") == ""]
        if len(ca):
            data = geojson_text(ca[["spring_id", "geometry"]])

            def add_ca(group, data=data):
                folium.GeoJson(data, style_function=lambda f: {"color": "#54278f", "weight": 1.5, "dashArray": "4 3",
                                                               "fillOpacity": 0.08},
                               tooltip=feature_tooltip(["spring_id"], ["contributing area of"])).add_to(group)
            layers.append(("Contributing areas", add_ca))
    for label, tail in drawdown_layers(folder, unit):  # the unnamed scenario and each named one
        dgrid, dd = read_surface(folder, unit, tail, store.location)
        steps = (0.1, 0.25, 0.5, 1, 2, 5, 10, 20, 50)
        levels = [v for v in steps if np.nanmax(dd) > v] + [-v for v in steps if np.nanmin(dd) < -v]
        dcont = contour_lines(dgrid, dd, levels, crs).to_crs(4326)

        def add_dd(group, dcont=dcont):
            for geom, level in zip(dcont.geometry, dcont["level"]):
                text = f"drawdown {level:g} {L}" if level > 0 else f"recovery {-level:g} {L}"
                folium.PolyLine([(y, x) for x, y in geom.coords], color="#b30000" if level > 0 else "#2b8cbe",
                                weight=1.5, dash_array="6 4", tooltip=text_tooltip(text)).add_to(group)
        if len(dcont):
            layers.append((label, add_dd))
    cautions = [CAUTION, KARST_WARNING]
    unit_name = units.set_index("code").loc[unit, "name"]
    title = f"hydroatlas: {unit}" + (f" ({unit_name})" if isinstance(unit_name, str) and unit_name != unit else "")
    notes = [f"Elevations and heads in {L} above the vertical datum: {datum}"]
    notes += [f"Well K and latest heads: {text}" for _, text in describe(zones.attrs["selection"]["left_out"])]
    return write_webmap(out, title=title, center=center, layers=layers, legends=legends, cautions=cautions,
                        notes=notes, tiles=tiles)


def make_figures(store: Store, *, out=".", surfaces=None, k_unit: str | None = None,
                 policy: SelectionPolicy | None = None) -> list[Path]:
    """PNG and SVG figures: head profiles of multi-zone wells, log K per unit, variogram fits, cross-validation.

    Profiles and K distributions follow the selection policy (None: the default); the cross-validation of a
    surface uses the policy recorded in that surface's sidecar, so its points are those the surface used.
    """
    import json

    from ..export import figures
    from ..interp import Variogram, crossval

    from ..quantities import crs_unit_label

    k_unit = store_k_unit(store, k_unit)  # default: the store's K unit
    distance_unit = crs_unit_label(store.settings.crs.axis_info[0].unit_name)
    out = ensure_folder(out)
    folder = Path(surfaces) if surfaces is not None else out
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
    for side_path in sorted(folder.glob("*_*.json")):
        if side_path.name.startswith("."):  # a temporary file of an interrupted writer
            continue
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
    return written


# -- model grid (SPEC 2.10) ----------------------------------------------------------
MODEL_MAX_CELLS = 20_000_000


def model_grid(store: Store, *, cell: float, out="model.nc", origin=None, shape=None, rotation: float = 0.0,
               layers: list[str] | None = None, kv_ratio: float = 10.0, k_source: str = "mean",
               min_thickness: float = 1.0, surfaces=None, max_cells: int | None = None,
               policy: SelectionPolicy | None = None) -> dict:
    """A regular model grid with one layer per unit: tops, bottoms, K_h, K_v, starting heads and an active mask.

    The K tests behind the layer K follow the selection policy (None: the default); manifest.json holds it
    under ``selection``, and the selections of the head surfaces used for starting heads under
    ``head_surface_selections``.

    Parameters
    ----------
    cell : float
        Cell size in CRS units.
    origin : (x, y), optional
        Lower-left corner of the grid (required with a rotation); default: snapped to the domain polygon or data.
    shape : (rows, cols), optional
        Default: enough cells to cover the domain (or data) extent.
    rotation : float
        Degrees counter-clockwise about the origin.
    layers : list of unit codes, optional
        In stratigraphic order; default all units with picks.
    kv_ratio : float
        K_h / K_v of aquifer layers; aquitard and confining layers take K_v = K_h (their tests stand for
        the vertical conductivity that controls leakage).
    k_source : {'mean', 'surface'}
        K_h from the unit geometric mean or from its log-K surface (`hydroatlas surface --quantity logk`).
    min_thickness : float
        Smallest layer thickness (store length unit); thinner cells are raised to it and flagged pinched.

    Layer geometry: the ground surface and each unit's thickness are interpolated (inverse-distance
    weighting, exact at wells) from the picks; a unit counts as zero thickness at wells whose picks
    show it absent (:func:`hydroatlas.assign.unit_presence`) and in every cell outside its extent
    (nearer to such a well than to one that has it): those cells are flagged pinched, and the manifest's
    grid ``cells_outside_unit_extent`` counts them per layer; picks ending at a well's total
    depth do not give a thickness. Layers are stacked downward from the ground, so each top equals the
    bottom of the layer above.
    """
    import math

    from ..export.modelgrid import write_model_grid
    from ..interp import IDW

    if not (isinstance(cell, (int, float)) and cell > 0):
        raise ParameterError(f"--cell must be > 0; got {cell}")
    if rotation and origin is None:
        raise ParameterError("a rotated grid needs --origin X,Y (the lower-left corner it rotates about)")
    if not kv_ratio > 0:
        raise ParameterError(f"--kv-ratio must be > 0; got {kv_ratio}")
    if not min_thickness > 0:
        raise ParameterError(f"--min-thickness must be > 0; got {min_thickness}")
    if k_source not in ("mean", "surface"):
        raise ParameterError(f"k_source must be 'mean' or 'surface'; got {k_source!r}")
    _crs_to_m(store)  # refuses a geographic store CRS
    units = store.read("units").sort_values("rank")
    picks_all = assign.finest_picks(store.read("picks"), units)
    wells = store.read("wells", ["well_id", "x", "y", "ground_elev", "total_depth"])
    picked = set(picks_all["unit"])
    if layers is None:
        layers = [c for c in units["code"] if c in picked]
        if not layers:
            raise ParameterError("the store has no unit picks; a model grid needs them")
    rank = dict(zip(units["code"], units["rank"]))
    for code in layers:
        _unit_members(units, code)
        if code not in picked:
            raise ParameterError(f"unit {code} has no picks anywhere; its layer geometry is unknown")
    if [rank[c] for c in layers] != sorted(rank[c] for c in layers) or len(set(layers)) != len(layers):
        raise ParameterError(f"layers {','.join(layers)} are not in stratigraphic order (top first): expected "
                             f"{','.join(sorted(layers, key=rank.get))}")
    # grid geometry
    domain = _domain_polygons(store, layers[0])
    if origin is None:
        if domain is not None:
            xmin, ymin, xmax, ymax = domain.total_bounds
        else:
            xmin, ymin = wells[["x", "y"]].min()
            xmax, ymax = wells[["x", "y"]].max()
        x0, y0 = math.floor(xmin / cell) * cell, math.floor(ymin / cell) * cell
        ncol = max(1, int(math.ceil((xmax - x0) / cell - 1e-9)))
        nrow = max(1, int(math.ceil((ymax - y0) / cell - 1e-9)))
    else:
        x0, y0 = (float(v) for v in origin)
        if shape is None:
            raise ParameterError("--origin needs --shape ROWS,COLS")
    if shape is not None:
        nrow, ncol = (int(v) for v in shape)
        if nrow < 1 or ncol < 1:
            raise ParameterError(f"--shape must be at least 1,1; got {shape}")
    limit = max_cells or MODEL_MAX_CELLS
    if nrow * ncol * len(layers) > limit:
        raise ParameterError(f"{len(layers)} layers x {nrow} x {ncol} cells = {nrow * ncol * len(layers):,} cells, "
                             f"more than the maximum of {limit:,}; choose a larger --cell")
    theta = math.radians(rotation)
    cols = (np.arange(ncol) + 0.5) * cell
    rows = (nrow - np.arange(nrow) - 0.5) * cell  # row 1 at the far side (north when unrotated)
    u, v = np.meshgrid(cols, rows)
    xc = x0 + u * math.cos(theta) - v * math.sin(theta)
    yc = y0 + u * math.sin(theta) + v * math.cos(theta)
    pts = np.column_stack([xc.ravel(), yc.ravel()])
    if domain is not None:
        import shapely

        active = shapely.contains_xy(domain.union_all(), pts[:, 0], pts[:, 1]).reshape(nrow, ncol)
    else:
        active = np.ones((nrow, ncol), bool)
    if not active.any():
        raise ParameterError("no cell of the grid lies inside the domain polygon")
    # layer geometry from picks
    L = store.settings.length_unit
    ground = IDW(2.0, neighbors=12).fit(wells[["x", "y"]].to_numpy(float), wells["ground_elev"].to_numpy(float)) \
        .predict(pts).reshape(nrow, ncol)
    p = picks_all.merge(wells, on="well_id")
    known_base = ~(p["bottom_depth"] >= p["total_depth"] - 1e-6)
    p["thickness"] = p["bottom_depth"] - p["top_depth"]
    tops, bottoms, pinched = [], [], []
    outside_extent = {}
    current = ground.copy()
    for code in layers:
        here = p[(p["unit"] == code) & known_base]
        if here.empty:  # never fully penetrated: use the penetrated thickness (a lower bound)
            here = p[p["unit"] == code]
        xy = here[["x", "y"]].to_numpy(float)
        b = here["thickness"].to_numpy(float)
        # wells whose picks show the unit absent (assign.unit_presence): zero thickness there, and zero
        # in every cell outside the unit's extent (nearer to such a well than to one that has the unit)
        presence = unit_presence_of(store, code, units)
        aw = presence[presence["present"].eq(False).fillna(False).to_numpy(bool)]
        if len(aw):
            xy = np.vstack([xy, aw[["x", "y"]].to_numpy(float)])
            b = np.concatenate([b, np.zeros(len(aw))])
        thick = IDW(2.0, neighbors=12).fit(xy, b).predict(pts).reshape(nrow, ncol)
        outside = ~assign.inside_extent(presence, pts).reshape(nrow, ncol)
        outside_extent[code] = int((outside & active).sum())
        thick = np.where(outside, 0.0, thick)
        thin = thick < min_thickness
        thick = np.where(thin, min_thickness, thick)
        tops.append(current)
        current = current - thick
        bottoms.append(current)
        pinched.append(thin.astype("int8"))
    top, bottom = np.array(tops), np.array(bottoms)
    # hydraulic conductivity (length unit per day)
    len_per_m = 1.0 / _length_to_m(store)
    rows, k_selection = unit_stats_selected(store, k_unit="m/d", policy=policy)
    stats_rows = {r["unit"]: r for r in rows}
    folder = Path(surfaces) if surfaces is not None else Path(out).parent
    kh, kv = [], []
    for code in layers:
        if stats_rows[code]["k_geomean"] is None:
            raise InsufficientDataError(f"unit {code} has no K tests; its layer K is unknown")
        if k_source == "surface":
            from .surfaces import read_logk_m_per_d

            grid_s, k_surface_md, _ = read_logk_m_per_d(folder, code, store)  # the surface's K unit -> m/d
            k_md = 10.0 ** _sample_grid(grid_s, np.log10(k_surface_md), pts).reshape(nrow, ncol)
            k_md = np.where(np.isfinite(k_md), k_md, stats_rows[code]["k_geomean"])
        else:
            k_md = np.full((nrow, ncol), stats_rows[code]["k_geomean"])
        k_len = k_md * len_per_m
        role = units.set_index("code").loc[code, "role"]
        kh.append(k_len)
        kv.append(k_len if role in ("aquitard", "confining") else k_len / kv_ratio)
    # starting heads: the unit's head surface, else the nearest layer that has one
    heads, have = [], []
    for code in layers:
        if unit_path(folder, code, "head.tif").is_file():
            grid_s, h = read_surface(folder, code, "head", store.location)
            hv = _sample_grid(grid_s, h, pts).reshape(nrow, ncol)
            heads.append(hv)
            have.append(True)
        else:
            heads.append(None)
            have.append(False)
    if not any(have):
        raise ParameterError(f"no head surface for any layer in {folder}; make one with 'hydroatlas surface "
                             f"{store.location} --unit {layers[0]} --quantity head --out {folder}'")
    borrowed = []
    for k in range(len(layers)):
        if have[k]:
            borrowed.append(np.zeros((nrow, ncol), "int8"))
            continue
        near = min((j for j in range(len(layers)) if have[j]), key=lambda j: (abs(j - k), j))
        heads[k] = heads[near]
        borrowed.append(np.ones((nrow, ncol), "int8"))
    start = np.array(heads)
    # fill cells outside a head surface's mask from the layer's mean, flagged as borrowed
    for k in range(len(layers)):
        miss = ~np.isfinite(start[k])
        if miss.any():
            start[k][miss] = np.nanmean(start[k]) if np.isfinite(start[k]).any() else np.nan
            borrowed[k][miss] = 1
    arrays = {"top": top, "bottom": bottom, "thickness": top - bottom, "kh": np.array(kh), "kv": np.array(kv),
              "start_head": start, "pinched": np.array(pinched), "head_borrowed": np.array(borrowed)}
    grid_info = {"origin": [x0, y0], "origin_is": "lower-left corner", "cell": cell, "rows": nrow, "cols": ncol,
                 "rotation": rotation, "rotation_is": "degrees counter-clockwise about the origin",
                 "min_thickness": min_thickness, "kv_ratio": kv_ratio, "k_source": k_source,
                 "cells_outside_unit_extent": outside_extent}
    from datetime import datetime, timezone

    history = (f"{datetime.now(timezone.utc).isoformat(timespec='seconds')} hydroatlas model_grid(cell={cell}, "
               f"origin={origin}, shape={shape}, rotation={rotation}, layers={layers}, kv_ratio={kv_ratio}, "
               f"k_source={k_source}, min_thickness={min_thickness})")
    source = f"hydroatlas store {store.location} (length unit {L}, vertical datum {store.settings.vertical_datum})"
    files = write_model_grid(out, arrays=arrays, active=active, x=xc, y=yc, layer_units=list(layers),
                             crs_wkt=store.settings.crs.to_wkt(), length_unit=L, grid_info=grid_info,
                             history=history, source=source, caution=CAUTION)
    # the manifest is the grid's sidecar: say which K tests and head readings the layers rest on
    import json

    from ..export.rasters import write_sidecar

    manifest = json.loads(Path(files["manifest"]).read_text())
    manifest["selection"] = k_selection
    manifest["head_surface_selections"] = {code: sidecar_selection(unit_path(folder, code, "head.json"))
                                           for code, ok in zip(layers, have) if ok}
    write_sidecar(files["manifest"], manifest)
    return {"files": files, "layers": list(layers), "shape": (len(layers), nrow, ncol), "arrays": arrays,
            "active": active, "x": xc, "y": yc, "grid": grid_info, "selection": k_selection}


def _sample_grid(grid, values, pts) -> np.ndarray:
    """Bilinear sample of a north-up grid at points (NaN outside or next to no-data)."""
    from scipy.interpolate import RegularGridInterpolator

    xs = grid.x_centers()
    ys = grid.y_centers()
    f = RegularGridInterpolator((ys[::-1], xs), np.asarray(values, float)[::-1], bounds_error=False,
                                fill_value=np.nan)
    return f(np.column_stack([pts[:, 1], pts[:, 0]]))
