"""Store jobs: create, import, assign zones to units, unit statistics, data-quality findings."""

from __future__ import annotations

from typing import Callable

import pandas as pd

from .. import assign, quality, stats
from ..errors import ParameterError
from ..selection import SelectionPolicy, left_out_by_unit, select_ktests, selection_record, zone_assignment
from ..store import Store, create_store
from ..store.importers import ImportReport, import_file


def init_store(location, *, crs, length_unit: str = "m", vertical_datum: str = "unspecified") -> Store:
    """Create a new store and return it open."""
    return create_store(location, crs=crs, length_unit=length_unit, vertical_datum=vertical_datum)


def import_data(store: Store, kind: str, path, *, input_crs=None,
                progress: Callable[[int], None] | None = None, clear_empty: bool = False) -> ImportReport:
    """Validate and import one file (see :mod:`hydroatlas.store.importers`)."""
    return import_file(store, kind, path, input_crs=input_crs, progress=progress, clear_empty=clear_empty)


def _record_table(kind: str) -> str:
    from ..store.importers import KINDS, TABLE_OF

    if kind not in KINDS:
        raise ParameterError(f"unknown kind {kind!r}; expected one of {', '.join(KINDS)}")
    return TABLE_OF.get(kind, kind)


def retire_records(store: Store, kind: str, ids: list[str], *, reason: str) -> int:
    """Take records out of every computation without deleting them; returns how many were retired.

    Each id is the record's natural key, its parts joined by '/' (``W1``, ``W1/P2``,
    ``W1/P2/slug@2024-05-01``). Rows that hang on a retired well, zone or spring
    (its zones, tests, heads, discharge) leave the computations with it.
    """
    if not reason or not reason.strip():
        raise ParameterError("a retirement needs a reason (--reason TEXT); it is kept with the record")
    with store.transaction():
        return store.set_retired(_record_table(kind), list(ids), reason=reason.strip())


def restore_records(store: Store, kind: str, ids: list[str]) -> int:
    """Bring retired records back into the computations; returns how many were restored."""
    with store.transaction():
        return store.set_retired(_record_table(kind), list(ids), reason=None)


def record_history(store: Store, kind: str, ident: str) -> list[dict]:
    """Every version of one record, oldest first (the last is the current one)."""
    return store.record_versions(_record_table(kind), ident)


def tests_with_units(store: Store, assignment: pd.DataFrame | None = None,
                     policy: SelectionPolicy | None = None) -> pd.DataFrame:
    """K tests that pass the selection policy (None: the default), joined with their zone's unit and flags.

    See :func:`hydroatlas.selection.select_ktests`, which also returns what was left out.
    """
    asg = zone_assignment(store) if assignment is None else assignment
    return select_ktests(store, policy, asg)[0]


def store_k_unit(store: Store, k_unit: str | None = None) -> str:
    """``k_unit`` in its canonical spelling, or the store's K unit (its length unit per day) when None."""
    from ..quantities import normalize_unit, store_units

    if k_unit is None:
        return store_units(store.settings.length_unit).k
    return normalize_unit(k_unit, "hydraulic conductivity")


def _poor_policy(policy: SelectionPolicy | None, exclude_poor: bool) -> SelectionPolicy | None:
    """``exclude_poor`` (the old option, now the default) against a policy that brings poor tests back."""
    if exclude_poor and policy is not None and policy.include_poor:
        raise ParameterError("give --include-poor or --exclude-poor, not both")
    return policy


def unit_stats_selected(store: Store, *, unit: str | None = None, per: str = "test", k_unit: str | None = None,
                        exclude_straddles: bool = False, exclude_poor: bool = False,
                        policy: SelectionPolicy | None = None) -> tuple[list[dict], dict]:
    """:func:`unit_stats` and the selection behind it (``{"policy": ..., "left_out": [...]}``)."""
    k_unit = store_k_unit(store, k_unit)
    units = store.read("units")
    if unit is not None and unit not in set(units["code"]):
        raise ParameterError(f"unit {unit!r} is not in the store; known units: {', '.join(units['code'])}")
    policy = _poor_policy(policy, exclude_poor)
    asg = zone_assignment(store)
    tests, left_out = select_ktests(store, policy, asg)
    rows = stats.unit_statistics(tests, units, per=per, k_unit=k_unit,
                                 exclude_straddles=exclude_straddles, exclude_poor=exclude_poor)
    members = {c: {c} for c in units["code"]}
    for code, chain in assign.unit_ancestors(units).items():
        for anc in chain:
            members.setdefault(anc, {anc}).add(code)
    n_out = left_out_by_unit(left_out, asg, members)
    for r in rows:
        r["n_left_out"] = int(n_out.get(r["unit"], 0))
    return [r for r in rows if unit is None or r["unit"] == unit], selection_record(policy, left_out)


