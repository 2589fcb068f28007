"""Springflow: a spring's discharge against the head of an index zone, its cease-flow head, trigger levels and
recession; and the discharge change a pumping scenario implies (issue 14, items 3 and 4).

Reads the selection (:mod:`hydroatlas.selection`), calls the core (:mod:`hydroatlas.springs`), writes

- ``OUT/<spring>_springflow.csv``: every discharge reading of the spring in the window with its paired index head,
  the reason where it has none, the fitted discharge of each model and its recession segment;
- ``OUT/<spring>_springflow.json``: the fits, the cease-flow head and the trigger levels with their intervals, the
  recession, units, window, selection, the caution, and the relation (model, parameters, bootstrap draws) that a
  drawdown scenario uses (:func:`read_relation`, :func:`spring_effects`);
- ``OUT/<spring>_springflow.png`` and ``.svg``: discharge against head with the fit and the cease-flow band, and
  the discharge record with the recession fits.

Units. Heads are in the store's length unit. Discharge is stored in m3/d (``discharge_m3d``) and shown in one rate
unit per spring: the unit its readings used most (the first of them on a tie) when that unit belongs to the
store's unit system (m3/d, m3/s, L/s in a metre store; gpm, gpd, MGD, ft3/d, ft3/s, acre-ft/yr in a feet store),
else the store's rate unit (m3/d or ft3/d).
"""

from __future__ import annotations

import json
import math
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd

from .. import springs as core
from ..cautions import caution_text
from ..errors import HydroatlasError, InsufficientDataError, ParameterError
from ..export.names import ensure_folder, file_stem, output_path, write_csv
from ..quantities import RATE_UNITS, convert, store_units
from ..selection import SelectionPolicy, resolve, select_readings, selection_record
from ..store import Store
from .store_jobs import _crs_to_m, _length_to_m, _unit_members, zone_assignment

#: rate units of each store unit system (the display rule above)
SYSTEM_RATE_UNITS = {"m": ("m3/d", "m3/s", "L/s"), "ft": ("gpm", "gpd", "MGD", "ft3/d", "ft3/s", "acre-ft/yr")}
#: depth-per-time unit of an equivalent recharge rate in each store unit system
RECHARGE_UNITS = {"m": "mm/yr", "ft": "in/yr"}
_RECHARGE_M_PER_D = {"mm/yr": 1e-3 / 365.25, "in/yr": 0.0254 / 365.25}
#: what trigger levels add to the caution of SPEC section 7
SPRING_CAUTION = ("Cease-flow heads and trigger levels come from a fitted relation between discharge and one "
                  "zone's head and extrapolate it below the heads observed; they are planning figures, not drought "
                  "rules: set triggers with the local water authority and a licensed professional.")
_EPOCH = pd.Timestamp("1970-01-01")


def spring_caution() -> str:
    """The caution of a springflow product: SPEC section 7 and :data:`SPRING_CAUTION`."""
    return caution_text() + " " + SPRING_CAUTION


def _instants(values) -> pd.Series:
    """ISO 8601 texts as naive UTC timestamps (offsets turned into UTC, as head readings)."""
    t = pd.to_datetime(pd.Series(values, dtype=object), format="ISO8601", utc=True)
    return t.dt.tz_convert(None)


def _days(t: pd.Series) -> np.ndarray:
    return ((t - _EPOCH) / pd.Timedelta(days=1)).to_numpy(float)


def relation_path(folder, spring_id) -> Path:
    """The springflow sidecar of a spring in a folder (``<spring>_springflow.json``)."""
    return output_path(folder, f"{file_stem(spring_id)}_springflow.json")


def _product_path(folder, spring_id, ext: str) -> Path:
    return output_path(folder, f"{file_stem(spring_id)}_springflow.{ext}")


def display_rate_unit(rate_units, length_unit: str) -> tuple[str, str]:
    """The rate unit a spring's discharge is shown in, and the rule that chose it (see the module docstring)."""
    counts = Counter(str(u) for u in rate_units if isinstance(u, str) and u)
    system = SYSTEM_RATE_UNITS.get(length_unit, ())
    if counts:
        first = {}
        for i, u in enumerate(rate_units):
            first.setdefault(str(u), i)
        unit = max(counts, key=lambda u: (counts[u], -first[u]))
        if unit in system:
            return unit, f"the unit most of the spring's discharge readings used ({unit})"
        fallback = store_units(length_unit).rate
        return fallback, (f"the store's rate unit: the readings' own unit ({unit}) is not of the store's unit "
                          "system")
    return store_units(length_unit).rate, "the store's rate unit"


