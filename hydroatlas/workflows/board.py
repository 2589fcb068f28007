"""What a map made for a board says besides its layers, and the static map figure for reports (issue 14, item 5).

The web map (:func:`hydroatlas.workflows.outputs.build_map`) and the static figure (:func:`board_map_figure`)
take their title, the head window, the pumping scenario, the springs' discharge and the district's extent from the
functions here, so both say the same. Texts are plain; the writers escape them.
"""

from __future__ import annotations

import json
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import HydroatlasError, InsufficientDataError
from ..export.names import unit_path
from ..store import Store


def district_name(store: Store) -> str:
    """A name for the district: the store file's stem (``zephyrine.gpkg`` gives ``zephyrine``), or the database."""
    loc = str(store.location)
    if "://" in loc:  # a PostGIS URL: the database name, without credentials or options
        tail = loc.rsplit("/", 1)[-1].split("?", 1)[0]
        return tail or "district"
    return Path(loc).stem or "district"


def map_title(store: Store, unit: str, units: pd.DataFrame, title: str | None = None) -> tuple[str, list[str]]:
    """The title of a map and the lines under it: the unit, the units of elevations, the date it was made.

    ``title`` (given by the user) replaces the default title, ``<district> - <unit> (<unit name>)``.
    """
    name = units.set_index("code")["name"].get(unit)
    unit_text = unit + (f" ({name})" if isinstance(name, str) and name and name != unit else "")
    L = store.settings.length_unit
    main = title if title else f"{district_name(store)} - {unit_text}"
    sub = ([f"Unit {unit_text}"] if title else []) + [
        f"Heads and elevations in {L} above the vertical datum: {store.settings.vertical_datum}",
        f"Map made {datetime.now(timezone.utc).date().isoformat()} (UTC) with hydroatlas"]
    return main, sub


def read_sidecar(path) -> dict | None:
    """A JSON sidecar as a dict, or None when it is missing or unreadable."""
    try:
        return json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def head_window_lines(store: Store, unit: str, surface) -> list[str]:
    """The head window behind a unit's head surface and how the surface was made, as plain lines ([] if none).

    ``surface`` is the head surface's product (:mod:`hydroatlas.products`) or a folder holding its sidecar.
    """
    from .pathways import head_window

    try:
        path = surface.file("head.json") if hasattr(surface, "files") else unit_path(surface, unit, "head.json")
    except HydroatlasError:
        return []
    side = read_sidecar(path)
    if side is None:
        return []
    try:
        window = head_window(store, unit, surface)
    except HydroatlasError:
        return []
    start, end = pd.Timestamp(window["start"]), pd.Timestamp(window["end"])
    span = start.date().isoformat() if start == end else f"{start.date().isoformat()} to {end.date().isoformat()}"
    lines = [f"Heads of {span} ({window['source']})"]
    method = side.get("method")
    if method:
        lines.append(f"Head surface: {method}" + (f" of {side['n_points']} points" if side.get("n_points") else ""))
    return lines


def _shown(v: float) -> str:
    return f"{v:,.0f}" if abs(v) >= 100 else f"{v:.3g}"