def unit_stats(store: Store, *, unit: str | None = None, per: str = "test", k_unit: str | None = None,
               exclude_straddles: bool = False, exclude_poor: bool = False,
               policy: SelectionPolicy | None = None) -> list[dict]:
    """Per-unit K statistics (SPEC 2.4), optionally for one unit code; K in ``k_unit`` (default: the store's K
    unit, its length unit per day).

    Tests pass the selection policy first (poor-quality tests are out by default; ``exclude_poor`` is kept
    for old callers and changes nothing then). Each row adds ``n_left_out``: the unit's tests (sub-units
    included) that the policy left out. The result is a list whose ``selection`` attribute holds the policy
    and every test it left out (:class:`UnitStatistics`).
    """
    rows, selection = unit_stats_selected(store, unit=unit, per=per, k_unit=k_unit,
                                          exclude_straddles=exclude_straddles, exclude_poor=exclude_poor,
                                          policy=policy)
    return UnitStatistics(rows, selection)


class UnitStatistics(list):
    """The rows of :func:`unit_stats`: a list of dicts, with the selection behind them in ``selection``
    (``{"policy": ..., "left_out": [...]}``)."""

    def __init__(self, rows=(), selection: dict | None = None):
        super().__init__(rows)
        self.selection = selection if selection is not None else {"policy": None, "left_out": []}


def well_profiles(store: Store, *, k_unit: str | None = None, unit: str | None = None,
                  exclude_poor: bool = False, policy: SelectionPolicy | None = None) -> pd.DataFrame:
    """Per-well transmissivity and effective K_h / K_v over tested zones (tests that pass the policy).

    The selection is in ``frame.attrs["selection"]``.
    """
    policy = _poor_policy(policy, exclude_poor)
    tests, left_out = select_ktests(store, policy, zone_assignment(store))
    zone_k = stats.zone_log_means(tests).merge(
        tests[["well_id", "zone_id", "thickness"]].drop_duplicates(), on=["well_id", "zone_id"])
    out = stats.well_profiles(zone_k, k_unit=store_k_unit(store, k_unit), length_unit=store.settings.length_unit)
    out = out if unit is None else out[out["unit"] == unit].reset_index(drop=True)
    out.attrs["selection"] = selection_record(policy, left_out)
    return out


def check_store(store: Store) -> list[dict]:
    """Data-quality findings (straddles, gaps, orphans, outliers)."""
    asg = zone_assignment(store)
    findings = quality.find_issues(
        wells=store.read("wells"), zones=store.read("zones"), picks=store.read("picks"),
        units=store.read("units"), ktests=store.read("ktests", ["well_id", "zone_id", "test_id", "k_ms"]),
        heads=store.read("heads", ["well_id", "zone_id", "head"]), assignment=asg,
        length_unit=store.settings.length_unit)
    from ..store.gpkg_sql import geometry_mismatches

    retired = store.retired()
    for table, key in (("wells", "well_id"), ("springs", "spring_id")):
        gone = set(retired.loc[retired["table"] == table, "record"])
        for r in geometry_mismatches(store, table).itertuples():
            ident = getattr(r, key)
            if ident in gone:
                continue
            findings.append({"kind": "geometry_mismatch", "severity": "error",
                             "well_id": ident if table == "wells" else None, "zone_id": None, "unit": None,
                             "message": f"{table} {ident}: the point geometry ({r.geom_x:.6g}, {r.geom_y:.6g}) and "
                                        f"the x, y columns ({r.x:.6g}, {r.y:.6g}) disagree ({r.problem}); "
                                        "computations use x, y: re-import the record with the right x, y"})
    for r in retired.itertuples():
        findings.append({"kind": "retired", "severity": "info", "well_id": None, "zone_id": None, "unit": None,
                         "message": f"{r.table} {r.record} is retired since {r.retired_at} ({r.reason}); "
                                    "left out of every computation, 'hydroatlas restore' brings it back"})
    return findings


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