def _parse_index(index) -> tuple[str, str]:
    if isinstance(index, (tuple, list)) and len(index) == 2:
        return str(index[0]), str(index[1])
    text = str(index or "").strip()
    if "/" not in text:
        raise ParameterError(f"index= must be WELL/ZONE (a well id and a zone id); got {index!r}", param="index")
    well, zone = text.rsplit("/", 1)
    if not well or not zone:
        raise ParameterError(f"index= must be WELL/ZONE (a well id and a zone id); got {index!r}", param="index")
    return well, zone


def _spring(store: Store, spring_id) -> dict:
    springs = store.read("springs")
    mine = springs[springs["spring_id"] == str(spring_id)]
    if mine.empty:
        known = ", ".join(springs["spring_id"].astype(str)) or "none"
        raise ParameterError(f"spring_id= {spring_id!r} is not a spring of the store (springs: {known})",
                             param="spring_id")
    return mine.iloc[0].to_dict()


def _discharge(store: Store, spring_id: str, window) -> pd.DataFrame:
    dis = store.read("discharge", ["spring_id", "measured_at", "discharge", "rate_unit", "discharge_m3d"])
    dis = dis[dis["spring_id"] == spring_id].copy()
    if dis.empty:
        raise InsufficientDataError(f"spring {spring_id} has no discharge readings; import them with "
                                    "'hydroatlas import STORE discharge FILE'")
    dis["t"] = _instants(dis["measured_at"]).to_numpy()
    if window is not None:
        dis = dis[(dis["t"] >= window.start) & (dis["t"] <= window.end)]
        if dis.empty:
            raise InsufficientDataError(f"spring {spring_id} has no discharge readings inside the window "
                                        f"{window.text}", param="window")
    return dis.sort_values("t").reset_index(drop=True)


def _wider(window, days: float):
    """The window widened by ``days`` on each side (head readings just outside pair readings at its edges)."""
    from ..heads import TimeWindow

    if window is None:
        return None
    pad = pd.Timedelta(days=2.0 * days)
    return TimeWindow(window.start - pad, window.end + pad, window.text)


def _recharge_per_day(unit: str) -> float:
    return _RECHARGE_M_PER_D[unit]


