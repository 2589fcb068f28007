"""Slug-test workflow: stored records -> diagnostics and reduction (numeric core) -> one K test per test.

The numeric core (:mod:`hydroatlas.slug`) diagnoses each record, reduces it with every method that applies and
picks one (``method="auto"``) or uses the method asked for. This module gathers each test's geometry from the
store (the ``sluggeometry`` row, its optional columns kept in ``attrs``, and the zone and unit around it), keeps
every applicable method's result as an alternative, compares the repeats of a zone, and writes ONE K test per
physical test (``test_id`` ``slug:<test_id>``, method ``slug``), so unit statistics count it once. Re-running with
another method updates that K test; the record history keeps the earlier version.
"""

from __future__ import annotations

import dataclasses
import json
import math
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import HydroatlasError, InsufficientDataError, ParameterError
from ..store import Store

SLUG_METHODS = ("auto", "hvorslev", "bouwer-rice", "cbp", "oscillating")
#: the published name of each method, shown and stored beside its key
METHOD_NAMES = {
    "hvorslev": "Hvorslev (1951)",
    "bouwer-rice": "Bouwer and Rice (1976)",
    "cbp": "Cooper, Bredehoeft and Papadopulos (1967)",
    "oscillating": "damped-oscillator model (Butler 1998; Butler, Garnett and Healey 2003)",
}
GEOMETRY_KINDS = ("screen", "packer", "open_hole")
#: unit roles that confine the unit below them
CONFINING_ROLES = ("aquitard", "confining")


def _plain(value):
    """``value`` as JSON-safe plain Python (numpy scalars and arrays, tuples, NaN -> None)."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    if value is None or isinstance(value, str):
        return value
    if dataclasses.is_dataclass(value):
        return _plain(dataclasses.asdict(value))
    return str(value)


def fit_record(fit, *, to_m: float, k_unit: str) -> dict:
    """One :class:`hydroatlas.slug.SlugFit` as a plain dict: K in m/s and in the store's K unit, arrays left out."""
    from ..quantities import k_from_ms

    if fit.k is None:  # the method refused; why is in problems
        k_ms = k_store = None
    else:
        k_ms = float(fit.k) * to_m  # fit.k is in the store's length unit per second
        k_store = float(k_from_ms(k_ms, k_unit))
    out = {"method": fit.method, "method_name": METHOD_NAMES.get(fit.method, fit.method),
           "k": k_store, "k_unit": k_unit, "k_ms": k_ms}
    for f in dataclasses.fields(fit):
        if f.name in ("method", "k", "fitted"):
            continue
        out[f.name] = _plain(getattr(fit, f.name))
    return out


def _fitted_curve(fit):
    """(t_fit, h_fit) arrays of a fit, or None."""
    fitted = getattr(fit, "fitted", None)
    if fitted is None:
        return None
    if isinstance(fitted, dict):
        t, h = fitted.get("t_fit"), fitted.get("h_fit")
    else:
        t, h = getattr(fitted, "t_fit", None), getattr(fitted, "h_fit", None)
        if t is None and isinstance(fitted, (tuple, list)) and len(fitted) == 2:
            t, h = fitted
    if t is None or h is None:
        return None
    return np.asarray(t, float), np.asarray(h, float)


def _attrs(text) -> dict:
    if text is None or (isinstance(text, float) and math.isnan(text)) or text == "":
        return {}
    try:
        obj = json.loads(text)
    except (TypeError, ValueError):
        return {}
    return obj if isinstance(obj, dict) else {}


def _flag(value):
    """true/false of an attrs value (already checked by the importer); None when absent."""
    if value is None:
        return None
    if isinstance(value, bool):
        return value
    return str(value).strip().lower() in ("true", "yes", "1")