def scenario_lines(side: dict, *, length_unit: str) -> list[str]:
    """A drawdown scenario's sidecar as plain lines: duration, S, T, the wells it changes, its largest drawdown.

    Rates are in the store's rate unit (a feet store also shows gpm, as the map's labels), T in the store's
    transmissivity unit (both from the sidecar's ``in_store_units``).
    """
    from .outputs import _rate_text

    su = side.get("in_store_units") or {}
    rate_unit = su.get("rate_unit") or f"{length_unit}3/d"
    lines = [f"{float(side['days']):g} days of pumping, storativity S = {float(side['storativity']):g}"]
    t = su.get("transmissivity")
    if t is not None:
        source = (side.get("transmissivity") or {}).get("source", "")
        how = " (given)" if source == "given" else (" (median over the wells: unit K x thickness)" if source else "")
        lines.append(f"Transmissivity T = {float(t):.3g} {su.get('transmissivity_unit', '')}{how}")
    changed, unchanged = [], 0
    for w in side.get("wells", []):
        status = w.get("status")
        if status == "unchanged":
            unchanged += 1
            continue
        new = _rate_text(float(w.get("scenario_rate_m3d") or 0.0), rate_unit)
        old = _rate_text(float(w.get("baseline_rate_m3d") or 0.0), rate_unit)
        what = {"proposed": f"proposed, {new}", "stopped": f"stopped (was {old})", "started": f"started, {new}",
                "changed": f"{old} to {new}"}.get(status, f"{status}, {new}")
        changed.append(f"{w.get('well_id')}: {what}")
    lines += [f"Well {c}" for c in changed]
    if unchanged:
        lines.append(f"{unchanged} baseline pumping well(s) unchanged")
    mode = side.get("mode")
    if mode:
        lines.append("Drawdown: " + ("total of all pumping, from unpumped heads" if mode == "from unpumped"
                                     else "change against the pumping in the measured heads"))
    if side.get("max_drawdown") is not None:
        lines.append(f"Largest drawdown {float(side['max_drawdown']):.2f} {length_unit}")
    lines += spring_effect_lines(side)
    method = side.get("method")
    if method:
        lines.append(f"Method: {method}")
    return lines


def scenario_heading(side: dict) -> str:
    name = side.get("scenario")
    return f"Pumping scenario {name}" if isinstance(name, str) and name else "Pumping scenario (unnamed, last run)"


def proposed_wells(side: dict) -> pd.DataFrame:
    """The proposed wells of a scenario sidecar: well_id, x, y (store CRS), scenario_rate_m3d."""
    rows = [(w.get("well_id"), w.get("x"), w.get("y"), w.get("scenario_rate_m3d"))
            for w in side.get("wells", []) if w.get("origin") == "proposed" or w.get("status") == "proposed"]
    frame = pd.DataFrame(rows, columns=["well_id", "x", "y", "scenario_rate_m3d"])
    return frame.astype({"x": float, "y": float, "scenario_rate_m3d": float})


def spring_discharge_lines(store: Store) -> dict[str, list[str]]:
    """Per spring id, plain lines on its discharge record: the latest reading and the median of the record.

    Shown in the unit the spring's readings used most (the readings are stored in m3/d as well).
    """
    from ..quantities import convert

    q = store.read("discharge", ["spring_id", "measured_at", "discharge_m3d", "rate_unit"])
    out: dict[str, list[str]] = {}
    if q.empty:
        return out
    q = q.assign(t=pd.to_datetime(q["measured_at"], format="ISO8601", utc=True, errors="coerce"))
    for sid, rec in q.dropna(subset=["t", "discharge_m3d"]).sort_values("t").groupby("spring_id"):
        unit = rec["rate_unit"].mode().iloc[0]

        def shown(v_m3d):
            return f"{_shown(float(convert(v_m3d, 'm3/d', unit, 'rate')))} {unit}"

        last = rec.iloc[-1]
        out[str(sid)] = [
            f"Discharge {shown(last['discharge_m3d'])} on {last['t'].date().isoformat()} (latest reading)",
            f"Median {shown(float(rec['discharge_m3d'].median()))} of {len(rec)} readings, "
            f"{rec['t'].iloc[0].date().isoformat()} to {last['t'].date().isoformat()}"]
    return out


def _num(v, fmt: str = ".2f") -> str | None:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return None
    return format(v, fmt) if np.isfinite(v) else None


