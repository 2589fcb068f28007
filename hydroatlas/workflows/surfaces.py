"""Heads, vertical differences, interpolated surfaces and gradients (SPEC 2.5-2.7)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .. import assign
from ..errors import InsufficientDataError, ParameterError
from ..export.names import ensure_folder, unit_path
from ..store import Store
from .store_jobs import (
    CAUTION, _crs_to_m, _length_to_m, _unit_members, _window, tests_with_units, unit_stats, zone_assignment,
)


# -- heads, verticals, surfaces (SPEC 2.5-2.7) ------------------------------------
QUANTITIES = ("head", "logk", "dhead")
AUTO_GLOBAL_MAX = 400
METHODS = ("kriging", "uk", "idw")


def zone_heads(store: Store, *, window=None, at: str | None = None, assignment=None) -> pd.DataFrame:
    """One head per zone (median in the window, nearest to a date, or median of all) with its unit."""
    from ..heads import select_heads

    asg = zone_assignment(store) if assignment is None else assignment
    sel = select_heads(store.read("heads", ["well_id", "zone_id", "measured_at", "head"]),
                       window=_window(window), at=at)
    return sel.merge(asg[["well_id", "zone_id", "unit", "mid_elev", "top_elev", "bottom_elev", "x", "y"]],
                     on=["well_id", "zone_id"], how="left")


def unit_intervals(store: Store, units: pd.DataFrame | None = None) -> pd.DataFrame:
    """Elevation interval of every unit at every well: the (finest) picks, plus inferred picks at wells without."""
    units = store.read("units") if units is None else units
    picks = assign.finest_picks(store.read("picks"), units)
    inferred = assign.infer_picks(store.read("wells"), store.read("picks"), units)
    allp = pd.concat([picks[["well_id", "unit", "top_depth", "bottom_depth"]], inferred], ignore_index=True)
    allp = allp.merge(store.read("wells", ["well_id", "ground_elev"]), on="well_id")
    allp["top_elev"] = allp["ground_elev"] - allp["top_depth"]
    allp["bottom_elev"] = allp["ground_elev"] - allp["bottom_depth"]
    return allp[["well_id", "unit", "top_elev", "bottom_elev"]]


def verticals(store: Store, *, window=None, at: str | None = None):
    """Head profiles of multi-zone wells and the differences between successive zones.

    Returns (pairs, profiles) DataFrames; see :func:`hydroatlas.heads.vertical_differences`.
    """
    from ..heads import head_profiles, vertical_differences

    asg = zone_assignment(store)
    zh = zone_heads(store, window=window, at=at, assignment=asg)
    profiles = head_profiles(zh[["well_id", "zone_id", "head", "n_readings"]], asg)
    units = store.read("units")
    k_ms = {r["unit"]: (r["k_geomean"] if r["k_geomean"] is not None else float("nan"))
            for r in unit_stats(store, k_unit="m/s")}
    pairs = vertical_differences(profiles, units, k_ms, unit_intervals(store, units),
                                 length_to_m=_length_to_m(store))
    pairs["leakage_unit"] = f"{store.settings.length_unit}/d"
    return pairs, profiles


def surface_points(store: Store, unit: str, quantity: str, *, window=None, at: str | None = None,
                   lower_unit: str | None = None):
    """Well locations and values of a quantity for one unit (one value per well).

    head: median head of each zone in the window, averaged over the well's zones in the unit;
    logk: log10 of K in m/d, the mean of log10 K of the well's tests in the unit;
    dhead: the unit's head minus the head of ``lower_unit`` (default: the next lower unit with
    heads) at the same well.
    """
    if quantity not in QUANTITIES:
        raise ParameterError(f"unknown quantity {quantity!r}; expected one of {', '.join(QUANTITIES)}")
    units = store.read("units")
    members = _unit_members(units, unit)
    wells = store.read("wells", ["well_id", "x", "y"]).set_index("well_id")
    info = {"unit": unit, "quantity": quantity}
    if quantity == "logk":
        t = tests_with_units(store)
        t = t[t["unit"].isin(members)]
        if t.empty:
            raise InsufficientDataError(f"unit {unit} has no K tests")
        per_well = np.log10(t["k_ms"] * 86_400.0).groupby(t["well_id"]).mean()
        info["value_unit"] = "log10(m/d)"
    else:
        zh = zone_heads(store, window=window, at=at)
        per_unit = zh.dropna(subset=["unit"]).groupby(["well_id", "unit"])["head"].mean().reset_index()
        here = per_unit[per_unit["unit"].isin(members)].groupby("well_id")["head"].mean()
        info["value_unit"] = store.settings.length_unit
        info["window"] = None if window is None else str(window if isinstance(window, str) else window.text)
        info["at"] = at
        if quantity == "head":
            per_well = here
            # a spring issuing from the unit is a point where its head equals the ground (common practice)
            springs = store.read("springs", ["spring_id", "x", "y", "elev", "unit"])
            springs = springs[springs["unit"].isin(members)]
            if not springs.empty:
                info["springs_as_heads"] = list(springs["spring_id"])
                wells = pd.concat([wells, springs.set_index("spring_id")[["x", "y"]]])
                per_well = pd.concat([per_well, springs.set_index("spring_id")["elev"]])
        else:
            rank = dict(zip(units["code"], units["rank"]))
            lower = per_unit[per_unit["unit"].map(rank) > max(rank[c] for c in members)]
            lower = lower[~lower["unit"].isin(members)]
            if lower.empty:
                raise InsufficientDataError(f"no unit below {unit} has heads; dhead needs heads in {unit} and "
                                            "in the unit below at the same wells")
            if lower_unit is not None:
                _unit_members(units, lower_unit)
                if lower_unit not in set(lower["unit"]):
                    raise InsufficientDataError(f"unit {lower_unit} has no heads below {unit}")
                below_code = lower_unit
            else:
                below_code = min(set(lower["unit"]), key=rank.get)
            below = lower[lower["unit"] == below_code].groupby("well_id")["head"].mean()
            per_well = (here - below).dropna()
            info["lower_unit"] = below_code
    per_well = per_well.dropna()
    if per_well.empty:
        raise InsufficientDataError(f"unit {unit} has no {quantity} values"
                                    + (f" in the window {info.get('window')}" if info.get("window") else ""))
    xy = wells.loc[per_well.index, ["x", "y"]].to_numpy(float)
    return xy, per_well.to_numpy(float), list(per_well.index), info


def make_interpolator(method: str, xy, z, *, variogram: str = "spherical", nugget=None, sill=None, range_=None,
                      neighbors: int | None = 16, power: float = 2.0, fallback_idw: bool = False):
    """The interpolator of a method, with its variogram fitted (or fixed) on the data; returns (model, info)."""
    from ..interp import IDW, OrdinaryKriging, UniversalKriging, Variogram

    if method not in METHODS:
        raise ParameterError(f"unknown method {method!r}; expected one of {', '.join(METHODS)}")
    if method == "idw":
        return IDW(power, neighbors=neighbors), {"method": "idw", "power": power, "neighbors": neighbors}
    fixed = sill is not None or range_ is not None
    if fixed and (sill is None or range_ is None):
        raise ParameterError("a fixed variogram needs both --sill and --range (and optionally --nugget)")
    try:
        if fixed:
            v = Variogram(variogram, nugget=nugget or 0.0, sill=sill, range=range_)
        else:
            target = np.asarray(z, float)
            if np.ptp(target) <= 1e-12 * float(np.max(np.abs(target))):
                raise InsufficientDataError("all values are equal: no variogram can be fitted "
                                            "(use IDW, or fix the variogram parameters)")
            if method == "uk":  # the drift would inflate the raw variogram: fit it on trend residuals
                a = np.column_stack([np.ones(len(xy)), xy - xy.mean(axis=0)])
                target = target - a @ np.linalg.lstsq(a, target, rcond=None)[0]
            v = Variogram.fit(xy, target, variogram, nugget=nugget)
    except InsufficientDataError as exc:
        if fallback_idw:
            return IDW(power, neighbors=neighbors), {"method": "idw", "power": power, "neighbors": neighbors,
                                                     "fallback_from": method, "fallback_reason": str(exc)}
        raise InsufficientDataError(f"{exc}; pass --fallback-idw to use inverse-distance weighting instead") from None
    cls = OrdinaryKriging if method == "kriging" else UniversalKriging
    model = cls(v, neighbors=neighbors)
    return model, {"method": method, "variogram": v.to_dict(), "variogram_fitted": not fixed,
                   "neighbors": neighbors}


def build_surface(store: Store, unit: str, quantity: str, *, method: str = "kriging", window=None,
                  at: str | None = None, cell: float | None = None, variogram: str = "spherical", nugget=None,
                  sill=None, range_=None, neighbors: int | str | None = "auto", buffer: float | None = None,
                  out=".", fallback_idw: bool = False, max_cells: int | None = None, workers: int = 1,
                  lower_unit: str | None = None, progress=None) -> dict:
    """Interpolate one quantity of one unit onto a grid and write GeoTIFF + JSON sidecar (+ gradients for heads).

    Returns the sidecar dict with the written paths under ``files``.
    """
    from ..export.rasters import write_geotiff, write_sidecar
    from ..interp import crossval
    from ..interp.grid import MAX_CELLS, GridSpec, mask_from_buffer, mask_from_polygons, predict_grid

    crs_to_m = _crs_to_m(store)
    xy, z, well_ids, info = surface_points(store, unit, quantity, window=window, at=at, lower_unit=lower_unit)
    if neighbors == "auto":  # one global system for up to AUTO_GLOBAL_MAX points: no neighbourhood seams
        neighbors = None if len(z) <= AUTO_GLOBAL_MAX else 16
    needed = {"kriging": 3, "uk": 4, "idw": 1}[method] if method in METHODS else 1
    if len(z) < needed:
        raise InsufficientDataError(f"{method} needs at least {needed} wells with {quantity} in unit {unit}; "
                                    f"found {len(z)}")
    domain = _domain_polygons(store, unit)
    (xmin, ymin, xmax, ymax), cell = grid_extent(xy, None if domain is None else domain.total_bounds, cell,
                                                 what=f"the {quantity} data of unit {unit}")
    model, minfo = make_interpolator(method, xy, z, variogram=variogram, nugget=nugget, sill=sill, range_=range_,
                                     neighbors=neighbors, fallback_idw=fallback_idw)
    model.fit(xy, z)
    max_cells = max_cells or MAX_CELLS
    grid = GridSpec.from_bounds(xmin, ymin, xmax, ymax, cell, crs=store.settings.crs.to_wkt(), max_cells=max_cells)
    if domain is not None:
        mask = mask_from_polygons(grid, domain.geometry)
        import shapely

        inside = shapely.contains_xy(domain.union_all(), xy[:, 0], xy[:, 1])
        if not inside.any() or not mask.any():
            raise ParameterError(f"the domain polygon does not overlap the {quantity} data of unit {unit}")
        mask_info = {"kind": "domain polygon", "area_ids": list(domain["area_id"])}
    else:
        dist = buffer if buffer is not None else 0.25 * max(xmax - xmin, ymax - ymin)
        mask = mask_from_buffer(grid, xy, dist)
        mask_info = {"kind": "buffer around data", "distance": dist}
    est, std = predict_grid(model, grid, mask=mask, workers=workers, progress=progress)
    cv = {}
    for m_name in METHODS:
        try:
            alt = model if m_name == minfo["method"] else make_interpolator(
                m_name, xy, z, variogram=variogram, nugget=nugget, sill=sill, range_=range_, neighbors=neighbors)[0]
            cv[m_name] = crossval.summary(crossval.leave_one_out(alt, xy, z))
        except (InsufficientDataError, ParameterError) as exc:
            cv[m_name] = {"error": str(exc)}
    out = ensure_folder(out)
    bands = [est] + ([std] if std is not None else [])
    names = [f"{quantity} estimate ({info['value_unit']})"]
    if std is not None:
        names.append("kriging standard deviation")
    tif = write_geotiff(unit_path(out, unit, f"{quantity}.tif"), grid, bands, crs=store.settings.crs, descriptions=names,
                        tags={"caution": CAUTION, "quantity": quantity, "unit": unit})
    sidecar = {"unit": unit, "quantity": quantity, "value_unit": info["value_unit"], **minfo,
               "n_points": int(len(z)), "wells": well_ids, "springs_as_heads": info.get("springs_as_heads", []),
               "window": info.get("window"), "at": info.get("at"),
               "lower_unit": info.get("lower_unit"), "cross_validation": cv, "selected_method": minfo["method"],
               "grid": grid.to_dict(), "mask": mask_info, "crs": store.settings.crs.to_string(),
               "bands": names, "nodata": -9999.0, "store": store.location, "caution": CAUTION,
               "files": {"raster": str(tif)}}
    if quantity == "head":
        sidecar["files"].update(write_gradients(store, unit, grid, est, out, crs_to_m=crs_to_m))
    sidecar["files"]["sidecar"] = str(write_sidecar(unit_path(out, unit, f"{quantity}.json"), sidecar))
    return sidecar


def grid_extent(xy, domain_bounds=None, cell: float | None = None, *, what: str = "the data"):
    """Bounds and cell size of a surface grid: the domain polygon's bounds, else the data's plus a margin.

    Without a domain the margin is a tenth of the data's extent. Data at one
    location or on one line have no area to grid: without ``cell`` they are
    refused (any cell size would be arbitrary, e.g. a 20 cm grid of 1 mm
    cells around a single well); with ``cell`` the margin is at least 50 cells.
    The automatic cell size is 1/200 of the longer side.

    Returns ((xmin, ymin, xmax, ymax), cell).
    """
    from ..interp.grid import auto_cell, spread_rank

    if cell is not None and not (isinstance(cell, (int, float, np.number)) and np.isfinite(cell) and cell > 0):
        raise ParameterError(f"cell size must be a finite number > 0; got {cell}")
    if domain_bounds is not None:
        bounds = tuple(float(v) for v in domain_bounds)
    else:
        xmin, ymin = xy.min(axis=0)
        xmax, ymax = xy.max(axis=0)
        span = float(max(xmax - xmin, ymax - ymin))
        if spread_rank(xy) < 2:
            if cell is None:
                n = len(np.unique(np.asarray(xy, float), axis=0))
                where = "at one location" if n < 2 else f"on one line ({n} locations)"
                raise InsufficientDataError(f"{what} lie {where}; a surface needs at least 3 wells not on one "
                                            "line, or give a domain area (areas of kind domain) or --cell")
            pad = max(0.1 * span, 50.0 * cell)
        else:
            pad = 0.1 * span
        bounds = (float(xmin - pad), float(ymin - pad), float(xmax + pad), float(ymax + pad))
    return bounds, (auto_cell(*bounds) if cell is None else cell)


def _domain_polygons(store: Store, unit: str):
    areas = store.read_geometries("areas")
    if areas.empty:
        return None
    dom = areas[areas["kind"] == "domain"]
    own = dom[dom["unit"] == unit]
    dom = own if not own.empty else dom[dom["unit"].isna()]
    return dom if not dom.empty else None


def write_gradients(store: Store, unit: str, grid, head, out, *, crs_to_m: float, arrows_across: int = 18) -> dict:
    """Gradient magnitude / flow azimuth raster and a flow_arrows point layer from a head grid."""
    import geopandas as gpd
    import pyogrio

    from .. import flow
    from ..export.layers import write_layer
    from ..export.rasters import write_geotiff

    mag, az = flow.grid_gradient(head, grid.cell, vertical_per_horizontal=_length_to_m(store) / crs_to_m)
    out = Path(out)
    tif = write_geotiff(unit_path(out, unit, "gradient.tif"), grid, [mag, az], crs=store.settings.crs,
                        descriptions=["hydraulic gradient (dimensionless)",
                                      "flow azimuth (degrees clockwise from grid north)"],
                        tags={"caution": CAUTION, "unit": unit})
    step = max(1, int(max(grid.nrows, grid.ncols) // arrows_across))
    rows, cols = np.mgrid[step // 2:grid.nrows:step, step // 2:grid.ncols:step]
    rows, cols = rows.ravel(), cols.ravel()
    ok = np.isfinite(mag[rows, cols]) & (mag[rows, cols] > 0)
    rows, cols = rows[ok], cols[ok]
    xs = grid.x_centers()[cols]
    ys = grid.y_centers()[rows]
    arrows = gpd.GeoDataFrame({"unit": unit, "azimuth": az[rows, cols], "gradient": mag[rows, cols],
                               "head": head[rows, cols]}, geometry=gpd.points_from_xy(xs, ys),
                              crs=store.settings.crs)
    gpkg = out / "layers.gpkg"
    if gpkg.exists() and "flow_arrows" in {n for n, _ in pyogrio.list_layers(gpkg)}:
        old = pyogrio.read_dataframe(gpkg, layer="flow_arrows")
        old = old[old["unit"] != unit]
        if not old.empty:
            arrows = gpd.GeoDataFrame(pd.concat([old, arrows], ignore_index=True), crs=store.settings.crs)
    write_layer(gpkg, "flow_arrows", arrows)
    return {"gradient": str(tif), "flow_arrows": f"{gpkg}:flow_arrows"}


def three_point_wells(store: Store, unit: str, well_ids: list[str], *, window=None, at=None) -> dict:
    """Three-point gradient and flow azimuth from the heads of three wells in one unit."""
    from .. import flow

    if len(well_ids) != 3:
        raise ParameterError(f"give exactly three wells; got {len(well_ids)}")
    xy, z, wells, _ = surface_points(store, unit, "head", window=window, at=at)
    where = {w: i for i, w in enumerate(wells)}
    missing = [w for w in well_ids if w not in where]
    if missing:
        raise ParameterError(f"well(s) {', '.join(missing)} have no head in unit {unit}")
    sel = [where[w] for w in well_ids]
    res = flow.three_point(xy[sel], z[sel] * _length_to_m(store) / _crs_to_m(store))
    res.update({"unit": unit, "wells": well_ids, "heads": z[sel].tolist()})
    return res


def read_surface(folder, unit: str, quantity: str, store_path: str):
    """A surface GeoTIFF written by `hydroatlas surface` as (grid, band-1 array); clear error when missing."""
    import rasterio

    from ..interp.grid import GridSpec

    path = unit_path(folder, unit, f"{quantity}.tif")
    if not path.is_file():
        raise ParameterError(f"no {quantity} surface for unit {unit} in {folder}; make it with "
                             f"'hydroatlas surface {store_path} --unit {unit} --quantity {quantity} --out {folder}'")
    with rasterio.open(path) as src:
        band = src.read(1, masked=True).filled(np.nan).astype(float)
        t = src.transform
        grid = GridSpec(t.c, t.f, t.a, src.height, src.width, src.crs.to_wkt() if src.crs else None)
    if abs(t.e + t.a) > 1e-9 * abs(t.a) or t.b or t.d:
        raise ParameterError(f"{path} is not a north-up grid with square cells")
    return grid, band
