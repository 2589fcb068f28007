"""Store jobs: create, import, assign zones to units, unit statistics, data-quality findings."""

from __future__ import annotations

from typing import Callable

import pandas as pd

from .. import assign, quality, stats
from ..cautions import CAUTION  # noqa: F401 - re-exported as hydroatlas.workflows.CAUTION; products use caution_text
from ..errors import ParameterError
from ..selection import SelectionPolicy, left_out_by_unit, select_ktests
from ..store import Store, create_store
from ..store.importers import ImportReport, import_file
from ..study import Study


def init_store(location, *, crs, length_unit: str = "m", vertical_datum: str = "unspecified") -> Store:
    """Create a new store and return it open."""
    return create_store(location, crs=crs, length_unit=length_unit, vertical_datum=vertical_datum)


def import_data(store: Store, kind: str, path, *, input_crs=None,
                progress: Callable[[int], None] | None = None, clear_empty: bool = False) -> ImportReport:
    """Validate and import one file (see :mod:`hydroatlas.store.importers`)."""
    return import_file(store, kind, path, input_crs=input_crs, progress=progress, clear_empty=clear_empty)


def copy_store(src, dst, *, progress=None) -> dict[str, int]:
    """Copy the whole store at ``src`` into a new store at ``dst``, GeoPackage or PostGIS either way, losing nothing
    (:func:`hydroatlas.store.copying.copy_store`); returns the rows copied per table."""
    from ..store.copying import copy_store as _copy

    return _copy(src, dst, progress=progress)


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
        raise ParameterError("a retirement needs a reason (reason=TEXT); it is kept with the record", param="reason")
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

    See :func:`hydroatlas.selection.select_ktests`, which also returns what was left out. ``store`` may be a
    :class:`~hydroatlas.study.Study`.
    """
    study = Study.of(store, policy)
    if assignment is None:
        return study.ktests()
    return select_ktests(study, study.policy, assignment)[0]


def zone_assignment(store: Store) -> pd.DataFrame:
    """Every zone with its unit, overlap fraction and flags (SPEC 2.3), from the store's active records
    (:attr:`hydroatlas.study.Study.assignment`; ``store`` may be a Study, whose assignment is reused)."""
    return Study.of(store).assignment


def store_k_unit(store: Store, k_unit: str | None = None) -> str:
    """``k_unit`` in its canonical spelling, or the store's K unit (its length unit per day) when None."""
    from ..quantities import normalize_unit, store_units

    if k_unit is None:
        return store_units(store.settings.length_unit).k
    return normalize_unit(k_unit, "hydraulic conductivity")


def _poor_policy(policy: SelectionPolicy | None, exclude_poor: bool) -> SelectionPolicy | None:
    """``exclude_poor`` (the old option, now the default) against a policy that brings poor tests back."""
    if exclude_poor and policy is not None and policy.include_poor:
        raise ParameterError("give include_poor=True or exclude_poor=True, not both",
                             param=("include_poor", "exclude_poor"))
    return policy


def unit_stats_selected(store: Store, *, unit: str | None = None, per: str = "test", k_unit: str | None = None,
                        exclude_straddles: bool = False, exclude_poor: bool = False,
                        policy: SelectionPolicy | None = None) -> tuple[list[dict], dict]:
    """:func:`unit_stats` and the selection behind it (``{"policy": ..., "left_out": [...]}``).

    ``store`` may be a :class:`~hydroatlas.study.Study` (its tables, assignment and K-test selection are reused).
    """
    k_unit = store_k_unit(store, k_unit)
    study = Study.of(store, policy)
    units = study.units
    if unit is not None and unit not in set(units["code"]):
        raise ParameterError(f"unit {unit!r} is not in the store; known units: {', '.join(units['code'])}")
    _poor_policy(study.policy, exclude_poor)
    asg = study.assignment
    if getattr(study.store, "sql_aggregates", False):  # a server store: the tests stay in the database
        rows, left_out = unit_stats_in_store(study, per=per, k_unit=k_unit, exclude_straddles=exclude_straddles)
    else:
        tests, left_out = study.select_ktests()
        rows = stats.unit_statistics(tests, units, per=per, k_unit=k_unit,
                                     exclude_straddles=exclude_straddles, exclude_poor=exclude_poor)
    members = {c: {c} for c in units["code"]}
    for code, chain in assign.unit_ancestors(units).items():
        for anc in chain:
            members.setdefault(anc, {anc}).add(code)
    n_out = left_out_by_unit(left_out, asg, members)
    for r in rows:
        r["n_left_out"] = int(n_out.get(r["unit"], 0))
    return [r for r in rows if unit is None or r["unit"] == unit], study.selection_record(left_out)


