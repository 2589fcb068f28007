"""Pathways from recharge areas to springs, contributing areas and pumping scenarios (SPEC 2.8-2.9)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InsufficientDataError, ParameterError
from ..export.names import ensure_folder, unit_path, write_csv
from ..store import Store
from .store_jobs import CAUTION, _crs_to_m, _length_to_m, _unit_members, unit_stats, zone_assignment
from .surfaces import read_surface


# -- pathways (SPEC 2.8) -----------------------------------------------------------
KARST_WARNING = ("Darcy travel times on a smooth head surface are upper bounds in karst: conduits can carry water "
                 "orders of magnitude faster, and particle paths do not see conduits, faults or barriers.")


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


def _seed_points(polygon, spacing: float) -> np.ndarray:
    import shapely

    xmin, ymin, xmax, ymax = polygon.bounds
    xs = np.arange(xmin + spacing / 2, xmax, spacing)
    ys = np.arange(ymin + spacing / 2, ymax, spacing)
    gx, gy = np.meshgrid(xs, ys)
    gx, gy = gx.ravel(), gy.ravel()
    inside = shapely.contains_xy(polygon, gx, gy)
    pts = np.column_stack([gx[inside], gy[inside]])
    if len(pts) == 0:
        c = polygon.representative_point()
        pts = np.array([[c.x, c.y]])
    return pts


def trace_paths(store: Store, unit: str, *, porosity: float, out=".", surfaces=None, backward: bool = False,
                k_source: str = "mean", seed_spacing: float | None = None, capture_radius: float | None = None,
                max_years: float = 1000.0, seeds_per_spring: int = 72) -> dict:
    """Track particles on a unit's head surface: forward from recharge areas, or backward from springs.

    Writes the ``pathlines`` layer (and ``contributing_areas`` when backward) of OUT/layers.gpkg,
    OUT/<unit>_pathways.csv and a JSON sidecar. Returns a summary dict.
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
    crs_to_m = _crs_to_m(store)
    units = store.read("units")
    _unit_members(units, unit)
    out = Path(out)
    folder = Path(surfaces) if surfaces is not None else out
    grid, head = read_surface(folder, unit, "head", store.location)
    if k_source == "surface":
        kgrid, logk = read_surface(folder, unit, "logk", store.location)
        if kgrid.shape != grid.shape or abs(kgrid.x0 - grid.x0) > 1e-6 or abs(kgrid.cell - grid.cell) > 1e-9:
            raise ParameterError("the head and log-K surfaces of the unit are on different grids; "
                                 "make both with the same --cell")
        k_md = 10.0 ** logk
        k_info = {"source": "log-K surface", "file": str(unit_path(folder, unit, "logk.tif"))}
    else:
        row = next(r for r in unit_stats(store, k_unit="m/d") if r["unit"] == unit)
        if row["k_geomean"] is None:
            raise InsufficientDataError(f"unit {unit} has no K tests; its geometric-mean K is unknown")
        k_md = row["k_geomean"]
        k_info = {"source": "unit geometric mean", "k_m_per_d": k_md}
    field = flow.VelocityGrid.from_head(grid.x0, grid.y0, grid.cell, head, k_md, porosity,
                                        vertical_per_horizontal=_length_to_m(store) / crs_to_m,
                                        k_per_day_to_crs=1.0 / crs_to_m)
    springs = store.read("springs")
    if springs.empty:
        raise ParameterError("the store has no spring; import springs with 'hydroatlas import STORE springs FILE'")
    pumped = set(store.read("pumping", ["well_id"])["well_id"])
    wells = store.read("wells", ["well_id", "x", "y"])
    pw = wells[wells["well_id"].isin(pumped)]
    sink_xy = np.vstack([springs[["x", "y"]].to_numpy(float), pw[["x", "y"]].to_numpy(float)])
    sink_ids = list(springs["spring_id"]) + list(pw["well_id"])
    sink_kind = ["spring"] * len(springs) + ["pumping well"] * len(pw)
    radius = capture_radius if capture_radius is not None else 2.0 * grid.cell
    if not radius > 0:
        raise ParameterError(f"capture radius must be > 0; got {radius}")
    t_max = max_years * 365.25
    recharge = _recharge_areas(store, unit) if not backward else None
    if backward:
        ang = np.linspace(0, 2 * np.pi, seeds_per_spring, endpoint=False)
        seeds, origin = [], []
        for sid, x, y in springs[["spring_id", "x", "y"]].itertuples(index=False):
            seeds.append(np.column_stack([x + 1.01 * radius * np.cos(ang), y + 1.01 * radius * np.sin(ang)]))
            origin += [sid] * len(ang)
        seeds = np.vstack(seeds)
        res = flow.track(seeds, field, backward=True, t_max=t_max, max_step=0.5 * grid.cell)
    else:
        seeds, origin = [], []
        for aid, geom in zip(recharge["area_id"], recharge.geometry):
            spacing = seed_spacing or max(grid.cell, float(np.sqrt(geom.area / 200.0)))
            pts = _seed_points(geom, spacing)
            seeds.append(pts)
            origin += [aid] * len(pts)
        seeds = np.vstack(seeds)
        res = flow.track(seeds, field, t_max=t_max, sinks=sink_xy, sink_radius=radius, max_step=0.5 * grid.cell)
    end_id = [sink_ids[i] if i >= 0 else None for i in res.end_sink]
    end_label = [f"{sink_kind[i]} {sink_ids[i]}" if i >= 0 else k for i, k in zip(res.end_sink, res.end_kind)]
    lines = [shapely.LineString(p[:, :2]) if len(p) >= 2 else shapely.LineString([p[0, :2], p[0, :2]])
             for p in res.paths]
    direction = "backward" if backward else "forward"
    gdf = gpd.GeoDataFrame({"unit": unit, "particle": np.arange(len(lines)), "direction": direction,
                            "origin": origin, "end_kind": res.end_kind, "end_id": end_id,
                            "travel_days": res.time, "travel_years": res.time / 365.25},
                           geometry=lines, crs=store.settings.crs)
    gpkg = out / "layers.gpkg"
    gdf = _keep_other_rows(gpkg, "pathlines", gdf, (gdf["unit"].iloc[0], direction), ("unit", "direction"))
    write_layer(gpkg, "pathlines", gdf, description=KARST_WARNING)
    files = {"pathlines": f"{gpkg}:pathlines"}
    if backward:
        ca, table = _contributing_areas(store, unit, field, grid, head, springs, sink_xy, radius, t_max)
        ca = _keep_other_rows(gpkg, "contributing_areas", ca, (unit,), ("unit",))
        write_layer(gpkg, "contributing_areas", ca, description=KARST_WARNING)
        files["contributing_areas"] = f"{gpkg}:contributing_areas"
    else:
        table = _forward_table(origin, end_label, res.time)
    files["table"] = str(write_csv(unit_path(out, unit, "pathways.csv"), table))
    side = {"unit": unit, "direction": direction, "porosity": porosity, "k": k_info,
            "capture_radius": radius, "max_years": max_years, "n_particles": int(len(seeds)),
            "head_surface": str(unit_path(folder, unit, "head.tif")), "integrator": "Dormand-Prince 5(4), adaptive",
            "caution": CAUTION, "karst_warning": KARST_WARNING, "files": files}
    files["sidecar"] = str(write_sidecar(unit_path(out, unit, "pathways.json"), side))
    side["table"] = table
    return side


