"""One selection policy for every command: which K tests and head readings go into a computation.

Every command that computes from K tests or heads (stats, verticals, surface, threepoint, paths, drawdown,
grid, map, layers, figures) selects them here, so that a reading left out of one product is left out of all
of them, for the same reason.

By default:

- K tests and head readings of quality ``poor`` are left out (``include_poor`` brings them back);
- water levels in wells of kind ``pumping`` or ``supply`` are left out of head selections: a level in a
  pumping well is the regional head minus the cone of depression and the well loss, often tens of feet
  below the head of the formation around it (``include_pumping_wells`` brings them back);
- head readings in a zone, or anywhere in a well, with a pumping record active at the reading's time
  (``start <= measured_at <= end``, an empty ``end`` meaning still pumping; a record with an empty
  ``zone_id`` covers the whole well) are left out for the same reason;
- the wells named in ``exclude_wells`` are left out of everything; an unknown id is an error.

Retired records never reach this module: :meth:`Store.read` leaves them out. Each selection returns, beside
its frame, a ``left_out`` list of what was left out and why, one entry per zone and reason::

    {"what": "heads" | "ktests", "well_id": str, "zone_id": str | None, "reason": str, "count": int}

``count`` is the number of readings (or tests) of that zone left out for that reason. Output sidecars store
``{"policy": policy.to_dict(), "left_out": [...]}`` under the key ``"selection"`` (:func:`selection_record`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import InsufficientDataError, ParameterError

#: well kinds whose water levels are not heads of the formation (cone of depression and well loss)
PUMPING_KINDS = ("pumping", "supply")
#: days a reading may lie from the date asked for (``--at``) and still stand for it
DEFAULT_TOLERANCE_DAYS = 31.0

REASON_EXCLUDED = "well left out by exclude_wells"
REASON_POOR = "quality poor"
REASON_PUMPING_KIND = "level in a well of kind {kind}"
REASON_PUMPING_ACTIVE = "pumping record active at the reading's time"
REASON_TOLERANCE = "no reading within {days:g} days of {date}"

# which parameter brings back what a reason left out (for the notes; a front end renames HINT_PARAMS)
_BRING_BACK = {REASON_POOR: "include_poor=True", REASON_PUMPING_ACTIVE: "include_pumping_wells=True",
               **{REASON_PUMPING_KIND.format(kind=k): "include_pumping_wells=True" for k in PUMPING_KINDS}}
#: the parameters the texts of :func:`describe` may name (as ``name=``, see :meth:`HydroatlasError.renamed`)
HINT_PARAMS = ("include_poor", "include_pumping_wells", "tolerance_days")


@dataclass(frozen=True)
class SelectionPolicy:
    """Which K tests and head readings a computation uses; checks itself on creation.

    Parameters
    ----------
    include_poor : bool
        Keep K tests and head readings of quality ``poor`` (left out by default).
    include_pumping_wells : bool
        Keep water levels in wells of kind pumping or supply, and readings taken while a pumping record of
        their zone or well was active (left out of head selections by default).
    exclude_wells : tuple of str
        Well ids left out of every selection; a comma-separated text is split. Ids are checked against the
        store when a selection is made.
    """

    include_poor: bool = False
    include_pumping_wells: bool = False
    exclude_wells: tuple[str, ...] = ()

    def __post_init__(self):
        for name in ("include_poor", "include_pumping_wells"):
            value = getattr(self, name)
            if not isinstance(value, (bool, np.bool_)):
                raise ParameterError(f"The '{name}' parameter of SelectionPolicy must be True or False. "
                                     f"Got {value!r} instead.")
            object.__setattr__(self, name, bool(value))
        wells = self.exclude_wells
        if wells is None:
            wells = ()
        if isinstance(wells, str):
            wells = wells.split(",")
        try:
            items = [str(w).strip() for w in wells]
        except TypeError:
            raise ParameterError("The 'exclude_wells' parameter of SelectionPolicy must be well ids (a list, or "
                                 f"a text of ids separated by commas). Got {wells!r} instead.") from None
        if any(not w for w in items):
            raise ParameterError(f"exclude_wells= holds an empty well id ({','.join(items)!r}); "
                                 "give ids separated by commas, e.g. W1,W2", param="exclude_wells")
        object.__setattr__(self, "exclude_wells", tuple(dict.fromkeys(items)))

    def to_dict(self) -> dict:
        """The policy as plain JSON values (for sidecars)."""
        return {"include_poor": self.include_poor, "include_pumping_wells": self.include_pumping_wells,
                "exclude_wells": list(self.exclude_wells)}

    @classmethod
    def from_dict(cls, data: dict | None) -> "SelectionPolicy":
        """The policy stored in a sidecar by :meth:`to_dict` (None or {} gives the default policy)."""
        data = data or {}
        return cls(include_poor=bool(data.get("include_poor", False)),
                   include_pumping_wells=bool(data.get("include_pumping_wells", False)),
                   exclude_wells=tuple(data.get("exclude_wells") or ()))


def resolve(store, policy: SelectionPolicy | None) -> SelectionPolicy:
    """``policy`` (or the default policy), with its excluded well ids checked against the store.

    A retired well counts as known (it is out already); an id the store never held is a ParameterError.
    """
    policy = SelectionPolicy() if policy is None else policy
    if not isinstance(policy, SelectionPolicy):
        raise ParameterError(f"policy must be a SelectionPolicy or None; got {type(policy).__name__}")
    if policy.exclude_wells:
        known = set(store.read("wells", ["well_id"], include_retired=True)["well_id"])
        unknown = [w for w in policy.exclude_wells if w not in known]
        if unknown:
            raise ParameterError(f"exclude_wells= names well(s) not in the store: {', '.join(unknown)}",
                                 param="exclude_wells")
    return policy


def selection_record(policy: SelectionPolicy | None, left_out: list[dict]) -> dict:
    """The ``"selection"`` entry of an output sidecar: the policy and what it left out."""
    policy = SelectionPolicy() if policy is None else policy
    return {"policy": policy.to_dict(), "left_out": list(left_out)}


def sidecar_selection(path) -> dict | None:
    """The ``"selection"`` entry of an existing output sidecar (e.g. of the head surface a command reads).

    None when the sidecar is missing or unreadable, or was written before selections were recorded.
    """
    import json
    from pathlib import Path

    try:
        return json.loads(Path(path).read_text()).get("selection")
    except (OSError, ValueError, AttributeError):
        return None


def zone_assignment(store) -> pd.DataFrame:
    """Every zone with its unit, overlap fraction and flags (SPEC 2.3), from the store's active records."""
    from . import assign

    return assign.assign_zones(store.read("zones"), store.read("picks"), store.read("wells"), store.read("units"))