def relation_lines(side: dict) -> list[str]:
    """A springflow sidecar (``hydroatlas springflow``) as plain lines: the cease-flow head and the trigger levels
    with their intervals, at the index zone, and the recession constant."""
    lines = []
    idx = side.get("index") or {}
    at = f" of index zone {idx.get('well_id')}/{idx.get('zone_id')}" if idx.get("well_id") else ""
    cf = side.get("cease_flow_head") or {}
    unit = cf.get("unit") or ""
    conf = _num(100 * float(cf.get("confidence") or 0.95), ".0f")
    h0, lo, hi = _num(cf.get("value")), _num(cf.get("low")), _num(cf.get("high"))
    if h0 is not None:
        lines.append(f"Cease-flow head {h0} {unit}{at}" + (f" ({conf} % interval {lo} to {hi} {unit})"
                                                           if lo is not None and hi is not None else ""))
    for lv in side.get("trigger_levels") or []:
        head, lo, hi = _num(lv.get("head")), _num(lv.get("low")), _num(lv.get("high"))
        q = _num(lv.get("discharge"), ".4g")
        if head is None or q is None:
            continue
        lines.append(f"Trigger level: discharge {float(lv.get('percent')):g} % of the median "
                     f"({_shown(float(q))} {lv.get('rate_unit', '')}) at head {head} {lv.get('length_unit', unit)}"
                     + (f" ({lo} to {hi})" if lo is not None and hi is not None else ""))
    rec = side.get("recession") or {}
    a = _num(rec.get("recession_constant"), ".3g")
    if a is not None:
        lines.append(f"Recession constant {a} 1/d (Maillet, {rec.get('n_segments', '?')} dry-season segment(s))")
    if lines:
        lines.append("Planning figures from a fitted relation, not drought rules (see the cautions)")
    return lines


def springflow_lines(store: Store, folders) -> dict[str, list[str]]:
    """Per spring id, the cease-flow head and trigger levels of its discharge-head relation, where one exists.

    Read from the sidecars ``hydroatlas springflow`` writes (``<spring>_springflow.json``,
    :func:`hydroatlas.workflows.springflow.relation_path`), in the first of ``folders`` (None entries skipped)
    that holds one; an unreadable sidecar, or one of another spring, is passed over.
    """
    from .springflow import relation_path

    out: dict[str, list[str]] = {}
    folders = [Path(f) for f in folders if f is not None]
    for sid in store.read("springs", ["spring_id"])["spring_id"]:
        for folder in folders:
            try:
                side = read_sidecar(relation_path(folder, sid))
            except HydroatlasError:
                continue
            if isinstance(side, dict) and str(side.get("spring_id")) == str(sid):
                lines = relation_lines(side)
                if lines:
                    out[str(sid)] = lines
                    break
    return out


def spring_effect_lines(side: dict) -> list[str]:
    """The spring effects of a drawdown scenario's sidecar (``spring_effects``) as plain lines."""
    lines = []
    for fx in side.get("spring_effects") or []:
        before, after = _num(fx.get("discharge_before"), ".4g"), _num(fx.get("discharge_after"), ".4g")
        change, lo, hi = (_num(fx.get(k), ".3g") for k in ("discharge_change", "discharge_change_low",
                                                          "discharge_change_high"))
        s = _num(fx.get("drawdown_at_index"))
        if before is None or after is None:
            continue
        ru, L = fx.get("rate_unit", ""), fx.get("length_unit", "")
        conf = _num(100 * float(fx.get("confidence") or 0.95), ".0f")
        # the sidecar's change is Q(h) - Q(h - s): positive is a loss of discharge
        text = (f"Spring {fx.get('spring_id')}: discharge {_shown(float(before))} to {_shown(float(after))} {ru}"
                + (f" (loss {change} {ru}, {conf} % interval {lo} to {hi})" if change and lo and hi else "")
                + (f", {s} {L} drawdown at index zone {fx.get('index_well')}/{fx.get('index_zone')}" if s else ""))
        if fx.get("ceases"):
            text += "; flow ceases"
        lines.append(text)
    return lines


def scenario_sidecar(item) -> dict | None:
    """The sidecar of a drawdown scenario: ``item`` is its product (:mod:`hydroatlas.products`) or a JSON path."""
    if hasattr(item, "files"):
        side = next((f for f in item.files if str(f).endswith(".json")), None)
        return None if side is None else read_sidecar(side)
    return read_sidecar(item)


def scenario_raster(item) -> Path | None:
    """The drawdown GeoTIFF of a scenario product (its first ``.tif``; the head after it comes second)."""
    return next((Path(f) for f in getattr(item, "files", ()) if str(f).endswith(".tif")), None)


