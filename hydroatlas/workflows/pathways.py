"""Pathways from recharge areas to springs, contributing areas and pumping scenarios (SPEC 2.8-2.9)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InsufficientDataError, ParameterError
from ..export.names import ensure_folder, unit_path, write_csv
from ..store import Store
from ..cautions import KARST_WARNING, caution_text
from ..assign import unit_members
from ..study import Study, metres_per_crs_unit, metres_per_length_unit
from .store_jobs import zone_assignment
from .store_jobs import unit_stats_selected
from ..selection import SelectionPolicy, selection_record, sidecar_selection
from .surfaces import read_grid


# -- pathways (SPEC 2.8) -----------------------------------------------------------
# KARST_WARNING (imported above from hydroatlas.cautions) describes the pathlines and contributing_areas layers


def _unit_recharge(store: Store, unit: str):
    """Recharge areas of a unit (those naming it or no unit); possibly empty."""
    areas = store.read_geometries("areas")
    if areas.empty:
        return areas
    return areas[(areas["kind"] == "recharge") & (areas["unit"].isna() | (areas["unit"] == unit))]


def _recharge_areas(store: Store, unit: str):
    rech = _unit_recharge(store, unit)
    if rech.empty:
        raise ParameterError(f"the store has no recharge area for unit {unit}; import one with "
                             "'hydroatlas import STORE areas FILE' (kind recharge)")
    return rech


#: bounds of the capture radius of a sink, in cells of the head surface and as a share of its shorter side
CAPTURE_RADIUS_MIN_CELLS = 0.25
CAPTURE_RADIUS_MAX_SHARE = 0.25
#: capture radius of a spring without discharge readings, in cells (common practice: about the grid resolution)
SPRING_RADIUS_CELLS = 2.0


def read_scenario(store: Store, unit: str, name: str, *, folder=None, allow_stale: bool = False):
    """A drawdown scenario recorded in the store (``drawdown --name NAME``, or the product name of any scenario).

    ``folder`` narrows the search to scenarios whose files lie there. Refuses a scenario made from rows that
    changed since (see :func:`hydroatlas.products.check_fresh`; ``allow_stale`` uses it with a warning).
    Returns (product, sidecar, grid, head after the scenario, warnings).
    """
    import json

    from .. import products

    def match(p):
        return p.parameters.get("scenario") == name or p.name == name

    prod = products.find_product(store, kind="drawdown", unit=unit, folder=folder, match=match, required=False)
    if prod is None:
        where = f" with its files in {folder}" if folder is not None else ""
        raise ParameterError(f"no drawdown scenario {name!r} of unit {unit} is recorded in the store "
                             f"{store.location}{where}; make it with 'hydroatlas drawdown {store.location} --unit "
                             f"{unit} --days N --name {name}'")
    products.check_files(prod)
    warnings = products.check_fresh(store, prod, allow_stale=allow_stale)
    side = next(Path(f) for f in prod.files if f.endswith(".json"))
    try:
        info = json.loads(side.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise ParameterError(f"cannot read the scenario sidecar {side}: {exc}") from None
    if info.get("unit") != unit or "baseline" not in info:
        raise ParameterError(f"{side} is not a drawdown scenario sidecar of unit {unit}")
    grid, head = read_grid(info["files"]["head"])
    return prod, info, grid, head, warnings


def _named_surfaces(store: Store, unit: str, names) -> dict:
    """{'head': name or None, 'logk': name or None} from the names of ``surface=`` (one name or several)."""
    from .. import products

    names = [names] if isinstance(names, str) else list(names or ())
    found = {"head": None, "logk": None}
    for name in names:
        prod = products.find_product(store, kind="surface", unit=unit, name=name)
        if prod.quantity not in found:
            raise ParameterError(f"surface= names {prod.describe()}; give a head or log-K surface of unit {unit}",
                                 param="surface")
        if found[prod.quantity] is not None:
            raise ParameterError(f"surface= names two {prod.quantity} surfaces ({found[prod.quantity]}, {name}); "
                                 "give one", param="surface")
        found[prod.quantity] = name
    return found


def _spring_discharge_m3d(store: Store, window: dict) -> dict:
    """Median discharge (m3/d) of each spring: readings in the head window, else all of its readings."""
    dis = store.read("discharge")
    if dis.empty:
        return {}
    dis = dis.assign(t=_instants(dis["measured_at"]).to_numpy())
    out = {}
    for sid, g in dis.groupby("spring_id"):
        inside = g[(g["t"] >= window["start"]) & (g["t"] <= window["end"])]
        out[sid] = float((inside if len(inside) else g)["discharge_m3d"].median())
    return out


def path_sinks(store: Store, unit: str, *, window: dict, grid, regional_head, k_md, scenario: dict | None = None,
               capture_radius: float | None = None) -> tuple[pd.DataFrame, list[str]]:
    """Sinks of particle tracking and the radius within which each captures a particle.

    Sinks are the springs and the wells pumping at the end of the head window
    (a record of the unit active then with a rate > 0; with a scenario, its
    rates: stopped wells drop out, proposed wells join). Wells that stopped are
    not sinks. Each sink captures within its stagnation distance in uniform flow,
    x0 = Q / (2 pi b q) (Javandel and Tsang 1986), with Q its rate (a spring: its
    median discharge), b the unit's thickness there (:func:`unit_thickness_at`)
    and q = K i the regional Darcy flux from the gradient of ``regional_head``,
    bounded to [CAPTURE_RADIUS_MIN_CELLS cells, CAPTURE_RADIUS_MAX_SHARE of the
    grid's shorter side]. A spring without discharge readings captures within
    SPRING_RADIUS_CELLS cells. ``capture_radius`` (CRS units), when given, is
    used for every sink instead.

    Returns the sinks (id, kind, x, y, rate_m3d, thickness_m, flux_m_per_d,
    stagnation_distance, radius, radius_rule) and warnings.
    """
    from .. import flow

    crs_to_m = metres_per_crs_unit(store.settings)
    springs = store.read("springs", ["spring_id", "x", "y"])
    _, base = baseline_pumping(store, unit, window)
    rates = dict(zip(base["well_id"], base["rate_m3d"].astype(float)))
    xy = {w: (float(x), float(y)) for w, x, y in base[["well_id", "x", "y"]].itertuples(index=False)}
    kind = {w: "pumping well" for w in rates}
    if scenario is not None:
        for c in scenario.get("wells", []):
            rates[c["well_id"]] = float(c["scenario_rate_m3d"])
            xy[c["well_id"]] = (float(c["x"]), float(c["y"]))
            kind[c["well_id"]] = "proposed well" if c.get("origin") == "proposed" else "pumping well"
    wells = [w for w in rates if rates[w] > 0]
    discharge = _spring_discharge_m3d(store, window)
    sinks = pd.DataFrame({
        "id": list(springs["spring_id"]) + wells,
        "kind": ["spring"] * len(springs) + [kind[w] for w in wells],
        "x": list(springs["x"].astype(float)) + [xy[w][0] for w in wells],
        "y": list(springs["y"].astype(float)) + [xy[w][1] for w in wells],
        "rate_m3d": [discharge.get(s, np.nan) for s in springs["spring_id"]] + [rates[w] for w in wells]})
    warnings = []
    if capture_radius is not None:
        sinks["radius"] = float(capture_radius)
        sinks["radius_rule"] = "given (--capture-radius)"
        return sinks, warnings
    pts = sinks[["x", "y"]].to_numpy(float).reshape(-1, 2)
    b_m, b_info, b_warn = unit_thickness_at(store, unit, pts)
    if b_m is None:
        per = _unit_picks(store, unit)
        if per.empty:
            raise InsufficientDataError(f"unit {unit} has no picks; its thickness, which sets the capture radius "
                                        "of springs and wells, is unknown; give capture_radius=",
                                        param="capture_radius")
        mean_b = float((per["bottom_depth"] - per["top_depth"]).mean())
        b_m = np.full(len(pts), mean_b * metres_per_length_unit(store.settings))
        warnings.append(f"no well penetrates unit {unit} fully; the capture radii use the mean thickness of its "
                        f"picks ({mean_b:.4g} {store.settings.length_unit}), which may be too small")
    warnings += b_warn
    gradient, _ = flow.grid_gradient(regional_head, grid.cell,
                                     vertical_per_horizontal=metres_per_length_unit(store.settings) / crs_to_m)
    i_pt = flow.values_at(grid.x0, grid.y0, grid.cell, gradient, pts, search=2)
    k_pt = (flow.values_at(grid.x0, grid.y0, grid.cell, k_md, pts, search=2) if np.ndim(k_md) == 2
            else np.full(len(pts), float(k_md)))
    q_md = k_pt * i_pt
    r_min = CAPTURE_RADIUS_MIN_CELLS * grid.cell
    r_max = max(r_min, CAPTURE_RADIUS_MAX_SHARE * min(grid.nrows, grid.ncols) * grid.cell)
    x0 = np.full(len(pts), np.nan)
    ok = np.isfinite(sinks["rate_m3d"].to_numpy(float)) & np.isfinite(q_md) & np.isfinite(b_m)
    if ok.any():
        x0[ok] = flow.stagnation_distance(sinks["rate_m3d"].to_numpy(float)[ok], b_m[ok], q_md[ok]) / crs_to_m
    radius = np.where(np.isfinite(x0), np.clip(x0, r_min, r_max), np.nan)
    rule = np.where(np.isfinite(x0), np.where(x0 < r_min, "stagnation distance, raised to the lower bound",
                                              np.where(x0 > r_max, "stagnation distance, cut to the upper bound",
                                                       "stagnation distance Q / (2 pi b q)")), "")
    spring = (sinks["kind"] == "spring").to_numpy()
    no_rate = spring & ~np.isfinite(radius)
    radius[no_rate] = SPRING_RADIUS_CELLS * grid.cell
    rule[no_rate] = f"{SPRING_RADIUS_CELLS:g} cells (no discharge reading)"
    lost = ~spring & ~np.isfinite(radius)
    if lost.any():
        warnings.append(f"well(s) {', '.join(sinks.loc[lost, 'id'])} lie outside the head surface; they capture "
                        f"within the lower bound ({r_min:g} CRS units)")
        radius[lost] = r_min
        rule[lost] = "lower bound (outside the head surface)"
    sinks["thickness_m"] = b_m
    sinks["flux_m_per_d"] = q_md
    sinks["stagnation_distance"] = x0
    sinks["radius"] = radius
    sinks["radius_rule"] = rule
    return sinks, warnings


def _sink_records(store: Store, sinks: pd.DataFrame) -> list[dict]:
    """The sinks for a sidecar, each number with its unit (rates, thickness and flux in the store's units)."""
    L = store.settings.length_unit
    len_m = metres_per_length_unit(store.settings)
    rows = []
    for r in sinks.to_dict(orient="records"):
        row = {"id": r["id"], "kind": r["kind"], "x": r["x"], "y": r["y"],
               "rate": float(_in_store_rate(store, r["rate_m3d"])), "rate_unit": _store_rate_unit(store),
               "capture_radius": r["radius"], "capture_radius_unit": "CRS units", "rule": r["radius_rule"]}
        if "thickness_m" in r:
            row.update({"thickness": r["thickness_m"] / len_m, "thickness_unit": L,
                        "darcy_flux": r["flux_m_per_d"] / len_m, "darcy_flux_unit": f"{L}/d",
                        "stagnation_distance": r["stagnation_distance"]})
        rows.append(row)
    return rows


def trace_paths(store: Store, unit: str, *, porosity: float, out=".", surfaces=None, backward: bool = False,
                k_source: str = "mean", seed_spacing: float | None = None, capture_radius: float | None = None,
                max_years: float = 1000.0, seeds_per_spring: int = 72,
                policy: SelectionPolicy | None = None, scenario: str | None = None, surface=None,
                allow_stale: bool = False) -> dict:
    """Track particles on a unit's head surface: forward from recharge areas, or backward from springs.

    The head surface (and with ``k_source='surface'`` the log-K surface) comes from the store's product
    registry: the surfaces named in ``surface`` (one product name or several), else the latest of the unit
    (with ``surfaces``, a folder: the latest whose files lie there). A surface made from store rows that
    changed since is refused (StaleProductError naming the command that remakes it) unless ``allow_stale``;
    then the sidecar lists it under ``stale_inputs_used``. The pathways (and, backward, the contributing
    areas) are recorded in the registry with the names of the products used.

    The K tests behind the unit's mean K follow the selection policy (None: the default); the sidecar's
    ``selection`` says which, ``head_surface_selection`` repeats that of the head surface used.

    Sinks are the springs and the wells pumping at the end of the head window,
    each capturing within its stagnation distance (:func:`path_sinks`); wells
    that stopped are not sinks. With ``scenario`` (a name given to ``drawdown
    --name``, or the product name of a scenario) particles move on that scenario's
    head surface, found in the registry, and the scenario's rates decide the
    sinks, so a proposed well's capture shows.

    Writes the ``pathlines`` layer (and ``contributing_areas`` when backward) of OUT/layers.gpkg,
    OUT/<unit>_pathways.csv (backward: OUT/<unit>_pathways_backward.csv; a scenario adds
    ``_<name>``) and a JSON sidecar of the same name. Returns a summary dict.
    """
    import geopandas as gpd
    import shapely

    from .. import flow
    from ..export.layers import write_layer
    from ..export.rasters import write_sidecar

    if not (isinstance(porosity, (int, float)) and 0 < porosity <= 1):
        raise ParameterError(f"effective porosity must be in (0, 1]; got {porosity}")
    if k_source not in ("mean", "surface"):
        raise ParameterError(f"k_source must be 'mean' or 'surface'; got {k_source!r}")
    from .. import products

    # the registry: the store must take the record, and the digests come before any row is read
    kind = "contributing_areas" if backward else "pathways"
    digests = products.input_digests(store, kind)
    products.ensure_writable(store)
    store = Study.of(store, policy)  # the tables are read once for the whole job
    crs_to_m = metres_per_crs_unit(store.settings)
    units = store.read("units")
    unit_members(units, unit)
    out = Path(out)
    named = _named_surfaces(store, unit, surface)
    scn = None
    used, stale = [], []
    if scenario is not None:
        scn_prod, scn, grid, head, stale = read_scenario(store, unit, scenario, folder=surfaces,
                                                         allow_stale=allow_stale)
        used.append(scn_prod)
        hw = scn["baseline"]["head_window"]
        window = {"start": pd.Timestamp(hw["from"]), "end": pd.Timestamp(hw["to"]), "text": hw["text"],
                  "source": f"{hw['source']}, as recorded by the scenario"}
        base = products.get_product(store, scn.get("baseline", {}).get("head_surface_product")
                                    or (scn_prod.inputs[0] if scn_prod.inputs else ""))
        regional = read_grid(base.files[0])[1] if base is not None and not base.missing_files() else None
        if regional is None or regional.shape != head.shape:
            regional = head
        head_prod = base
    else:
        head_prod, stale = products.use_product(store, kind="surface", unit=unit, quantity="head",
                                                name=named["head"], folder=surfaces, allow_stale=allow_stale)
        used.append(head_prod)
        grid, head = read_grid(head_prod.file("head.tif"))
        window = head_window(store, unit, head_prod)
        regional = head
    if k_source == "surface":
        from .surfaces import read_logk_m_per_d

        logk_prod, more = products.use_product(store, kind="surface", unit=unit, quantity="logk",
                                               name=named["logk"], folder=surfaces, allow_stale=allow_stale)
        used.append(logk_prod)
        stale += more
        kgrid, k_md, k_surface_unit = read_logk_m_per_d(logk_prod, unit, store)
        if kgrid.shape != grid.shape or abs(kgrid.x0 - grid.x0) > 1e-6 or abs(kgrid.cell - grid.cell) > 1e-9:
            raise ParameterError("the head and log-K surfaces of the unit are on different grids; "
                                 "make both with the same cell=", param="cell")
        k_info = {"source": "log-K surface", "file": str(logk_prod.file("logk.tif")), "product": logk_prod.name,
                  "surface_values": f"log10 of K in {k_surface_unit}", "k_unit": k_surface_unit}
    else:
        rows, k_selection = unit_stats_selected(store, k_unit="m/d", policy=policy)
        row = next(r for r in rows if r["unit"] == unit)
        if row["k_geomean"] is None:
            raise InsufficientDataError(f"unit {unit} has no K tests; its geometric-mean K is unknown")
        from ..quantities import convert
        from .store_jobs import store_k_unit

        k_md = row["k_geomean"]
        k_unit = store_k_unit(store)  # the sidecar names K in the store's K unit
        k_info = {"source": "unit geometric mean", "k": convert(k_md, "m/d", k_unit, "hydraulic conductivity"),
                  "k_unit": k_unit}
    field = flow.VelocityGrid.from_head(grid.x0, grid.y0, grid.cell, head, k_md, porosity,
                                        vertical_per_horizontal=metres_per_length_unit(store.settings) / crs_to_m,
                                        k_per_day_to_crs=1.0 / crs_to_m)
    springs = store.read("springs")
    if springs.empty:
        raise ParameterError("the store has no spring; import springs with 'hydroatlas import STORE springs FILE'")
    if capture_radius is not None and not capture_radius > 0:
        raise ParameterError(f"capture radius must be > 0; got {capture_radius}")
    sinks, warnings = path_sinks(store, unit, window=window, grid=grid, regional_head=regional, k_md=k_md,
                                 scenario=scn, capture_radius=capture_radius)
    sink_xy = sinks[["x", "y"]].to_numpy(float).reshape(-1, 2)
    sink_ids = list(sinks["id"])
    sink_kind = list(sinks["kind"])
    radius = sinks["radius"].to_numpy(float)
    t_max = max_years * 365.25
    recharge = _recharge_areas(store, unit) if not backward else None
    if backward:  # the springs come first among the sinks
        seeds, owner = flow.ring_seeds(springs[["x", "y"]].to_numpy(float), radius[:len(springs)],
                                       per_centre=seeds_per_spring)
        origin = list(springs["spring_id"].to_numpy()[owner])
        res = flow.track(seeds, field, backward=True, t_max=t_max, max_step=0.5 * grid.cell)
    else:
        seeds, origin = [], []
        for aid, geom in zip(recharge["area_id"], recharge.geometry):
            spacing = seed_spacing or max(grid.cell, float(np.sqrt(geom.area / 200.0)))
            pts = flow.seed_points(geom, spacing)
            seeds.append(pts)
            origin += [aid] * len(pts)
        seeds = np.vstack(seeds)
        res = flow.track(seeds, field, t_max=t_max, sinks=sink_xy, sink_radius=radius, max_step=0.5 * grid.cell)
    end_id = [sink_ids[i] if i >= 0 else None for i in res.end_sink]
    end_label = [f"{sink_kind[i]} {sink_ids[i]}" if i >= 0 else k for i, k in zip(res.end_sink, res.end_kind)]
    lines = [shapely.LineString(p[:, :2]) if len(p) >= 2 else shapely.LineString([p[0, :2], p[0, :2]])
             for p in res.paths]
    direction = "backward" if backward else "forward"
    scenario_label = "" if scenario is None else str(scenario)
    gdf = gpd.GeoDataFrame({"unit": unit, "particle": np.arange(len(lines)), "direction": direction,
                            "scenario": scenario_label, "origin": origin, "end_kind": res.end_kind,
                            "end_id": end_id, "travel_days": res.time, "travel_years": res.time / 365.25},
                           geometry=lines, crs=store.settings.crs)
    gpkg = out / "layers.gpkg"
    gdf = _keep_other_rows(gpkg, "pathlines", gdf, (unit, direction, scenario_label),
                           ("unit", "direction", "scenario"))
    write_layer(gpkg, "pathlines", gdf, description=KARST_WARNING)
    files = {"pathlines": f"{gpkg}:pathlines"}
    if backward:
        rech_all = _unit_recharge(store, unit)  # possibly none: the table is then empty
        polys, table = flow.contributing_areas(field, np.isfinite(head), sink_xy, radius, t_max=t_max,
                                               targets=list(springs["spring_id"]),
                                               areas=list(zip(rech_all["area_id"], rech_all.geometry)))
        ca = gpd.GeoDataFrame(polys.rename(columns={"sink_id": "spring_id"}).assign(unit=unit)[
            ["spring_id", "unit", "cells", "area", "median_days", "geometry"]], geometry="geometry",
            crs=store.settings.crs)
        table = table.rename(columns={"sink_id": "spring_id", "area_id": "recharge_area"})
        ca["scenario"] = scenario_label
        ca = _keep_other_rows(gpkg, "contributing_areas", ca, (unit, scenario_label), ("unit", "scenario"))
        write_layer(gpkg, "contributing_areas", ca, description=KARST_WARNING)
        files["contributing_areas"] = f"{gpkg}:contributing_areas"
    else:
        table = flow.travel_summary(origin, end_label, res.time).rename(columns={"origin": "recharge_area"})
    tail = "pathways" + ("_backward" if backward else "") + ("" if scenario is None else f"_{scenario_stem(scenario)}")
    files["table"] = str(write_csv(unit_path(out, unit, f"{tail}.csv"), table))
    side = {"unit": unit, "direction": direction, "porosity": porosity, "k": k_info,
            "capture_radius": (float(capture_radius) if capture_radius is not None
                               else "per sink: stagnation distance Q / (2 pi b q), Javandel and Tsang (1986)"),
            "sinks": _sink_records(store, sinks), "head_window": window_record(window), "scenario": scenario,
            "warnings": warnings, "max_years": max_years, "n_particles": int(len(seeds)),
            "head_surface": str(scn["files"]["head"] if scn is not None else head_prod.file("head.tif")),
            "input_products": [p.name for p in used], "stale_inputs_used": stale,
            "integrator": "Dormand-Prince 5(4), adaptive",
            "caution": caution_text("pathways"), "karst_warning": KARST_WARNING, "files": files,
            # K tests behind the mean K here; the surfaces' own selections are in their sidecars
            "selection": (k_selection if k_source == "mean" else sidecar_selection(logk_prod.file("logk.json"))),
            "head_surface_selection": (sidecar_selection(head_prod.file("head.json")) if head_prod is not None
                                       and scn is None else (scn or {}).get("head_surface_selection"))}
    table_path = unit_path(out, unit, f"{tail}.csv")
    side["product"] = products.product_name(
        store, f"{unit}_{kind}" + ("" if scenario is None else f"_{scenario_stem(scenario)}"), table_path)
    files["sidecar"] = str(write_sidecar(unit_path(out, unit, f"{tail}.json"), side))
    command = products.command_line(
        "paths", store, ("--unit", unit), ("--porosity", porosity), ("--backward", bool(backward)),
        ("--k-source", None if k_source == "mean" else k_source), ("--seed-spacing", seed_spacing),
        ("--capture-radius", capture_radius), ("--scenario", scenario),
        *[("--surface", n) for n in (named["head"], named["logk"]) if n],
        ("--max-years", None if max_years == 1000.0 else max_years), *products.policy_args(policy),
        ("--out", str(out)))
    products.record_product(store, kind=kind, name=side["product"], unit=unit, quantity="travel time",
                            value_unit="d", files=[files["table"], files["sidecar"], str(gpkg)],
                            parameters={"direction": direction, "porosity": porosity, "k": k_info,
                                        "scenario": scenario, "max_years": max_years,
                                        "layers": ["pathlines"] + (["contributing_areas"] if backward else [])},
                            head_window=side["head_window"], selection=side["selection"],
                            inputs=side["input_products"], command=command, digests=digests)
    side["table"] = table
    return side


def _keep_other_rows(gpkg: Path, layer: str, new, key: tuple, columns: tuple):
    """``new`` plus the rows of an existing layer whose ``columns`` differ from ``key`` (other units, directions)."""
    import geopandas as gpd
    import pyogrio

    if not gpkg.exists() or layer not in {n for n, _ in pyogrio.list_layers(gpkg)}:
        return new
    old = pyogrio.read_dataframe(gpkg, layer=layer)
    if "scenario" in columns and "scenario" not in old.columns:
        old["scenario"] = ""  # written before scenarios were traced: the baseline
    if not set(columns) <= set(old.columns):
        return new
    same = np.ones(len(old), bool)
    for col, value in zip(columns, key):
        same &= (old[col].fillna("") == value).to_numpy() if col == "scenario" else (old[col] == value).to_numpy()
    old = old[~same]
    if old.empty:
        return new
    return gpd.GeoDataFrame(pd.concat([old.to_crs(new.crs), new], ignore_index=True), crs=new.crs)


# -- pumping scenarios (SPEC 2.9) --------------------------------------------------
# -- the baseline of a scenario: head window, pumping in it, unit thickness ---------------
#: scenario names that would give a file name of another output
RESERVED_SCENARIO_NAMES = ("drawdown", "impacts", "backward")
#: a pick's bottom this close to the well's total depth (in metres) is where drilling stopped
TOTAL_DEPTH_TOLERANCE_M = 0.05


def scenario_stem(name) -> str:
    """The file-name part of a scenario name (``drawdown --name``, ``paths --scenario``); refuses empty names."""
    from ..export.names import file_stem

    text = "" if name is None else str(name).strip()
    if not text:
        raise ParameterError("a scenario name must not be empty")
    if text.lower() in RESERVED_SCENARIO_NAMES:
        raise ParameterError(f"scenario name {text!r} is reserved (it would clash with other output names); "
                             "choose another")
    return file_stem(text)


def _instants(values) -> pd.Series:
    """ISO 8601 texts (or NaN) as naive timestamps (offsets turned into UTC, as the head readings)."""
    t = pd.to_datetime(pd.Series(values, dtype=object), format="ISO8601", utc=True)
    return t.dt.tz_convert(None)


def head_window(store: Store, unit: str, folder) -> dict:
    """The time window of the heads behind a unit's head surface (read from its sidecar).

    ``folder`` is the head surface product (:class:`hydroatlas.products.Product`) or a folder holding
    ``<unit>_head.json``. A surface made with ``--window`` has that window; one made with ``--at`` has
    that instant; one made from all readings has the span of the unit's readings.
    Returns ``start`` and ``end`` (timestamps), ``text`` and ``source``.
    """
    import json

    from ..heads import TimeWindow, parse_instant

    side = folder.file("head.json") if hasattr(folder, "files") else unit_path(folder, unit, "head.json")
    info = {}
    if side.is_file():
        try:
            info = json.loads(side.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            info = {}
    if isinstance(info.get("window"), str) and info["window"]:
        tw = TimeWindow.parse(info["window"], name=f"window of {side.name}")
        return {"start": tw.start, "end": tw.end, "text": tw.text,
                "source": f"window of the head surface ({side.name})"}
    if isinstance(info.get("at"), str) and info["at"]:
        t, _ = parse_instant(info["at"], name=f"date of {side.name}")
        return {"start": t, "end": t, "text": info["at"], "source": f"date of the head surface ({side.name}, --at)"}
    heads = store.read("heads", ["well_id", "zone_id", "measured_at"])
    asg = zone_assignment(store)
    members = unit_members(store.read("units"), unit)
    mine = heads.merge(asg[asg["unit"].isin(members)][["well_id", "zone_id"]], on=["well_id", "zone_id"])
    if mine.empty:
        mine = heads
    if mine.empty:
        raise InsufficientDataError(f"unit {unit} has no head readings; its head window is unknown")
    t = _instants(mine["measured_at"])
    start, end = t.min(), t.max()
    return {"start": start, "end": end, "text": f"{start.isoformat()}/{end.isoformat()}",
            "source": "span of the unit's head readings (the head surface used every reading)"}


def window_record(window: dict) -> dict:
    """The head window as plain JSON values."""
    return {"from": window["start"].isoformat(), "to": window["end"].isoformat(), "text": window["text"],
            "source": window["source"]}


def _in_unit(store: Store, rec: pd.DataFrame, unit: str) -> list[bool]:
    """Which pumping records draw on ``unit``: a zone assigned to it, or a whole-well record of a well open to it."""
    asg = zone_assignment(store)
    members = unit_members(store.read("units"), unit)
    zone_unit = {(w, z): u for w, z, u in asg[["well_id", "zone_id", "unit"]].itertuples(index=False)}
    well_units = asg.groupby("well_id")["unit"].agg(set).to_dict()
    return [((zone_unit.get((w, z)) in members) if z else bool(well_units.get(w, set()) & members))
            for w, z in rec[["well_id", "zone_id"]].itertuples(index=False)]


def pumping_records(store: Store, unit: str) -> pd.DataFrame:
    """Pumping records of a unit's wells (zone in the unit, or whole-well records of wells open to it).

    Columns well_id, zone_id, start, end (timestamps; NaT while pumping), rate, rate_unit, rate_m3d, x, y.
    """
    cols = ["well_id", "zone_id", "start", "end", "rate", "rate_unit", "rate_m3d", "x", "y"]
    rec = store.read("pumping")
    if rec.empty:
        return pd.DataFrame(columns=cols)
    rec = rec[_in_unit(store, rec, unit)].copy()
    rec["start"] = _instants(rec["start"]).to_numpy()
    rec["end"] = _instants(rec["end"]).to_numpy()
    rec = rec.merge(store.read("wells", ["well_id", "x", "y"]), on="well_id")
    return rec[cols].reset_index(drop=True)


def baseline_pumping(store: Store, unit: str, window: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Pumping behind a head surface: the records active during the head window and the wells they belong to.

    Returns ``(records, wells)``: the records that overlap the window (start at or
    before its end, no end or an end at or after its start), and per well the
    summed rate at the window's end (``rate_m3d``; 0 for a well whose records all
    stopped inside the window) with ``x``, ``y`` and ``stopped_in_window``.
    """
    rec = pumping_records(store, unit)
    start, end = window["start"], window["end"]
    during = (rec["start"] <= end) & (rec["end"].isna() | (rec["end"] >= start))
    rec = rec[during].reset_index(drop=True)
    at_end = rec["end"].isna() | (rec["end"] >= end)
    rec["rate_at_window_end_m3d"] = np.where(at_end, rec["rate_m3d"].astype(float), 0.0)
    wells = (rec.groupby("well_id", sort=True)
             .agg(x=("x", "first"), y=("y", "first"), rate_m3d=("rate_at_window_end_m3d", "sum"))
             .reset_index())
    wells["stopped_in_window"] = wells["rate_m3d"] <= 0
    return rec, wells


def _unit_picks(store: Store, unit: str) -> pd.DataFrame:
    """Per well with a pick of the unit: top and bottom depth, total depth and whether the pick holds the bottom."""
    from .. import pumping

    units = store.read("units")
    members = unit_members(units, unit)
    picks = store.read("picks")
    mine = picks[picks["unit"].isin(members)]
    cols = ["well_id", "x", "y", "ground_elev", "top_depth", "bottom_depth", "total_depth", "full"]
    if mine.empty:
        return pd.DataFrame(columns=cols)
    per = mine.groupby("well_id").agg(top_depth=("top_depth", "min"), bottom_depth=("bottom_depth", "max"))
    rank = dict(zip(units["code"], units["rank"]))
    lowest = max(rank[c] for c in members)
    below = picks[(picks["unit"].map(rank) > lowest) & ~picks["unit"].isin(members)]
    per = per.reset_index().merge(store.read("wells", ["well_id", "x", "y", "ground_elev", "total_depth"]),
                                  on="well_id")
    per["full"] = pumping.full_penetrations(per["bottom_depth"].to_numpy(float),
                                            per["total_depth"].to_numpy(float),
                                            per["well_id"].isin(set(below["well_id"])).to_numpy(),
                                            tolerance=TOTAL_DEPTH_TOLERANCE_M / metres_per_length_unit(store.settings))
    return per[cols]


def unit_thickness_at(store: Store, unit: str, xy) -> tuple[np.ndarray | None, dict, list[str]]:
    """Thickness of a unit (m) at points (store CRS), from the wells that penetrate it fully.

    Only wells whose picks hold the unit's top and bottom count: a pick ending
    at the well's total depth shows where drilling stopped, not the unit's
    bottom, and the well must show that it went on (a pick of a lower unit, or
    a total depth below the pick; :func:`hydroatlas.pumping.full_penetrations`). With three or more such wells
    their thicknesses are interpolated by inverse-distance weighting (power 2,
    16 nearest); with one or two, their mean is used with a warning; with none
    the thickness is unknown (None).

    Returns ``(thickness_m or None, info, warnings)``.
    """
    from ..interp import IDW

    per = _unit_picks(store, unit)
    full = per[per["full"].astype(bool)] if not per.empty else per
    len_m = metres_per_length_unit(store.settings)
    L = store.settings.length_unit
    info = {"rule": "wells whose picks hold the unit's top and bottom (bottom not at the well's total depth, and "
                    "a pick of a lower unit or a total depth below the pick)",
            "n_wells_with_picks": int(len(per)), "n_full_penetrations": int(len(full)),
            "full_penetration_wells": list(full["well_id"]), "length_unit": L}
    warnings = []
    if full.empty:
        info["method"] = None
        return None, info, warnings
    th = (full["bottom_depth"] - full["top_depth"]).to_numpy(float)
    info["mean_full_penetration_thickness"] = float(th.mean())
    if len(per):
        info["mean_thickness_of_all_picks"] = float((per["bottom_depth"] - per["top_depth"]).mean())
    pts = np.atleast_2d(np.asarray(xy, float))
    if len(full) >= 3:
        model = IDW(power=2.0, neighbors=16).fit(full[["x", "y"]].to_numpy(float), th)
        b = model.predict(pts)
        info["method"] = "inverse-distance weighting (power 2, 16 nearest) of full-penetration thicknesses"
    else:
        b = np.full(len(pts), th.mean())
        info["method"] = "mean of the full-penetration thicknesses"
        warnings.append(f"only {len(full)} well(s) penetrate unit {unit} fully ({', '.join(full['well_id'])}); "
                        f"its thickness ({th.mean():.4g} {L}) is their mean, not interpolated; "
                        "check it or give the transmissivity")
    return b * len_m, info, warnings


def unit_levels_at(store: Store, unit: str, xy) -> tuple[np.ndarray, np.ndarray]:
    """Top and bottom elevation of a unit at points (store length unit), interpolated from picks by IDW.

    The top comes from every well with a pick of the unit; the bottom only from
    wells that penetrate it fully (NaN where there is none).
    """
    from ..interp import IDW

    per = _unit_picks(store, unit)
    pts = np.atleast_2d(np.asarray(xy, float))
    top = np.full(len(pts), np.nan)
    bottom = np.full(len(pts), np.nan)
    if per.empty or len(pts) == 0:
        return top, bottom
    xy_w = per[["x", "y"]].to_numpy(float)
    top = IDW(power=2.0, neighbors=16).fit(xy_w, (per["ground_elev"] - per["top_depth"]).to_numpy(float)).predict(pts)
    full = per["full"].to_numpy(bool)
    if full.any():
        bottom = IDW(power=2.0, neighbors=16).fit(
            xy_w[full], (per["ground_elev"] - per["bottom_depth"]).to_numpy(float)[full]).predict(pts)
    return top, bottom


def drawdown_layers(store: Store, unit: str, *, scenarios=None, folder=None) -> list[tuple[str, object]]:
    """The drawdown scenarios of a unit recorded in the store, for the map: (label, product), newest first.

    ``scenarios``: the scenarios to show, by scenario name (``drawdown --name``) or product name; None shows
    every scenario of the unit recorded in the store (with ``folder``, those whose files lie there). A name
    that matches no scenario of the unit is a ParameterError.
    """
    from .. import products

    recorded = products.list_products(store, kind="drawdown", unit=unit)
    if folder is not None:
        root = Path(folder).resolve()
        recorded = [p for p in recorded if all(Path(f).resolve().is_relative_to(root) for f in p.files)]
    if scenarios is not None:
        wanted = [scenarios] if isinstance(scenarios, str) else list(scenarios)
        chosen = []
        for name in wanted:
            hits = [p for p in recorded if p.parameters.get("scenario") == name or p.name == name]
            if not hits:
                known = [p.parameters.get("scenario") or p.name for p in recorded]
                raise ParameterError(f"no drawdown scenario {name!r} of unit {unit} is recorded in the store "
                                     f"{store.location}; recorded: {', '.join(known) or 'none'}", param="scenarios")
            chosen.append(hits[-1])
        recorded = chosen
    out = []
    for prod in sorted(recorded, key=lambda p: p.created_utc, reverse=True):
        what = "total drawdown" if prod.parameters.get("mode") == "from unpumped" else "drawdown change"
        name = prod.parameters.get("scenario")
        out.append((f"Scenario {name}: {what}" if name else f"Scenario {prod.name} (unnamed): {what}", prod))
    return out


def _store_rate_unit(store: Store) -> str:
    """The store's volumetric rate unit: cubic length units per day (m3/d or ft3/d)."""
    return f"{store.settings.length_unit}3/d"


def _in_store_rate(store: Store, q_m3d):
    from ..quantities import RATE_UNITS

    return np.asarray(q_m3d, float) / RATE_UNITS[_store_rate_unit(store)]


def active_pumping(store: Store, unit: str) -> pd.DataFrame:
    """Pumping wells of a unit with their current rate (m3/d): records without an end, latest start per zone."""
    rec = store.read("pumping")
    if rec.empty:
        return pd.DataFrame(columns=["well_id", "rate_m3d"])
    rec = rec[rec["end"].isna()].sort_values("start").groupby(["well_id", "zone_id"]).tail(1)
    rec = rec[_in_unit(store, rec, unit)]
    return rec.groupby("well_id", as_index=False)["rate_m3d"].sum()


def _drawdown_in_store_units(length_unit: str, side: dict) -> dict:
    """T and the wells' rates of a drawdown sidecar in the store's units (ft2/d and ft3/d in a feet store)."""
    from ..quantities import convert, store_units

    su = store_units(length_unit)

    def rate(v):
        return None if v is None else convert(float(v), "m3/d", su.rate, "rate")

    t = side.get("transmissivity_m2_per_d")
    return {"transmissivity": None if t is None else convert(float(t), "m2/d", su.transmissivity, "transmissivity"),
            "transmissivity_unit": su.transmissivity, "rate_unit": su.rate,
            "wells": [{"well_id": w.get("well_id"), "baseline_rate": rate(w.get("baseline_rate_m3d")),
                       "scenario_rate": rate(w.get("scenario_rate_m3d")), "change": rate(w.get("change_m3d"))}
                      for w in side.get("wells", [])]}


def drawdown_scenario(store: Store, unit: str, *, days: float, storativity: float, rates: dict | None = None,
                      new_wells: list | None = None, rate_unit: str = "m3/d", transmissivity: float | None = None,
                      surfaces=None, out=".", threshold: float = 0.5, well_radius_m: float = 0.1,
                      name: str | None = None, from_unpumped: bool = False,
                      policy: SelectionPolicy | None = None, surface: str | None = None,
                      allow_stale: bool = False) -> dict:
    """Theis drawdown of a pumping scenario over a unit's head surface, against the baseline in the heads.

    The head surface comes from the store's product registry: the one named ``surface``, else the latest head
    surface of the unit (with ``surfaces``, a folder: the latest whose files lie there); one made from store
    rows that changed since is refused unless ``allow_stale``. The scenario is recorded in the registry (kind
    ``drawdown``, its name ``<unit>_drawdown_<name>``, or ``<unit>_drawdown`` without a name) and its
    sidecar names the head surface product it used (``baseline.head_surface_product``).

    The K tests behind the default T follow the selection policy (None: the default); the sidecar's
    ``selection`` says which, ``head_surface_selection`` repeats that of the head surface used.

    Measured heads already hold the cones of the wells that pumped during the
    head window of the surface (the baseline: every pumping record of the unit
    active during that window, at its rate at the window's end). By default the
    result is the change the scenario makes against that baseline: proposed
    wells and changed rates add drawdown, stopped wells (rate 0) give recovery
    (negative drawdown), unchanged baseline wells give nothing; the head after
    is the surface minus that change. With ``from_unpumped`` the result is the
    total drawdown of all pumping (baseline wells at their scenario rates plus
    proposed wells) on the surface adjusted to unpumped conditions: the baseline
    records' Theis drawdown at the end of the head window (time since each
    record's start, less the recovery since its stop) is added back first.

    Parameters
    ----------
    days : float
        Pumping duration of the scenario (d), > 0.
    storativity : float
        Storage coefficient S (> 0).
    rates : dict, optional
        Well id -> scenario rate in ``rate_unit`` (0 stops the well); replaces its baseline rate.
    new_wells : list of (label, x, y, rate), optional
        Proposed wells (store CRS, rate in ``rate_unit``).
    transmissivity : float, optional
        T in m2/d for every well; default the unit's geometric-mean K times its thickness at each well,
        from the wells that penetrate it fully (:func:`unit_thickness_at`).
    threshold : float
        Springs and monitoring zones with more drawdown than this (store length unit) are listed, and
        so is any whose head the scenario takes below the unit's top or bottom.
    name : str, optional
        Scenario name: outputs are OUT/<unit>_drawdown_<name>.tif, OUT/<unit>_head_<name>.tif,
        OUT/<unit>_drawdown_<name>_impacts.csv and OUT/<unit>_drawdown_<name>.json (``paths --scenario``
        reads them). Without a name: OUT/<unit>_drawdown.tif, OUT/<unit>_head_drawdown.tif,
        OUT/<unit>_drawdown_impacts.csv and OUT/<unit>_drawdown.json.
    from_unpumped : bool
        Total drawdown of all pumping on the head surface adjusted to unpumped conditions (see above).
    """
    from .. import flow, pumping
    from ..export.rasters import write_geotiff, write_sidecar
    from ..quantities import RATE_UNITS, normalize_unit

    if not (isinstance(days, (int, float)) and days > 0):
        raise ParameterError(f"days= must be > 0; got {days}", param="days")
    if not (isinstance(storativity, (int, float)) and storativity > 0):
        raise ParameterError(f"storativity S must be > 0; got {storativity}")
    if transmissivity is not None and not transmissivity > 0:
        raise ParameterError(f"transmissivity T must be > 0; got {transmissivity}")
    stem = None if name is None else scenario_stem(name)
    from .. import products

    # the registry: the store must take the record, and the digests come before any row is read
    digests = products.input_digests(store, "drawdown")
    products.ensure_writable(store)
    store = Study.of(store, policy)  # the tables are read once for the whole job
    crs_to_m = metres_per_crs_unit(store.settings)
    len_m = metres_per_length_unit(store.settings)
    L = store.settings.length_unit
    q_factor = RATE_UNITS[normalize_unit(rate_unit, "rate")]
    out = Path(out)
    head_prod, stale = products.use_product(store, kind="surface", unit=unit, quantity="head", name=surface,
                                            folder=surfaces, allow_stale=allow_stale)
    grid, head = read_grid(head_prod.file("head.tif"))
    window = head_window(store, unit, head_prod)
    records, base = baseline_pumping(store, unit, window)
    wells = store.read("wells", ["well_id", "x", "y"]).set_index("well_id")
    base_q = dict(zip(base["well_id"], base["rate_m3d"].astype(float)))
    scen_q = dict(base_q)
    for wid, q in (rates or {}).items():
        if wid not in wells.index:
            raise ParameterError(f"rates= names well {wid!r}, which is not in the store (use new_wells= "
                                 "for a proposed well)", param=("rates", "new_wells"))
        scen_q[wid] = float(q) * q_factor
    rows = []
    for wid, q in scen_q.items():
        b = base_q.get(wid, 0.0)
        status = ("unchanged" if q == b else "stopped" if q == 0 else "started" if wid not in base_q or b == 0
                  else "changed")
        rows.append((wid, float(wells.loc[wid, "x"]), float(wells.loc[wid, "y"]), b, q, status, "stored"))
    for label, x, y, q in (new_wells or []):
        if label in wells.index or label in scen_q:
            raise ParameterError(f"new_wells= {label!r} has the id of a stored well; give its rate with "
                                 f"rates={label}=Q, or another name", param=("new_wells", "rates"))
        rows.append((label, float(x), float(y), 0.0, float(q) * q_factor, "proposed", "proposed"))
    if not rows:
        raise ParameterError(f"no pumping well of unit {unit} in the baseline (no pumping record active in the "
                             f"head window {window['text']}) and no rates= or new_wells=: nothing to compute",
                             param=("rates", "new_wells"))
    pw = pd.DataFrame(rows, columns=["well_id", "x", "y", "baseline_rate_m3d", "scenario_rate_m3d", "status",
                                     "origin"])
    pw["change_m3d"] = pw["scenario_rate_m3d"] - pw["baseline_rate_m3d"]
    xmin, ymin, xmax, ymax = grid.bounds
    outside = (~pw["x"].between(xmin, xmax) | ~pw["y"].between(ymin, ymax)) & (pw["status"] != "unchanged")
    if outside.any():
        raise ParameterError(f"pumping well(s) {', '.join(pw.loc[outside, 'well_id'])} lie outside the head "
                             f"surface grid of unit {unit}")
    warnings = []
    later = pumping_records(store, unit)
    later = sorted(set(later.loc[later["start"] > window["end"], "well_id"]) - set(scen_q))
    if later:
        warnings.append(f"well(s) {', '.join(later)} started pumping after the head window {window['text']}; "
                        "they are not in the baseline and not in this scenario unless given a scenario rate")
    wxy = pw[["x", "y"]].to_numpy(float)
    if transmissivity is None:
        rows, k_selection = unit_stats_selected(store, k_unit="m/d", policy=policy)
        row = next(r for r in rows if r["unit"] == unit)
        if row["k_geomean"] is None:
            raise InsufficientDataError(f"unit {unit} has no K tests; give transmissivity=",
                                        param="transmissivity")
        b_m, b_info, b_warn = unit_thickness_at(store, unit, wxy)
        if b_m is None:
            raise InsufficientDataError(
                f"no well penetrates unit {unit} fully (picks of its top and bottom, the bottom not at the "
                f"well's total depth, with a lower unit picked or the well drilled on below it), so its "
                "thickness for T = K b is "
                "unknown; give transmissivity=", param="transmissivity")
        warnings += b_warn
        t_well = row["k_geomean"] * b_m
        t_info = {"source": "unit geometric-mean K x thickness at each well from full penetrations",
                  "k_m_per_d": row["k_geomean"], "thickness": b_info}
    else:
        t_well = np.full(len(pw), float(transmissivity))
        t_info = {"source": "given"}
    pw["thickness_m"] = b_m if transmissivity is None else np.nan
    pw["transmissivity_m2d"] = t_well
    t_of = dict(zip(pw["well_id"], t_well))
    xc, yc = grid.x_centers() * crs_to_m, grid.y_centers() * crs_to_m
    valid = np.isfinite(head)
    # the adjustment to unpumped conditions: every baseline record's Theis drawdown at the window's end
    adj_terms = None
    if from_unpumped and len(records):
        day = pd.Timedelta(days=1)
        since_start = ((window["end"] - records["start"]) / day).to_numpy(float)
        since_stop = ((window["end"] - records["end"]) / day).to_numpy(float)
        idx, q_terms, t_terms = pumping.history_terms(records["rate_m3d"].to_numpy(float), since_start, since_stop)
        if len(idx):
            rec_xy = records[["x", "y"]].to_numpy(float)[idx] * crs_to_m
            rec_t = np.array([t_of[w] for w in records["well_id"].to_numpy()[idx]])
            adj_terms = (rec_xy, q_terms, t_terms, rec_t)
    scenario_q = (pw["scenario_rate_m3d"] if from_unpumped else pw["change_m3d"]).to_numpy(float)

    def superpose(**where):
        """Scenario drawdown and unpumped adjustment (m) on the grid (grid=) or at points (points=, m)."""
        return pumping.scenario_drawdown(wxy * crs_to_m, scenario_q, float(days), T=t_well, S=float(storativity),
                                         r_min=well_radius_m, history=adj_terms, **where)

    s_m, adj_m = superpose(grid=(xc, yc))
    s_len = np.where(valid, s_m / len_m, np.nan)
    start_head = np.where(valid, head + adj_m / len_m, np.nan)  # the measured surface, or unpumped
    after = start_head - s_len
    # the unit's top and bottom on the grid: where the scenario takes the head below them
    top_g, bot_g = np.full(head.shape, np.nan), np.full(head.shape, np.nan)
    rr, cc = np.nonzero(valid)
    if len(rr):
        t_v, b_v = unit_levels_at(store, unit, np.column_stack([grid.x_centers()[cc], grid.y_centers()[rr]]))
        top_g[rr, cc], bot_g[rr, cc] = t_v, b_v
    crossed = pumping.level_crossings(start_head, after, top_g, bot_g)
    cells = {"below_unit_top": int(crossed["below_top"].sum()),
             "taken_below_unit_top": int(crossed["taken_below_top"].sum()),
             "below_unit_bottom": int(crossed["below_bottom"].sum()), "valid": int(valid.sum())}
    out = ensure_folder(out)
    tail = "drawdown" if stem is None else f"drawdown_{stem}"
    what = ("total drawdown of all pumping, from unpumped heads" if from_unpumped
            else "drawdown change against the baseline in the measured heads (negative: recovery)")
    dd_tif = write_geotiff(unit_path(out, unit, f"{tail}.tif"), grid, [s_len], crs=store.settings.crs,
                           descriptions=[f"{what} ({L})"], units=L,
                           tags={"caution": caution_text("drawdown"), "quantity": "drawdown", "unit": unit})
    hd_tif = write_geotiff(unit_path(out, unit, "head_drawdown.tif" if stem is None else f"head_{stem}.tif"), grid,
                           [after], crs=store.settings.crs,
                           descriptions=[f"head after {days:g} d of the scenario ({L})"], units=L,
                           tags={"caution": caution_text("drawdown"), "quantity": "head after drawdown", "unit": unit})
    # springs and monitoring zones of the unit: exact drawdown at their locations
    members = unit_members(store.read("units"), unit)
    springs = store.read("springs", ["spring_id", "x", "y", "unit"])
    springs = springs[springs["unit"].isna() | springs["unit"].isin(members)]
    asg = zone_assignment(store)
    zones = asg[asg["unit"].isin(members) & ~asg["well_id"].isin(set(pw["well_id"]))]
    points = pd.concat([
        pd.DataFrame({"kind": "spring", "id": springs["spring_id"], "zone_id": None, "x": springs["x"],
                      "y": springs["y"]}),
        pd.DataFrame({"kind": "monitoring zone", "id": zones["well_id"], "zone_id": zones["zone_id"],
                      "x": zones["x"], "y": zones["y"]})], ignore_index=True)
    pxy = points[["x", "y"]].to_numpy(float).reshape(-1, 2)
    s_pt, adj_pt = superpose(points=pxy * crs_to_m) if len(points) else (np.zeros(0), np.zeros(0))
    points["drawdown"] = s_pt / len_m
    points["head_before"] = flow.values_at(grid.x0, grid.y0, grid.cell, head, pxy) + adj_pt / len_m
    points["head_after"] = points["head_before"] - points["drawdown"]
    top_pt, bot_pt = unit_levels_at(store, unit, pxy)
    points["unit_top_elev"], points["unit_bottom_elev"] = top_pt, bot_pt
    after_pt = points["head_after"].to_numpy(float)
    crossed = pumping.level_crossings(points["head_before"].to_numpy(float), after_pt, top_pt, bot_pt)
    points["below_unit_top"] = [bool(c) if np.isfinite(t) else None for c, t in zip(crossed["below_top"], top_pt)]
    points["below_unit_bottom"] = [bool(c) if np.isfinite(b) else None
                                   for c, b in zip(crossed["below_bottom"], bot_pt)]
    taken = crossed["taken_below_top"] | crossed["below_bottom"]
    impacts = points[(points["drawdown"] > threshold) | taken].sort_values("drawdown", ascending=False)
    impacts = impacts.assign(length_unit=L)
    impacts_csv = write_csv(unit_path(out, unit, "drawdown_impacts.csv" if stem is None
                                      else f"drawdown_{stem}_impacts.csv"), impacts)
    # springs with a discharge-head relation ('springflow'): the discharge change the drawdown at the index implies
    from .springflow import scenario_spring_effects

    spring_fx = scenario_spring_effects(store, springs["spring_id"], [out, surfaces],
                                        lambda xy: superpose(points=np.asarray(xy, float) * crs_to_m)[0] / len_m)
    if cells["taken_below_unit_top"]:
        warnings.append(f"the scenario takes the head below the top of unit {unit} in {cells['taken_below_unit_top']} "
                        "cells (confined to unconfined: Theis with a confined S then understates drawdown)")
    if cells["below_unit_bottom"]:
        warnings.append(f"the head after the scenario is below the bottom of unit {unit} in "
                        f"{cells['below_unit_bottom']} cells (the unit would be dewatered there: the computed "
                        "drawdown is not attainable)")
    rate_unit_store = _store_rate_unit(store)
    base_rows = []
    for w in base.itertuples(index=False):
        mine = records[records["well_id"] == w.well_id]
        base_rows.append({
            "well_id": w.well_id, "x": float(w.x), "y": float(w.y),
            "rate": float(_in_store_rate(store, w.rate_m3d)), "rate_unit": rate_unit_store,
            "stopped_in_window": bool(w.stopped_in_window),
            "records": [{"zone_id": r.zone_id, "start": r.start.isoformat(),
                         "end": None if pd.isna(r.end) else r.end.isoformat(),
                         "rate": float(r.rate), "rate_unit": r.rate_unit} for r in mine.itertuples(index=False)]})
    changes = [{"well_id": r.well_id, "status": r.status, "x": r.x, "y": r.y,
                "baseline_rate": float(_in_store_rate(store, r.baseline_rate_m3d)),
                "scenario_rate": float(_in_store_rate(store, r.scenario_rate_m3d)),
                "change": float(_in_store_rate(store, r.change_m3d)), "rate_unit": rate_unit_store}
               for r in pw.itertuples(index=False) if r.status != "unchanged"]
    mode = "from unpumped" if from_unpumped else "change from baseline"
    side = {"unit": unit, "scenario": name, "mode": mode, "days": days, "storativity": storativity,
            "baseline": {
                "head_window": window_record(window),
                "head_surface": str(head_prod.file("head.tif")), "head_surface_product": head_prod.name,
                "wells": base_rows,
                "meaning": "measured heads already hold the cones of these wells (pumping records active during "
                           "the head window; rate at the window's end)"},
            "changes": changes,
            "result": (("total drawdown of all pumping (baseline wells at their scenario rates plus proposed "
                        "wells) for the duration, on the head surface adjusted to unpumped conditions by adding "
                        "back the baseline records' Theis drawdown at the end of the head window (time since each "
                        "record's start, less the recovery since its stop)") if from_unpumped else
                       ("change against the baseline: proposed wells and changed rates add drawdown, stopped wells "
                        "give recovery (negative drawdown), unchanged baseline wells give none")),
            "transmissivity_m2_per_d": float(np.median(t_well)), "transmissivity": t_info,
            "wells": [{"well_id": r.well_id, "status": r.status, "origin": r.origin, "x": r.x, "y": r.y,
                       "baseline_rate_m3d": r.baseline_rate_m3d, "scenario_rate_m3d": r.scenario_rate_m3d,
                       "change_m3d": r.change_m3d, "transmissivity_m2_per_d": r.transmissivity_m2d,
                       "thickness_m": None if not np.isfinite(r.thickness_m) else r.thickness_m}
                      for r in pw.itertuples(index=False)],
            "rate_unit_of_wells": "m3/d", "threshold": threshold, "length_unit": L,
            "cells": cells, "warnings": warnings,
            "method": "Theis (1935) superposition, no image wells (no boundaries)",
            "max_drawdown": float(np.nanmax(s_len)) if np.isfinite(s_len).any() else None,
            "min_drawdown": float(np.nanmin(s_len)) if np.isfinite(s_len).any() else None,
            "caution": caution_text("drawdown"),
            "files": {"drawdown": str(dd_tif), "head": str(hd_tif), "impacts": str(impacts_csv)}}
    # the K tests behind T (none when T was given); the head surface's own selection is in its sidecar
    side["selection"] = k_selection if transmissivity is None else selection_record(policy, [])
    side["head_surface_selection"] = sidecar_selection(head_prod.file("head.json"))
    side["input_products"] = [head_prod.name]
    side["stale_inputs_used"] = stale
    side["in_store_units"] = _drawdown_in_store_units(L, side)
    if from_unpumped:
        side["adjustment_to_unpumped"] = {
            "max": float(np.nanmax(np.where(valid, adj_m / len_m, np.nan))) if valid.any() else None,
            "length_unit": L, "evaluated_at": window["end"].isoformat()}
    side["spring_effects"] = spring_fx.to_dict(orient="records")
    if len(spring_fx):
        side["files"]["spring_effects"] = str(write_csv(unit_path(out, unit, f"{tail}_spring_effects.csv"),
                                                        spring_fx))
    side["product"] = products.product_name(store, f"{unit}_{tail}", dd_tif)
    side["files"]["sidecar"] = str(write_sidecar(unit_path(out, unit, f"{tail}.json"), side))
    ru = normalize_unit(rate_unit, "rate")  # each rate with its unit in the command
    rate_args = [("--rate", f"{w}={q:.10g}{ru}") for w, q in (rates or {}).items()]
    well_args = [("--new-well", f"{lbl},{x:.10g},{y:.10g},{q:.10g}{ru}") for lbl, x, y, q in (new_wells or [])]
    command = products.command_line(
        "drawdown", store, ("--unit", unit), ("--days", days), ("-S", storativity), *rate_args, *well_args,
        ("-T", None if transmissivity is None else f"{transmissivity:.10g}m2/d"), ("--threshold", threshold),
        ("--name", name), ("--from-unpumped", bool(from_unpumped)), ("--surface", surface),
        *products.policy_args(policy), ("--out", str(out)))
    products.record_product(store, kind="drawdown", name=side["product"], unit=unit, quantity="drawdown",
                            value_unit=L,
                            files=[side["files"][k] for k in ("drawdown", "head", "impacts", "sidecar")],
                            parameters={"scenario": name, "mode": mode, "days": days, "storativity": storativity,
                                        "transmissivity_m2_per_d": side["transmissivity_m2_per_d"],
                                        "changes": changes, "threshold": threshold},
                            head_window=side["baseline"]["head_window"], selection=side["selection"],
                            inputs=[head_prod.name], command=command, digests=digests)
    side["impacts"] = impacts
    return side
