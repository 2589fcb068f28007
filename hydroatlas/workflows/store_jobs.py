"""Store jobs: create, import, assign zones to units, unit statistics, data-quality findings."""

from __future__ import annotations

from typing import Callable

import pandas as pd

from .. import assign, quality, stats
from ..errors import ParameterError
from ..store import Store, create_store
from ..store.importers import ImportReport, import_file


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


CAUTION = ("Screening-level estimate for planning and model set-up, not a substitute for site-specific "
           "investigation or for the judgement of a licensed professional geoscientist or engineer; well "
           "construction, testing and pumping are governed by local rules and permits. Interpolated surfaces do "
           "not see conduits, faults or barriers; in karst, flow can be far faster than a smooth surface suggests.")


def _length_to_m(store: Store) -> float:
    from ..quantities import LENGTH_UNITS

    return LENGTH_UNITS[store.settings.length_unit]


def _crs_to_m(store: Store) -> float:
    crs = store.settings.crs
    if not crs.is_projected:
        raise ParameterError("surfaces, gradients and distances need a projected store CRS; this store uses "
                         f"{crs.name} (geographic). Create the store with a projected CRS (e.g. a UTM zone)")
    return float(crs.axis_info[0].unit_conversion_factor)


def _window(window):
    from ..heads import TimeWindow

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