def springflow(store: Store, spring_id, *, index=None, window=None, levels=core.DEFAULT_LEVELS,
               tolerance_days: float = core.DEFAULT_TOLERANCE_DAYS, how: str = "nearest",
               recession_from: float | None = None, recession_to: float | None = None,
               recession_unit: str | None = None, recession_windows=None,
               min_recession_readings: int = core.DEFAULT_RECESSION_READINGS,
               all_zones: bool = False, bootstrap: int = core.DEFAULT_BOOTSTRAP, seed: int = 0,
               confidence: float = 0.95, out=".", surfaces=None, figure: bool = True,
               policy: SelectionPolicy | None = None) -> dict:
    """Fit a spring's discharge against the head of an index zone; cease-flow head, trigger levels, recession.

    Parameters
    ----------
    spring_id : str
    index : str or (str, str), optional
        The index zone, ``WELL/ZONE``. Without it the zones of the spring's unit (and its sub-units; every zone
        with heads when the spring names no unit, or with ``all_zones``) are ranked by the R^2 of a line of
        discharge on their head (:func:`hydroatlas.springs.rank_candidates`) and the best supported one is used.
    window : TimeWindow or str, optional
        Only discharge readings inside it (heads up to ``2 * tolerance_days`` outside it may pair with them).
    levels : sequence of float
        Trigger levels, percent of the reference discharge (the median of the spring's discharge readings in the
        window).
    tolerance_days : float
        Pairing tolerance (:func:`hydroatlas.springs.pair_readings`).
    how : {"nearest", "interpolate"}
    recession_from, recession_to : float, optional
        Discharges between which the days of recession are given; default from the reference discharge to the
        discharge of the lowest trigger level.
    recession_unit : str, optional
        Rate unit of ``recession_from`` and ``recession_to``; default the spring's display rate unit.
    recession_windows : list of TimeWindow or str, optional
        Fit the recession on the readings inside these windows instead of on runs of falling discharge.
    min_recession_readings : int
        Least readings of a recession segment.
    bootstrap, seed, confidence
        Of the intervals (:func:`hydroatlas.springs.fit_relation`).
    out : path
        Output folder.
    surfaces : path, optional
        Folder of a ``paths --backward`` run whose layers.gpkg holds the spring's contributing area (for the
        equivalent recharge rate); the product registry is searched first.
    policy : SelectionPolicy, optional
        Which head readings count (default policy when None).

    Returns
    -------
    dict
        The sidecar's content, plus ``table`` (the pairs, a DataFrame) and ``candidates`` (a DataFrame).
    """
    from ..heads import TimeWindow

    spring = _spring(store, spring_id)
    sid = str(spring["spring_id"])
    L = store.settings.length_unit
    if window is not None and not isinstance(window, TimeWindow):
        window = TimeWindow.parse(str(window), name="window=")
    if not (isinstance(tolerance_days, (int, float, np.number)) and math.isfinite(tolerance_days)
            and tolerance_days >= 0):
        raise ParameterError(f"tolerance_days= must be a number of days >= 0 and finite; got {tolerance_days!r}",
                             param="tolerance_days")
    if how not in core.PAIRING:
        raise ParameterError(f"how= must be one of {', '.join(core.PAIRING)}; got {how!r}", param="how")
    levels = core._check_levels(levels)
    policy = resolve(store, policy)
    dis = _discharge(store, sid, window)
    rate_unit, rate_rule = display_rate_unit(list(dis["rate_unit"]), L)
    q = convert(dis["discharge_m3d"].to_numpy(float), "m3/d", rate_unit, "rate")
    q_days = _days(dis["t"])
    q_ref = float(np.median(q))
    if not q_ref > 0:
        raise InsufficientDataError(f"the median discharge of spring {sid} is 0 (dry most of the record"
                                    f"{' in the window' if window is not None else ''}): there is no reference "
                                    "discharge for trigger levels", param="window")
    if recession_unit is not None:
        recession_from, recession_to = (None if v is None else float(convert(float(v), recession_unit, rate_unit,
                                                                               "rate"))
                                        for v in (recession_from, recession_to))
    try:
        readings, left_out = select_readings(store, policy, window=_wider(window, float(tolerance_days)))
    except InsufficientDataError:
        readings, left_out = pd.DataFrame(columns=["well_id", "zone_id", "measured_at", "head"]), []
    readings = readings.assign(t=_instants(readings["measured_at"]).to_numpy())
    asg = zone_assignment(store)
    series = {(w, z): g for (w, z), g in readings.groupby(["well_id", "zone_id"], sort=True)}

    def zone_series(key):
        g = series[key]
        return _days(g["t"]), g["head"].to_numpy(float)

    units = store.read("units")
    spring_unit = spring.get("unit") if isinstance(spring.get("unit"), str) and spring.get("unit") else None
    if index is not None:
        key = _parse_index(index)
        if not ((asg["well_id"] == key[0]) & (asg["zone_id"] == key[1])).any():
            raise ParameterError(f"index= {key[0]}/{key[1]} is not a zone of the store", param="index")
        if key not in series:
            when = f" inside the window {window.text} (widened by 2 x {tolerance_days:g} days)" if window else ""
            raise InsufficientDataError(f"the index zone {key[0]}/{key[1]} has no head readings{when} after the "
                                        "selection", param="index")
        ranking = core.rank_candidates({f"{key[0]}/{key[1]}": zone_series(key)}, q_days, q, how=how,
                                       tolerance_days=float(tolerance_days))
        chosen_by = "given"
    else:
        if spring_unit is not None and not all_zones:
            members = _unit_members(units, spring_unit)
            zones = asg[asg["unit"].isin(members)]
            scope = f"zones of unit {spring_unit}" + (" and its sub-units" if len(members) > 1 else "")
        else:
            zones = asg
            scope = "every zone with head readings" + ("" if all_zones else " (the spring names no unit)")
        keys = [(w, z) for w, z in zones[["well_id", "zone_id"]].itertuples(index=False) if (w, z) in series]
        if not keys:
            raise InsufficientDataError(f"no candidate index zone for spring {sid}: no {scope} has head readings "
                                        "after the selection; give index=WELL/ZONE", param="index")
        ranking = core.rank_candidates({f"{w}/{z}": zone_series((w, z)) for w, z in keys}, q_days, q, how=how,
                                       tolerance_days=float(tolerance_days))
        key = _parse_index(ranking[0]["label"])
        chosen_by = f"ranking of {len(keys)} candidate(s): {scope}, by R^2 of a line, then number of pairs"
    th, hv = zone_series(key)
    pairing = core.pair_readings(q_days, th, hv, how=how, tolerance_days=float(tolerance_days))
    if pairing.n_paired < core.MIN_PAIRS_LINEAR:
        raise InsufficientDataError(
            f"only {pairing.n_paired} discharge reading(s) of spring {sid} pair with a head of {key[0]}/{key[1]} "
            f"within {tolerance_days:g} days ({how}); at least {core.MIN_PAIRS_LINEAR} are needed; widen "
            "tolerance_days= or give another index=", param=("tolerance_days", "index"))
    m = pairing.paired
    relation = core.fit_relation(pairing.head[m], q[m], levels=levels, reference_discharge=q_ref,
                                 bootstrap=int(bootstrap), seed=seed, confidence=confidence)
    warnings = []
    if relation.model is None:
        warnings.append(f"no relation of discharge to head is supported at {key[0]}/{key[1]}: line: "
                        f"{relation.linear_why_not}; power law: {relation.power_why_not}")
    # recession
    rec_windows = None
    if recession_windows:
        rec_windows = []
        for w in recession_windows:
            tw = w if isinstance(w, TimeWindow) else TimeWindow.parse(str(w), name="recession_windows=")
            rec_windows.append((float(_days(pd.Series([tw.start]))[0]), float(_days(pd.Series([tw.end]))[0])))
    recession, seg_of = _recession(q_days, q, rec_windows, min_recession_readings, confidence, relation,
                                   recession_from, recession_to, rate_unit, warnings)
    # the table
    table = pd.DataFrame({
        "spring_id": sid, "measured_at": dis["measured_at"].to_numpy(), "discharge": q, "rate_unit": rate_unit,
        "index_well": key[0], "index_zone": key[1], "head": pairing.head, "length_unit": L,
        "head_offset_days": pairing.offset_days, "paired": m,
        "unpaired_reason": [r or "" for r in pairing.reason],
        "fitted_linear": (relation.linear.predict(pairing.head) if relation.linear is not None and not
                          relation.linear_why_not else np.nan),
        "fitted_power": (relation.power.predict(pairing.head) if relation.power is not None and not
                         relation.power_why_not else np.nan),
        "fitted": relation.predict(pairing.head) if relation.model else np.nan,
        "recession_segment": seg_of})
    out = ensure_folder(out)
    files = {"table": str(write_csv(_product_path(out, sid, "csv"), table))}
    crs_to_m = _crs_to_m(store) if store.settings.crs.is_projected else None
    balance = contributing_balance(store, sid, q_ref * RATE_UNITS[rate_unit], folders=[surfaces, out],
                                   unit=spring_unit)
    candidates = pd.DataFrame(ranking)
    wxy = asg.set_index(["well_id", "zone_id"])[["x", "y"]]
    if crs_to_m is not None and len(candidates):
        dist = []
        for lbl in candidates["label"]:
            w, z = _parse_index(lbl)
            x, y = wxy.loc[(w, z)]
            dist.append(math.hypot(float(x) - float(spring["x"]), float(y) - float(spring["y"])))
        candidates["distance"] = dist
        candidates["distance_unit"] = "CRS units"
    side = _sidecar(store, sid, spring_unit, key, chosen_by, candidates, window, pairing, dis, rate_unit,
                    rate_rule, relation, recession, policy, left_out, files, balance, warnings, bootstrap, seed)
    if figure:
        from ..export.figures import spring_discharge

        f_lin = relation.fit if relation.model else None
        hh = np.linspace(min(relation.head_range[0], relation.h0 if math.isfinite(relation.h0)
                             else relation.head_range[0]), relation.head_range[1], 200)
        curve = (hh, relation.predict(hh)) if f_lin is not None else None
        segs = []
        if recession.get("fit") is not None:
            fit = recession["fit"]
            for k, (i, j) in enumerate(fit.segments):
                tt = dis["t"].iloc[i:j + 1].to_numpy()
                d = q_days[i:j + 1] - q_days[i]
                segs.append((tt, fit.q0[k] * np.exp(-fit.a * d)))
        paths = spring_discharge(
            output_path(out, f"{file_stem(sid)}_springflow"), pairing.head[m], q[m], curve=curve,
            h0=relation.h0 if relation.model else None,
            h0_band=(relation.h0_low, relation.h0_high) if relation.model else None,
            levels=[(lv.percent, lv.head, lv.low, lv.high) for lv in relation.levels],
            times=dis["t"].to_numpy(), discharge=q, recession=segs,
            title=f"Spring {sid}: discharge against the head of {key[0]}/{key[1]}",
            subtitle=_figure_subtitle(relation, recession, L, rate_unit),
            length_unit=L, rate_unit=rate_unit)
        files["figure_png"], files["figure_svg"] = str(paths[0]), str(paths[1])
    from ..export.rasters import write_sidecar

    side["files"] = files
    files["sidecar"] = str(write_sidecar(relation_path(out, sid), side))
    side["table"] = table
    side["candidates_table"] = candidates
    return side