def unit_stats_in_store(study: Study, *, per: str = "test", k_unit: str = "m/d",
                        exclude_straddles: bool = False) -> tuple[list[dict], list[dict]]:
    """The rows of :func:`hydroatlas.stats.unit_statistics` with the K tests aggregated by the store
    (``Store.aggregate_logk``: in SQL on PostGIS, in pandas on a GeoPackage), and what the policy left out.

    The zones' units come from the study's assignment; the tests never reach the client on a server store.
    """
    from ..selection import REASON_EXCLUDED, REASON_POOR

    store, policy, units = study.store, study.policy, study.units
    groups = stats.unit_groups(study.assignment, units, exclude_straddles=exclude_straddles)
    agg = store.aggregate_logk(groups, per=per, exclude_wells=policy.exclude_wells, include_poor=policy.include_poor)
    rows = stats.unit_statistics_from_aggregates(agg, units, per=per, k_unit=k_unit)
    counts = store.left_out_ktests(exclude_wells=policy.exclude_wells, include_poor=policy.include_poor)
    left_out = sorted(({"what": "ktests", "well_id": str(w), "zone_id": None if pd.isna(z) else str(z),
                        "reason": REASON_EXCLUDED if bool(ex) else REASON_POOR, "count": int(n)}
                       for w, z, ex, n in counts[["well_id", "zone_id", "excluded", "count"]].itertuples(index=False)),
                      key=lambda e: (e["well_id"], e["zone_id"] or "", e["reason"]))
    return rows, left_out


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
    study = Study.of(store, policy)
    _poor_policy(study.policy, exclude_poor)
    tests, left_out = study.select_ktests()
    zone_k = stats.zone_log_means(tests).merge(
        tests[["well_id", "zone_id", "thickness"]].drop_duplicates(), on=["well_id", "zone_id"])
    out = stats.well_profiles(zone_k, k_unit=store_k_unit(store, k_unit), length_unit=store.settings.length_unit)
    out = out if unit is None else out[out["unit"] == unit].reset_index(drop=True)
    out.attrs["selection"] = study.selection_record(left_out)
    return out


def check_store(store: Store) -> list[dict]:
    """Data-quality findings (straddles, gaps, orphans, outliers)."""
    study = Study.of(store)
    store = study.store
    findings = quality.find_issues(
        wells=study.wells, zones=study.zones, picks=study.picks, units=study.units,
        ktests=study.read("ktests", ["well_id", "zone_id", "test_id", "k_ms"]),
        heads=study.read("heads", ["well_id", "zone_id", "head"]), assignment=study.assignment,
        length_unit=store.settings.length_unit)
    from ..store.gpkg_sql import geometry_mismatches

    retired = store.retired()
    for table, key in (("wells", "well_id"), ("springs", "spring_id")):
        gone = set(retired.loc[retired["table"] == table, "record"])
        own = getattr(store, "geometry_mismatches", None)  # a server backend checks in its own SQL
        for r in (own(table) if own else geometry_mismatches(store, table)).itertuples():
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


def _length_to_m(store: Store) -> float:
    """Kept for modules not yet moved: :func:`hydroatlas.study.metres_per_length_unit`."""
    from ..study import metres_per_length_unit

    return metres_per_length_unit(store.settings)


def _crs_to_m(store: Store) -> float:
    """Kept for modules not yet moved: :func:`hydroatlas.study.metres_per_crs_unit`."""
    from ..study import metres_per_crs_unit

    return metres_per_crs_unit(store.settings)


def _unit_members(units: pd.DataFrame, code: str) -> set[str]:
    """Kept for modules not yet moved: :func:`hydroatlas.assign.unit_members`."""
    return assign.unit_members(units, code)
