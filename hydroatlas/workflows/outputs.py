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
    CAUTION, _crs_to_m, _unit_members, tests_with_units, unit_stats, zone_assignment,
)
from .surfaces import (
    _domain_polygons, make_interpolator, read_surface, surface_points, unit_intervals, unit_presence_of, verticals,
)
from .pathways import KARST_WARNING, active_pumping, drawdown_layers
from ..selection import (
    DEFAULT_TOLERANCE_DAYS, SelectionPolicy, describe, select_ktests, select_readings, selection_record,
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
    if not store.read("slug_records", ["well_id"]).empty:  # one figure per slug test, by the method last asked
        from .slug_jobs import reduce_slug_tests, slug_method_asked

        slugs = reduce_slug_tests(store, method=slug_method_asked(store), write=False,
                                  figures=output_path(out, "slugs"))
        written += [Path(p) for p in slugs.attrs["figures"]]
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
#: inverse-distance weighting of the contact surfaces (residuals from a least-squares plane)
CONTACT_IDW_POWER = 2.0
CONTACT_IDW_NEIGHBORS = 12
CONTACT_METHOD = ("each contact between units (a unit's top and bottom) interpolated on its own from the picked "
                  "elevations (ground_elev - depth) of the wells that give it: least-squares plane plus inverse-"
                  f"distance weighting (power {CONTACT_IDW_POWER:g}, {CONTACT_IDW_NEIGHBORS} nearest wells) of the "
                  "residuals, exact at the wells (to floating-point rounding); the plane is held flat beyond the "
                  "wells' bounding box; each contact kept at or below the one above, and a unit's top and bottom "
                  "made one outside its extent from the picks")


def model_grid(store: Store, *, cell: float, out="model.nc", origin=None, shape=None, rotation: float = 0.0,
               layers: list[str] | None = None, kv_ratio: float = 10.0, k_source: str = "mean",
               min_thickness: float = 1.0, merge_down: bool = False, base: float | None = None,
               base_thickness: float | None = None, surfaces=None, max_cells: int | None = None,
               policy: SelectionPolicy | None = None, mf6=None, spring_conductance: float | None = None) -> dict:
    """A regular model grid with one layer per unit: geometry, idomain, K_h, K_v, starting heads, icelltype.

    Builds a :class:`hydroatlas.layering.ModelLayers` in the store's units (elevations and heads in its length
    unit, K in that unit per day) and writes it with :func:`hydroatlas.export.modelgrid.write_model_grid` (NetCDF,
    plain arrays, manifest.json) and, with ``mf6``, as a MODFLOW 6 simulation
    (:func:`hydroatlas.export.mf6.write_mf6`). The K tests behind the layer K follow the selection policy (None:
    the default); manifest.json holds it under ``selection``, and the selections of the head surfaces used for
    starting heads under ``head_surface_selections``.

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
        In stratigraphic order; default every unit with picks. A unit left out between two chosen ones is merged
        into the layer above (below with ``merge_down``); units above the first or below the last chosen one
        are not in the model (the model top is the top of the first chosen unit).
    kv_ratio : float
        K_h / K_v of a unit without vertical K tests (and K_h = K_v x ratio of a unit with vertical tests only).
    k_source : {'mean', 'surface'}
        K_h from the geometric mean of the unit's horizontal tests, or from its log-K surface
        (`hydroatlas surface --quantity logk`).
    min_thickness : float
        Thinnest active cell (store length unit); a thinner cell, or one where the unit is absent, is a vertical
        pass-through cell (idomain -1) that keeps its true elevations.
    merge_down : bool
        Merge left-out units into the layer below instead of the layer above.
    base, base_thickness : float, optional
        Bottom of the lowest layer as an elevation, or as a thickness below its top (store length unit). Needed
        where no well reaches the base of the lowest unit; without them the mean penetrated thickness is used,
        with a warning in the notes.
    mf6 : path, optional
        Folder for a MODFLOW 6 simulation (flopy needed).
    spring_conductance : float, optional
        Drain conductance of a spring cell in the MODFLOW 6 simulation (store length unit squared per day).

    Geometry: see :mod:`hydroatlas.layering`. Each contact between successive units is interpolated from the
    picks of the wells that give it (exact at the wells); the ground is the top of the first unit; a unit
    absent at a well (:func:`hydroatlas.assign.unit_presence`) has its top and bottom at one elevation there
    and zero thickness outside its extent. Layers are never stacked down from the ground, so leaving a unit out
    or pinching one out moves no other layer.
    """
    import math
    from datetime import datetime, timezone

    from .. import layering
    from ..export.modelgrid import write_model_grid
    from ..quantities import k_from_ms, store_units

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
    if base is not None and base_thickness is not None:
        raise ParameterError("give --base or --base-thickness, not both")
    if base is not None and not math.isfinite(base):
        raise ParameterError(f"--base must be a finite elevation; got {base}")
    if base_thickness is not None and not (math.isfinite(base_thickness) and base_thickness > 0):
        raise ParameterError(f"--base-thickness must be > 0; got {base_thickness}")
    _crs_to_m(store)  # refuses a geographic store CRS
    L = store.settings.length_unit
    units = store.read("units").sort_values("rank").reset_index(drop=True)
    role_of = dict(zip(units["code"], units["role"]))
    raw_picks = store.read("picks")
    picks_all = assign.finest_picks(raw_picks, units)
    wells = store.read("wells", ["well_id", "x", "y", "ground_elev", "total_depth"])
    picked = set(picks_all["unit"])
    # the sequence of units is the finest one (sub-units instead of their parent); a code covers its members
    parents = set(units["parent"].dropna())
    leaves = [c for c in units["code"] if c not in parents]
    leaf_index = {c: i for i, c in enumerate(leaves)}
    chains = assign.unit_ancestors(units)

    def span(code):
        idx = sorted(leaf_index[c] for c in leaves if c == code or code in chains[c])
        if not idx:
            raise ParameterError(f"unit {code} has no sub-units without sub-units of their own")
        if idx != list(range(idx[0], idx[-1] + 1)):
            raise ParameterError(f"the sub-units of {code} are not next to each other in rank; choose them as layers")
        return idx[0], idx[-1]

    if layers is None:
        layers = [c for c in units["code"] if c in picked
                  and not (c in parents and any(code in picked for code in _unit_members(units, c) - {c}))]
        if not layers:
            raise ParameterError("the store has no unit picks; a model grid needs them")
    layers = list(layers)
    for code in layers:
        members = _unit_members(units, code)
        if not members & picked:
            raise ParameterError(f"unit {code} has no picks anywhere; its layer geometry is unknown")
    spans = [span(c) for c in layers]
    rank = dict(zip(units["code"], units["rank"]))
    if len(set(layers)) != len(layers) or any(b[0] <= a[1] for a, b in zip(spans, spans[1:])):
        raise ParameterError(f"layers {','.join(layers)} are not in stratigraphic order (top first) or overlap: "
                             f"expected e.g. {','.join(sorted(dict.fromkeys(layers), key=rank.get))}")
    groups, merged_idx, above_idx, below_idx = layering.layer_groups(len(leaves), spans, merge_down=merge_down)
    merged = {code: [leaves[j] for j in m] for code, m in zip(layers, merged_idx) if m}
    notes: list[str] = [f"layer geometry: {CONTACT_METHOD}"]
    if above_idx:
        notes.append(f"units above the first layer are not in the model: {', '.join(leaves[j] for j in above_idx)}; "
                     f"the model top is the top of {layers[0]}")
    if below_idx:
        notes.append(f"units below the last layer are not in the model: {', '.join(leaves[j] for j in below_idx)}")
    for code, m in merged.items():
        notes.append(f"{', '.join(m)} merged into layer {code} ({'below' if merge_down else 'above'} "
                     f"{'them' if len(m) > 1 else 'it'}): thickness-weighted arithmetic K_h, harmonic K_v")
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
    xc, yc = layering.grid_cell_centres(x0, y0, cell, nrow, ncol, rotation)
    pts = np.column_stack([xc.ravel(), yc.ravel()])
    if domain is not None:
        import shapely

        active = shapely.contains_xy(domain.union_all(), pts[:, 0], pts[:, 1]).reshape(nrow, ncol)
    else:
        active = np.ones((nrow, ncol), bool)
    if not active.any():
        raise ParameterError("no cell of the grid lies inside the domain polygon")
    # contacts at the wells, from the picks and the presence of each unit
    wxy = wells[["x", "y"]].to_numpy(float)
    ground_w = wells["ground_elev"].to_numpy(float)
    row_of = {w: i for i, w in enumerate(wells["well_id"])}
    n = len(leaves)
    top_w = np.full((len(wells), n), np.nan)
    bot_w = np.full((len(wells), n), np.nan)
    known_w = np.zeros((len(wells), n), bool)
    p = picks_all.merge(wells[["well_id", "ground_elev", "total_depth"]], on="well_id")
    for r in p.itertuples(index=False):
        if r.unit not in rank or r.well_id not in row_of:
            continue
        first, last = span(r.unit) if r.unit not in leaf_index else (leaf_index[r.unit],) * 2
        i = row_of[r.well_id]
        ended = np.isfinite(r.total_depth) and r.bottom_depth >= r.total_depth - 1e-6
        if np.isnan(top_w[i, first]):
            top_w[i, first] = r.ground_elev - r.top_depth
        if np.isnan(bot_w[i, last]):
            bot_w[i, last] = r.ground_elev - r.bottom_depth
            known_w[i, last] = not ended
    located = wells[["well_id", "x", "y"]]
    presence = []
    pres_w = np.full((len(wells), n), -1, dtype="int8")
    for j, code in enumerate(leaves):
        pres = assign.unit_presence(raw_picks, located, units, code)
        presence.append(pres)
        flag = pres["present"]
        pres_w[:, j] = np.where(flag.isna(), -1, np.where(flag.fillna(False).astype(bool), 1, 0))
    contacts_w, mismatch = layering.well_contacts(ground_w, top_w, bot_w, known_w, pres_w)
    c_first, c_last = groups[0][0], groups[-1][1] + 1
    raw = np.stack([layering.interpolate_surface(wxy, contacts_w[:, c], pts, power=CONTACT_IDW_POWER,
                                                 neighbors=CONTACT_IDW_NEIGHBORS).reshape(nrow, ncol)
                    for c in range(c_last + 1)])
    inside = np.stack([assign.inside_extent(presence[j], pts).reshape(nrow, ncol) for j in range(c_last)])
    outside_extent = {leaves[j]: int((~inside[j] & active).sum()) for j in range(c_first, c_last)}
    with_data = np.isfinite(contacts_w).any(axis=0)
    boundaries = {groups[0][0]} | {last + 1 for _, last in groups[:-1]}
    for c in sorted(boundaries):
        if c > 0 and not with_data[c]:
            raise InsufficientDataError(f"no well gives the contact between {leaves[c - 1]} and {leaves[c]} (the "
                                        f"picks of {leaves[c - 1]} all end at the wells' total depth and no well "
                                        f"has a pick of {leaves[c]}); the layers there are unknown")
    contacts = layering.order_contacts(raw, inside)
    # the bottom of the lowest layer: picked, or --base / --base-thickness, or the stated default
    base_unit = leaves[c_last - 1]
    ceiling = contacts[c_first].copy()
    for c in range(c_first + 1, c_last):
        ceiling = np.where(np.isfinite(contacts[c]), contacts[c], ceiling)
    n_base = int(np.isfinite(contacts_w[:, c_last]).sum())
    rule = None
    if base is not None:
        bottom = np.minimum(base, ceiling)
        rule = f"--base {base:g} {L}"
    elif base_thickness is not None:
        bottom = ceiling - base_thickness
        rule = f"--base-thickness {base_thickness:g} {L}"
    elif not with_data[c_last]:
        here = p[p["unit"].isin(_unit_members(units, base_unit))]
        pen = (here["bottom_depth"] - here["top_depth"]).to_numpy(float)
        if pen.size == 0 or not np.isfinite(pen).any():
            raise InsufficientDataError(f"the base of {base_unit} is unknown: give --base ELEV or --base-thickness")
        t_mean = float(np.nanmean(pen))
        bottom = ceiling - t_mean
        rule = f"default: the mean penetrated thickness of {base_unit}, {t_mean:.4g} {L}"
        notes.append(f"warning: no well reaches the base of {base_unit} (every pick of it ends at the well's total "
                     f"depth); the lowest layer's bottom lies the mean penetrated thickness ({t_mean:.4g} {L}, a lower "
                     "bound of the true thickness) below its top; give --base or --base-thickness to set it")
    if rule is not None:
        bottom = np.where(inside[c_last - 1], bottom, ceiling)
        contacts[c_last] = np.minimum(bottom, ceiling)
        if base is not None or base_thickness is not None:
            notes.append(f"bottom of the lowest layer ({base_unit}) from {rule}"
                         + (f"; it replaces the base picked at {n_base} well(s)" if n_base else ""))
    for c in range(c_first + 1, c_last):  # a contact inside a merged layer that no well gives: zero thickness
        miss = ~np.isfinite(contacts[c])
        if miss.any():
            contacts[c] = np.where(miss, contacts[c - 1], contacts[c])
            notes.append(f"no well gives the top of {leaves[c]}: inside its layer it counts as zero thickness "
                         "for the layer K")
    off = mismatch[:, c_first:c_last + 1] > assign.EXTENT_TOLERANCE
    if off.any():
        notes.append(f"{int(off.any(axis=1).sum())} well(s) have picks that leave a gap or overlap at a contact "
                     f"(largest {float(mismatch[:, c_first:c_last + 1].max()):.4g} {L}); the contact is the mean there")
    top, botm, idomain, emptied = layering.layer_geometry(contacts, groups, min_thickness=min_thickness,
                                                          active=active)
    thick = np.concatenate([top[None], botm[:-1]]) - botm
    pass_through = {code: int((idomain[k] == layering.PASS_THROUGH).sum()) for k, code in enumerate(layers)}
    for code, count in pass_through.items():
        if count:
            notes.append(f"{code}: {count} cell(s) thinner than {min_thickness:g} {L} or where the unit is absent "
                         "are vertical pass-through cells (idomain -1) with their true elevations")
    if emptied:
        notes.append(f"{emptied} column(s) inside the domain have no layer as thick as {min_thickness:g} {L}: "
                     "made inactive (idomain 0)")
    # hydraulic conductivity per unit: K_h from horizontal tests, K_v from vertical tests or the ratio
    k_unit = store_units(L).k
    asg = zone_assignment(store)
    tests, k_left_out = select_ktests(store, policy, asg)
    k_selection = selection_record(policy, k_left_out)
    orient = store.read("ktests", ["well_id", "zone_id", "test_id", "orientation"])
    tests = tests.merge(orient, on=["well_id", "zone_id", "test_id"], how="left")
    tests["orientation"] = tests["orientation"].fillna("horizontal")
    folder = Path(surfaces) if surfaces is not None else Path(out).parent
    k_info = {}

    def unit_k(code, *, primary: bool):
        """(K_h, K_v) of a unit in the store's K unit (arrays (nrow, ncol)) and what they rest on; None if no tests."""
        mine = tests[tests["unit"].isin(_unit_members(units, code))]
        horiz = mine.loc[mine["orientation"] == "horizontal", "k_ms"].to_numpy(float)
        vert = mine.loc[mine["orientation"] == "vertical", "k_ms"].to_numpy(float)
        gmean = (lambda v: float(k_from_ms(10.0 ** np.mean(np.log10(v)), k_unit)))
        info = {"n_horizontal_tests": int(horiz.size), "n_vertical_tests": int(vert.size)}
        if horiz.size:
            kh = np.full((nrow, ncol), gmean(horiz))
            info["k_h"] = f"geometric mean of {horiz.size} horizontal test(s)"
        elif vert.size:
            kh = np.full((nrow, ncol), gmean(vert) * kv_ratio)
            info["k_h"] = f"no horizontal tests: K_v x --kv-ratio {kv_ratio:g}"
        else:
            return None, info
        if primary and k_source == "surface":
            from .surfaces import read_logk_m_per_d

            grid_s, k_surface_md, _ = read_logk_m_per_d(folder, code, store)  # the surface's K unit -> m/d
            k_md = 10.0 ** _sample_grid(grid_s, np.log10(k_surface_md), pts).reshape(nrow, ncol)
            from ..quantities import convert

            kh = np.where(np.isfinite(k_md), convert(k_md, "m/d", k_unit, "hydraulic conductivity"), kh)
            info["k_h"] = "log-K surface sampled at the cells (the test mean where it has no value)"
        if vert.size:
            kv = np.full((nrow, ncol), gmean(vert))
            info["k_v"] = f"geometric mean of {vert.size} vertical test(s)"
        else:
            kv = kh / kv_ratio
            info["k_v"] = f"K_h / --kv-ratio {kv_ratio:g} (no vertical tests)"
        return (kh, kv), info

    kh_layers, kv_layers = [], []
    for k, (code, (first, last)) in enumerate(zip(layers, groups)):
        own, info = unit_k(code, primary=True)
        if own is None:
            raise InsufficientDataError(f"unit {code} has no K tests; its layer K is unknown: import tests of it, or "
                                        "leave it out of --layers (a unit between two layers joins one of them)")
        k_info[code] = info
        parts_b, parts_h, parts_v = [], [], []
        own_first, own_last = spans[k]
        parts_b.append(contacts[own_first] - contacts[own_last + 1])
        parts_h.append(own[0])
        parts_v.append(own[1])
        for j in merged_idx[k]:
            got, minfo = unit_k(leaves[j], primary=False)
            if got is None:
                got = own
                notes.append(f"warning: {leaves[j]} (merged into layer {code}) has no K tests: it takes the K of "
                             f"{code}; choose the layers so that it joins a unit of its kind (--merge-down)")
            k_info[f"{leaves[j]} (merged into {code})"] = minfo
            parts_b.append(contacts[j] - contacts[j + 1])
            parts_h.append(got[0])
            parts_v.append(got[1])
        kh, kv = layering.effective_k(np.stack(parts_b), np.stack(parts_h), np.stack(parts_v), primary=0)
        kh_layers.append(kh)
        kv_layers.append(kv)
        if role_of.get(code) in layering.CONFINING_ROLES and not info["n_vertical_tests"]:
            notes.append(f"{code} ({role_of.get(code)}): no vertical K tests (column orientation); "
                         f"K_v = K_h / {kv_ratio:g}")
    # starting heads: each layer's own head surface, masked outside its unit's extent; aquitards and layers
    # without a surface lie between the layers with heads above and below
    roles = [role_of.get(c, "other") for c in layers]
    confining = np.array([r in layering.CONFINING_ROLES for r in roles])
    own_heads = np.full((len(layers), nrow, ncol), np.nan)
    have = []
    for k, code in enumerate(layers):
        if not unit_path(folder, code, "head.tif").is_file():
            have.append(False)
            continue
        grid_s, h = read_surface(folder, code, "head", store.location)
        hv = _sample_grid(grid_s, h, pts).reshape(nrow, ncol)
        own_first, own_last = spans[k]
        in_unit = inside[own_first:own_last + 1].any(axis=0)
        own_heads[k] = np.where(in_unit, hv, np.nan)
        have.append(True)
    if not any(have):
        raise ParameterError(f"no head surface for any layer in {folder}; make one with 'hydroatlas surface "
                             f"{store.location} --unit {layers[0]} --quantity head --out {folder}'")
    if not np.isfinite(own_heads).any():
        raise InsufficientDataError(f"the head surfaces in {folder} have no value inside the grid")
    strt, strt_source = layering.starting_heads(own_heads, top, botm, confining=confining)
    for k, code in enumerate(layers):
        counts = {c: int((strt_source[k][active] == c).sum()) for c in layering.STRT_SOURCES}
        if not have[k]:
            notes.append(f"{code} has no head surface of its own (none in {folder}): its starting heads are "
                         f"{_strt_words(counts)}")
        elif confining[k]:
            notes.append(f"{code} ({roles[k]}): starting heads {_strt_words(counts)}; its own head surface is used "
                         "only where a side has no head")
        elif counts[layering.STRT_OWN] < int(active.sum()):
            notes.append(f"{code}: starting heads from its own head surface in {counts[layering.STRT_OWN]} of "
                         f"{int(active.sum())} active columns; elsewhere {_strt_words(counts, skip_own=True)}")
    icelltype, icell_why = layering.cell_types(roles, strt, top, botm, idomain)
    notes += [f"{code}: icelltype {int(t)} ({why})" for code, t, why in zip(layers, icelltype, icell_why)]
    model = layering.ModelLayers(
        units=list(layers), roles=roles, top=top, botm=botm, idomain=idomain, k=np.stack(kh_layers),
        k33=np.stack(kv_layers), strt=strt, icelltype=icelltype, length_unit=L, k_unit=k_unit, time_unit="days",
        merged=merged, notes=notes, x0=x0, y0=y0, cell=float(cell), nrow=nrow, ncol=ncol, rotation=float(rotation),
        crs=store.settings.crs, strt_source=strt_source)
    grid_info = {"min_thickness": min_thickness, "kv_ratio": kv_ratio, "k_source": k_source,
                 "merge_down": bool(merge_down), "base": base, "base_thickness": base_thickness,
                 "base_rule": rule or f"picked at {n_base} well(s)",
                 "cells_outside_unit_extent": outside_extent, "pass_through_cells": pass_through}
    history = (f"{datetime.now(timezone.utc).isoformat(timespec='seconds')} hydroatlas model_grid(cell={cell}, "
               f"origin={origin}, shape={shape}, rotation={rotation}, layers={layers}, kv_ratio={kv_ratio}, "
               f"k_source={k_source}, min_thickness={min_thickness}, merge_down={merge_down}, base={base}, "
               f"base_thickness={base_thickness})")
    source = f"hydroatlas store {store.location} (length unit {L}, vertical datum {store.settings.vertical_datum})"
    extra = {"grid": grid_info, "geometry_method": CONTACT_METHOD, "k_sources": k_info,
             "strt_sources": {str(c): w for c, w in layering.STRT_SOURCES.items()},
             "selection": k_selection,
             "head_surface_selections": {code: sidecar_selection(unit_path(folder, code, "head.json"))
                                         for code, ok in zip(layers, have) if ok}}
    mf6_summary = None
    if mf6 is not None:  # written first, so that the manifest can say what it holds (wells, springs, conductance)
        from ..export.mf6 import model_name, pumping_now, write_mf6

        pumped = pumping_now(store.read("pumping"), store.read("zones"), store.read("wells"))
        springs = store.read("springs", ["spring_id", "x", "y", "elev"])
        mf6_summary = write_mf6(mf6, model, wells=pumped, springs=springs, spring_conductance=spring_conductance,
                                name=model_name(Path(out).stem))
        extra["mf6"] = mf6_summary
    files = write_model_grid(out, model, history=history, source=source, caution=CAUTION, manifest_extra=extra)
    if mf6_summary is not None:
        files["mf6"] = mf6_summary["folder"]
    return {"files": files, "mf6": mf6_summary, "layers": list(layers), "shape": (len(layers), nrow, ncol), "model_layers": model,
            "arrays": {"top": top, "botm": botm, "idomain": idomain, "k": model.k, "k33": model.k33, "strt": strt,
                       "icelltype": icelltype, "thickness": thick},
            "active": active, "x": xc, "y": yc, "grid": grid_info, "merged": merged, "notes": notes,
            "selection": k_selection}


def _strt_words(counts: dict, *, skip_own: bool = False) -> str:
    """Where a layer's starting heads come from, in words with cell counts (active columns)."""
    from ..layering import STRT_BETWEEN, STRT_MEAN, STRT_ONE_SIDE, STRT_OWN

    words = {STRT_OWN: "from its own head surface", STRT_BETWEEN: "linear in elevation between the layers with "
             "heads above and below", STRT_ONE_SIDE: "those of the nearest layer with heads (one side only)",
             STRT_MEAN: "the layer's mean (no head in any layer)"}
    parts = [f"{words[c]} in {v} cell(s)" for c, v in counts.items() if v and not (skip_own and c == STRT_OWN)]
    return "; ".join(parts) if parts else "none in the active cells"


def _sample_grid(grid, values, pts) -> np.ndarray:
    """Bilinear sample of a north-up grid at points (NaN outside or next to no-data)."""
    from scipy.interpolate import RegularGridInterpolator

    xs = grid.x_centers()
    ys = grid.y_centers()
    f = RegularGridInterpolator((ys[::-1], xs), np.asarray(values, float)[::-1], bounds_error=False,
                                fill_value=np.nan)
    return f(np.column_stack([pts[:, 1], pts[:, 0]]))