def _figure_subtitle(relation, recession, L, rate_unit) -> str:
    parts = []
    if relation.model:
        parts.append(f"{'line' if relation.model == 'linear' else 'power law'}; cease-flow head "
                     f"{relation.h0:.4g} {L} (95 % {relation.h0_low:.4g} to {relation.h0_high:.4g})")
    else:
        parts.append("no supported relation")
    fit = recession.get("fit")
    if fit is not None:
        parts.append(f"recession constant {fit.a:.3g} 1/d")
    return "; ".join(parts)


def _recession(t_days, q, windows, min_readings, confidence, relation, q_from, q_to, rate_unit, warnings):
    """The recession part of the sidecar and each reading's segment number (-1: none)."""
    seg_of = np.full(len(q), -1)
    segs = core.recession_segments(t_days, q, min_readings=int(min_readings), windows=windows)
    rule = (f"readings inside the given windows ({len(windows)})" if windows is not None else
            f"runs of non-increasing discharge of at least {int(min_readings)} readings")
    info = {"rule": rule, "method": "Maillet (1905): Q = Q0 exp(-a t), ln Q least squares, one a shared by the "
                                    "segments, one Q0 each", "fit": None}
    if not segs:
        info["why_not"] = f"no recession segment ({rule})"
        warnings.append(f"no recession fitted: {info['why_not']}")
        return info, seg_of
    for k, (i, j) in enumerate(segs):
        seg_of[i:j + 1] = k
    try:
        fit = core.fit_recession(t_days, q, segs, confidence=confidence)
    except HydroatlasError as exc:
        info["why_not"] = str(exc)
        warnings.append(f"no recession fitted: {exc}")
        return info, seg_of
    info["fit"] = fit
    lowest = min(relation.levels, key=lambda lv: lv.percent) if relation.levels else None
    a_from = relation.reference_discharge if q_from is None else float(q_from)
    a_to = (lowest.discharge if lowest is not None else None) if q_to is None else float(q_to)
    info["days"] = None
    if a_to is not None:
        try:
            d = core.recession_days(a_from, a_to, fit)
            info["days"] = {"from": a_from, "to": a_to, "rate_unit": rate_unit, "days": d["days"],
                            "low": d["low"], "high": d["high"],
                            "rule": ("given" if q_from is not None or q_to is not None else
                                     "from the reference discharge to the discharge of the lowest trigger level"),
                            "meaning": "days of recession with no recharge, t = ln(Q_from / Q_to) / a"}
        except HydroatlasError as exc:
            if q_from is not None or q_to is not None:
                raise ParameterError(f"recession_from= / recession_to=: {exc}",
                                     param=("recession_from", "recession_to")) from None
            warnings.append(f"no recession time: {exc}")
    return info, seg_of


