"""Heads, vertical differences, interpolated surfaces and gradients (SPEC 2.5-2.7)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .. import assign
from ..errors import InsufficientDataError, ParameterError
from ..export.names import ensure_folder, unit_path
from ..selection import DEFAULT_TOLERANCE_DAYS, SelectionPolicy
from ..selection import select_heads as select_zone_heads
from ..interp.methods import AUTO_GLOBAL_MAX, METHODS  # noqa: F401 (re-exported; the rules live in the core)
from ..store import Store
from ..study import Study, as_window
from ..cautions import caution_text


# -- heads, verticals, surfaces (SPEC 2.5-2.7) ------------------------------------
QUANTITIES = ("head", "logk", "dhead", "change")


def zone_heads(store: Store, *, window=None, at: str | None = None, assignment=None,
               policy: SelectionPolicy | None = None,
               tolerance_days: float = DEFAULT_TOLERANCE_DAYS) -> pd.DataFrame:
    """One head per zone (median in the window, nearest to a date within the tolerance, or median of all) with
    its unit, from the readings that pass the selection policy (None: the default policy).

    What the policy left out is in ``frame.attrs["selection"]``; see :func:`hydroatlas.selection.select_heads`.
    ``store`` may be a :class:`~hydroatlas.study.Study` (its tables and assignment are then reused).
    """
    study = Study.of(store, policy)
    if assignment is None:
        zh, left_out = study.select_heads(window=window, at=at, tolerance_days=tolerance_days)
    else:
        zh, left_out = select_zone_heads(study, study.policy, window=as_window(window), at=at,
                                         tolerance_days=tolerance_days, assignment=assignment)
    zh.attrs["selection"] = study.selection_record(left_out)
    return zh


def unit_intervals(store: Store, units: pd.DataFrame | None = None) -> pd.DataFrame:
    """Elevation interval of every unit at every well: the (finest) picks, plus inferred picks at wells without
    (:func:`hydroatlas.assign.unit_intervals`; ``units``: another units table than the store's)."""
    study = Study.of(store)
    if units is None:
        return study.unit_intervals
    return assign.unit_intervals(study.wells, study.picks, units)


def verticals(store: Store, *, window=None, at: str | None = None, policy: SelectionPolicy | None = None,
              tolerance_days: float = DEFAULT_TOLERANCE_DAYS):
    """Head profiles of multi-zone wells and the differences between successive zones.

    Heads and the K tests behind the leakage follow the selection policy (None: the default).
    Returns (pairs, profiles) DataFrames; see :func:`hydroatlas.heads.vertical_differences`.
    ``pairs.attrs["selection"]`` holds the policy and what it left out (heads and K tests).
    """
    from ..heads import head_profiles, vertical_differences
    from .store_jobs import unit_stats_selected

    study = Study.of(store, policy)
    zh, heads_out = study.select_heads(window=window, at=at, tolerance_days=tolerance_days)
    profiles = head_profiles(zh[["well_id", "zone_id", "head", "n_readings"]], study.assignment)
    rows, k_selection = unit_stats_selected(study, k_unit="m/s")
    k_ms = {r["unit"]: (r["k_geomean"] if r["k_geomean"] is not None else float("nan")) for r in rows}
    pairs = vertical_differences(profiles, study.units, k_ms, study.unit_intervals, length_to_m=study.length_to_m)
    pairs["leakage_unit"] = f"{study.settings.length_unit}/d"
    pairs.attrs["selection"] = study.selection_record(heads_out + k_selection["left_out"])
    return pairs, profiles


def surface_points(store: Store, unit: str, quantity: str, *, window=None, at: str | None = None,
                   lower_unit: str | None = None, policy: SelectionPolicy | None = None,
                   tolerance_days: float = DEFAULT_TOLERANCE_DAYS, baseline=None):
    """Well locations and values of a quantity for one unit (one value per well).

    Heads and K tests follow the selection policy (None: the default); ``info["selection"]`` holds the
    policy and what it left out.
    head: median head of each zone in the window, averaged over the well's zones in the unit;
    logk: log10 of K in the store's K unit (ft/d in a feet store, m/d in a metre store; ``info["k_unit"]``),
    the mean of log10 K of the well's tests in the unit;
    dhead: the unit's head minus the head of ``lower_unit`` at the same well (default: the next
    aquifer below, across any aquitard or confining unit; see :func:`default_lower_unit`);
    change: mean head in ``window`` minus mean head in ``baseline`` of each zone (both required), averaged
    over the well's zones in the unit (:mod:`hydroatlas.workflows.head_change`); ``info["change"]`` holds the
    per-zone table and the zones left out for lack of readings in one window.
    """
    if quantity not in QUANTITIES:
        raise ParameterError(f"unknown quantity {quantity!r}; expected one of {', '.join(QUANTITIES)}")
    study = Study.of(store, policy)
    units = study.units
    members = study.unit_members(unit)
    wells = study.wells[["well_id", "x", "y"]].set_index("well_id")
    info = {"unit": unit, "quantity": quantity}
    if quantity == "logk":
        t, left_out = study.select_ktests()
        info["selection"] = study.selection_record(left_out)
        t = t[t["unit"].isin(members)]
        if t.empty:
            raise InsufficientDataError(f"unit {unit} has no K tests")
        from ..quantities import k_from_ms
        from .store_jobs import store_k_unit

        k_unit = store_k_unit(study)
        lg = pd.Series(np.log10(k_from_ms(t["k_ms"].to_numpy(float), k_unit)), index=t.index)
        per_well = lg.groupby(t["well_id"]).mean()
        info["value_unit"] = f"log10({k_unit})"
        info["k_unit"] = k_unit
    elif quantity == "change":
        from .head_change import unit_changes, zone_head_changes

        if at is not None:
            raise ParameterError("a change of head compares two windows; give window= and baseline=, not at=",
                                 param="at")
        table, left_out, zones_out = zone_head_changes(study, window=window, baseline=baseline,
                                                       policy=study.policy, assignment=study.assignment)
        info["selection"] = study.selection_record(left_out)
        per_well, rows, zones_out = unit_changes(table, zones_out, members)
        info.update(value_unit=store.settings.length_unit, window=str(getattr(window, "text", window)),
                    baseline=str(getattr(baseline, "text", baseline)),
                    change={"table": rows, "zones_left_out": zones_out})
    else:
        zh, left_out = study.select_heads(window=window, at=at, tolerance_days=tolerance_days)
        info["selection"] = study.selection_record(left_out)
        info["tolerance_days"] = float(tolerance_days) if at is not None else None
        per_unit = zh.dropna(subset=["unit"]).groupby(["well_id", "unit"])["head"].mean().reset_index()
        here = per_unit[per_unit["unit"].isin(members)].groupby("well_id")["head"].mean()
        info["value_unit"] = store.settings.length_unit
        info["window"] = None if window is None else str(window if isinstance(window, str) else window.text)
        info["at"] = at
        if quantity == "head":
            per_well = here
            # a spring issuing from the unit is a point where its head equals the ground (common practice)
            springs = study.springs[["spring_id", "x", "y", "elev", "unit"]]
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
                below_code = lower_unit
                info["lower_unit_rule"] = "given (--lower-unit)"
            else:
                below_code, info["lower_unit_rule"] = default_lower_unit(units, unit, set(lower["unit"]))
            below_members = study.unit_members(below_code)
            below = lower[lower["unit"].isin(below_members)]
            if below.empty:
                raise InsufficientDataError(
                    f"unit {below_code} has no heads below {unit}"
                    + ("" if lower_unit is not None else f" ({info['lower_unit_rule']}); give lower_unit="),
                    param="lower_unit")
            below = below.groupby("well_id")["head"].mean()
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
        raise ParameterError("a fixed variogram needs both sill= and range_= (and optionally nugget=)",
                             param=("sill", "range_", "nugget"))
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
        raise InsufficientDataError(f"{exc}; pass fallback_idw=True to use inverse-distance weighting instead",
                                    param="fallback_idw") from None
    cls = OrdinaryKriging if method == "kriging" else UniversalKriging
    model = cls(v, neighbors=neighbors)
    return model, {"method": method, "variogram": v.to_dict(), "variogram_fitted": not fixed,
                   "neighbors": neighbors}


def build_surface(store: Store, unit: str, quantity: str, *, method: str = "kriging", window=None,
                  at: str | None = None, cell: float | None = None, variogram: str = "spherical", nugget=None,
                  sill=None, range_=None, neighbors: int | str | None = "auto", buffer: float | None = None,
                  out=".", fallback_idw: bool = False, max_cells: int | None = None, workers: int = 1,
                  lower_unit: str | None = None, progress=None, policy: SelectionPolicy | None = None,
                  tolerance_days: float = DEFAULT_TOLERANCE_DAYS, use_extent: bool = True,
                  compare_methods: bool = False, baseline=None, scheduler=None) -> dict:
    """Interpolate one quantity of one unit onto a grid and write GeoTIFF + JSON sidecar (+ gradients for heads).

    ``workers`` > 1 predicts the tiles in that many local (spawned) processes; ``scheduler`` on a Dask cluster
    instead: an address such as ``tcp://host:8786``, a scheduler file, or a ``distributed.Client``
    (:mod:`hydroatlas.interp.dask_tiles`). With a scheduler, and for grids of more than
    :data:`~hydroatlas.workflows.surface_tiles.STREAM_CELLS` cells, the tiles are written into the GeoTIFF as
    they arrive and the grid is never held whole (:mod:`hydroatlas.workflows.surface_tiles`); the numbers
    are the same either way.

    The sidecar's ``cross_validation`` holds the leave-one-out figures of the method used, or of every
    method (kriging, uk, idw) when ``compare_methods`` is True.

    Heads and K tests follow the selection policy (None: the default); the sidecar's ``selection`` says
    which policy and what it left out.
    Cells outside the unit's extent from the picks (for dhead, outside either unit's) are no-data unless
    ``use_extent`` is False; the sidecar's ``extent`` says whether it was applied and how many cells it removed.
    Returns the sidecar dict with the written paths under ``files``.
    """
    from ..export.rasters import write_geotiff, write_sidecar
    from ..interp import methods
    from ..interp.grid import MAX_CELLS, GridSpec, predict_grid, wants_std
    from ..quantities import crs_unit_label
    from .. import products
    from .surface_tiles import STREAM_CELLS, SurfaceMask, write_surface_tiles

    if isinstance(scheduler, str):  # connect first: a wrong address is refused before anything is read
        import inspect

        from ..interp.dask_tiles import connected

        args = {k: v for k, v in locals().items() if k in inspect.signature(build_surface).parameters}
        with connected(scheduler) as client:
            return build_surface(**{**args, "scheduler": client})
    # the registry: the store must take the record, and the digests come before any row is read
    digests = products.input_digests(store, "surface", quantity) if quantity in QUANTITIES else None
    products.ensure_writable(store)
    command = _surface_command(store, unit, quantity, method=method, window=window, at=at, baseline=baseline,
                               tolerance_days=tolerance_days, cell=cell, variogram=variogram, nugget=nugget,
                               sill=sill, range_=range_, neighbors=neighbors, lower_unit=lower_unit, buffer=buffer,
                               fallback_idw=fallback_idw, max_cells=max_cells, compare_methods=compare_methods,
                               policy=policy, out=out)
    study = Study.of(store, policy)
    crs_to_m = study.crs_to_m
    xy, z, well_ids, info = surface_points(study, unit, quantity, window=window, at=at, lower_unit=lower_unit,
                                           tolerance_days=tolerance_days, baseline=baseline)
    neighbors = methods.resolve_neighbors(neighbors, len(z))  # "auto": one global system up to 400 points
    methods.require_points(method, len(z), what=f"wells with {quantity} in unit {unit}")
    domain = study.domain(unit)
    (xmin, ymin, xmax, ymax), cell = grid_extent(xy, None if domain is None else domain.total_bounds, cell,
                                                 what=f"the {quantity} data of unit {unit}")
    model, minfo = make_interpolator(method, xy, z, variogram=variogram, nugget=nugget, sill=sill, range_=range_,
                                     neighbors=neighbors, fallback_idw=fallback_idw)
    model.fit(xy, z)
    max_cells = max_cells or MAX_CELLS
    grid = GridSpec.from_bounds(xmin, ymin, xmax, ymax, cell, crs=store.settings.crs.to_wkt(), max_cells=max_cells)
    dist = None
    if domain is not None:
        import shapely

        inside = shapely.contains_xy(domain.union_all(), xy[:, 0], xy[:, 1])
        if not inside.any():
            raise ParameterError(f"the domain polygon does not overlap the {quantity} data of unit {unit}")
        mask_info = {"kind": "domain polygon", "area_ids": list(domain["area_id"])}
    else:
        dist = buffer if buffer is not None else 0.25 * max(xmax - xmin, ymax - ymin)
        mask_info = {"kind": "buffer around data", "distance": dist}
    # a unit present in part of the area is not mapped where its picks show it absent
    extent_info = {"applied": False, "reason": "not asked (use_extent=False)"}
    codes, limited = [], False
    if use_extent:
        codes = [unit] + ([info["lower_unit"]] if info.get("lower_unit") else [])
        data_in, extent_info = extent_mask(study, codes, xy)
        limited = any(u["limited"] for u in extent_info["units"].values())
        extent_info["applied"] = limited
        if not limited:
            extent_info["reason"] = "no well shows the unit absent: present everywhere"
        extent_info["data_outside"] = [w for w, ok in zip(well_ids, data_in) if not ok]
    # the mask is made tile by tile (the same cells whether the grid is held whole or streamed)
    cells = SurfaceMask(grid, polygons=None if domain is None else domain.geometry, points=xy, distance=dist,
                        presences=[study.presence(c) for c in codes])

    def mask_checked():  # after a pass over every tile
        if domain is not None and not cells.cells_in_area:
            raise ParameterError(f"the domain polygon does not overlap the {quantity} data of unit {unit}")
        if use_extent:
            extent_info["cells_removed"] = cells.cells_removed
            if limited and not cells.cells_kept:
                raise InsufficientDataError(f"no cell of the {quantity} grid of unit {unit} lies inside the "
                                            "unit's extent from the picks")

    if progress is not None and hasattr(progress, "total"):  # a progress bar learns the whole job's size
        progress.total = int(grid.nrows)
    streamed = scheduler is not None or grid.nrows * grid.ncols > STREAM_CELLS
    est = std = None
    if not streamed:
        mask = cells.whole()
        mask_checked()
        est, std = predict_grid(model, grid, mask=mask, workers=workers, progress=progress)
    def other(m_name):  # another method on the same data, set up when cross-validated
        return lambda: make_interpolator(m_name, xy, z, variogram=variogram, nugget=nugget, sill=sill,
                                         range_=range_, neighbors=neighbors)[0]

    cv = methods.cross_validate_methods(xy, z, {m: model if m == minfo["method"] else other(m)
                                                for m in (METHODS if compare_methods else (minfo["method"],))})
    out = ensure_folder(out)
    names = [f"{quantity} estimate ({info['value_unit']})"]
    if wants_std(model):
        names.append("kriging standard deviation")
    raster_args = {"crs": store.settings.crs, "descriptions": names, "units": info["value_unit"],
                   "tags": {"caution": caution_text("surface"), "quantity": quantity, "unit": unit}}
    gradient_files = {}
    if streamed:
        tif, gradient_files = write_surface_tiles(store, unit, quantity, model, grid, cells, out,
                                                  raster_args=raster_args, crs_to_m=crs_to_m, scheduler=scheduler,
                                                  workers=workers, progress=progress, before_close=mask_checked)
    else:
        tif = write_geotiff(unit_path(out, unit, f"{quantity}.tif"), grid,
                            [est] + ([std] if std is not None else []), **raster_args)
    sidecar = {"unit": unit, "quantity": quantity, "value_unit": info["value_unit"], "k_unit": info.get("k_unit"),
               "distance_unit": crs_unit_label(store.settings.crs.axis_info[0].unit_name), **minfo,
               "n_points": int(len(z)), "wells": well_ids, "springs_as_heads": info.get("springs_as_heads", []),
               "window": info.get("window"), "at": info.get("at"), "tolerance_days": info.get("tolerance_days"),
               "selection": info["selection"],
               "lower_unit": info.get("lower_unit"), "lower_unit_rule": info.get("lower_unit_rule"),
               "cross_validation": cv, "selected_method": minfo["method"],
               "grid": grid.to_dict(), "mask": mask_info, "extent": extent_info,
               "crs": store.settings.crs.to_string(),
               "bands": names, "nodata": -9999.0, "store": store.location, "caution": caution_text("surface"),
               "files": {"raster": str(tif)}}
    if quantity == "change":  # the per-zone table behind the surface, and both windows
        from ..export.names import write_csv

        change = info["change"]
        sidecar.update(baseline=info["baseline"], change={
            "definition": "mean head in the window minus mean head in the baseline, per zone; per well the mean "
                          "over its zones in the unit; negative where heads fell",
            "n_zones": int(len(change["table"])), "zones_left_out": change["zones_left_out"]})
        sidecar["files"]["zones"] = str(write_csv(unit_path(out, unit, "change_zones.csv"), change["table"]))
    if quantity == "head":
        sidecar["files"].update(gradient_files if streamed else
                                write_gradients(store, unit, grid, est, out, crs_to_m=crs_to_m))
        sidecar["gradient_product"] = products.product_name(store, f"{unit}_gradient", sidecar["files"]["gradient"])
    sidecar["product"] = products.product_name(store, f"{unit}_{quantity}", tif)
    sidecar["files"]["sidecar"] = str(write_sidecar(unit_path(out, unit, f"{quantity}.json"), sidecar))
    _record_surface(store, sidecar, digests, command)
    return sidecar


def _surface_command(store, unit, quantity, *, method, window, at, baseline, tolerance_days, cell, variogram,
                     nugget, sill, range_, neighbors, lower_unit, buffer, fallback_idw, max_cells, compare_methods,
                     policy, out) -> str:
    """The command line that remakes a surface (recorded in the product registry)."""
    from .. import products

    def text(w):
        return None if w is None else (w if isinstance(w, str) else getattr(w, "text", str(w)))

    kriging = method in ("kriging", "uk")
    return products.command_line(
        "surface", store, ("--unit", unit), ("--quantity", quantity), ("--method", method),
        ("--window", text(window)), ("--baseline", text(baseline)), ("--at", at),
        ("--tolerance", tolerance_days if at is not None and tolerance_days != DEFAULT_TOLERANCE_DAYS else None),
        ("--cell", cell), ("--variogram", variogram if kriging and variogram != "spherical" else None),
        ("--nugget", nugget), ("--sill", sill), ("--range", range_),
        ("--neighbors", None if neighbors == "auto" else (neighbors or 0)), ("--lower-unit", lower_unit),
        ("--buffer", buffer), ("--fallback-idw", bool(fallback_idw)), ("--max-cells", max_cells),
        ("--compare-methods", bool(compare_methods)), *products.policy_args(policy), ("--out", str(out)))


def _record_surface(store, sidecar: dict, digests, command: str) -> None:
    """Record a surface (and, for heads, the gradient written beside it) in the product registry."""
    from .. import products

    unit, quantity = sidecar["unit"], sidecar["quantity"]
    head_window = {"window": sidecar.get("window"), "at": sidecar.get("at"),
                   "tolerance_days": sidecar.get("tolerance_days"), "baseline": sidecar.get("baseline")}
    params = {k: sidecar.get(k) for k in ("method", "selected_method", "variogram", "neighbors", "power",
                                           "n_points", "lower_unit", "lower_unit_rule", "distance_unit", "k_unit",
                                           "fallback_from")}
    params["grid"] = sidecar.get("grid")
    params["mask"] = sidecar.get("mask")
    files = [sidecar["files"]["raster"], sidecar["files"]["sidecar"]] + (
        [sidecar["files"]["zones"]] if "zones" in sidecar["files"] else [])
    products.record_product(store, kind="surface", name=sidecar["product"], unit=unit, quantity=quantity,
                            value_unit=sidecar.get("value_unit"), parameters=params, head_window=head_window,
                            selection=sidecar.get("selection"), files=files, command=command, digests=digests)
    if quantity == "head":
        gpkg = str(sidecar["files"]["flow_arrows"]).rsplit(":", 1)[0]
        products.record_product(store, kind="gradient", name=sidecar["gradient_product"], unit=unit,
                                quantity="gradient", value_unit="1",
                                parameters={"layer": "flow_arrows", "bands": ["hydraulic gradient (dimensionless)",
                                                                              "flow azimuth (degrees clockwise "
                                                                              "from grid north)"]},
                                head_window=head_window, selection=sidecar.get("selection"),
                                files=[sidecar["files"]["gradient"], gpkg], inputs=[sidecar["product"]],
                                command=command, digests=digests)


def grid_extent(xy, domain_bounds=None, cell: float | None = None, *, what: str = "the data"):
    """Bounds and cell size of a surface grid: the domain polygon's bounds, else the data's plus a margin.

    Without a domain the margin is a tenth of the data's extent. Data at one
    location or on one line have no area to grid: without ``cell`` they are
    refused (any cell size would be arbitrary, e.g. a 20 cm grid of 1 mm
    cells around a single well); with ``cell`` the margin is at least 50 cells.
    The automatic cell size is the readable value (1, 2, 2.5 or 5 times a power of ten) at or below 1/200
    of the longer side (:func:`hydroatlas.interp.grid.readable_cell`); the grid built on these bounds
    has its edges on whole multiples of the cell (:func:`hydroatlas.interp.grid.snapped_extent`).

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
                                            "line, or give a domain area (areas of kind domain) or cell=",
                                            param="cell")
            pad = max(0.1 * span, 50.0 * cell)
        else:
            pad = 0.1 * span
        bounds = (float(xmin - pad), float(ymin - pad), float(xmax + pad), float(ymax + pad))
    return bounds, (auto_cell(*bounds) if cell is None else cell)


def _domain_polygons(store: Store, unit: str):
    """The domain polygons of ``unit`` (see :meth:`hydroatlas.study.Study.domain`)."""
    return Study.of(store).domain(unit)


def write_gradients(store: Store, unit: str, grid, head, out, *, crs_to_m: float, arrows_across: int = 18) -> dict:
    """Gradient magnitude / flow azimuth raster and a flow_arrows point layer from a head grid."""
    from .. import flow
    from ..export.rasters import write_geotiff

    mag, az = flow.grid_gradient(head, grid.cell, vertical_per_horizontal=gradient_scale(store, crs_to_m))
    out = Path(out)
    tif = write_geotiff(unit_path(out, unit, "gradient.tif"), grid, [mag, az], **gradient_raster_args(store, unit))
    rows, cols = arrow_cells(grid, arrows_across)
    return {"gradient": str(tif), **write_flow_arrows(store, unit, grid, rows, cols, mag[rows, cols],
                                                      az[rows, cols], head[rows, cols], out)}


def gradient_scale(store: Store, crs_to_m: float) -> float:
    """Head units per CRS unit (the ``vertical_per_horizontal`` of :func:`hydroatlas.flow.grid_gradient`)."""
    from ..quantities import LENGTH_UNITS

    return LENGTH_UNITS[store.settings.length_unit] / crs_to_m


def gradient_raster_args(store: Store, unit: str) -> dict:
    """Keyword arguments of the gradient raster's writer (CRS, band names and units, tags)."""
    return {"crs": store.settings.crs,
            "descriptions": ["hydraulic gradient (dimensionless)", "flow azimuth (degrees clockwise from grid north)"],
            "units": ["1", "degree"], "overview_resampling": "nearest",
            "tags": {"caution": caution_text("gradient"), "quantity": "gradient", "unit": unit}}


def arrow_cells(grid, arrows_across: int = 18) -> tuple[np.ndarray, np.ndarray]:
    """Rows and columns of the cells that may carry a flow arrow: every ``step``-th cell, about
    ``arrows_across`` along the longer side, in row-major order."""
    step = max(1, int(max(grid.nrows, grid.ncols) // arrows_across))
    rows, cols = np.mgrid[step // 2:grid.nrows:step, step // 2:grid.ncols:step]
    return rows.ravel(), cols.ravel()


def write_flow_arrows(store: Store, unit: str, grid, rows, cols, mag, az, head, out) -> dict:
    """The flow_arrows layer of OUT/layers.gpkg at cells (rows, cols) with their gradient, azimuth and head;
    cells without a gradient (NaN or 0) get no arrow, and the unit's earlier arrows are replaced."""
    import geopandas as gpd
    import pyogrio

    from ..export.layers import write_layer

    mag, az, head = (np.asarray(v, float) for v in (mag, az, head))
    ok = np.isfinite(mag) & (mag > 0)
    rows, cols = np.asarray(rows)[ok], np.asarray(cols)[ok]
    xs = grid.x_centers()[cols]
    ys = grid.y_centers()[rows]
    arrows = gpd.GeoDataFrame({"unit": unit, "azimuth": az[ok], "gradient": mag[ok], "head": head[ok]},
                              geometry=gpd.points_from_xy(xs, ys), crs=store.settings.crs)
    out = Path(out)
    gpkg = out / "layers.gpkg"
    if gpkg.exists() and "flow_arrows" in {n for n, _ in pyogrio.list_layers(gpkg)}:
        old = pyogrio.read_dataframe(gpkg, layer="flow_arrows")
        old = old[old["unit"] != unit]
        if not old.empty:
            arrows = gpd.GeoDataFrame(pd.concat([old, arrows], ignore_index=True), crs=store.settings.crs)
    write_layer(gpkg, "flow_arrows", arrows)
    return {"flow_arrows": f"{gpkg}:flow_arrows"}


def three_point_wells(store: Store, unit: str, well_ids: list[str], *, window=None, at=None,
                      policy: SelectionPolicy | None = None, tolerance_days: float = DEFAULT_TOLERANCE_DAYS) -> dict:
    """Three-point gradient and flow azimuth from the heads of three wells in one unit (heads that pass the
    selection policy; None: the default)."""
    from .. import flow

    if len(well_ids) != 3:
        raise ParameterError(f"give exactly three wells; got {len(well_ids)}")
    study = Study.of(store, policy)
    xy, z, wells, info = surface_points(study, unit, "head", window=window, at=at, tolerance_days=tolerance_days)
    where = {w: i for i, w in enumerate(wells)}
    missing = [w for w in well_ids if w not in where]
    if missing:
        why = sorted({f"{e['well_id']}: {e['reason']}" for e in info["selection"]["left_out"]
                      if e["well_id"] in missing})
        raise ParameterError(f"well(s) {', '.join(missing)} have no head in unit {unit}"
                             + (f" (left out by the selection: {'; '.join(why)})" if why else ""))
    sel = [where[w] for w in well_ids]
    res = flow.three_point(xy[sel], z[sel] * study.length_to_m / study.crs_to_m)
    res.update({"unit": unit, "wells": well_ids, "heads": z[sel].tolist(), "selection": info["selection"]})
    return res


def read_surface(folder, unit: str, quantity: str, store_path: str):
    """A surface GeoTIFF named ``<unit>_<quantity>.tif`` in ``folder`` as (grid, band-1 array); clear error when
    missing. Commands find their surfaces through the product registry (:mod:`hydroatlas.products`) and read
    the product's file with :func:`read_grid`."""
    path = unit_path(folder, unit, f"{quantity}.tif")
    if not path.is_file():
        raise ParameterError(f"no {quantity} surface for unit {unit} in {folder}; make it with "
                             f"'hydroatlas surface {store_path} --unit {unit} --quantity {quantity} --out {folder}'")
    return read_grid(path)


def read_grid(path):
    """Band 1 of a north-up GeoTIFF with square cells (a product's raster) as (grid, array); no-data as NaN."""
    import rasterio

    from ..interp.grid import GridSpec

    path = Path(path)
    with rasterio.open(path) as src:
        band = src.read(1, masked=True).filled(np.nan).astype(float)
        t = src.transform
        grid = GridSpec(t.c, t.f, t.a, src.height, src.width, src.crs.to_wkt() if src.crs else None)
    if abs(t.e + t.a) > 1e-9 * abs(t.a) or t.b or t.d:
        raise ParameterError(f"{path} is not a north-up grid with square cells")
    return grid, band


def read_logk_m_per_d(folder, unit: str, store: Store):
    """A log-K surface made by `hydroatlas surface --quantity logk` as (grid, K in m/d, K unit of the surface).

    ``folder`` is the log-K surface product (:class:`hydroatlas.products.Product`) or a folder holding
    ``<unit>_logk.tif``. The surface holds log10 of K in the unit its sidecar names (``k_unit``; older sidecars
    say it in ``value_unit`` as 'log10(m/d)'); without a sidecar, the store's K unit.
    """
    import json
    import re

    from ..quantities import convert
    from .store_jobs import store_k_unit

    if hasattr(folder, "files"):  # a product of the registry
        grid, logk = read_grid(folder.file("logk.tif"))
        side = folder.file("logk.json")
    else:
        grid, logk = read_surface(folder, unit, "logk", store.location)
        side = unit_path(folder, unit, "logk.json")
    k_unit = None
    if side.is_file():
        meta = json.loads(side.read_text())
        match = re.fullmatch(r"log10\((.+)\)", str(meta.get("value_unit", "")))
        k_unit = meta.get("k_unit") or (match.group(1) if match else None)
    k_unit = store_k_unit(store, k_unit)
    return grid, convert(10.0 ** logk, k_unit, "m/d", "hydraulic conductivity"), k_unit


# -- unit extent and the default lower unit (issue 10) ----------------------------------
def default_lower_unit(units: pd.DataFrame, unit: str, with_heads=()) -> tuple[str, str]:
    """The unit whose head a dhead surface of ``unit`` subtracts when none is given, and the rule used.

    The next unit of role aquifer below ``unit`` in rank order, across any aquitard, confining or other
    unit between them (the head step across an aquitard is the difference between the aquifers on its
    two sides). Where no aquifer lies below, the next unit below that has heads (``with_heads``).
    """
    members = assign.unit_members(units, unit)
    rank = dict(zip(units["code"], units["rank"]))
    hi = max(rank[c] for c in members)
    below = units[(units["rank"] > hi) & ~units["code"].isin(members)].sort_values("rank")
    aquifers = below[below["role"] == "aquifer"]
    if not aquifers.empty:
        code = aquifers["code"].iloc[0]
        crossed = [c for c in below["code"] if rank[c] < rank[code]]
        return code, f"next aquifer below {unit}" + (f", across {', '.join(crossed)}" if crossed else "")
    with_heads = [c for c in below["code"] if c in set(with_heads)]
    if not with_heads:
        raise InsufficientDataError(f"no unit below {unit} has heads; give lower_unit=", param="lower_unit")
    return with_heads[0], f"next unit below {unit} with heads (no aquifer lies below it)"


def unit_presence_of(store: Store, unit: str, units: pd.DataFrame | None = None) -> pd.DataFrame:
    """Presence of a unit at every well from the store's picks (see :func:`hydroatlas.assign.unit_presence`);
    ``units``: another units table than the store's."""
    study = Study.of(store)
    if units is None:
        return study.presence(unit)
    assign.unit_members(units, unit)
    return assign.unit_presence(study.picks, study.read("wells", ["well_id", "x", "y"]), units, unit)


def extent_mask(store: Store, codes, points, *, rows_per_tile: int = 256) -> tuple[np.ndarray, dict]:
    """True inside the extent of every unit in ``codes`` (where the nearest well with picks has it).

    ``points`` is an array of shape (n, 2) in the store CRS, or a grid (:class:`~hydroatlas.interp.grid.GridSpec`,
    cell centres, done in tiles of rows) giving a mask of the grid's shape. Returns the mask and a
    summary for a sidecar: the rule, and per unit the number of wells that show it present, absent and
    unknown.
    """
    study = Study.of(store)
    grid = points if hasattr(points, "centers") else None
    inside = np.ones(grid.shape if grid is not None else len(points), bool)
    per_unit = {}
    for code in dict.fromkeys(c for c in codes if c is not None):
        pres = study.presence(code)
        known = pres["present"].dropna().astype(bool)
        per_unit[code] = {"wells_present": int(known.sum()), "wells_absent": int((~known).sum()),
                          "wells_unknown": int(pres["present"].isna().sum()),
                          "limited": bool((~known).any())}
        if grid is None:
            inside &= assign.inside_extent(pres, points)
            continue
        for r0 in range(0, grid.nrows, rows_per_tile):
            r1 = min(grid.nrows, r0 + rows_per_tile)
            inside[r0:r1] &= assign.inside_extent(pres, grid.centers(r0, r1)).reshape(r1 - r0, grid.ncols)
    info = {"rule": "present where the nearest well with a known presence has the unit; a unit is absent at a "
                    "well where the picks above and below its position touch or a pick of it has zero "
                    "thickness, unknown where the log does not reach it",
            "units": per_unit}
    return inside, info