def find_inputs(store: Store, unit: str, folder=None, *, surface: str | None = None, scenarios=None,
                allow_stale: bool = False) -> dict:
    """What a map of ``unit`` shows, found in the product registry as the web map finds it.

    Returns the dict of :func:`hydroatlas.workflows.outputs._map_products` (products ``head``, ``gradient``,
    ``pathways``, ``contributing_areas``, ``drawdown`` as (label, product) newest first, ``used``) with
    ``pathlines`` and ``contributing_area_shapes`` (GeoDataFrames of the unit's baseline rows, or None) and
    ``warnings`` (stale products used, with ``allow_stale``; else a stale product is refused).
    """
    from .. import products
    from .outputs import _map_products, _product_layer

    found = _map_products(store, unit, surface=surface, scenarios=scenarios, folder=folder)
    found["warnings"] = products.check_fresh(store, found["used"], allow_stale=allow_stale)
    for key, prod, layer in (("pathlines", found["pathways"], "pathlines"),
                             ("contributing_area_shapes", found["contributing_areas"], "contributing_areas")):
        gdf = _product_layer(prod, layer)
        if gdf is not None:
            keep = (gdf["unit"] == unit) & ~gdf.geometry.is_empty
            if layer == "pathlines" and "direction" in gdf.columns:
                keep &= gdf["direction"] == "forward"
            if "scenario" in gdf.columns:  # the baseline's rows; a scenario's are in its own table and layer rows
                keep &= gdf["scenario"].fillna("") == ""
            gdf = gdf[keep]
        found[key] = gdf if gdf is not None and len(gdf) else None
    return found


def district_bounds(store: Store, *, pad: float = 0.03) -> tuple[float, float, float, float] | None:
    """The district's extent in the store CRS: its domain polygon(s), else the wells and springs.

    Grown by ``pad`` of the larger side on each side (at least 100 m, so one well still gives a view); None
    when the store holds none of them.
    """
    areas = store.read_geometries("areas")
    dom = areas[areas["kind"] == "domain"] if not areas.empty else areas
    if not dom.empty:
        x0, y0, x1, y1 = (float(v) for v in dom.total_bounds)
    else:
        pts = [store.read("wells", ["x", "y"]), store.read("springs", ["x", "y"])]
        xy = pd.concat([p for p in pts if not p.empty], ignore_index=True) if any(not p.empty for p in pts) else None
        if xy is None or xy.empty:
            return None
        x0, y0 = xy[["x", "y"]].min().to_numpy(float)
        x1, y1 = xy[["x", "y"]].max().to_numpy(float)
    try:
        from .store_jobs import _crs_to_m

        min_pad = 100.0 / _crs_to_m(store)
    except HydroatlasError:
        min_pad = 0.001  # a geographic CRS: degrees
    d = max(pad * max(x1 - x0, y1 - y0), min_pad)
    return (x0 - d, y0 - d, x1 + d, y1 + d)


def bounds_latlon(store: Store, box) -> tuple[tuple[float, float], tuple[float, float]] | None:
    """A store-CRS box as ((south, west), (north, east)) in WGS 84 degrees (edges densified by pyproj)."""
    if box is None:
        return None
    from pyproj import Transformer

    tr = Transformer.from_crs(store.settings.crs, "EPSG:4326", always_xy=True)
    w, s, e, n = tr.transform_bounds(*box, densify_pts=21)
    return ((s, w), (n, e))


def north_angle(store: Store, x: float, y: float) -> float:
    """Angle of true north at (x, y), in degrees clockwise from the CRS's grid north (the grid convergence)."""
    from pyproj import Transformer

    crs = store.settings.crs
    if crs.is_geographic:
        return 0.0
    fwd = Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    back = Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    lon, lat = fwd.transform(x, y)
    x2, y2 = back.transform(lon, lat + 0.01)
    return float(np.degrees(np.arctan2(x2 - x, y2 - y)))