def _fit_record(fit, why: str, kind: str) -> dict | None:
    if fit is None:
        return {"supported": False, "why_not": why}
    rec = {"supported": not why, "why_not": why, "n": fit.n, "r2": fit.r2, "r2_adj": fit.r2_adj, "aic": fit.aic,
           "residual_std": fit.sigma}
    if kind == "linear":
        rec.update(intercept=fit.a, slope=fit.b, intercept_stderr=fit.se_a, slope_stderr=fit.se_b,
                   cov_intercept_slope=fit.cov_ab, p_slope=fit.p_slope, cease_flow_head=fit.head_at(0.0),
                   equation="Q = a + b h")
    else:
        rec.update(c=fit.c, h0=fit.h0, n_exponent=fit.n_exp, equation="Q = c (h - h0)^n for h > h0, else 0")
    return rec


def _sidecar(store, sid, spring_unit, key, chosen_by, candidates, window, pairing, dis, rate_unit, rate_rule,
             relation, recession, policy, left_out, files, balance, warnings, bootstrap, seed) -> dict:
    L = store.settings.length_unit
    unpaired = [{"measured_at": t, "reason": r} for t, r, p in
                zip(dis["measured_at"], pairing.reason, pairing.paired) if not p]
    fit = recession.get("fit")
    rec = {k: v for k, v in recession.items() if k != "fit"}
    if fit is not None:
        rec.update(recession_constant=fit.a, recession_constant_stderr=fit.se_a,
                   recession_constant_ci95=[fit.a_low, fit.a_high], recession_constant_unit="1/d",
                   half_life_days=fit.half_life_days, n_readings=fit.n, n_segments=len(fit.segments),
                   r2_ln_discharge=fit.r2,
                   segments=[{"from": str(dis["measured_at"].iloc[i]), "to": str(dis["measured_at"].iloc[j]),
                              "readings": j - i + 1, "q0": q0} for (i, j), q0 in zip(fit.segments, fit.q0)],
                   confidence=fit.confidence)
    conf = relation.confidence
    rel = None
    if relation.model:
        rel = {"spring_id": sid, "index_well": key[0], "index_zone": key[1], "model": relation.model,
               "params": relation.params(), "param_order": (["a", "b"] if relation.model == "linear"
                                                            else ["c", "h0", "n"]),
               "draws": relation.draws, "reference_head": relation.reference_head,
               "reference_discharge": relation.reference_discharge, "cease_flow_head": relation.h0,
               "length_unit": L, "rate_unit": rate_unit, "confidence": conf,
               "head_range": list(relation.head_range)}
    return {
        "spring_id": sid, "spring_unit": spring_unit,
        "index": {"well_id": key[0], "zone_id": key[1], "chosen_by": chosen_by},
        "candidates": candidates.to_dict(orient="records"),
        "window": None if window is None else window.text,
        "pairing": {"how": pairing.how, "tolerance_days": pairing.tolerance_days, "n_readings": len(pairing.paired),
                    "n_paired": pairing.n_paired, "unpaired": unpaired,
                    "rule": ("nearest head reading within the tolerance" if pairing.how == "nearest" else
                             "linear in time between the bracketing head readings, at most 2 x the tolerance "
                             "apart")},
        "units": {"head": L, "discharge": rate_unit, "discharge_rule": rate_rule, "time": "d",
                  "recession_constant": "1/d"},
        "fits": {"linear": _fit_record(relation.linear, relation.linear_why_not, "linear"),
                 "power": _fit_record(relation.power, relation.power_why_not, "power")},
        "model": relation.model, "criterion": relation.criterion,
        "cease_flow_head": {"value": relation.h0, "low": relation.h0_low, "high": relation.h0_high,
                            "unit": L, "confidence": conf, "interval": relation.interval_method},
        "reference_discharge": {"value": relation.reference_discharge, "unit": rate_unit,
                                "rule": "median of the spring's discharge readings in the window (all paired or "
                                        "not); taken as known in the intervals"},
        "trigger_levels": [{"percent": lv.percent, "discharge": lv.discharge, "head": lv.head, "low": lv.low,
                            "high": lv.high, "length_unit": L, "rate_unit": rate_unit} for lv in relation.levels],
        "bootstrap": {"draws": int(bootstrap), "seed": seed,
                      "method": "residual bootstrap, centred residuals inflated by sqrt(n / (n - p))"},
        "recession": rec, "contributing_area_balance": balance, "relation": rel,
        "selection": selection_record(policy, left_out), "warnings": warnings, "caution": spring_caution(),
    }