def _number(value):
    try:
        x = float(value)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _confined_by_unit(store: Store, assignment: pd.DataFrame) -> dict:
    """(well_id, zone_id) -> True where the unit directly above the zone's unit is an aquitard or confining unit.

    The unit above is the one picked just above at the well, or by rank where the well has no picks.
    """
    units = store.read("units", ["code", "rank", "role"])
    if units.empty or assignment.empty:
        return {}
    role = dict(zip(units["code"], units["role"]))
    rank = dict(zip(units["code"], units["rank"]))
    by_rank = units.sort_values("rank")["code"].tolist()
    picks = store.read("picks", ["well_id", "unit", "top_depth"])
    picked = {w: g.sort_values("top_depth")["unit"].tolist() for w, g in picks.groupby("well_id")}
    out = {}
    for r in assignment.itertuples():
        unit = getattr(r, "unit", None)
        if unit is None or (isinstance(unit, float) and math.isnan(unit)) or unit not in rank:
            continue
        order = picked.get(r.well_id) or by_rank
        if unit not in order:
            order = by_rank
        i = order.index(unit)
        above = order[i - 1] if i > 0 else None
        out[(r.well_id, r.zone_id)] = bool(above is not None and role.get(above) in CONFINING_ROLES)
    return out


def test_geometry(gm: pd.Series, zone: pd.Series | None, *, confined_by_unit: bool | None,
                  unit_top_depth: float | None = None, length_unit: str = "m") -> tuple[dict, dict]:
    """The geometry dict of :func:`hydroatlas.slug.reduce` for one test, and where each inferred value came from.

    Lengths are in the store's length unit, depths positive downward from ground. The screen bottom is the
    screen top plus the screen length when ``screen_top_depth`` is given, else the zone's bottom depth.
    ``confined`` comes from the geometry row, else a packer zone, else the unit above the zone's unit
    (aquitard or confining); ``geometry_kind`` from the row, else the zone's kind (packer, open_hole, screen).
    ``aquifer_top_depth`` is the depth of the top of the zone's unit at the well (its pick), used by the confined
    Bouwer-Rice variant.
    """
    extra = _attrs(gm.get("attrs"))
    notes = {}
    le = float(gm["screen_length"])
    top = _number(extra.get("screen_top_depth"))
    zone_kind = None if zone is None else zone.get("kind")
    if top is not None:
        bottom = top + le
        notes["screen_depths"] = "screen_top_depth of the geometry row plus screen_length"
    elif zone is not None and _number(zone.get("bottom_depth")) is not None:
        bottom = float(zone["bottom_depth"])
        top = bottom - le
        notes["screen_depths"] = "the zone's bottom depth, screen_length above it"
    else:
        bottom = None
    kind = extra.get("geometry_kind")
    if kind is not None:
        notes["geometry_kind"] = "geometry row"
    else:
        kind = {"packer": "packer", "open_hole": "open_hole"}.get(zone_kind, "screen")
        notes["geometry_kind"] = f"zone kind ({zone_kind or 'not given'})"
    confined = _flag(extra.get("confined"))
    if confined is not None:
        notes["confined"] = "geometry row"
    elif zone_kind == "packer":
        confined = True
        notes["confined"] = "packer zone"
    elif confined_by_unit is not None:
        confined = confined_by_unit
        notes["confined"] = ("an aquitard or confining unit lies directly above the zone's unit" if confined
                             else "no aquitard or confining unit directly above the zone's unit")
    else:
        confined = False
        notes["confined"] = "not known (the zone has no unit); taken as unconfined"
    geometry = {"casing_radius": float(gm["casing_radius"]), "well_radius": float(gm["well_radius"]),
                "screen_length": le, "aquifer_thickness": _number(gm.get("aquifer_thickness")),
                "static_depth": _number(gm.get("static_depth")), "screen_top_depth": top,
                "screen_bottom_depth": bottom, "confined": bool(confined), "geometry_kind": kind,
                "aquifer_top_depth": unit_top_depth, "length_unit": length_unit}
    if unit_top_depth is not None:
        notes["aquifer_top_depth"] = "the pick of the zone's unit at the well"
    return geometry, notes


def _diagnosis_record(diag) -> dict:
    return {"response": diag.response, "h0": _plain(diag.h0), "final_fraction": _plain(diag.final_fraction),
            "n_points": _plain(diag.n_points), "evidence": _plain(diag.evidence)}