def _keep_other_rows(gpkg: Path, layer: str, new, key: tuple, columns: tuple):
    """``new`` plus the rows of an existing layer whose ``columns`` differ from ``key`` (other units, directions)."""
    import geopandas as gpd
    import pyogrio

    if not gpkg.exists() or layer not in {n for n, _ in pyogrio.list_layers(gpkg)}:
        return new
    old = pyogrio.read_dataframe(gpkg, layer=layer)
    if not set(columns) <= set(old.columns):
        return new
    same = np.ones(len(old), bool)
    for col, value in zip(columns, key):
        same &= (old[col] == value).to_numpy()
    old = old[~same]
    if old.empty:
        return new
    return gpd.GeoDataFrame(pd.concat([old.to_crs(new.crs), new], ignore_index=True), crs=new.crs)


def _forward_table(origin, end_label, time) -> pd.DataFrame:
    frame = pd.DataFrame({"recharge_area": origin, "destination": end_label, "days": time})
    rows = []
    for area, g in frame.groupby("recharge_area", sort=True):
        for dest, gd in g.groupby("destination", sort=True):
            d = gd["days"].to_numpy()
            rows.append({"recharge_area": area, "destination": dest, "particles": len(d),
                         "share": len(d) / len(g), "median_days": float(np.median(d)),
                         "p10_days": float(np.percentile(d, 10)), "p90_days": float(np.percentile(d, 90)),
                         "median_years": float(np.median(d)) / 365.25})
    return pd.DataFrame(rows)