def _entries(what: str, frame: pd.DataFrame, reason: pd.Series) -> list[dict]:
    """One left-out entry per zone and reason, with the number of rows it covers."""
    if frame.empty:
        return []
    keys = pd.DataFrame({"well_id": frame["well_id"].astype(str), "zone_id": frame["zone_id"],
                         "reason": reason.loc[frame.index]})
    counts = keys.groupby(["well_id", "zone_id", "reason"], sort=True, dropna=False).size()
    return [{"what": what, "well_id": w, "zone_id": None if pd.isna(z) else str(z), "reason": r, "count": int(n)}
            for (w, z, r), n in counts.items()]


class _Reasons:
    """The first reason that leaves each row out (later reasons do not overwrite it)."""

    def __init__(self, index):
        self.reason = pd.Series(None, index=index, dtype=object)

    def mark(self, mask, text: str) -> None:
        mask = np.asarray(mask, dtype=bool) & self.reason.isna().to_numpy()
        if mask.any():
            self.reason[mask] = text

    @property
    def kept(self) -> np.ndarray:
        return self.reason.isna().to_numpy()


def _pumping_active(store, readings: pd.DataFrame) -> np.ndarray:
    """True for readings taken while a pumping record of their zone (or whole well) was active."""
    rec = store.read("pumping", ["well_id", "zone_id", "start", "end"])
    active = np.zeros(len(readings), dtype=bool)
    if rec.empty or readings.empty:
        return active
    rec = rec.rename(columns={"zone_id": "pump_zone"})
    r = readings[["well_id", "zone_id", "measured_at"]].assign(_row=np.arange(len(readings)))
    r = r[r["well_id"].isin(set(rec["well_id"]))]
    if r.empty:
        return active
    m = r.merge(rec, on="well_id", how="inner")
    t = pd.to_datetime(m["measured_at"], format="ISO8601")
    start = pd.to_datetime(m["start"], format="ISO8601")
    end = pd.to_datetime(m["end"], format="ISO8601")
    whole_well = m["pump_zone"].isna() | m["pump_zone"].astype(str).str.strip().eq("")
    same_zone = whole_well | (m["pump_zone"].astype(str) == m["zone_id"].astype(str))
    during = (start <= t) & (end.isna() | (t <= end))
    active[m.loc[(same_zone & during).to_numpy(), "_row"].to_numpy()] = True
    return active