def _quality(fit, disagree: bool) -> str:
    """good: a valid fit whose repeats agree; fair: valid but with repeats that disagree or stated problems;
    poor: the chosen fit breaks a validity condition (left out of statistics by default)."""
    if not fit.valid:
        return "poor"
    if disagree or fit.problems:
        return "fair"
    return "good"


def reduce_slug_tests(store: Store, *, method: str = "auto", write: bool = True, figures=None) -> pd.DataFrame:
    """Reduce the stored slug-test records to K (SPEC 2.11, issue 12) and, with ``write``, store them as K tests.

    Parameters
    ----------
    store : Store
    method : {'auto', 'hvorslev', 'bouwer-rice', 'cbp', 'oscillating'}
        ``auto`` lets the core pick the method the response and geometry call for, and say why.
    write : bool
        Store one K test per physical test (``slug:<test_id>``, method ``slug``); the chosen method, the
        reason, every alternative fit, the diagnostics, the repeat comparison and the geometry go to its
        ``attrs``. A second run with another method updates it (the earlier version stays in the history).
    figures : path-like, optional
        Folder for one figure per test (:func:`hydroatlas.export.figures.slug_test`).

    Returns
    -------
    DataFrame
        One row per test: ``method`` (chosen), ``k`` and ``k_unit`` (the store's K unit: ft/d in a feet
        store, m/d in a metre store), ``k_ms`` (m/s), ``response``, ``n_points``, ``r2``,
        ``residual_pattern``, ``h_range`` (normalised-head range fitted), ``shape_valid``, ``valid``,
        ``repeat_disagree``, ``quality``, ``reason``, ``problem`` (why no K), ``alternatives``.
        ``frame.attrs["figures"]`` lists the figure files written.
    """
    from .. import slug
    from ..quantities import LENGTH_UNITS
    from .store_jobs import store_k_unit, zone_assignment

    if method not in SLUG_METHODS:
        raise ParameterError(f"unknown slug-test method {method!r}; expected one of {', '.join(SLUG_METHODS)}")
    rec = store.read("slug_records")
    if rec.empty:
        raise InsufficientDataError("the store has no slug-test records; import them with "
                                    "'hydroatlas import STORE slugtests FILE' (or kind transducer)")
    geo = store.read("slug_geometry").set_index(["well_id", "zone_id", "test_id"])
    zones = store.read("zones", ["well_id", "zone_id", "top_depth", "bottom_depth", "kind"])
    zone_of = zones.set_index(["well_id", "zone_id"])
    try:
        asg = zone_assignment(store)
    except HydroatlasError:
        asg = pd.DataFrame(columns=["well_id", "zone_id", "unit"])
    unit_of = {(r.well_id, r.zone_id): r.unit for r in asg.itertuples()} if "unit" in asg else {}
    confined_unit = _confined_by_unit(store, asg) if "unit" in asg else {}
    picks = store.read("picks", ["well_id", "unit", "top_depth"])
    pick_top = {(r.well_id, r.unit): float(r.top_depth) for r in picks.itertuples()}
    unit_top = {k: pick_top[(k[0], u)] for k, u in unit_of.items() if (k[0], u) in pick_top}
    to_m = LENGTH_UNITS[store.settings.length_unit]
    k_unit = store_k_unit(store)
    length_unit = store.settings.length_unit

    rows, records, curves = [], {}, {}
    for key, g in rec.groupby(["well_id", "zone_id", "test_id"], sort=True):
        g = g.sort_values("t_s")
        t, d = g["t_s"].to_numpy(float), g["displacement"].to_numpy(float)
        records[key] = (t, d)
        row = {"well_id": key[0], "zone_id": key[1], "test_id": key[2], "unit": unit_of.get(key[:2]),
               "method": None, "k": np.nan, "k_unit": k_unit, "k_ms": np.nan, "response": None,
               "n_points": None, "r2": np.nan, "residual_pattern": None, "h_range": None, "shape_valid": None,
               "valid": False, "repeat_disagree": False, "quality": None, "reason": None, "problem": None,
               "alternatives": []}
        rows.append(row)
        try:
            diag = slug.diagnose(t, d)
            row["response"] = diag.response
            row["_diagnosis"] = _diagnosis_record(diag)
        except HydroatlasError as exc:
            row["problem"] = f"record cannot be read: {exc}"
            continue
        if key not in geo.index:
            row["problem"] = "no geometry (import a sluggeometry file)"
            continue
        gm = geo.loc[key]
        zone = zone_of.loc[key[:2]] if key[:2] in zone_of.index else None
        geometry, notes = test_geometry(gm, zone, confined_by_unit=confined_unit.get(key[:2]),
                                        unit_top_depth=unit_top.get(key[:2]), length_unit=length_unit)
        row["_geometry"], row["_geometry_notes"], row["_gm"] = geometry, notes, gm
        start = _attrs(g["attrs"].dropna().iloc[0]).get("test_start") if g["attrs"].notna().any() else None
        row["_started"] = start
        try:
            chosen, alternatives, reason = slug.reduce(t, d, geometry, method=method)
        except HydroatlasError as exc:
            row["problem"] = str(exc)
            continue
        fits = [fit_record(chosen, to_m=to_m, k_unit=k_unit)] + \
            [fit_record(a, to_m=to_m, k_unit=k_unit) for a in alternatives]
        curves[key] = chosen
        window = fits[0].get("window")
        missing = fits[0]["k"] is None  # the chosen method refused (the alternatives may still hold a K)
        row.update({"method": chosen.method, "k": np.nan if missing else fits[0]["k"],
                    "k_ms": np.nan if missing else fits[0]["k_ms"],
                    "n_points": int(chosen.n_points), "r2": float(chosen.r2) if chosen.r2 is not None else np.nan,
                    "residual_pattern": chosen.residual_pattern,
                    "h_range": f"{window[0]:.2f} to {window[1]:.2f}" if window else None,
                    "shape_valid": bool((chosen.shape or {}).get("valid", True)), "valid": bool(chosen.valid),
                    "reason": reason, "alternatives": fits[1:], "_fit": fits[0]})
        if chosen.problems:
            row["problem"] = "; ".join(chosen.problems)

    out = pd.DataFrame(rows)
    # repeats of a zone: normalised heads against time compared by the core (non-linear or skin effects)
    repeat_info = {}
    for (well, zone), g in out.groupby(["well_id", "zone_id"]):
        keys = [(well, zone, tid) for tid in g["test_id"]]
        if len(keys) < 2:
            repeat_info[(well, zone)] = {"n": len(keys), "disagree": False}
            continue
        try:
            cmp = slug.compare_repeats([records[k] for k in keys])
        except HydroatlasError as exc:
            cmp = {"n": len(keys), "disagree": False, "problem": str(exc)}
        cmp = _plain(cmp)
        cmp["tests"] = [k[2] for k in keys]
        repeat_info[(well, zone)] = cmp
        out.loc[g.index, "repeat_disagree"] = bool(cmp.get("disagree"))
    ok = out["k_ms"].notna()
    out["quality"] = [(_quality(curves[(r.well_id, r.zone_id, r.test_id)], bool(r.repeat_disagree)) if good
                       else None) for r, good in zip(out.itertuples(), ok)]

    figure_files: list[Path] = []
    if figures is not None:
        figure_files = _write_figures(out, records, curves, repeat_info, figures, k_unit=k_unit,
                                      length_unit=length_unit)

    if write and ok.any():
        frame_rows = []
        for i, r in out[ok].iterrows():
            gm = r["_gm"]
            tested_on = gm.get("tested_on")
            unknown = tested_on is None or (isinstance(tested_on, float) and math.isnan(tested_on))
            if unknown and r.get("_started"):
                tested_on, unknown, dated = str(r["_started"])[:10], False, "the transducer record's test start"
            else:
                dated = None
            attrs = {"method": r["method"], "method_name": METHOD_NAMES.get(r["method"], r["method"]),
                     "method_asked": method, "reason": r["reason"], "fit": r["_fit"],
                     "alternatives": r["alternatives"], "diagnostics": r["_diagnosis"],
                     "repeats": repeat_info.get((r["well_id"], r["zone_id"])),
                     "geometry": r["_geometry"], "geometry_sources": r["_geometry_notes"],
                     "length_unit": length_unit, "k_unit": k_unit, "slug_test_id": r["test_id"]}
            if unknown:
                attrs["tested_on_unknown"] = True
            if dated:
                attrs["tested_on_from"] = dated
            frame_rows.append({
                "well_id": r["well_id"], "zone_id": r["zone_id"], "test_id": f"slug:{r['test_id']}",
                "tested_on": date.today().isoformat() if unknown else str(tested_on)[:10],
                "method": "slug", "k": r["k"], "k_unit": k_unit, "k_ms": r["k_ms"], "quality": r["quality"],
                "source": f"hydroatlas slug reduction ({r['method']}, asked {method})",
                "attrs": json.dumps(_plain(attrs)), "source_file": "slug reduction",
                "source_row": len(frame_rows) + 1})
        with store.transaction():
            # the whole attrs object is replaced: a re-run with another method must not keep old keys
            store.upsert("ktests", pd.DataFrame(frame_rows), merge_attrs=False)
    out = out.drop(columns=[c for c in out.columns if c.startswith("_")])
    out.attrs["figures"] = [str(p) for p in figure_files]
    out.attrs["repeats"] = {f"{w}/{z}": v for (w, z), v in repeat_info.items()}
    return out


