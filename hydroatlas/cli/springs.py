"""The springflow command: a spring's discharge against an index head, cease-flow head, trigger levels, recession."""

from __future__ import annotations

from ._common import (
    Finite,
    Quantity,
    NON_NEGATIVE,
    POSITIVE,
    _OptionError,
    _in_units,
    _option_label,
    _policy,
    _report,
    _say_selection,
    _store_units,
    _window_value,
    click,
    format_option,
    main,
    open_store,
    pd,
    selection_options,
    surfaces_option,
    with_caution,
)

#: a trigger level: percent of the reference discharge, strictly between 0 and 100
PERCENT = Finite(min=0, max=100, min_open=True, max_open=True)
#: bootstrap draws: at least 100
DRAWS = Finite(min=100, integer=True)
SEED = Finite(min=0, integer=True)


def _levels_value(ctx, param, value):
    """Click callback: --levels 50,25,10, each a percentage in (0, 100)."""
    if value is None:
        return None
    label = _option_label(param)
    parts = [p.strip() for p in str(value).split(",")]
    if not parts or any(not p for p in parts):
        raise _OptionError(f"{label} must be percentages separated by commas, e.g. 50,25,10 (got {value})",
                           ctx=ctx, param=param)
    try:
        return tuple(PERCENT.check(p, label) for p in parts)
    except _OptionError as exc:
        exc.ctx, exc.param = ctx, param
        raise


def _index_value(ctx, param, value):
    """Click callback: --index WELL/ZONE."""
    if value is not None:
        well, sep, zone = str(value).strip().rpartition("/")
        if not sep or not well or not zone:
            raise _OptionError(f"{_option_label(param)} must be WELL/ZONE, a well id and a zone id (got {value})",
                               ctx=ctx, param=param)
    return value


def _windows_value(ctx, param, values):
    """Click callback: each --recession-window an ISO 8601 interval FROM/TO."""
    for v in values or ():
        _window_value(ctx, param, v)
    return tuple(values or ())


def _rate_m3d(value, store_rate_unit: str):
    """A --recession-from/--recession-to value in m3/d; a bare number is in the store's rate unit."""
    return _in_units(value, "rate", "m3/d", default_unit=store_rate_unit)


@main.command()
@click.argument("store")
@click.option("--spring", "spring_id", required=True, help="The spring's id.")
@click.option("--index", default=None, callback=_index_value, metavar="WELL/ZONE",
              help="The index zone whose head the discharge is fitted against; default: the zones of the "
                   "spring's unit ranked by the R^2 of a line, the best supported one.")
@click.option("--all-zones", is_flag=True,
              help="Without --index: rank every zone with heads, not only those of the spring's unit.")
@click.option("--window", default=None, callback=_window_value,
              help="ISO 8601 interval FROM/TO: only discharge readings inside it.")
@click.option("--levels", default="50,25,10", show_default=True, callback=_levels_value, metavar="P,P,...",
              help="Trigger levels: percent of the reference discharge (the median discharge of the record in "
                   "the window).")
@click.option("--tolerance", "tolerance_days", type=Quantity("time", NON_NEGATIVE), default="16",
              show_default=True,
              help="Days a head reading may lie from a discharge reading (or with a unit: 48h, 2d); with "
                   "--pairing interpolate the bracketing readings may lie twice this apart.")
@click.option("--pairing", "how", type=click.Choice(["nearest", "interpolate"]), default="nearest",
              show_default=True,
              help="Pair each discharge reading with the nearest head reading, or interpolate the head in time "
                   "between the readings around it.")
@click.option("--recession-from", "recession_from", type=Quantity("rate", POSITIVE), default=None,
              help="Discharge from which the days of recession are counted, with its unit (e.g. 500gpm; a bare "
                   "number is in the store's rate unit); default the reference discharge.")
@click.option("--recession-to", "recession_to", type=Quantity("rate", POSITIVE), default=None,
              help="Discharge to which the days of recession are counted; default the discharge of the lowest "
                   "trigger level.")
@click.option("--recession-window", "recession_windows", multiple=True, callback=_windows_value,
              metavar="FROM/TO",
              help="Fit the recession on the readings inside these windows (may be repeated) instead of on "
                   "runs of falling discharge.")
@click.option("--min-recession-readings", "min_recession_readings", type=Finite(min=3, integer=True), default=4,
              show_default=True, help="Least readings of a run of falling discharge fitted as a recession.")
@click.option("--bootstrap", type=DRAWS, default=999, show_default=True,
              help="Bootstrap draws for the power law's intervals and the spring effect of a drawdown.")
