"""One function per user-level job: read selections from the store, call the core, return results.

The command line and the demo call these; scripts and notebooks may too.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from . import assign, quality, stats
from .store import Store, create_store
from .store.importers import ImportReport, import_file
from .errors import InsufficientDataError, ParameterError


def init_store(location, *, crs, length_unit: str = "m", vertical_datum: str = "unspecified") -> Store:
    """Create a new store and return it open."""
    return create_store(location, crs=crs, length_unit=length_unit, vertical_datum=vertical_datum)


def import_data(store: Store, kind: str, path, *, input_crs=None,
                progress: Callable[[int], None] | None = None) -> ImportReport:
    """Validate and import one file (see :mod:`hydroatlas.store.importers`)."""
    return import_file(store, kind, path, input_crs=input_crs, progress=progress)


def zone_assignment(store: Store) -> pd.DataFrame:
    """Every zone with its unit, overlap fraction and flags (SPEC 2.3)."""
    return assign.assign_zones(store.read("zones"), store.read("picks"), store.read("wells"), store.read("units"))


def tests_with_units(store: Store, assignment: pd.DataFrame | None = None) -> pd.DataFrame:
    """K tests joined with their zone's assigned unit and straddle flag."""
    asg = zone_assignment(store) if assignment is None else assignment
    tests = store.read("ktests", ["well_id", "zone_id", "test_id", "tested_on", "method", "k_ms", "quality"])
    return tests.merge(asg[["well_id", "zone_id", "unit", "straddles", "overlap_fraction", "thickness"]],
                       on=["well_id", "zone_id"], how="left")


def unit_stats(store: Store, *, unit: str | None = None, per: str = "test", k_unit: str = "m/d",
               exclude_straddles: bool = False, exclude_poor: bool = False) -> list[dict]:
    """Per-unit K statistics (SPEC 2.4), optionally for one unit code."""
    units = store.read("units")
    if unit is not None and unit not in set(units["code"]):
        raise ParameterError(f"unit {unit!r} is not in the store; known units: {', '.join(units['code'])}")
    rows = stats.unit_statistics(tests_with_units(store), units, per=per, k_unit=k_unit,
                                 exclude_straddles=exclude_straddles, exclude_poor=exclude_poor)
    return [r for r in rows if unit is None or r["unit"] == unit]


def well_profiles(store: Store, *, k_unit: str = "m/d", unit: str | None = None,
                  exclude_poor: bool = False) -> pd.DataFrame:
    """Per-well transmissivity and effective K_h / K_v over tested zones."""
    tests = tests_with_units(store)
    if exclude_poor:
        tests = tests[tests["quality"].ne("poor") | tests["quality"].isna()]
    zone_k = stats.zone_log_means(tests).merge(
        tests[["well_id", "zone_id", "thickness"]].drop_duplicates(), on=["well_id", "zone_id"])
    out = stats.well_profiles(zone_k, k_unit=k_unit, length_unit=store.settings.length_unit)
    return out if unit is None else out[out["unit"] == unit]


def check_store(store: Store) -> list[dict]:
    """Data-quality findings (straddles, gaps, orphans, outliers)."""
    asg = zone_assignment(store)
    return quality.find_issues(
        wells=store.read("wells"), zones=store.read("zones"), picks=store.read("picks"),
        units=store.read("units"), ktests=store.read("ktests", ["well_id", "zone_id", "test_id", "k_ms"]),
        heads=store.read("heads", ["well_id", "zone_id", "head"]), assignment=asg)



# -- heads, verticals, surfaces (SPEC 2.5-2.7) ------------------------------------
QUANTITIES = ("head", "logk", "dhead")
AUTO_GLOBAL_MAX = 400
METHODS = ("kriging", "uk", "idw")
CAUTION = ("Screening-level estimate for planning and model set-up, not a substitute for site-specific "
           "investigation or for the judgement of a licensed professional geoscientist or engineer; well "
           "construction, testing and pumping are governed by local rules and permits. Interpolated surfaces do "
           "not see conduits, faults or barriers; in karst, flow can be far faster than a smooth surface suggests.")