def _write_figures(out: pd.DataFrame, records: dict, curves: dict, repeat_info: dict, folder, *, k_unit: str,
                   length_unit: str) -> list[Path]:
    """One figure per test: normalised head against time, the zone's repeats overlaid, window and fit drawn."""
    from ..export import figures
    from ..export.names import ensure_folder, file_stem, output_path

    folder = ensure_folder(folder)
    written: list[Path] = []
    for r in out.itertuples():
        key = (r.well_id, r.zone_id, r.test_id)
        t, d = records[key]
        if not len(d) or d[0] == 0:
            continue
        same_zone = [k for k in records if k[:2] == key[:2]]
        repeats = []
        for k in same_zone:
            tk, dk = records[k]
            if len(dk) and dk[0] != 0:
                repeats.append({"label": f"{k[2]} (H0 = {dk[0]:.3g} {length_unit})", "t": tk, "h": dk / dk[0],
                                "current": k == key})
        fit = curves.get(key)
        curve = _fitted_curve(fit) if fit is not None else None
        title = f"{r.well_id} / {r.zone_id} / {r.test_id}"
        if fit is not None and np.isfinite(r.k):
            subtitle = (f"K = {r.k:.3g} {k_unit}, {METHOD_NAMES.get(r.method, r.method)}\n"
                        f"response: {r.response}; quality: {r.quality}")
            t_window = getattr(fit, "t_window", None)
            method_key = fit.method
        else:
            subtitle = f"no K: {r.problem}"
            t_window, method_key = None, None
        stem = output_path(folder, f"slug_{file_stem(r.well_id)}_{file_stem(r.zone_id)}_{file_stem(r.test_id)}")
        written += figures.slug_test(stem, repeats, method=method_key, fitted=curve, t_window=t_window,
                                     title=title, subtitle=subtitle,
                                     disagree=bool(repeat_info.get(key[:2], {}).get("disagree")))
    return written


def slug_method_asked(store: Store) -> str:
    """The method the stored slug K tests were last reduced with, when they agree on one; else 'auto'."""
    kt = store.read("ktests", ["test_id", "attrs"])
    asked = {_attrs(a).get("method_asked") for tid, a in zip(kt["test_id"], kt["attrs"])
             if str(tid).startswith("slug:")}
    asked.discard(None)
    return asked.pop() if len(asked) == 1 and next(iter(asked)) in SLUG_METHODS else "auto"