def select_readings(store, policy: SelectionPolicy | None = None, *,
                    window=None) -> tuple[pd.DataFrame, list[dict]]:
    """Head readings that pass the policy, and what it left out.

    Parameters
    ----------
    window : TimeWindow, optional
        Only readings inside it are considered, so that the left-out counts are of readings the
        computation would otherwise have used.

    Returns
    -------
    (DataFrame, list of dict)
        well_id, zone_id, measured_at, head of every kept reading; the left-out entries (``what`` = "heads").

    Raises
    ------
    InsufficientDataError
        When ``window`` holds no reading at all.
    """
    from .heads import TimeWindow

    policy = resolve(store, policy)
    h = store.read("heads", ["well_id", "zone_id", "measured_at", "head", "quality"])
    if window is not None:
        window = window if isinstance(window, TimeWindow) else TimeWindow.parse(window)
        t = pd.to_datetime(h["measured_at"], format="ISO8601")
        h = h[((t >= window.start) & (t <= window.end)).to_numpy()]
        if h.empty:
            raise InsufficientDataError(f"no head readings inside the window {window.text}")
    h = h.reset_index(drop=True)
    why = _Reasons(h.index)
    if policy.exclude_wells:
        why.mark(h["well_id"].isin(set(policy.exclude_wells)), REASON_EXCLUDED)
    if not policy.include_poor:
        why.mark(h["quality"].eq("poor"), REASON_POOR)
    if not policy.include_pumping_wells and not h.empty:
        kind = h["well_id"].map(store.read("wells", ["well_id", "kind"]).set_index("well_id")["kind"])
        for k in PUMPING_KINDS:
            why.mark(kind.eq(k), REASON_PUMPING_KIND.format(kind=k))
        why.mark(_pumping_active(store, h), REASON_PUMPING_ACTIVE)
    left = _entries("heads", h[~why.kept], why.reason)
    kept = h[why.kept].drop(columns="quality").reset_index(drop=True)
    return kept, left


def _nothing_left(what: str, left_out: list[dict]) -> str:
    n = sum(e["count"] for e in left_out)
    if not n:
        return f"there are no {what}"
    return f"no {what} are left after the selection: " + describe(left_out)[0][1]


def select_heads(store, policy: SelectionPolicy | None = None, *, window=None, at: str | None = None,
                 tolerance_days: float = DEFAULT_TOLERANCE_DAYS,
                 assignment: pd.DataFrame | None = None) -> tuple[pd.DataFrame, list[dict]]:
    """One head per zone from the readings that pass the policy, with the zone's unit; and what was left out.

    Parameters
    ----------
    window : TimeWindow or str, optional
        Median of each zone's readings inside it.
    at : str, optional
        ISO 8601 date: each zone's reading nearest to it, if within ``tolerance_days``; the zones without
        one are left out (reason "no reading within N days of DATE").
    tolerance_days : float
        Days (>= 0) a reading may lie from ``at``.
    assignment : DataFrame, optional
        The zone assignment (computed when not given).

    Returns
    -------
    (DataFrame, list of dict)
        well_id, zone_id, head, n_readings, first, last (offset_days with ``at``), unit, mid_elev,
        top_elev, bottom_elev, x, y; the left-out entries.
    """
    from .heads import TimeWindow
    from .heads import select_heads as pick_heads

    if window is not None and not isinstance(window, TimeWindow):
        window = TimeWindow.parse(window)
    if at is not None and not (isinstance(tolerance_days, (int, float, np.number)) and np.isfinite(tolerance_days)
                               and tolerance_days >= 0):
        raise ParameterError(f"tolerance_days= must be a number of days >= 0 and finite (got {tolerance_days})",
                             param="tolerance_days")
    readings, left = select_readings(store, policy, window=window)
    if readings.empty:
        raise InsufficientDataError(_nothing_left("head readings", left), param=HINT_PARAMS)
    sel = pick_heads(readings, window=window, at=at, tolerance_days=tolerance_days if at is not None else None)
    if at is not None:
        kept = set(zip(sel["well_id"], sel["zone_id"]))
        reason = REASON_TOLERANCE.format(days=float(tolerance_days), date=str(at).strip())
        for (w, z), n in readings.groupby(["well_id", "zone_id"], sort=True).size().items():
            if (w, z) not in kept:
                left.append({"what": "heads", "well_id": str(w), "zone_id": str(z), "reason": reason,
                             "count": int(n)})
    asg = zone_assignment(store) if assignment is None else assignment
    zh = sel.merge(asg[["well_id", "zone_id", "unit", "mid_elev", "top_elev", "bottom_elev", "x", "y"]],
                   on=["well_id", "zone_id"], how="left")
    return zh, left