def _contributing_areas(store: Store, unit: str, field, grid, head, springs, sink_xy, radius, t_max,
                        max_particles: int = 20_000):
    """Contributing area of each spring: the cells whose forward path ends at it.

    A lattice of particles over every cell of the head surface (thinned to about
    ``max_particles``) is tracked forward; the cells whose particle reaches a
    spring are polygonised into that spring's contributing area. Backward paths
    from a ring around a spring sample a converging catchment poorly (most of
    the ring maps to a few flow tubes), so the delineation is done this way.
    Returns the polygon layer and, per spring and recharge area, the share of the
    area's cells that drain to the spring with their travel times.
    """
    import geopandas as gpd
    import shapely
    from rasterio.features import shapes
    from rasterio.transform import from_origin

    from .. import flow

    valid = np.isfinite(head)
    stride = max(1, int(np.ceil(np.sqrt(valid.sum() / max_particles))))
    rows, cols = np.nonzero(valid[::stride, ::stride])
    xs = grid.x_centers()[::stride][cols]
    ys = grid.y_centers()[::stride][rows]
    res = flow.track(np.column_stack([xs, ys]), field, t_max=t_max, sinks=sink_xy, sink_radius=radius,
                     max_step=0.5 * grid.cell)
    shape = valid[::stride, ::stride].shape
    transform = from_origin(grid.x0, grid.y0, grid.cell * stride, grid.cell * stride)
    rech = _unit_recharge(store, unit)
    polys, rows_out = [], []
    for j, sid in enumerate(springs["spring_id"]):
        reach = res.end_sink == j
        raster = np.zeros(shape, dtype=np.uint8)
        raster[rows[reach], cols[reach]] = 1
        parts = [shapely.geometry.shape(g) for g, v in shapes(raster, mask=raster == 1, transform=transform) if v == 1]
        geom = shapely.union_all(parts) if parts else shapely.Polygon()
        t = res.time[reach]
        polys.append({"spring_id": sid, "unit": unit, "cells": int(reach.sum()), "area": float(geom.area),
                      "median_days": float(np.median(t)) if len(t) else None, "geometry": geom})
        for aid, poly in zip(rech["area_id"], rech.geometry):
            inside = shapely.contains_xy(poly, xs, ys)
            hit = inside & reach
            tt = res.time[hit]
            rows_out.append({"spring_id": sid, "recharge_area": aid, "area_cells": int(inside.sum()),
                             "share": float(hit.sum() / inside.sum()) if inside.any() else None,
                             "median_days": float(np.median(tt)) if len(tt) else None,
                             "p10_days": float(np.percentile(tt, 10)) if len(tt) else None,
                             "p90_days": float(np.percentile(tt, 90)) if len(tt) else None})
    ca = gpd.GeoDataFrame(polys, geometry="geometry", crs=store.settings.crs)
    return ca, pd.DataFrame(rows_out)


# -- pumping scenarios (SPEC 2.9) --------------------------------------------------
def _unit_thickness_m(store: Store, unit: str) -> float:
    units = store.read("units")
    members = _unit_members(units, unit)
    picks = store.read("picks")
    picks = picks[picks["unit"].isin(members)]
    if picks.empty:
        raise InsufficientDataError(f"unit {unit} has no picks; its thickness (for T = K b) is unknown; "
                                    "give --transmissivity")
    per_well = (picks["bottom_depth"] - picks["top_depth"]).groupby(picks["well_id"]).sum()
    return float(per_well.mean()) * _length_to_m(store)


