"""The change of head per zone between two time windows (``surface --quantity change``, issue 14).

A drought shows as the fall of head from a baseline period to a later window. Per zone the change is the mean
of the zone's readings inside ``window`` minus the mean of its readings inside ``baseline``, both from the
readings that pass the selection policy (:mod:`hydroatlas.selection`). A zone needs readings in both windows;
a zone with readings in only one is listed as left out, with the reason and the number of readings it had.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import InsufficientDataError, ParameterError
from ..heads import TimeWindow
from ..selection import SelectionPolicy, select_readings
from ..store import Store

#: columns of the per-zone change table, in order (heads and changes in the store's length unit)
CHANGE_COLUMNS = ["well_id", "zone_id", "unit", "x", "y", "baseline_mean", "baseline_count", "window_mean",
                  "window_count", "change", "length_unit"]

REASON_NO_BASELINE = "no reading in the baseline {text} after the selection"
REASON_NO_WINDOW = "no reading in the window {text} after the selection"


def change_windows(window, baseline) -> tuple[TimeWindow, TimeWindow]:
    """``window`` and ``baseline`` as :class:`~hydroatlas.heads.TimeWindow`; both required, not overlapping.

    Raises
    ------
    ParameterError
        When either is missing or not an ISO 8601 interval, or when they overlap (a reading inside both
        would count on both sides of the difference).
    """
    missing = [name for name, value in (("window", window), ("baseline", baseline)) if value is None]
    if missing:
        raise ParameterError("a change of head needs both window= and baseline= (ISO 8601 intervals FROM/TO); "
                             f"missing {' and '.join(m + '=' for m in missing)}", param=tuple(missing))
    w = window if isinstance(window, TimeWindow) else TimeWindow.parse(window, name="window=")
    b = baseline if isinstance(baseline, TimeWindow) else TimeWindow.parse(baseline, name="baseline=")
    if w.start <= b.end and b.start <= w.end:
        raise ParameterError(f"window= {w.text} and baseline= {b.text} overlap; a change of head compares two "
                             "separate periods", param=("window", "baseline"))
    return w, b


def window_means(readings: pd.DataFrame, window: TimeWindow) -> pd.DataFrame:
    """Mean head and number of readings of each zone inside ``window``.

    Parameters
    ----------
    readings : DataFrame
        well_id, zone_id, measured_at (ISO 8601 text), head (store length unit).

    Returns
    -------
    DataFrame
        well_id, zone_id, mean, count; one row per zone with at least one reading inside the window.
    """
    t = pd.to_datetime(readings["measured_at"], format="ISO8601")
    inside = readings[((t >= window.start) & (t <= window.end)).to_numpy()]
    g = inside.groupby(["well_id", "zone_id"], sort=True)["head"]
    return g.agg(mean="mean", count="size").reset_index()


def head_changes(window_readings: pd.DataFrame, baseline_readings: pd.DataFrame, window: TimeWindow,
                 baseline: TimeWindow) -> tuple[pd.DataFrame, list[dict]]:
    """Per-zone change of mean head from ``baseline`` to ``window`` (pure; no store).

    Parameters
    ----------
    window_readings, baseline_readings : DataFrame
        well_id, zone_id, measured_at, head of the readings to use (readings outside the respective window
        are ignored).
    window, baseline : TimeWindow

    Returns
    -------
    (DataFrame, list of dict)
        well_id, zone_id, baseline_mean, baseline_count, window_mean, window_count, change (window mean minus
        baseline mean; negative where heads fell); and one entry per zone with readings in only one of the
        two windows: {"well_id", "zone_id", "reason", "count"} (count: its readings in the other window).
    """
    w = window_means(window_readings, window).rename(columns={"mean": "window_mean", "count": "window_count"})
    b = window_means(baseline_readings, baseline).rename(columns={"mean": "baseline_mean",
                                                                  "count": "baseline_count"})
    both = b.merge(w, on=["well_id", "zone_id"], how="outer", sort=True)
    left_out = []
    for row in both[both["baseline_count"].isna() | both["window_count"].isna()].itertuples(index=False):
        no_base = pd.isna(row.baseline_count)
        reason = (REASON_NO_BASELINE.format(text=baseline.text) if no_base
                  else REASON_NO_WINDOW.format(text=window.text))
        count = row.window_count if no_base else row.baseline_count
        left_out.append({"well_id": str(row.well_id), "zone_id": str(row.zone_id), "reason": reason,
                         "count": int(count)})
    kept = both.dropna(subset=["baseline_count", "window_count"]).reset_index(drop=True)
    kept = kept.astype({"baseline_count": int, "window_count": int})
    kept["change"] = kept["window_mean"] - kept["baseline_mean"]
    return kept[["well_id", "zone_id", "baseline_mean", "baseline_count", "window_mean", "window_count",
                 "change"]], left_out


def zone_head_changes(store: Store, *, window, baseline, policy: SelectionPolicy | None = None,
                      assignment: pd.DataFrame | None = None) -> tuple[pd.DataFrame, list[dict], list[dict]]:
    """The change of head of every zone between ``baseline`` and ``window``, from the store.

    Parameters
    ----------
    window, baseline : str or TimeWindow
        ISO 8601 intervals FROM/TO; both required, not overlapping.
    policy : SelectionPolicy, optional
        Which readings count (None: the default policy).
    assignment : DataFrame, optional
        The zone assignment (computed when not given).

    Returns
    -------
    (DataFrame, list of dict, list of dict)
        The change table (:data:`CHANGE_COLUMNS`; x, y of the well in the store CRS, heads in the store's
        length unit), what the selection policy left out of the two windows (``selection`` entries), and the
        zones left out for lack of readings in one window, each with its unit.

    Raises
    ------
    InsufficientDataError
        When a window holds no reading at all, or no zone has readings in both.
    """
    from .store_jobs import zone_assignment

    w, b = change_windows(window, baseline)
    win_readings, left_w = select_readings(store, policy, window=w)
    base_readings, left_b = select_readings(store, policy, window=b)
    frame, zones_out = head_changes(win_readings, base_readings, w, b)
    asg = zone_assignment(store) if assignment is None else assignment
    frame = frame.merge(asg[["well_id", "zone_id", "unit", "x", "y"]], on=["well_id", "zone_id"], how="left")
    frame["length_unit"] = store.settings.length_unit
    unit_of = {(wid, z): u for wid, z, u in asg[["well_id", "zone_id", "unit"]].itertuples(index=False)}
    for e in zones_out:
        u = unit_of.get((e["well_id"], e["zone_id"]))
        e["unit"] = u if isinstance(u, str) else None
    if frame.empty:
        raise InsufficientDataError(f"no zone has head readings in both the baseline {b.text} and the window "
                                    f"{w.text} after the selection")
    return frame[CHANGE_COLUMNS], left_w + left_b, zones_out


def unit_changes(frame: pd.DataFrame, zones_out: list[dict], members) -> tuple[pd.Series, pd.DataFrame, list]:
    """The per-well change of one unit: the mean change over the well's zones in the unit.

    Parameters
    ----------
    frame : DataFrame
        From :func:`zone_head_changes`.
    zones_out : list of dict
        Its zones left out (each with ``unit``).
    members : set of str
        The unit's code and the codes of its sub-units.

    Returns
    -------
    (Series, DataFrame, list of dict)
        Change per well (index well_id), the rows of ``frame`` in the unit, and the left-out zones in the unit.
    """
    rows = frame[frame["unit"].isin(members)].reset_index(drop=True)
    per_well = rows.groupby("well_id", sort=True)["change"].mean()
    return per_well[np.isfinite(per_well)], rows, [e for e in zones_out if e.get("unit") in members]