KTEST_COLUMNS = ["well_id", "zone_id", "test_id", "tested_on", "method", "k_ms", "quality"]


def select_ktests(store, policy: SelectionPolicy | None = None,
                  assignment: pd.DataFrame | None = None) -> tuple[pd.DataFrame, list[dict]]:
    """K tests that pass the policy, joined with their zone's unit; and what was left out.

    Levels in pumping wells do not matter here: a pumping or slug test in a pumping well is a valid test.

    Returns
    -------
    (DataFrame, list of dict)
        well_id, zone_id, test_id, tested_on, method, k_ms, quality, unit, straddles, overlap_fraction,
        thickness; the left-out entries (``what`` = "ktests").
    """
    policy = resolve(store, policy)
    tests = store.read("ktests", KTEST_COLUMNS).reset_index(drop=True)
    why = _Reasons(tests.index)
    if policy.exclude_wells:
        why.mark(tests["well_id"].isin(set(policy.exclude_wells)), REASON_EXCLUDED)
    if not policy.include_poor:
        why.mark(tests["quality"].eq("poor"), REASON_POOR)
    left = _entries("ktests", tests[~why.kept], why.reason)
    asg = zone_assignment(store) if assignment is None else assignment
    frame = tests[why.kept].reset_index(drop=True).merge(
        asg[["well_id", "zone_id", "unit", "straddles", "overlap_fraction", "thickness"]],
        on=["well_id", "zone_id"], how="left")
    return frame, left


def left_out_by_unit(left_out: list[dict], assignment: pd.DataFrame, members: dict[str, set[str]],
                     what: str = "ktests") -> dict[str, int]:
    """Number of left-out rows per unit (a parent unit counts those of its sub-units).

    ``members`` maps each unit code to the codes it includes (itself and its sub-units).
    """
    zone_unit = {(w, z): u for w, z, u in assignment[["well_id", "zone_id", "unit"]].itertuples(index=False)}
    per_code: dict[str, int] = {}
    for e in left_out:
        if e["what"] != what:
            continue
        u = zone_unit.get((e["well_id"], e["zone_id"]))
        if isinstance(u, str):
            per_code[u] = per_code.get(u, 0) + int(e["count"])
    return {code: sum(per_code.get(c, 0) for c in codes) for code, codes in members.items()}


_NOUNS = {"heads": ("head reading", "head readings"), "ktests": ("K test", "K tests")}


def describe(left_out: list[dict], *, names=None) -> list[tuple[str, str]]:
    """One-line texts saying what a selection left out and why, as (level, text) pairs.

    level is "note" for what the policy left out and "warning" for zones without a reading near the date
    asked for. Empty when nothing was left out. The texts say which parameter brings records back, as Python
    spells it (``include_poor=True``); ``names`` (a mapping or callable, as for
    :meth:`hydroatlas.errors.HydroatlasError.renamed`) spells the :data:`HINT_PARAMS` another way (``--include-poor``).
    """
    lines = []
    for what in ("ktests", "heads"):
        entries = [e for e in left_out if e["what"] == what]
        policy_out = [e for e in entries if not e["reason"].startswith("no reading within")]
        if policy_out:
            counts: dict[str, int] = {}
            for e in policy_out:
                counts[e["reason"]] = counts.get(e["reason"], 0) + int(e["count"])
            n = sum(counts.values())
            wells = len({e["well_id"] for e in policy_out})
            noun = _NOUNS[what][0 if n == 1 else 1]
            parts = ", ".join(f"{c} {r}" for r, c in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0])))
            back = sorted({_BRING_BACK[r] for r in counts if r in _BRING_BACK})
            hint = f"; {' / '.join(back)} bring{'s' if len(back) == 1 else ''} them back" if back else ""
            lines.append(("note", f"{n} {noun} in {wells} well{'s' if wells != 1 else ''} left out by the "
                                  f"selection: {parts}{hint}"))
        far = [e for e in entries if e["reason"].startswith("no reading within")]
        if far:
            zones = len(far)
            lines.append(("warning", f"{zones} zone{'s' if zones != 1 else ''} left out: {far[0]['reason']} "
                                     "(tolerance_days=DAYS widens the search)"))
    if names is not None:
        from .errors import rename_params

        lines = [(level, rename_params(text, HINT_PARAMS, names)) for level, text in lines]
    return lines