def active_pumping(store: Store, unit: str) -> pd.DataFrame:
    """Pumping wells of a unit with their current rate (m3/d): records without an end, latest start per zone."""
    rec = store.read("pumping")
    if rec.empty:
        return pd.DataFrame(columns=["well_id", "rate_m3d"])
    rec = rec[rec["end"].isna()].sort_values("start").groupby(["well_id", "zone_id"]).tail(1)
    asg = zone_assignment(store)
    members = _unit_members(store.read("units"), unit)
    zone_unit = {(w, z): u for w, z, u in asg[["well_id", "zone_id", "unit"]].itertuples(index=False)}
    well_units = asg.groupby("well_id")["unit"].agg(set).to_dict()
    keep = [((zone_unit.get((w, z)) in members) if z else bool(well_units.get(w, set()) & members))
            for w, z in rec[["well_id", "zone_id"]].itertuples(index=False)]
    rec = rec[keep]
    return rec.groupby("well_id", as_index=False)["rate_m3d"].sum()


def drawdown_scenario(store: Store, unit: str, *, days: float, storativity: float, rates: dict | None = None,
                      new_wells: list | None = None, rate_unit: str = "m3/d", transmissivity: float | None = None,
                      surfaces=None, out=".", threshold: float = 0.5, well_radius_m: float = 0.1) -> dict:
    """Superposed Theis drawdown of the unit's pumping wells over its head surface.

    Parameters
    ----------
    days : float
        Pumping duration (d), > 0.
    storativity : float
        Storage coefficient S (> 0).
    rates : dict, optional
        Well id -> rate in ``rate_unit``; replaces (or adds) the stored current rate of that well.
    new_wells : list of (label, x, y, rate), optional
        Proposed wells (store CRS, rate in ``rate_unit``).
    transmissivity : float, optional
        T in m2/d; default the unit's geometric-mean K times its mean picked thickness.
    threshold : float
        Springs and monitoring zones with more drawdown than this (store length unit) are listed.

    Writes OUT/<unit>_drawdown.tif, OUT/<unit>_head_drawdown.tif, OUT/<unit>_drawdown_impacts.csv
    and OUT/<unit>_drawdown.json.
    """
    from .. import pumping
    from ..export.rasters import write_geotiff, write_sidecar
    from ..quantities import RATE_UNITS, normalize_unit

    if not (isinstance(days, (int, float)) and days > 0):
        raise ParameterError(f"--days must be > 0; got {days}")
    if not (isinstance(storativity, (int, float)) and storativity > 0):
        raise ParameterError(f"storativity S must be > 0; got {storativity}")
    if transmissivity is not None and not transmissivity > 0:
        raise ParameterError(f"transmissivity T must be > 0; got {transmissivity}")
    crs_to_m = _crs_to_m(store)
    len_m = _length_to_m(store)
    q_factor = RATE_UNITS[normalize_unit(rate_unit, "rate")]
    out = Path(out)
    folder = Path(surfaces) if surfaces is not None else out
    grid, head = read_surface(folder, unit, "head", store.location)
    wells = store.read("wells", ["well_id", "x", "y"]).set_index("well_id")
    current = active_pumping(store, unit).set_index("well_id")["rate_m3d"].to_dict()
    for wid, q in (rates or {}).items():
        if wid not in wells.index:
            raise ParameterError(f"--rate names well {wid!r}, which is not in the store (use --new-well X,Y,Q "
                                 "for a proposed well)")
        current[wid] = float(q) * q_factor
    table = [(wid, float(wells.loc[wid, "x"]), float(wells.loc[wid, "y"]), q, "stored") for wid, q in current.items()]
    for label, x, y, q in (new_wells or []):
        table.append((label, float(x), float(y), float(q) * q_factor, "proposed"))
    if not table:
        raise ParameterError(f"no pumping well of unit {unit}: import pumping records or give --rate / --new-well")
    pw = pd.DataFrame(table, columns=["well_id", "x", "y", "rate_m3d", "status"])
    xmin, ymin, xmax, ymax = grid.bounds
    outside = ~pw["x"].between(xmin, xmax) | ~pw["y"].between(ymin, ymax)
    if outside.any():
        raise ParameterError(f"pumping well(s) {', '.join(pw.loc[outside, 'well_id'])} lie outside the head "
                             f"surface grid of unit {unit}")
    if transmissivity is None:
        row = next(r for r in unit_stats(store, k_unit="m/d") if r["unit"] == unit)
        if row["k_geomean"] is None:
            raise InsufficientDataError(f"unit {unit} has no K tests; give --transmissivity")
        b = _unit_thickness_m(store, unit)
        transmissivity = row["k_geomean"] * b
        t_info = {"source": "unit geometric-mean K x mean picked thickness", "k_m_per_d": row["k_geomean"],
                  "thickness_m": b}
    else:
        t_info = {"source": "given"}
    wxy = pw[["x", "y"]].to_numpy(float) * crs_to_m
    s_m = pumping.superpose_drawdown_grid(grid.x_centers() * crs_to_m, grid.y_centers() * crs_to_m, wxy,
                                          pw["rate_m3d"].to_numpy(float), float(days), T=float(transmissivity),
                                          S=float(storativity), r_min=well_radius_m)
    s_len = s_m / len_m
    s_len = np.where(np.isfinite(head), s_len, np.nan)
    out = ensure_folder(out)
    dd_tif = write_geotiff(unit_path(out, unit, "drawdown.tif"), grid, [s_len], crs=store.settings.crs,
                           descriptions=[f"drawdown ({store.settings.length_unit})"], tags={"caution": CAUTION})
    hd_tif = write_geotiff(unit_path(out, unit, "head_drawdown.tif"), grid, [head - s_len], crs=store.settings.crs,
                           descriptions=[f"head after {days:g} d of pumping ({store.settings.length_unit})"],
                           tags={"caution": CAUTION})
    # springs and monitoring zones of the unit: exact drawdown at their locations
    members = _unit_members(store.read("units"), unit)
    springs = store.read("springs", ["spring_id", "x", "y", "unit"])
    springs = springs[springs["unit"].isna() | springs["unit"].isin(members)]
    asg = zone_assignment(store)
    zones = asg[asg["unit"].isin(members) & ~asg["well_id"].isin(set(pw["well_id"]))]
    points = pd.concat([
        pd.DataFrame({"kind": "spring", "id": springs["spring_id"], "zone_id": None, "x": springs["x"],
                      "y": springs["y"]}),
        pd.DataFrame({"kind": "monitoring zone", "id": zones["well_id"], "zone_id": zones["zone_id"],
                      "x": zones["x"], "y": zones["y"]})], ignore_index=True)
    if not points.empty:
        points["drawdown"] = pumping.superpose_drawdown(points[["x", "y"]].to_numpy(float) * crs_to_m, wxy,
                                                        pw["rate_m3d"].to_numpy(float), float(days),
                                                        T=float(transmissivity), S=float(storativity),
                                                        r_min=well_radius_m) / len_m
    else:
        points["drawdown"] = []
    impacts = points[points["drawdown"] > threshold].sort_values("drawdown", ascending=False)
    impacts_csv = write_csv(unit_path(out, unit, "drawdown_impacts.csv"), impacts)
    side = {"unit": unit, "days": days, "storativity": storativity, "transmissivity_m2_per_d": transmissivity,
            "transmissivity": t_info, "wells": pw.to_dict(orient="records"), "rate_unit_of_wells": "m3/d",
            "threshold": threshold, "length_unit": store.settings.length_unit,
            "method": "Theis (1935) superposition, no image wells (no boundaries)",
            "max_drawdown": float(np.nanmax(s_len)) if np.isfinite(s_len).any() else None,
            "caution": CAUTION + " Theis assumes a uniform, infinite, confined aquifer; boundaries, leakage and "
                       "karst conduits change real drawdown.",
            "files": {"drawdown": str(dd_tif), "head": str(hd_tif), "impacts": str(impacts_csv)}}
    side["files"]["sidecar"] = str(write_sidecar(unit_path(out, unit, "drawdown.json"), side))
    side["impacts"] = impacts
    return side
