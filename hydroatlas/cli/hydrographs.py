"""The hydrographs command: head against time per zone, spring discharge against time."""

from __future__ import annotations

from ._common import (
    ParameterError,
    _FORMATS,
    _OptionError,
    _emit,
    _option_label,
    _policy,
    _say_selection,
    _window_value,
    click,
    main,
    open_store,
    pd,
    selection_options,
)


def _shade_value(ctx, param, values):
    """Click callback: each --shade is LABEL=FROM/TO with a label and an ISO 8601 interval."""
    from ..heads import TimeWindow

    label_of = _option_label(param)
    out = []
    for text in values or ():
        label, sep, window = str(text).partition("=")
        if not sep or not label.strip():
            raise _OptionError(f"{label_of} must be LABEL=FROM/TO, e.g. drought=2022-06-01/2022-12-31 "
                               f"(got {text})", ctx=ctx, param=param)
        try:
            TimeWindow.parse(window.strip(), name=f"{label_of} {label.strip()}")
        except ParameterError as exc:
            raise _OptionError(str(exc), ctx=ctx, param=param) from None
        out.append((label.strip(), window.strip()))
    return tuple(out)


def _ids_value(ctx, param, value):
    """Click callback: ID,ID with no empty id."""
    if value is not None and any(not v.strip() for v in value.split(",")):
        raise _OptionError(f"{_option_label(param)} holds an empty id ({value!r}); give ids separated by commas, "
                           "e.g. W1,W2", ctx=ctx, param=param)
    return value


@main.command()
@click.argument("store")
@click.option("--wells", default=None, callback=_ids_value, metavar="ID,ID",
              help="Only these wells (comma separated); default every well (of --unit when given).")
@click.option("--unit", default=None, help="Only zones of this unit (and its sub-units), and springs issuing from it.")
@click.option("--springs", default=None, callback=_ids_value, metavar="ID,ID",
              help="Springs whose discharge to draw (default: every spring with discharge readings, of --unit "
                   "when given).")
@click.option("--window", default=None, callback=_window_value,
              help="ISO 8601 interval FROM/TO shaded and labelled 'window' (e.g. a drought).")
@click.option("--baseline", default=None, callback=_window_value,
              help="ISO 8601 interval FROM/TO shaded and labelled 'baseline' (e.g. a normal period).")
@click.option("--shade", "shades", multiple=True, callback=_shade_value, metavar="LABEL=FROM/TO",
              help="Another window to shade under its own label, e.g. drought=2022-06-01/2022-12-31 (may be "
                   "repeated).")
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
@click.option("--format", "fmt", type=_FORMATS, default="table", show_default=True,
              help="How to print the summary of what was drawn (one row per zone and per spring).")
@selection_options
def hydrographs(store, wells, unit, springs, window, baseline, shades, out, fmt, include_poor,
                include_pumping_wells, exclude_wells):
    """Hydrographs: head against time of every zone, spring discharge against time.

    One figure per well (OUT/<well>_hydrograph.png and .svg) with all its zones,
    each coloured by its unit (the same colour for a unit in every figure), heads
    in the store's length unit above its vertical datum; one figure per spring
    (OUT/<spring>_discharge_hydrograph.png and .svg) in the rate unit its readings
    were given in most often. --window, --baseline and --shade windows are shaded.
    OUT/hydrograph_heads.csv and OUT/hydrograph_discharge.csv hold exactly the
    readings drawn; OUT/hydrographs.json says the windows, units and selection.
    Head readings follow the selection policy (poor readings and levels in pumping
    wells are left out by default, as in every head product).

    Example: hydroatlas hydrographs district.gpkg --unit ULS --window 2022-06-01/2022-12-31
    --baseline 2021-03-01/2021-05-31 --out figures
    """
    from ..workflows.hydrographs import SUMMARY_COLUMNS, write_hydrographs

    with open_store(store) as s:
        result = write_hydrographs(s, out=out, wells=wells, unit=unit, springs=springs, window=window,
                                   baseline=baseline, shades=shades,
                                   policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    _say_selection(result.get("selection"), only="heads")
    for w in result["wells_without_readings"]:
        click.echo(f"warning: well {w} has no head reading to draw after the selection", err=True)
    for sp in result["springs_without_readings"]:
        click.echo(f"warning: spring {sp} has no discharge reading", err=True)
    frame = pd.DataFrame(result["summary"], columns=SUMMARY_COLUMNS)
    if fmt == "json":
        _emit(frame, "json", {k: result[k] for k in ("length_unit", "vertical_datum", "rate_units",
                                                      "shaded_windows", "n_head_readings",
                                                      "n_discharge_readings", "wells_without_readings",
                                                      "springs_without_readings", "selection", "summary",
                                                      "files")})
        return
    _emit(frame, fmt)
    if fmt == "table":
        files = result["files"]
        n_fig = len(files["wells"]) + len(files["springs"])
        click.echo(f"{n_fig} figure(s) (PNG and SVG), {result['n_head_readings']} head readings "
                   f"({result['length_unit']}), {result['n_discharge_readings']} discharge readings")
        for kind in ("heads_csv", "discharge_csv", "sidecar"):
            click.echo(f"  {kind}: {files[kind]}")