def _length_to_m(store: Store) -> float:
    from .quantities import LENGTH_UNITS

    return LENGTH_UNITS[store.settings.length_unit]


def _crs_to_m(store: Store) -> float:
    crs = store.settings.crs
    if not crs.is_projected:
        raise ParameterError("surfaces, gradients and distances need a projected store CRS; this store uses "
                         f"{crs.name} (geographic). Create the store with a projected CRS (e.g. a UTM zone)")
    return float(crs.axis_info[0].unit_conversion_factor)


def _window(window):
    from .heads import TimeWindow

    if window is None or isinstance(window, TimeWindow):
        return window
    return TimeWindow.parse(window)


def _unit_members(units: pd.DataFrame, code: str) -> set[str]:
    if code not in set(units["code"]):
        raise ParameterError(f"unit {code!r} is not in the store; known units: {', '.join(units['code'])}")
    members = {code}
    for c, chain in assign.unit_ancestors(units).items():
        if code in chain:
            members.add(c)
    return members


def zone_heads(store: Store, *, window=None, at: str | None = None, assignment=None) -> pd.DataFrame:
    """One head per zone (median in the window, nearest to a date, or median of all) with its unit."""
    from .heads import select_heads

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
    from .heads import head_profiles, vertical_differences

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
    from .interp import IDW, OrdinaryKriging, UniversalKriging, Variogram

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
    from .export.rasters import write_geotiff, write_sidecar
    from .interp import crossval
    from .interp.grid import MAX_CELLS, GridSpec, mask_from_buffer, mask_from_polygons, predict_grid

    crs_to_m = _crs_to_m(store)
    xy, z, well_ids, info = surface_points(store, unit, quantity, window=window, at=at, lower_unit=lower_unit)
    if neighbors == "auto":  # one global system for up to AUTO_GLOBAL_MAX points: no neighbourhood seams
        neighbors = None if len(z) <= AUTO_GLOBAL_MAX else 16
    needed = {"kriging": 3, "uk": 4, "idw": 1}[method] if method in METHODS else 1
    if len(z) < needed:
        raise InsufficientDataError(f"{method} needs at least {needed} wells with {quantity} in unit {unit}; "
                                    f"found {len(z)}")
    model, minfo = make_interpolator(method, xy, z, variogram=variogram, nugget=nugget, sill=sill, range_=range_,
                                     neighbors=neighbors, fallback_idw=fallback_idw)
    model.fit(xy, z)
    max_cells = max_cells or MAX_CELLS
    domain = _domain_polygons(store, unit)
    if domain is not None:
        xmin, ymin, xmax, ymax = domain.total_bounds
    else:
        xmin, ymin = xy.min(axis=0)
        xmax, ymax = xy.max(axis=0)
        pad = 0.1 * max(xmax - xmin, ymax - ymin, 1.0)
        xmin, ymin, xmax, ymax = xmin - pad, ymin - pad, xmax + pad, ymax + pad
    if cell is None:
        cell = float(max(xmax - xmin, ymax - ymin) / 200.0)
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
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    stem = f"{unit}_{quantity}"
    bands = [est] + ([std] if std is not None else [])
    names = [f"{quantity} estimate ({info['value_unit']})"] + (["kriging standard deviation"] if std is not None else [])
    tif = write_geotiff(out / f"{stem}.tif", grid, bands, crs=store.settings.crs, descriptions=names,
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
    write_sidecar(out / f"{stem}.json", sidecar)
    sidecar["files"]["sidecar"] = str(out / f"{stem}.json")
    return sidecar


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

    from . import flow
    from .export.layers import write_layer
    from .export.rasters import write_geotiff

    mag, az = flow.grid_gradient(head, grid.cell, vertical_per_horizontal=_length_to_m(store) / crs_to_m)
    out = Path(out)
    tif = write_geotiff(out / f"{unit}_gradient.tif", grid, [mag, az], crs=store.settings.crs,
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
    from . import flow

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


# -- pathways (SPEC 2.8) -----------------------------------------------------------
KARST_WARNING = ("Darcy travel times on a smooth head surface are upper bounds in karst: conduits can carry water "
                 "orders of magnitude faster, and particle paths do not see conduits, faults or barriers.")


def read_surface(folder, unit: str, quantity: str, store_path: str):
    """A surface GeoTIFF written by `hydroatlas surface` as (grid, band-1 array); clear error when missing."""
    import rasterio

    from .interp.grid import GridSpec

    path = Path(folder) / f"{unit}_{quantity}.tif"
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


def _recharge_areas(store: Store, unit: str):
    areas = store.read_geometries("areas")
    rech = areas[(areas["kind"] == "recharge") & (areas["unit"].isna() | (areas["unit"] == unit))] \
        if not areas.empty else areas
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

    from . import flow
    from .export.layers import write_layer
    from .export.rasters import write_sidecar

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
        k_info = {"source": "log-K surface", "file": str(folder / f"{unit}_logk.tif")}
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
    csv_path = out / f"{unit}_pathways.csv"
    table.to_csv(csv_path, index=False)
    files["table"] = str(csv_path)
    side = {"unit": unit, "direction": direction, "porosity": porosity, "k": k_info,
            "capture_radius": radius, "max_years": max_years, "n_particles": int(len(seeds)),
            "head_surface": str(folder / f"{unit}_head.tif"), "integrator": "Dormand-Prince 5(4), adaptive",
            "caution": CAUTION, "karst_warning": KARST_WARNING, "files": files}
    write_sidecar(out / f"{unit}_pathways.json", side)
    files["sidecar"] = str(out / f"{unit}_pathways.json")
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

    from . import flow

    valid = np.isfinite(head)
    stride = max(1, int(np.ceil(np.sqrt(valid.sum() / max_particles))))
    rows, cols = np.nonzero(valid[::stride, ::stride])
    xs = grid.x_centers()[::stride][cols]
    ys = grid.y_centers()[::stride][rows]
    res = flow.track(np.column_stack([xs, ys]), field, t_max=t_max, sinks=sink_xy, sink_radius=radius,
                     max_step=0.5 * grid.cell)
    shape = valid[::stride, ::stride].shape
    transform = from_origin(grid.x0, grid.y0, grid.cell * stride, grid.cell * stride)
    areas = store.read_geometries("areas")
    rech = areas[(areas["kind"] == "recharge") & (areas["unit"].isna() | (areas["unit"] == unit))] \
        if not areas.empty else areas
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
    from . import pumping
    from .export.rasters import write_geotiff, write_sidecar
    from .quantities import RATE_UNITS, normalize_unit

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
    out.mkdir(parents=True, exist_ok=True)
    dd_tif = write_geotiff(out / f"{unit}_drawdown.tif", grid, [s_len], crs=store.settings.crs,
                           descriptions=[f"drawdown ({store.settings.length_unit})"], tags={"caution": CAUTION})
    hd_tif = write_geotiff(out / f"{unit}_head_drawdown.tif", grid, [head - s_len], crs=store.settings.crs,
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
    impacts_csv = out / f"{unit}_drawdown_impacts.csv"
    impacts.to_csv(impacts_csv, index=False)
    side = {"unit": unit, "days": days, "storativity": storativity, "transmissivity_m2_per_d": transmissivity,
            "transmissivity": t_info, "wells": pw.to_dict(orient="records"), "rate_unit_of_wells": "m3/d",
            "threshold": threshold, "length_unit": store.settings.length_unit,
            "method": "Theis (1935) superposition, no image wells (no boundaries)",
            "max_drawdown": float(np.nanmax(s_len)) if np.isfinite(s_len).any() else None,
            "caution": CAUTION + " Theis assumes a uniform, infinite, confined aquifer; boundaries, leakage and "
                       "karst conduits change real drawdown.",
            "files": {"drawdown": str(dd_tif), "head": str(hd_tif), "impacts": str(impacts_csv)}}
    write_sidecar(out / f"{unit}_drawdown.json", side)
    side["files"]["sidecar"] = str(out / f"{unit}_drawdown.json")
    side["impacts"] = impacts
    return side


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


def well_summaries(store: Store, *, k_unit: str = "m/d") -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per well and unit: geometric-mean K and test count; per zone: unit, elevations, K and latest head."""
    from .quantities import k_from_ms

    asg = zone_assignment(store)
    tests = tests_with_units(store, asg)
    lg = np.log10(tests["k_ms"].to_numpy(float))
    per_zone = pd.DataFrame({"well_id": tests["well_id"], "zone_id": tests["zone_id"], "lg": lg}) \
        .groupby(["well_id", "zone_id"]).agg(lg=("lg", "mean"), n_tests=("lg", "size")).reset_index()
    heads = store.read("heads", ["well_id", "zone_id", "measured_at", "head"])
    latest = heads.sort_values("measured_at").groupby(["well_id", "zone_id"]).tail(1) \
        .rename(columns={"measured_at": "latest_head_at", "head": "latest_head"})
    zones = asg.merge(per_zone, on=["well_id", "zone_id"], how="left").merge(latest, on=["well_id", "zone_id"],
                                                                           how="left")
    zones["k"] = k_from_ms(10 ** zones["lg"].to_numpy(float), k_unit)
    zones["k_unit"] = k_unit
    per_unit = zones.dropna(subset=["lg", "unit"]).groupby(["well_id", "unit"]).agg(
        lg=("lg", "mean"), n_tests=("n_tests", "sum")).reset_index()
    per_unit["k"] = k_from_ms(10 ** per_unit["lg"].to_numpy(float), k_unit)
    return per_unit, zones.drop(columns=["lg"])


def export_layers(store: Store, *, out=".", surfaces=None, k_unit: str = "m/d") -> dict:
    """Vector layers to OUT/layers.gpkg and OUT/geojson/<layer>.geojson (RFC 7946, WGS 84).

    wells (with per-unit geometric-mean K and test counts as columns), zones (points at
    mid-depth), head contours of every head surface found, and the flow_arrows, pathlines and
    contributing_areas layers already written by `surface` and `paths`.
    """
    import geopandas as gpd
    import pyogrio

    from .export.layers import write_layer

    out = Path(out)
    folder = Path(surfaces) if surfaces is not None else out
    crs = store.settings.crs
    per_unit, zones = well_summaries(store, k_unit=k_unit)
    wells = store.read("wells", ["well_id", "x", "y", "ground_elev", "total_depth", "kind", "name"])
    for code in store.read("units").sort_values("rank")["code"]:
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
    for tif in sorted(folder.glob("*_head.tif")):
        unit = tif.name[: -len("_head.tif")]
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
    gj = out / "geojson"
    gj.mkdir(parents=True, exist_ok=True)
    files = {"gpkg": str(gpkg)}
    for name, gdf in layers.items():
        path = gj / f"{name}.geojson"
        if path.exists():
            path.unlink()
        pyogrio.write_dataframe(gdf.to_crs(4326), path, driver="GeoJSON", layer_options={"RFC7946": "YES"})
        files[name] = str(path)
    return files


def build_map(store: Store, *, unit: str | None = None, out="map.html", surfaces=None, k_unit: str = "m/d",
              tiles: str | None = None) -> Path:
    """One self-contained HTML map of the store and of the results found in ``surfaces``."""
    import folium
    import geopandas as gpd
    import pyogrio
    import rasterio
    from rasterio.warp import Resampling, calculate_default_transform, reproject

    from .export.webmap import (K_COLORMAP, TIME_COLORMAP, arrow_svg, geojson_text, hex_colors, legend_html,
                                safe_text, write_webmap)
    from .quantities import normalize_unit

    k_unit = normalize_unit(k_unit, "hydraulic conductivity")
    crs = store.settings.crs
    units = store.read("units").sort_values("rank")
    if unit is None:
        aquifers = units[units["role"] == "aquifer"]["code"]
        unit = aquifers.iloc[0] if len(aquifers) else units["code"].iloc[0]
    _unit_members(units, unit)
    out = Path(out)
    folder = Path(surfaces) if surfaces is not None else out.parent
    per_unit, zones = well_summaries(store, k_unit=k_unit)
    wells = store.read("wells", ["well_id", "x", "y", "kind", "name"])
    wells = wells.merge(per_unit[per_unit["unit"] == unit][["well_id", "k", "n_tests"]], on="well_id", how="left")
    wgs = gpd.GeoDataFrame(wells, geometry=gpd.points_from_xy(wells["x"], wells["y"]), crs=crs).to_crs(4326)
    center = (float(wgs.geometry.y.mean()), float(wgs.geometry.x.mean())) if len(wgs) else (0.0, 0.0)
    lgk = np.log10(wells["k"].to_numpy(float))
    finite = lgk[np.isfinite(lgk)]
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
    colors = hex_colors(lgk, lo, hi, K_COLORMAP)
    layers, legends = [], []

    def add_wells(group):
        for (_, w), geom, color in zip(wells.iterrows(), wgs.geometry, colors):
            zs = zones[zones["well_id"] == w["well_id"]]
            rows = "".join(
                f"<tr><td>{safe_text(z.zone_id)}</td><td>{safe_text(z.unit)}</td>"
                f"<td>{'' if not np.isfinite(z.k) else f'{z.k:.3g}'}</td>"
                f"<td>{'' if not np.isfinite(z.latest_head) else f'{z.latest_head:.2f}'}</td>"
                f"<td>{safe_text(z.latest_head_at)}</td></tr>" for z in zs.itertuples())
            popup = (f"<b>{safe_text(w['well_id'])}</b> {safe_text(w['name'])}<br>{safe_text(w['kind'])}"
                     f"<table class='ha-table'><tr><th>zone</th><th>unit</th><th>K ({safe_text(k_unit)})</th>"
                     f"<th>latest head ({safe_text(store.settings.length_unit)})</th><th>on</th></tr>{rows}</table>")
            has_k = np.isfinite(w["k"])
            folium.CircleMarker([geom.y, geom.x], radius=7 if has_k else 4, color="#1d2b36", weight=1,
                                fill=True, fill_color=color, fill_opacity=0.95,
                                tooltip=safe_text(w["well_id"]), popup=folium.Popup(popup, max_width=420)
                                ).add_to(group)
    layers.append((f"Wells: K of {unit}", add_wells))
    if finite.size:
        legends.append(legend_html(f"Geometric-mean K of {unit} per well ({k_unit}, log scale)", lo, hi, K_COLORMAP,
                                   fmt=lambda v: f"{10 ** v:.3g}"))
    head_tif = folder / f"{unit}_head.tif"
    if head_tif.is_file():
        grid, head = read_surface(folder, unit, "head", store.location)
        cont = contour_lines(grid, head, _nice_levels(head), crs).to_crs(4326)

        def add_contours(group):
            for geom, level in zip(cont.geometry, cont["level"]):
                coords = [(y, x) for x, y in geom.coords]
                folium.PolyLine(coords, color="#0b5563", weight=1.5, opacity=0.9,
                                tooltip=f"head {level:g} {store.settings.length_unit}").add_to(group)
                mid = coords[len(coords) // 2]
                folium.Marker(mid, icon=folium.DivIcon(html=f"<div class='ha-label'>{level:g}</div>",
                                                       icon_size=(40, 14), icon_anchor=(20, 7))).add_to(group)
        layers.append((f"Head contours of {unit} ({store.settings.length_unit})", add_contours))
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
                    legends.append(legend_html(f"Kriging standard deviation ({store.settings.length_unit})",
                                               s0, s1, "Greys"))
    gpkg = folder / "layers.gpkg"
    have = {n for n, _ in pyogrio.list_layers(gpkg)} if gpkg.exists() else set()
    if "flow_arrows" in have:
        arrows = pyogrio.read_dataframe(gpkg, layer="flow_arrows")
        arrows = arrows[arrows["unit"] == unit].to_crs(4326)

        def add_arrows(group):
            for geom, az, grad in zip(arrows.geometry, arrows["azimuth"], arrows["gradient"]):
                folium.Marker([geom.y, geom.x], tooltip=f"flow {az:.0f} deg, gradient {grad:.2g}",
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
                                    tooltip=f"{safe_text(wid)}: {q:.0f} m3/d").add_to(group)
        layers.append(("Pumping wells (size by rate)", add_pumping))
    springs = store.read("springs")
    if not springs.empty:
        sg = gpd.GeoDataFrame(springs, geometry=gpd.points_from_xy(springs["x"], springs["y"]), crs=crs).to_crs(4326)

        def add_springs(group):
            for geom, sid, name, elev in zip(sg.geometry, sg["spring_id"], sg["name"], sg["elev"]):
                icon = folium.DivIcon(html=SPRING_SVG, icon_size=(18, 18), icon_anchor=(9, 9))
                folium.Marker([geom.y, geom.x], icon=icon,
                              tooltip=f"{safe_text(sid)} {safe_text(name)} ({elev:g})").add_to(group)
        layers.append(("Springs", add_springs))
    areas = store.read_geometries("areas")
    rech = areas[areas["kind"] == "recharge"] if not areas.empty else areas
    if not rech.empty:
        data = geojson_text(rech[["area_id", "kind", "geometry"]])

        def add_recharge(group, data=data):
            folium.GeoJson(data, style_function=lambda f: {"color": "#238b45", "weight": 2, "fillOpacity": 0.15},
                           tooltip=folium.GeoJsonTooltip(fields=["area_id"], aliases=["recharge area"])).add_to(group)
        layers.append(("Recharge areas", add_recharge))
    if "pathlines" in have:
        pl = pyogrio.read_dataframe(gpkg, layer="pathlines")
        pl = pl[(pl["unit"] == unit) & (pl["direction"] == "forward")].to_crs(4326)
        if len(pl):
            years = pl["travel_years"].to_numpy(float)
            t0, t1 = float(np.nanmin(years)), float(np.nanmax(years))
            pcol = hex_colors(years, t0, t1, TIME_COLORMAP)

            def add_paths(group):
                for geom, color, yrs, end in zip(pl.geometry, pcol, years, pl["end_kind"]):
                    folium.PolyLine([(y, x) for x, y in geom.coords], color=color, weight=2, opacity=0.85,
                                    tooltip=f"{yrs:.1f} years, ends at {safe_text(end)}").add_to(group)
            layers.append(("Pathlines (colour by travel time)", add_paths))
            legends.append(legend_html("Pathline travel time (years; Darcy, upper bound in karst)", t0, t1,
                                       TIME_COLORMAP))
    if "contributing_areas" in have:
        ca = pyogrio.read_dataframe(gpkg, layer="contributing_areas")
        ca = ca[(ca["unit"] == unit) & ~ca.geometry.is_empty]
        if len(ca):
            data = geojson_text(ca[["spring_id", "geometry"]])

            def add_ca(group, data=data):
                folium.GeoJson(data, style_function=lambda f: {"color": "#54278f", "weight": 1.5, "dashArray": "4 3",
                                                               "fillOpacity": 0.08},
                               tooltip=folium.GeoJsonTooltip(fields=["spring_id"],
                                                             aliases=["contributing area of"])).add_to(group)
            layers.append(("Contributing areas", add_ca))
    dd_tif = folder / f"{unit}_drawdown.tif"
    if dd_tif.is_file():
        dgrid, dd = read_surface(folder, unit, "drawdown", store.location)
        levels = [v for v in (0.1, 0.25, 0.5, 1, 2, 5, 10, 20, 50) if np.nanmax(dd) > v]
        dcont = contour_lines(dgrid, dd, levels, crs).to_crs(4326)

        def add_dd(group):
            for geom, level in zip(dcont.geometry, dcont["level"]):
                folium.PolyLine([(y, x) for x, y in geom.coords], color="#b30000", weight=1.5, dash_array="6 4",
                                tooltip=f"drawdown {level:g} {store.settings.length_unit}").add_to(group)
        if len(dcont):
            layers.append(("Drawdown of the last scenario", add_dd))
    cautions = [CAUTION, KARST_WARNING]
    return write_webmap(out, title=f"hydroatlas: {unit}", center=center, layers=layers, legends=legends,
                        cautions=cautions, tiles=tiles)


def make_figures(store: Store, *, out=".", surfaces=None, k_unit: str = "m/d") -> list[Path]:
    """PNG and SVG figures: head profiles of multi-zone wells, log K per unit, variogram fits, cross-validation."""
    import json

    from .export import figures
    from .interp import Variogram, crossval

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    folder = Path(surfaces) if surfaces is not None else out
    written: list[Path] = []
    units = store.read("units")
    pairs, profiles = verticals(store)
    if not profiles.empty:
        allp = unit_intervals(store, units).merge(units[["code", "role"]].rename(columns={"code": "unit"}),
                                                  on="unit")
        for well, zones in profiles.groupby("well_id"):
            written += figures.head_profile(out / f"profile_{_file_safe(well)}", well, zones,
                                            allp[allp["well_id"] == well], pairs[pairs["well_id"] == well],
                                            length_unit=store.settings.length_unit)
    tests = tests_with_units(store)
    tests = tests[tests["unit"].notna()]
    if not tests.empty:
        from .quantities import k_from_ms

        values = pd.DataFrame({"unit": tests["unit"], "log10k": np.log10(k_from_ms(tests["k_ms"].to_numpy(float),
                                                                                    k_unit))})
        rows = [r for r in unit_stats(store, k_unit=k_unit) if r["n_tests"]]
        written += figures.logk_distribution(out / "logk_by_unit", values, rows, k_unit=k_unit)
    for side_path in sorted(folder.glob("*_*.json")):
        side = json.loads(side_path.read_text())
        if "variogram" not in side or "quantity" not in side:
            continue
        v = side["variogram"]
        stem = side_path.stem
        if v.get("experimental"):
            written += figures.variogram_fit(out / f"variogram_{stem}", v["experimental"], v,
                                             title=f"{side['unit']} {side['quantity']}")
        xy, z, _, info = surface_points(store, side["unit"], side["quantity"], window=side.get("window"),
                                        at=side.get("at"), lower_unit=side.get("lower_unit"))
        vario = Variogram(v["model"], nugget=v["nugget"], sill=v["sill"], range=v["range"], angle=v.get("angle", 0),
                          ratio=v.get("ratio", 1))
        model, _ = make_interpolator(side["method"], xy, z, variogram=v["model"], nugget=vario.nugget,
                                     sill=vario.sill, range_=vario.range, neighbors=side.get("neighbors"))
        cv = crossval.leave_one_out(model, xy, z)
        written += figures.cross_validation(out / f"crossval_{stem}", z, cv["estimate"], std=cv["std"],
                                            label=f"{side['unit']} {side['quantity']} ({side['method']})",
                                            unit=info["value_unit"])
    return written


def _file_safe(text: str) -> str:
    import re

    return re.sub(r"[^A-Za-z0-9_.-]+", "_", str(text))[:80] or "well"


# -- model grid (SPEC 2.10) ----------------------------------------------------------
MODEL_MAX_CELLS = 20_000_000


def model_grid(store: Store, *, cell: float, out="model.nc", origin=None, shape=None, rotation: float = 0.0,
               layers: list[str] | None = None, kv_ratio: float = 10.0, k_source: str = "mean",
               min_thickness: float = 1.0, surfaces=None, max_cells: int | None = None) -> dict:
    """A regular model grid with one layer per unit: tops, bottoms, K_h, K_v, starting heads and an active mask.

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
    cover the units above and below it but not it (pinched out there); picks ending at a well's total
    depth do not give a thickness. Layers are stacked downward from the ground, so each top equals the
    bottom of the layer above.
    """
    import math

    from .export.modelgrid import write_model_grid
    from .interp import IDW

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
    crs_to_m = _crs_to_m(store)
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
    current = ground.copy()
    for code in layers:
        here = p[(p["unit"] == code) & known_base]
        if here.empty:  # never fully penetrated: use the penetrated thickness (a lower bound)
            here = p[p["unit"] == code]
        xy = here[["x", "y"]].to_numpy(float)
        b = here["thickness"].to_numpy(float)
        # wells whose picks bracket the unit (a unit above and below it) but lack it: zero thickness there
        by_well = p.groupby("well_id")["unit"].agg(set)
        absent = [w for w, us in by_well.items() if code not in us
                  and any(rank[x] < rank[code] for x in us) and any(rank[x] > rank[code] for x in us)]
        if absent:
            aw = wells.set_index("well_id").loc[absent]
            xy = np.vstack([xy, aw[["x", "y"]].to_numpy(float)])
            b = np.concatenate([b, np.zeros(len(aw))])
        thick = IDW(2.0, neighbors=12).fit(xy, b).predict(pts).reshape(nrow, ncol)
        thin = thick < min_thickness
        thick = np.where(thin, min_thickness, thick)
        tops.append(current)
        current = current - thick
        bottoms.append(current)
        pinched.append(thin.astype("int8"))
    top, bottom = np.array(tops), np.array(bottoms)
    # hydraulic conductivity (length unit per day)
    len_per_m = 1.0 / _length_to_m(store)
    stats_rows = {r["unit"]: r for r in unit_stats(store, k_unit="m/d")}
    folder = Path(surfaces) if surfaces is not None else Path(out).parent
    kh, kv = [], []
    for code in layers:
        if stats_rows[code]["k_geomean"] is None:
            raise InsufficientDataError(f"unit {code} has no K tests; its layer K is unknown")
        if k_source == "surface":
            grid_s, logk = read_surface(folder, code, "logk", store.location)
            k_md = 10.0 ** _sample_grid(grid_s, logk, pts).reshape(nrow, ncol)
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
        tif = folder / f"{code}_head.tif"
        if tif.is_file():
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
                 "min_thickness": min_thickness, "kv_ratio": kv_ratio, "k_source": k_source}
    from datetime import datetime, timezone

    history = (f"{datetime.now(timezone.utc).isoformat(timespec='seconds')} hydroatlas model_grid(cell={cell}, "
               f"origin={origin}, shape={shape}, rotation={rotation}, layers={layers}, kv_ratio={kv_ratio}, "
               f"k_source={k_source}, min_thickness={min_thickness})")
    source = f"hydroatlas store {store.location} (length unit {L}, vertical datum {store.settings.vertical_datum})"
    files = write_model_grid(out, arrays=arrays, active=active, x=xc, y=yc, layer_units=list(layers),
                             crs_wkt=store.settings.crs.to_wkt(), length_unit=L, grid_info=grid_info,
                             history=history, source=source, caution=CAUTION)
    return {"files": files, "layers": list(layers), "shape": (len(layers), nrow, ncol), "arrays": arrays,
            "active": active, "x": xc, "y": yc, "grid": grid_info}


def _sample_grid(grid, values, pts) -> np.ndarray:
    """Bilinear sample of a north-up grid at points (NaN outside or next to no-data)."""
    from scipy.interpolate import RegularGridInterpolator

    xs = grid.x_centers()
    ys = grid.y_centers()
    f = RegularGridInterpolator((ys[::-1], xs), np.asarray(values, float)[::-1], bounds_error=False,
                                fill_value=np.nan)
    return f(np.column_stack([pts[:, 1], pts[:, 0]]))