# -- the relation used by a drawdown scenario -----------------------------------------------------------------------
def read_relation(folder, spring_id) -> dict | None:
    """The discharge-head relation of a spring recorded in ``folder`` by :func:`springflow`, or None.

    None when there is no sidecar, it cannot be read, or it holds no supported relation.
    """
    if folder is None:
        return None
    try:
        path = relation_path(folder, spring_id)
        if not path.is_file():
            return None
        side = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, HydroatlasError):
        return None
    rel = side.get("relation") if isinstance(side, dict) else None
    if not isinstance(rel, dict) or rel.get("spring_id") != str(spring_id) or rel.get("model") not in ("linear",
                                                                                                      "power"):
        return None
    return dict(rel, file=str(path))


def find_relations(spring_ids, folders) -> dict:
    """spring id -> relation, from the first of ``folders`` that holds one (None entries are skipped)."""
    found = {}
    for sid in spring_ids:
        for folder in folders:
            rel = read_relation(folder, sid)
            if rel is not None:
                found[str(sid)] = rel
                break
    return found


def _contributing_area(store: Store, spring_id: str, folders, unit) -> tuple[float | None, str]:
    """Area (m2) of a spring's contributing area and where it came from; (None, why) when there is none."""
    import pyogrio

    crs_to_m = _crs_to_m(store)
    candidates = []
    try:
        from .. import products

        prod = products.find_product(store, kind="contributing_areas", unit=unit, required=False)
        if prod is not None:
            candidates += [Path(f) for f in prod.files if str(f).endswith(".gpkg")]
    except (HydroatlasError, ImportError, OSError, ValueError):
        pass
    for folder in folders:
        if folder is not None:
            candidates.append(Path(folder) / "layers.gpkg")
    for gpkg in candidates:
        try:
            if not gpkg.is_file() or "contributing_areas" not in {n for n, _ in pyogrio.list_layers(gpkg)}:
                continue
            ca = pyogrio.read_dataframe(gpkg, layer="contributing_areas", read_geometry=False)
        except Exception:  # noqa: BLE001 - an unreadable file is no contributing area
            continue
        ca = ca[ca["spring_id"].astype(str) == spring_id]
        if "scenario" in ca.columns:
            ca = ca[ca["scenario"].fillna("") == ""]
        if unit is not None and "unit" in ca.columns:
            ca = ca[ca["unit"] == unit] if (ca["unit"] == unit).any() else ca
        ca = ca[pd.to_numeric(ca["area"], errors="coerce") > 0]
        if len(ca):
            return (float(ca["area"].astype(float).iloc[-1]) * crs_to_m ** 2,
                    f"contributing area of 'paths --backward' ({gpkg}, layer contributing_areas)")
    areas = store.read_geometries("areas")
    if not areas.empty:
        rech = areas[(areas["kind"] == "recharge") & (areas["unit"].isna() | (areas["unit"] == unit))]
        if len(rech):
            return (float(rech.geometry.area.sum()) * crs_to_m ** 2,
                    f"recharge areas of unit {unit} ({', '.join(rech['area_id'])}): no delineated contributing "
                    "area was found (make one with 'paths --backward'); the rate is then what those areas alone "
                    "would have to receive")
    return None, "no contributing area (make one with 'paths --backward') and no recharge area"