def board_map_figure(store: Store, *, out, unit: str | None = None, surfaces=None, title: str | None = None,
                     k_unit: str | None = None, policy=None, spring_notes: dict | None = None,
                     surface: str | None = None, scenarios=None, allow_stale: bool = False,
                     warnings: list | None = None, used: list | None = None) -> list[Path]:
    """The static map for reports: OUT/map_<unit>.png, .svg and .pdf (:func:`hydroatlas.export.figures.board_map`).

    The layers the web map shows when it opens: head contours (labelled), the newest drawdown scenario's contours
    (labelled) and its proposed wells, wells by kind coloured by the geometric-mean K of the unit, pumping wells
    sized by rate, springs, recharge areas, contributing areas, pathlines coloured by travel time and the unit's
    extent; the title, the head window and the scenario above the map; a legend, a scale bar in the store's unit
    and a north arrow (true north); the caution line at the foot.

    Its inputs come from the product registry as the web map's do (``surface``, ``scenarios``, ``surfaces`` and
    ``allow_stale`` as in :func:`hydroatlas.workflows.outputs.build_map`); ``warnings`` and ``used`` (lists, when
    given) receive the stale-input texts and the products drawn.
    """
    from ..cautions import caution_texts
    from ..export import figures
    from ..export.names import ensure_folder, file_stem, output_path
    from ..export.webmap import DRAWDOWN_COLOR, PROPOSED_COLOR, RECOVERY_COLOR, TIME_COLORMAP
    from ..quantities import store_units
    from .outputs import _nice_levels, _rate_text, default_map_unit, unit_extent_outline, well_summaries
    from .pathways import active_pumping
    from .. import assign
    from .store_jobs import store_k_unit
    from .surfaces import read_grid

    k_unit = store_k_unit(store, k_unit)
    L = store.settings.length_unit
    rate_unit = store_units(L).rate
    crs = store.settings.crs
    units = store.read("units").sort_values("rank")
    if unit is None:
        unit = default_map_unit(store, units)
    assign.unit_members(units, unit)  # an unknown unit code is refused here
    out = ensure_folder(out)
    found = find_inputs(store, unit, surfaces, surface=surface, scenarios=scenarios, allow_stale=allow_stale)
    main, sub = map_title(store, unit, units, title)
    sections = []
    if found["head"] is not None:
        grid, head = read_grid(found["head"].file("head.tif"))
        sections.append(("Head surface", head_window_lines(store, unit, found["head"])))
    layers = []
    per_unit, _ = well_summaries(store, k_unit=k_unit, policy=policy)
    wells = store.read("wells", ["well_id", "x", "y", "kind"])
    wells = wells.merge(per_unit[per_unit["unit"] == unit][["well_id", "k"]], on="well_id", how="left")
    if found["head"] is not None:
        layers.append(figures.MapContours(f"Head contours of {unit} ({L})", grid.x_centers(),
                                          grid.y_centers(), head, tuple(_nice_levels(head)),
                                          color="#0b5563", fmt="{:g} " + L))
    extent = unit_extent_outline(store, unit, units)
    if extent is not None:
        layers.append(figures.MapAreas(f"Extent of {unit} (from the picks)", tuple(extent.geometry),
                                       edgecolor="#7a4a12", facecolor=None, linestyle="--"))
    areas = store.read_geometries("areas")
    rech = areas[areas["kind"] == "recharge"] if not areas.empty else areas
    if not rech.empty:
        layers.append(figures.MapAreas("Recharge areas", tuple(rech.to_crs(crs).geometry), edgecolor="#238b45",
                                       facecolor="#238b45"))
    if found["contributing_area_shapes"] is not None:
        layers.append(figures.MapAreas("Contributing areas",
                                       tuple(found["contributing_area_shapes"].to_crs(crs).geometry),
                                       edgecolor="#54278f", facecolor="#54278f", linestyle=":", alpha=0.06))
    if found["pathlines"] is not None:
        pl = found["pathlines"].to_crs(crs)
        layers.append(figures.MapLines("Pathlines (colour by travel time)", tuple(pl.geometry),
                                       pl["travel_years"].to_numpy(float), cmap=TIME_COLORMAP,
                                       value_label="Pathline travel time (years; Darcy, upper bound in karst)"))
    proposed = pd.DataFrame(columns=["well_id", "x", "y", "scenario_rate_m3d"])
    if found["drawdown"]:
        label, prod = found["drawdown"][0]  # the newest (the web map shows it on, older ones off)
        dgrid, dd = read_grid(scenario_raster(prod))
        steps = (0.1, 0.25, 0.5, 1, 2, 5, 10, 20, 50)
        levels = sorted([v for v in steps if np.nanmax(dd) > v] + [-v for v in steps if np.nanmin(dd) < -v])
        if levels:
            layers.append(figures.MapContours(label, dgrid.x_centers(), dgrid.y_centers(), dd, tuple(levels),
                                              color=DRAWDOWN_COLOR, negative_color=RECOVERY_COLOR,
                                              negative_label=f"{label}: recovery (head rise)", linestyle="--",
                                              fmt="{:g} " + L))
        side = scenario_sidecar(prod)
        if side is not None:
            sections.append((scenario_heading(side), scenario_lines(side, length_unit=L)))
            proposed = proposed_wells(side)
    kinds = [k if isinstance(k, str) and k else "other" for k in wells["kind"]]
    layers.append(figures.MapWells(f"Wells: K of {unit} ({k_unit}, geometric mean per well, log scale)",
                                   wells["x"].to_numpy(float), wells["y"].to_numpy(float), tuple(kinds),
                                   np.log10(wells["k"].to_numpy(float)), k_unit=k_unit))
    pump = active_pumping(store, unit).merge(store.read("wells", ["well_id", "x", "y"]), on="well_id")
    if not pump.empty:
        q = pump["rate_m3d"].to_numpy(float)
        layers.append(figures.MapPoints("Pumping wells (size by rate)", pump["x"].to_numpy(float),
                                        pump["y"].to_numpy(float), marker="o",
                                        sizes=tuple(30 + 400 * np.sqrt(q / (q.max() or 1.0))),
                                        facecolor="#fdae6b", edgecolor="#8c2d04", alpha=0.6,
                                        labels=tuple(_rate_text(v, rate_unit) for v in q)))
    if len(proposed):
        layers.append(figures.MapPoints("Proposed wells (scenarios)", proposed["x"].to_numpy(float),
                                        proposed["y"].to_numpy(float), marker="s", sizes=(90,),
                                        facecolor="#ffffff", edgecolor=PROPOSED_COLOR, hatch="+",
                                        labels=tuple(f"{w} ({_rate_text(q, rate_unit)})" for w, q in
                                                     zip(proposed["well_id"], proposed["scenario_rate_m3d"]))))
    springs = store.read("springs", ["spring_id", "x", "y"])
    if not springs.empty:
        layers.append(figures.MapPoints("Springs", springs["x"].to_numpy(float), springs["y"].to_numpy(float),
                                        marker="D", sizes=(70,), facecolor="#6baed6", edgecolor="#08306b",
                                        labels=tuple(str(s) for s in springs["spring_id"])))
    if spring_notes is None:
        head_folder = Path(found["head"].file("head.tif")).parent if found["head"] is not None else None
        spring_notes = springflow_lines(store, [surfaces, out, head_folder])
    notes = spring_notes
    if notes:
        sections.append(("Springs", [f"{sid}: {line}" for sid, lines in notes.items() for line in lines]))
    if found["warnings"]:
        sections.append(("Stale inputs used", list(found["warnings"])))
    if warnings is not None:
        warnings.extend(found["warnings"])
    if used is not None:
        used.extend(found["used"])
    box = district_bounds(store)
    if box is None:
        raise InsufficientDataError("the store holds no wells, springs or domain polygon: nothing to map")
    try:
        from .store_jobs import _crs_to_m

        metres_per_unit = _crs_to_m(store)
    except HydroatlasError:
        metres_per_unit = None
    stem = output_path(out, f"map_{file_stem(unit)}")
    return figures.board_map(stem, title=main, subtitle=tuple(sub), sections=tuple(sections), layers=tuple(layers),
                             bounds=box, length_unit=L, metres_per_crs_unit=metres_per_unit,
                             north_deg=north_angle(store, (box[0] + box[2]) / 2, (box[1] + box[3]) / 2),
                             caution=" ".join(caution_texts("map")))