@click.option("--seed", type=SEED, default=0, show_default=True, help="Seed of the bootstrap.")
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
@selection_options
@format_option
@with_caution("general")
def springflow(store, spring_id, index, all_zones, window, levels, tolerance_days, how, recession_from,
               recession_to, recession_windows, min_recession_readings, bootstrap, seed, surfaces, out,
               include_poor, include_pumping_wells, exclude_wells, fmt):
    """Discharge of a spring against the head of an index zone: cease-flow head, trigger levels, recession.

    Each discharge reading is paired with the index zone's head at its time;
    discharge is fitted against head by a line (Q = a + b h) and, where the data
    support it, a power law (Q = c (h - h0)^n); the better by AIC is used. The
    cease-flow head h0 has a 95 % interval (Fieller's for the line, a residual
    bootstrap for the power law); so do the trigger levels, the heads at which
    discharge falls to --levels percent of the reference discharge. Maillet's
    recession Q = Q0 exp(-a t) is fitted to runs of falling discharge: the
    recession constant a (1/d) and the days from --recession-from to
    --recession-to with no recharge. Heads are in the store's length unit;
    discharge in the rate unit the spring's readings used most (if of the
    store's unit system, else ft3/d or m3/d). Writes OUT/<spring>_springflow.csv
    (pairs and fitted values), OUT/<spring>_springflow.json (fits, intervals,
    recession, the relation a drawdown scenario uses) and
    OUT/<spring>_springflow.png and .svg. Trigger levels are planning figures,
    not drought rules: set triggers with the local water authority.

    Example: hydroatlas springflow district.gpkg --spring SP-1 --index MW-4/P2 --levels 50,25,10
    """
    from ..workflows.springflow import springflow as run

    with open_store(store) as s:
        su = _store_units(s)
        q_from = _rate_m3d(recession_from, su.rate)
        q_to = _rate_m3d(recession_to, su.rate)
        res = run(s, spring_id, index=index, window=window, levels=levels,
                  tolerance_days=float(_in_units(tolerance_days, "time", "d", default_unit="d")), how=how,
                  recession_from=q_from, recession_to=q_to, recession_unit="m3/d",
                  recession_windows=list(recession_windows) or None,
                  min_recession_readings=int(min_recession_readings), all_zones=all_zones,
                  bootstrap=int(bootstrap), seed=int(seed), out=out, surfaces=surfaces,
                  policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    warnings = list(_say_selection(res.get("selection"), only="heads") or [])
    for line in res.get("warnings", []):
        click.echo(f"warning: {line}", err=True)
    warnings += list(res.get("warnings", []))
    L = res["units"]["head"]
    ru = res["units"]["discharge"]
    levels_frame = _levels_frame(res)
    if fmt != "table":
        facts = {k: res[k] for k in ("spring_id", "spring_unit", "index", "window", "units", "model", "criterion",
                                     "cease_flow_head", "reference_discharge", "trigger_levels", "fits",
                                     "recession", "contributing_area_balance", "pairing", "candidates",
                                     "bootstrap", "selection", "caution", "files")}
        facts["warnings"] = warnings
        _report(fmt, facts, rows=levels_frame)
        return
    ix = res["index"]
    pr = res["pairing"]
    click.echo(f"spring {res['spring_id']}: index zone {ix['well_id']}/{ix['zone_id']} ({ix['chosen_by']}); "
               f"{pr['n_paired']} of {pr['n_readings']} discharge readings paired ({pr['how']}, "
               f"{pr['tolerance_days']:g} d)")
    click.echo(f"heads in {L}, discharge in {ru}; model: {res['model'] or 'none'} ({res['criterion']})")
    if res["model"]:
        click.echo(levels_frame.to_string(index=False, na_rep="-", float_format=lambda v: f"{v:.5g}"))
    rec = res["recession"]
    if rec.get("recession_constant") is not None:
        lo, hi = rec["recession_constant_ci95"]
        click.echo(f"recession constant {rec['recession_constant']:.4g} 1/d (95 % {lo:.4g} to {hi:.4g}), "
                   f"{rec['n_segments']} segment(s), {rec['n_readings']} readings")
        d = rec.get("days")
        if d:
            click.echo(f"days from {d['from']:.4g} to {d['to']:.4g} {ru} with no recharge: {d['days']:.4g} "
                       f"(95 % {d['low']:.4g} to {d['high']:.4g})")
    bal = res["contributing_area_balance"]
    if bal.get("equivalent_recharge") is not None:
        click.echo(f"equivalent recharge of the median discharge over {bal['area']:.4g} {bal['area_unit']}: "
                   f"{bal['equivalent_recharge']:.4g} {bal['recharge_unit']} ({bal['area_source']})")
    for kind, path in res["files"].items():
        click.echo(f"  {kind}: {path}")
    click.echo(f"caution: {res['caution']}")


def _levels_frame(res) -> pd.DataFrame:
    """The cease-flow head and the trigger levels, one row each, every number with its unit."""
    L = res["units"]["head"]
    ru = res["units"]["discharge"]
    h0 = res["cease_flow_head"]
    rows = []
    if res["model"]:
        rows.append({"what": "cease-flow head", "percent": 0.0, "discharge": 0.0, "rate_unit": ru,
                     "head": h0["value"], "head_low": h0["low"], "head_high": h0["high"], "length_unit": L})
        for lv in res["trigger_levels"]:
            rows.append({"what": "trigger level", "percent": lv["percent"], "discharge": lv["discharge"],
                         "rate_unit": ru, "head": lv["head"], "head_low": lv["low"], "head_high": lv["high"],
                         "length_unit": L})
    return pd.DataFrame(rows, columns=["what", "percent", "discharge", "rate_unit", "head", "head_low",
                                       "head_high", "length_unit"])