def _stored_recharge(store: Store, unit) -> dict | None:
    """A recharge rate stored with the unit's recharge areas (attributes recharge_rate and recharge_unit)."""
    areas = store.read_geometries("areas")
    if areas.empty:
        return None
    rech = areas[(areas["kind"] == "recharge") & (areas["unit"].isna() | (areas["unit"] == unit))]
    default_unit = RECHARGE_UNITS[store.settings.length_unit]
    rates, weights, ids = [], [], []
    for aid, attrs, geom in zip(rech["area_id"], rech["attrs"], rech.geometry):
        try:
            a = json.loads(attrs) if isinstance(attrs, str) and attrs else {}
            value = float(a.get("recharge_rate")) if a.get("recharge_rate") not in (None, "") else None
        except (TypeError, ValueError):
            value = None
        if value is None or not math.isfinite(value):
            continue
        unit_text = str(a.get("recharge_unit") or default_unit).strip()
        if unit_text not in _RECHARGE_M_PER_D:
            continue
        rates.append(value * _recharge_per_day(unit_text) / _recharge_per_day(default_unit))
        weights.append(float(geom.area))
        ids.append(str(aid))
    if not rates:
        return None
    value = float(np.average(rates, weights=weights))
    return {"value": value, "unit": default_unit,
            "source": ("recharge_rate of recharge area " + ids[0] if len(ids) == 1 else
                       "area-weighted mean of the recharge_rate of recharge areas " + ", ".join(ids))}


def contributing_balance(store: Store, spring_id: str, discharge_m3d: float, *, folders=(), unit=None) -> dict:
    """Discharge over the contributing area as an equivalent recharge rate (mm/yr in a metre store, in/yr in a
    feet store), beside a stored recharge rate when the store has one."""
    r_unit = RECHARGE_UNITS[store.settings.length_unit]
    try:
        area_m2, source = _contributing_area(store, spring_id, folders, unit)
    except HydroatlasError as exc:
        area_m2, source = None, str(exc)
    L = store.settings.length_unit
    len_m = _length_to_m(store)
    out = {"discharge_m3d": discharge_m3d, "area": None, "area_unit": f"{L}2", "area_source": source,
           "equivalent_recharge": None, "recharge_unit": r_unit, "stored_recharge": _stored_recharge(store, unit)}
    if area_m2:
        out["area"] = area_m2 / len_m ** 2
        out["equivalent_recharge"] = float(core.equivalent_recharge(discharge_m3d, area_m2)) / _recharge_per_day(
            r_unit)
    return out


def spring_effects(store: Store, scenario_drawdown_at_index: dict, relations, *, folders=()) -> pd.DataFrame:
    """Discharge change a drawdown scenario implies at each spring with a discharge-head relation.

    Parameters
    ----------
    scenario_drawdown_at_index : dict
        spring id -> the scenario's drawdown at the spring's index zone (store length unit; negative for a
        recovery), or a dict with ``drawdown`` and optionally ``head`` (the index head before the drawdown; by
        default the relation's reference head, the median head of its pairs).
    relations : dict or list of dict
        The relations (:func:`read_relation`), by spring id or as a list.
    folders : sequence of paths
        Where to look for contributing areas (:func:`contributing_balance`).

    Returns
    -------
    DataFrame
        One row per spring with both a relation and a drawdown: spring_id, index_well, index_zone, model,
        drawdown_at_index, head_before, head_after, length_unit, head_basis, cease_flow_head,
        discharge_before, discharge_after, discharge_change, discharge_change_low, discharge_change_high,
        change_percent, ceases, rate_unit, confidence, contributing_area, area_unit, area_source,
        equivalent_recharge_before, equivalent_recharge_after, recharge_unit, stored_recharge,
        stored_recharge_source, relation_file.
    """
    rels = relations.values() if isinstance(relations, dict) else relations
    L = store.settings.length_unit
    springs = store.read("springs", ["spring_id", "unit"]).set_index("spring_id")["unit"]
    rows = []
    for rel in rels:
        sid = str(rel["spring_id"])
        if sid not in scenario_drawdown_at_index:
            continue
        value = scenario_drawdown_at_index[sid]
        head = None
        if isinstance(value, dict):
            head = value.get("head")
            value = value.get("drawdown")
        s = float(value)
        if rel.get("length_unit") != L:
            raise ParameterError(f"the relation of spring {sid} ({rel.get('file', '')}) is in "
                                 f"{rel.get('length_unit')}, the store in {L}", param="relations")
        basis = "given"
        if head is None or not math.isfinite(float(head)):
            head, basis = float(rel["reference_head"]), "reference head of the relation (median head of its pairs)"
        names = rel.get("param_order") or (["a", "b"] if rel["model"] == "linear" else ["c", "h0", "n"])
        params = [float(rel["params"][k]) for k in names]
        draws = np.asarray(rel.get("draws") or [], float)
        eff = core.discharge_change(rel["model"], params, draws, head=float(head), drawdown=s,
                                    confidence=float(rel.get("confidence", 0.95)))
        ru = rel["rate_unit"]
        unit = springs.get(sid) if isinstance(springs.get(sid), str) else None
        bal_before = contributing_balance(store, sid, eff["before"] * RATE_UNITS[ru], folders=folders, unit=unit)
        after_rate = None
        if bal_before["equivalent_recharge"] is not None and eff["before"] > 0:
            after_rate = bal_before["equivalent_recharge"] * eff["after"] / eff["before"]
        stored = bal_before["stored_recharge"] or {}
        rows.append({
            "spring_id": sid, "index_well": rel["index_well"], "index_zone": rel["index_zone"],
            "model": rel["model"], "drawdown_at_index": s, "head_before": float(head),
            "head_after": float(head) - s, "length_unit": L, "head_basis": basis,
            "cease_flow_head": rel.get("cease_flow_head"),
            "discharge_before": eff["before"], "discharge_after": eff["after"], "discharge_change": eff["change"],
            "discharge_change_low": eff["change_low"], "discharge_change_high": eff["change_high"],
            "change_percent": eff["percent"], "ceases": eff["ceases"], "rate_unit": ru,
            "confidence": float(rel.get("confidence", 0.95)),
            "contributing_area": bal_before["area"], "area_unit": bal_before["area_unit"],
            "area_source": bal_before["area_source"], "equivalent_recharge_before": bal_before["equivalent_recharge"],
            "equivalent_recharge_after": after_rate, "recharge_unit": bal_before["recharge_unit"],
            "stored_recharge": stored.get("value"), "stored_recharge_source": stored.get("source"),
            "relation_file": rel.get("file")})
    cols = ["spring_id", "index_well", "index_zone", "model", "drawdown_at_index", "head_before", "head_after",
            "length_unit", "head_basis", "cease_flow_head", "discharge_before", "discharge_after",
            "discharge_change", "discharge_change_low", "discharge_change_high", "change_percent", "ceases",
            "rate_unit", "confidence", "contributing_area", "area_unit", "area_source",
            "equivalent_recharge_before", "equivalent_recharge_after", "recharge_unit", "stored_recharge",
            "stored_recharge_source", "relation_file"]
    return pd.DataFrame(rows, columns=cols)


def scenario_spring_effects(store: Store, spring_ids, folders, drawdown_at) -> pd.DataFrame:
    """Spring effects of a drawdown scenario, for :func:`hydroatlas.workflows.pathways.drawdown_scenario`.

    ``drawdown_at(xy)`` gives the scenario's drawdown (store length unit) at points ``xy`` (shape (n, 2), store
    CRS); it is evaluated at each related spring's index zone. Springs without a relation in ``folders`` are
    left out (an empty frame when none has one).
    """
    folders = [f for f in folders if f is not None]
    relations = find_relations([str(s) for s in spring_ids], folders)
    if not relations:
        return spring_effects(store, {}, [])
    asg = zone_assignment(store).set_index(["well_id", "zone_id"])
    dd = {}
    for sid, rel in relations.items():
        k = (rel["index_well"], rel["index_zone"])
        if k not in asg.index:
            continue
        x, y = asg.loc[k, ["x", "y"]]
        dd[sid] = float(np.asarray(drawdown_at(np.array([[float(x), float(y)]])), float).ravel()[0])
    return spring_effects(store, dd, relations, folders=folders)
