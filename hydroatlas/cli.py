"""The ``hydroatlas`` command line: argument parsing only; each command calls one workflow.

Exit codes: 0 success, 2 bad usage or bad input (one-line message on stderr),
1 internal error (traceback with --debug).
"""

from __future__ import annotations

import json
import math
import sys
import traceback
from contextlib import contextmanager

import click
import pandas as pd

from . import workflows
from .errors import HydroatlasError, ParameterError
from .heads import TimeWindow, parse_instant
from .quantities import RATE_UNITS, known_units
from .stats import PER_CHOICES
from .store import open_store
from .store.importers import KINDS

CAUTION = ("Results are screening-level estimates for planning and model set-up, not a substitute for "
           "site-specific investigation or for the judgement of a licensed professional geoscientist or "
           "engineer; well construction, testing and pumping are governed by local rules and permits.")

_FORMATS = click.Choice(["table", "csv", "json"])
# Defaults used (with a warning) when a scenario parameter is not given; common practice, not site values.
DEFAULT_POROSITY = 0.1
DEFAULT_STORATIVITY = 1e-4

# options shared by several commands, declared once
k_unit_option = click.option("--k-unit", type=click.Choice(known_units("hydraulic conductivity")), default="m/d",
                             show_default=True, help="Unit of the K figures.")
surfaces_option = click.option("--surfaces", default=None, type=click.Path(file_okay=False),
                               help="Folder of the surfaces and layers.gpkg made by 'surface' and 'paths' "
                                    "(default: the output folder).")


# -- option values: declared constraints, refused with exit code 2 and one line that names the option ------------
class _OptionError(click.BadParameter):
    """A refused option value: exit code 2 and one line, "hydroatlas: error: --cell must be ...", no usage text."""

    def format_message(self) -> str:
        return self.message

    def show(self, file=None) -> None:
        click.echo(f"hydroatlas: error: {self.format_message()}", file=file, err=True)


def _option_label(param) -> str:
    return "/".join(param.opts) if param is not None and param.opts else "option"


class Finite(click.ParamType):
    """A finite number (or whole number) within declared bounds.

    Declared once per kind of value and reused; a refusal is one line that names
    the option, e.g. "--cell must be > 0 and finite (got inf)".
    """

    def __init__(self, *, min: float | None = None, max: float | None = None, min_open: bool = False,
                 max_open: bool = False, integer: bool = False):
        self.min, self.max, self.min_open, self.max_open, self.integer = min, max, min_open, max_open, integer
        self.name = "integer" if integer else "float"  # the metavar in --help, as click's own types

    def describe(self) -> str:
        """The constraint in words: '> 0 and finite', '> 0 and <= 1', 'a whole number >= 1', 'a finite number'."""
        low = None if self.min is None else f"{'>' if self.min_open else '>='} {self.min:g}"
        high = None if self.max is None else f"{'<' if self.max_open else '<='} {self.max:g}"
        if self.integer:
            return " ".join(["a whole number", " and ".join(b for b in (low, high) if b)]).strip()
        if low and high:
            return f"{low} and {high}"
        if low or high:
            return f"{low or high} and finite"
        return "a finite number"

    def check(self, value, label: str):
        """``value`` (text or number) as a checked float or int; _OptionError naming ``label`` otherwise."""
        try:
            x = float(value)
            if self.integer:  # "5" and 5.0 are whole, "5.0" from the command line and 2.5 are not
                x = int(value) if isinstance(value, str) else (int(x) if x.is_integer() else None)
        except (TypeError, ValueError, OverflowError):
            x = None
        ok = x is not None and math.isfinite(x)
        if ok and self.min is not None:
            ok = x > self.min if self.min_open else x >= self.min
        if ok and self.max is not None:
            ok = x < self.max if self.max_open else x <= self.max
        if not ok:
            shown = value.strip() if isinstance(value, str) else value
            raise _OptionError(f"{label} must be {self.describe()} (got {shown})")
        return x

    def convert(self, value, param, ctx):
        try:
            return self.check(value, _option_label(param))
        except _OptionError as exc:
            exc.ctx, exc.param = ctx, param
            raise


FINITE = Finite()
POSITIVE = Finite(min=0, min_open=True)
NON_NEGATIVE = Finite(min=0)
COUNT = Finite(min=1, integer=True)
FRACTION = Finite(min=0, max=1, min_open=True)  # (0, 1]: effective porosity
OPEN_FRACTION = Finite(min=0, max=1, min_open=True, max_open=True)  # (0, 1): storativity
ANGLE = Finite(min=-360, max=360)


class _Pair(click.ParamType):
    """Two comma-separated numbers, each checked by a :class:`Finite`, e.g. X,Y or ROWS,COLS."""

    def __init__(self, what: str, each: Finite, kind: str):
        self.name, self.each, self.kind = what, each, kind

    def convert(self, value, param, ctx):
        if isinstance(value, tuple):
            return value
        parts = str(value).split(",")
        label = _option_label(param)
        try:
            if len(parts) != 2:
                raise _OptionError("")
            return tuple(self.each.check(p, label) for p in parts)
        except _OptionError:
            raise _OptionError(f"{label} must be {self.name}, {self.kind} (got {value})", ctx=ctx,
                               param=param) from None


class _Checked(click.ParamType):
    """Text checked by ``parse([text])`` while the command line is read (before the command says anything), kept
    as text for the command to parse."""

    name = "text"

    def __init__(self, parse):
        self.parse = parse

    def convert(self, value, param, ctx):
        try:
            self.parse([value])
        except _OptionError as exc:
            exc.ctx, exc.param = ctx, param
            raise
        return value


def _window_value(ctx, param, value):
    """Click callback: an ISO 8601 interval FROM/TO, each end at least YYYY-MM-DD."""
    if value is not None:
        try:
            TimeWindow.parse(value, name=_option_label(param))
        except ParameterError as exc:
            raise _OptionError(str(exc), ctx=ctx, param=param) from None
    return value


def _date_value(ctx, param, value):
    """Click callback: an ISO 8601 date or date-time, at least YYYY-MM-DD."""
    if value is not None:
        try:
            parse_instant(value, name=_option_label(param))
        except ParameterError as exc:
            raise _OptionError(str(exc), ctx=ctx, param=param) from None
    return value


class _Group(click.Group):
    """Turn hydroatlas errors into exit code 2 and one line; anything else into exit code 1."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except HydroatlasError as exc:
            if ctx.obj and ctx.obj.get("debug"):
                traceback.print_exc()
            click.echo(f"hydroatlas: error: {exc}", err=True)
            ctx.exit(2)
        except (click.exceptions.Exit, click.ClickException, click.exceptions.Abort):
            raise
        except Exception as exc:  # noqa: BLE001 - the last guard of the program
            if ctx.obj and ctx.obj.get("debug"):
                traceback.print_exc()
            click.echo(f"hydroatlas: internal error: {type(exc).__name__}: {exc} (rerun with --debug "
                       "for a traceback and please report it)", err=True)
            ctx.exit(1)


@click.group(cls=_Group)
@click.option("--debug", is_flag=True, help="Show tracebacks on errors.")
@click.version_option(package_name="hydroatlas")
@click.pass_context
def main(ctx, debug):
    """hydroatlas: a spatial store and mapper of hydrostratigraphic properties.

    The store (a GeoPackage file) is the first argument of every command.
    """
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug


def _json_safe(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    if hasattr(value, "item"):
        return _json_safe(value.item())
    return value


def _emit(frame: pd.DataFrame, fmt: str, records=None):
    if fmt == "json":
        data = records if records is not None else frame.to_dict(orient="records")
        click.echo(json.dumps(_json_safe(data), indent=2))
    elif fmt == "csv":
        click.echo(frame.to_csv(index=False), nl=False)
    else:
        click.echo(frame.to_string(index=False, na_rep="-", float_format=lambda v: f"{v:.4g}")
                   if not frame.empty else "(nothing to show)")


def _progress(label, unit=" rows"):
    """A progress bar on a terminal; silent when stderr is not a terminal."""
    from tqdm import tqdm

    return tqdm(desc=label, unit=unit, disable=not sys.stderr.isatty(), leave=False)


@contextmanager
def _progress_bar(label):
    bar = _progress(label)
    try:
        yield bar
    finally:
        bar.close()


@main.command()
@click.argument("store")
@click.option("--crs", required=True, help="Horizontal CRS of the store, e.g. EPSG:32615.")
@click.option("--length-unit", type=click.Choice(["m", "ft"]), default="m", show_default=True,
              help="Unit of depths, elevations and heads.")
@click.option("--vertical-datum", default="unspecified", show_default=True, help="Label of the vertical datum.")
def init(store, crs, length_unit, vertical_datum):
    """Create a new, empty store.

    Example: hydroatlas init district.gpkg --crs EPSG:32615 --length-unit m --vertical-datum NAVD88
    """
    s = workflows.init_store(store, crs=crs, length_unit=length_unit, vertical_datum=vertical_datum)
    click.echo(f"created {store} (CRS {s.settings.crs.name}, lengths in {s.settings.length_unit}, "
               f"vertical datum {s.settings.vertical_datum})")
    s.close()


@main.command(name="import")
@click.argument("store")
@click.argument("kind", type=click.Choice(KINDS))
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--input-crs", default=None, help="CRS of the file's coordinates if not the store's.")
@click.option("--clear-empty", is_flag=True,
              help="An empty cell of an optional column clears the stored value (by default it keeps it).")
def import_(store, kind, file, input_crs, clear_empty):
    """Import one file of KIND into the store, whole or not at all.

    Re-importing a file updates rows by their natural key and adds no duplicates;
    every value it changes keeps its earlier version in the record history
    ('hydroatlas history'). Optional columns left out of the file, and empty
    optional cells, keep the stored values. Import in this order: units, wells,
    picks, zones, then ktests, heads, pumping; springs before discharge; areas
    any time after units.

    Example: hydroatlas import district.gpkg wells wells.csv --input-crs EPSG:4326
    """
    with open_store(store) as s:
        bar = _progress(kind)
        try:
            report = workflows.import_data(s, kind, file, input_crs=input_crs, progress=bar.update,
                                           clear_empty=clear_empty)
        finally:
            bar.close()
    click.echo(report.summary())
    for note in report.notes:
        click.echo(f"note: {note}")


@main.command()
@click.argument("store")
@click.option("--json", "as_json", is_flag=True, help="Print the findings as JSON.")
def check(store, as_json):
    """Report data-quality findings: straddling zones, pick gaps and overlaps,
    wells without picks, orphans, K outliers and heads far outside their unit's range."""
    with open_store(store) as s:
        findings = workflows.check_store(s)
    frame = pd.DataFrame(findings, columns=["kind", "severity", "well_id", "zone_id", "unit", "message"])
    if as_json:
        _emit(frame, "json", findings)
    else:
        _emit(frame, "table")
        counts = frame["kind"].value_counts()
        click.echo("\n" + (", ".join(f"{k}: {v}" for k, v in counts.items()) or "no findings"))


@main.command()
@click.argument("store")
@click.option("--unit", default=None, help="Only this unit code.")
@k_unit_option
@click.option("--per", type=click.Choice(PER_CHOICES), default="test", show_default=True,
              help="What counts once: every test, the log-mean of each zone, or of each well.")
@click.option("--format", "fmt", type=_FORMATS, default="table", show_default=True)
@click.option("--exclude-straddles", is_flag=True, help="Leave out zones that cross units.")
@click.option("--exclude-poor", is_flag=True, help="Leave out tests of quality 'poor'.")
@click.option("--wells", "by_well", is_flag=True,
              help="Per-well transmissivity and effective K_h / K_v instead of unit statistics.")
def stats(store, unit, k_unit, per, fmt, exclude_straddles, exclude_poor, by_well):
    """Hydraulic-conductivity statistics per unit (geometric mean, log variance, 95 % CI).

    Variances are sample variances (ddof = 1) of log10 K and ln K.

    Example: hydroatlas stats district.gpkg --per zone --k-unit ft/d --format json
    """
    with open_store(store) as s:
        if by_well:
            frame = workflows.well_profiles(s, k_unit=k_unit, unit=unit, exclude_poor=exclude_poor)
            _emit(frame, fmt)
            return
        rows = workflows.unit_stats(s, unit=unit, per=per, k_unit=k_unit, exclude_straddles=exclude_straddles,
                                    exclude_poor=exclude_poor)
    if fmt == "json":
        _emit(pd.DataFrame(), "json", rows)
        return
    if not rows:
        raise HydroatlasError("the store has no units; import a units file first")
    frame = pd.DataFrame(rows)
    if fmt == "table":
        frame["ci95"] = [("-" if v is None or v[0] is None or not math.isfinite(v[0])
                          else f"{v[0]:.3g}-{v[1]:.3g}") for v in frame["k_geomean_ci95"]]
        frame = frame[["unit", "role", "n_tests", "n_zones", "n_wells", "k_geomean", "ci95", "k_median",
                       "k_min", "k_max", "log10k_mean", "log10k_std", "lnk_var"]]
        click.echo(f"K in {k_unit}; statistics per {per}")
    else:
        lo_hi = frame.pop("k_geomean_ci95")
        frame["k_geomean_ci95_low"] = [v[0] if v else None for v in lo_hi]
        frame["k_geomean_ci95_high"] = [v[1] if v else None for v in lo_hi]
    _emit(frame, fmt)


@main.command()
@click.argument("store")
@click.option("--window", default=None, callback=_window_value,
              help="ISO 8601 interval FROM/TO: median head of each zone inside it.")
@click.option("--at", default=None, callback=_date_value,
              help="Date: the reading nearest to it, per zone (instead of --window).")
@click.option("--profiles", is_flag=True, help="Print the head profile of each multi-zone well instead of pairs.")
@click.option("--format", "fmt", type=_FORMATS, default="table", show_default=True)
def verticals(store, window, at, profiles, fmt):
    """Head differences, vertical gradients and aquitard leakage at multi-zone wells.

    One row per pair of successive zones (top down): dhead is the upper head minus
    the lower head (positive = downward flow), vertical_gradient is dhead over the
    distance between the zone midpoints, and leakage_flux is the Darcy flux across
    the aquitard and confining units between them, dhead / sum(b / K), with K the
    unit's geometric-mean K used as vertical K.

    Example: hydroatlas verticals district.gpkg --window 2024-03-01/2024-03-31 --format json
    """
    with open_store(store) as s:
        pairs, prof = workflows.verticals(s, window=window, at=at)
    frame = prof if profiles else pairs
    _emit(frame, fmt)


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code.")
@click.option("--quantity", type=click.Choice(workflows.QUANTITIES), default="head", show_default=True,
              help="head, logk (log10 K in m/d) or dhead (head minus the head of the unit below).")
@click.option("--method", type=click.Choice(workflows.METHODS), default="kriging", show_default=True,
              help="kriging (ordinary), uk (universal, linear drift) or idw.")
@click.option("--window", default=None, callback=_window_value,
              help="ISO 8601 interval FROM/TO for heads (median per zone).")
@click.option("--at", default=None, callback=_date_value, help="Date: the head reading nearest to it, per zone.")
@click.option("--cell", type=POSITIVE, default=None, help="Cell size in CRS units (default: 1/200 of the extent).")
@click.option("--variogram", type=click.Choice(["spherical", "exponential", "gaussian"]), default="spherical",
              show_default=True, help="Variogram model, fitted by weighted least squares unless fixed.")
@click.option("--nugget", type=NON_NEGATIVE, default=None, help="Fix the nugget.")
@click.option("--sill", type=POSITIVE, default=None, help="Fix the total sill (with --range).")
@click.option("--range", "range_", type=POSITIVE, default=None, help="Fix the practical range (with --sill).")
@click.option("--neighbors", type=Finite(min=0, integer=True), default=None,
              help="Nearest points per cell; 0 = all (one global system). Default: all up to 400 points, else 16.")
@click.option("--lower-unit", default=None, help="For dhead: the unit whose head is subtracted (default: next below).")
@click.option("--buffer", type=POSITIVE, default=None, help="Mask distance around the data when no domain polygon.")
@click.option("--fallback-idw", is_flag=True, help="Use IDW when no variogram can be fitted (all values equal).")
@click.option("--max-cells", type=COUNT, default=None, help="Refuse grids larger than this (default 50,000,000).")
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
def surface(store, unit, quantity, method, window, at, cell, variogram, nugget, sill, range_, neighbors,
            lower_unit, buffer, fallback_idw, max_cells, out):
    """Interpolate head, log K or head difference of one unit onto a grid.

    Writes OUT/<unit>_<quantity>.tif (band 1 estimate, band 2 kriging standard
    deviation), OUT/<unit>_<quantity>.json (method, variogram, neighbourhood,
    leave-one-out cross-validation of every method, window) and, for heads,
    OUT/<unit>_gradient.tif and the flow_arrows layer of OUT/layers.gpkg.
    The grid covers the domain polygon (areas of kind domain) or the data.

    Caution: results are screening-level estimates for planning and model set-up,
    not a substitute for site-specific investigation or for the judgement of a
    licensed professional geoscientist or engineer; well construction, testing and
    pumping are governed by local rules and permits. A smooth surface does not see
    conduits, faults or barriers; in karst, flow can be far faster than it suggests.

    Example: hydroatlas surface district.gpkg --unit ULS --quantity head --window 2024-03-01/2024-03-31
    """
    with open_store(store) as s, _progress_bar("grid rows") as bar:
        result = workflows.build_surface(s, unit, quantity, method=method, window=window, at=at, cell=cell,
                                         variogram=variogram, nugget=nugget, sill=sill, range_=range_,
                                         neighbors="auto" if neighbors is None else (neighbors or None),
                                         buffer=buffer, out=out,
                                         fallback_idw=fallback_idw, max_cells=max_cells, lower_unit=lower_unit,
                                         progress=bar.update)
    cv = result["cross_validation"].get(result["selected_method"], {})
    click.echo(f"{unit} {quantity} by {result['selected_method']} from {result['n_points']} wells; "
               f"leave-one-out RMSE {cv.get('rmse', float('nan')):.4g} {result['value_unit']}")
    for kind, path in result["files"].items():
        click.echo(f"  {kind}: {path}")


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code.")
@click.option("--wells", required=True, help="Three well ids, comma separated.")
@click.option("--window", default=None, callback=_window_value, help="ISO 8601 interval FROM/TO for heads.")
@click.option("--at", default=None, callback=_date_value, help="Date: the reading nearest to it.")
@click.option("--format", "fmt", type=_FORMATS, default="table", show_default=True)
def threepoint(store, unit, wells, window, at, fmt):
    """Hydraulic gradient and flow direction from the heads of three wells (plane through three points).

    Example: hydroatlas threepoint district.gpkg --unit ULS --wells W1,W2,W3
    """
    with open_store(store) as s:
        res = workflows.three_point_wells(s, unit, [w.strip() for w in wells.split(",")], window=window, at=at)
    if fmt == "json":
        _emit(pd.DataFrame(), "json", res)
    else:
        _emit(pd.DataFrame([{k: v for k, v in res.items() if k not in ("wells", "heads")}]), fmt)


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code (its head surface must exist).")
@click.option("--porosity", type=FRACTION, default=None,
              help=f"Effective porosity n_e, in (0, 1] (default {DEFAULT_POROSITY}, with a warning: give the "
                   "value for your rock).")
@click.option("--backward", is_flag=True, help="Track backward from the springs and outline contributing areas.")
@click.option("--k-source", type=click.Choice(["mean", "surface"]), default="mean", show_default=True,
              help="K from the unit's geometric mean or from its log-K surface.")
@surfaces_option
@click.option("--seed-spacing", type=POSITIVE, default=None, help="Spacing of seeds in recharge areas (CRS units).")
@click.option("--capture-radius", type=POSITIVE, default=None, help="Particles end within this of a spring or "
              "pumping well (default: 2 cells).")
@click.option("--max-years", type=POSITIVE, default=1000.0, show_default=True, help="Longest travel time tracked.")
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
def paths(store, unit, porosity, backward, k_source, surfaces, seed_spacing, capture_radius, max_years, out):
    """Likely pathways from recharge areas to springs, pumping wells or the domain edge.

    Particles move with the Darcy seepage velocity v = K i / n_e on the unit's head
    surface (made by 'hydroatlas surface --quantity head'), integrated by an adaptive
    Dormand-Prince 5(4) scheme. Forward: seeds over each recharge area. --backward:
    paths from each spring and its contributing area. Writes the pathlines (and
    contributing_areas) layers of OUT/layers.gpkg and OUT/<unit>_pathways.csv.

    Caution: results are screening-level estimates for planning and model set-up,
    not a substitute for site-specific investigation or for the judgement of a
    licensed professional geoscientist or engineer; well construction, testing and
    pumping are governed by local rules and permits. Particle paths on a smooth head
    surface do not see conduits, faults or barriers; in karst, Darcy travel times are
    upper bounds and conduit flow can be orders of magnitude faster.

    Example: hydroatlas paths district.gpkg --unit ULS --porosity 0.02 --out maps/
    """
    if porosity is None:
        porosity = DEFAULT_POROSITY
        click.echo(f"warning: --porosity not given; using n_e = {DEFAULT_POROSITY} (travel times scale with n_e: "
                   "give the effective porosity of your unit)", err=True)
    with open_store(store) as s:
        result = workflows.trace_paths(s, unit, porosity=porosity, out=out, surfaces=surfaces, backward=backward,
                                       k_source=k_source, seed_spacing=seed_spacing, capture_radius=capture_radius,
                                       max_years=max_years)
    click.echo(f"{result['n_particles']} particles tracked {result['direction']} on the {unit} head surface")
    click.echo(result["table"].to_string(index=False, float_format=lambda v: f"{v:.4g}"))
    click.echo(f"Caution: {workflows.KARST_WARNING}")
    for kind, path in result["files"].items():
        click.echo(f"  {kind}: {path}")


def _parse_rates(values):
    out = {}
    for item in values:
        wid, sep, q = item.partition("=")
        try:
            if not (sep and wid.strip()):
                raise ValueError
            out[wid.strip()] = FINITE.check(q, "--rate")
        except (ValueError, _OptionError):
            raise _OptionError(f"--rate must be WELL=Q with Q a finite number (got {item})") from None
    return out


def _parse_new_wells(values):
    out = []
    for n, item in enumerate(values, start=1):
        parts = item.split(",")
        try:
            if len(parts) not in (3, 4):
                raise ValueError
            x, y, q = (FINITE.check(p, "--new-well") for p in parts[-3:])
        except (ValueError, _OptionError):
            raise _OptionError(f"--new-well must be [NAME,]X,Y,Q with X, Y, Q finite numbers "
                               f"(got {item})") from None
        name = parts[0].strip() if len(parts) == 4 else ""
        out.append((name or f"proposed-{n}", x, y, q))
    return out


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code (its head surface must exist).")
@click.option("--days", type=POSITIVE, required=True, help="Pumping duration in days.")
@click.option("--storativity", "-S", type=OPEN_FRACTION, default=None,
              help=f"Storage coefficient S, in (0, 1) (default {DEFAULT_STORATIVITY}, a confined aquifer, "
                   "with a warning).")
@click.option("--rate", "rates", multiple=True, type=_Checked(lambda v: _parse_rates(v)),
              help="WELL=Q: rate of a stored well (replaces its stored rate).")
@click.option("--new-well", "new_wells", multiple=True, type=_Checked(lambda v: _parse_new_wells(v)),
              help="[NAME,]X,Y,Q: a proposed well (store CRS).")
@click.option("--rate-unit", type=click.Choice(list(RATE_UNITS)), default="m3/d", show_default=True)
@click.option("--transmissivity", "-T", type=POSITIVE, default=None,
              help="T in m2/d (default: the unit's geometric-mean K times its mean thickness).")
@click.option("--threshold", type=NON_NEGATIVE, default=0.5, show_default=True,
              help="List springs and monitoring zones losing more head than this (store length unit).")
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
def drawdown(store, unit, days, storativity, rates, new_wells, rate_unit, transmissivity, threshold, surfaces, out):
    """Theis drawdown of the unit's pumping wells, superposed on its head surface.

    Uses the stored current pumping rates (records without an end date) of wells
    screened in the unit, changed or added with --rate and --new-well. Writes
    OUT/<unit>_drawdown.tif, OUT/<unit>_head_drawdown.tif (head minus drawdown),
    OUT/<unit>_drawdown_impacts.csv (springs and monitoring zones above the
    threshold) and a JSON sidecar.

    Caution: results are screening-level estimates for planning and model set-up,
    not a substitute for site-specific investigation or for the judgement of a
    licensed professional geoscientist or engineer; well construction, testing and
    pumping are governed by local rules and permits. Theis assumes a uniform,
    infinite aquifer: boundaries, leakage and karst conduits change real drawdown.

    Example: hydroatlas drawdown district.gpkg --unit ULS --days 365 -S 0.001 --rate ZP-031=2000
    """
    if storativity is None:
        storativity = DEFAULT_STORATIVITY
        click.echo(f"warning: --storativity not given; using S = {DEFAULT_STORATIVITY} (typical of a confined "
                   "aquifer; an unconfined one is nearer 0.01-0.3: give the value for your unit)", err=True)
    with open_store(store) as s:
        res = workflows.drawdown_scenario(s, unit, days=days, storativity=storativity, rates=_parse_rates(rates),
                                          new_wells=_parse_new_wells(new_wells), rate_unit=rate_unit,
                                          transmissivity=transmissivity, surfaces=surfaces, out=out,
                                          threshold=threshold)
    click.echo(f"{len(res['wells'])} pumping wells, {days:g} d, T = {res['transmissivity_m2_per_d']:.4g} m2/d, "
               f"S = {storativity:g}; largest drawdown {res['max_drawdown']:.3g} {res['length_unit']}")
    imp = res["impacts"]
    if imp.empty:
        click.echo(f"no spring or monitoring zone loses more than {threshold:g} {res['length_unit']}")
    else:
        click.echo(imp[["kind", "id", "zone_id", "drawdown"]].to_string(index=False, na_rep="",
                                                                        float_format=lambda v: f"{v:.3g}"))
    for kind, path in res["files"].items():
        click.echo(f"  {kind}: {path}")


@main.command(name="map")
@click.argument("store")
@click.option("--unit", default=None, help="Unit whose K, head contours and results are shown (default: top aquifer).")
@k_unit_option
@surfaces_option
@click.option("--tiles", default=None, help="Basemap URL template (needs internet); none by default.")
@click.option("--out", default="map.html", show_default=True, type=click.Path(dir_okay=False))
def map_(store, unit, k_unit, surfaces, tiles, out):
    """One self-contained HTML web map that works offline.

    Wells coloured by K, head contours, flow arrows, kriging standard deviation,
    pumping wells sized by rate, springs, recharge areas, pathlines coloured by
    travel time, contributing areas and drawdown contours, each switchable.

    Caution: results are screening-level estimates for planning and model set-up,
    not a substitute for site-specific investigation or for the judgement of a
    licensed professional geoscientist or engineer; well construction, testing and
    pumping are governed by local rules and permits.
    """
    with open_store(store) as s:
        path = workflows.build_map(s, unit=unit, out=out, surfaces=surfaces, k_unit=k_unit, tiles=tiles)
    click.echo(f"map: {path}")


@main.command()
@click.argument("store")
@k_unit_option
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False))
def layers(store, k_unit, surfaces, out):
    """Vector layers to OUT/layers.gpkg and OUT/geojson/*.geojson (RFC 7946, WGS 84).

    wells (with per-unit K columns), zones (points at mid-depth), head contours, and
    the flow arrows, pathlines and contributing areas made by 'surface' and 'paths'.
    """
    with open_store(store) as s:
        files = workflows.export_layers(s, out=out, surfaces=surfaces, k_unit=k_unit)
    for kind, path in files.items():
        click.echo(f"  {kind}: {path}")


@main.command()
@click.argument("store")
@k_unit_option
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False))
def figures(store, k_unit, surfaces, out):
    """PNG and SVG figures: head against elevation at each multi-zone well (units as bands, head
    difference across each aquitard), log10 K per unit with the geometric mean and its 95 % CI,
    fitted over experimental variograms, and leave-one-out cross-validation of each surface."""
    with open_store(store) as s:
        files = workflows.make_figures(s, out=out, surfaces=surfaces, k_unit=k_unit)
    click.echo(f"{len(files)} files in {out}")


@main.command()
@click.argument("store")
@click.option("--cell", type=POSITIVE, required=True, help="Cell size in CRS units.")
@click.option("--origin", type=_Pair("X,Y", FINITE, "two finite numbers"), default=None,
              help="X,Y of the lower-left corner (needed with --rotation).")
@click.option("--shape", type=_Pair("ROWS,COLS", COUNT, "two whole numbers >= 1"), default=None,
              help="ROWS,COLS (needed with --origin).")
@click.option("--rotation", type=ANGLE, default=0.0, show_default=True,
              help="Degrees counter-clockwise about the origin.")
@click.option("--layers", default=None, help="Unit codes, top first, comma separated (default: all picked units).")
@click.option("--kv-ratio", type=POSITIVE, default=10.0, show_default=True, help="K_h / K_v of aquifer layers.")
@click.option("--k-source", type=click.Choice(["mean", "surface"]), default="mean", show_default=True)
@click.option("--min-thickness", type=POSITIVE, default=1.0, show_default=True,
              help="Smallest layer thickness (store length unit).")
@surfaces_option
@click.option("--max-cells", type=COUNT, default=None, help="Refuse grids larger than this (default 20,000,000).")
@click.option("--out", default="model.nc", show_default=True, type=click.Path(dir_okay=False))
def grid(store, cell, origin, shape, rotation, layers, kv_ratio, k_source, min_thickness, surfaces, max_cells, out):
    """Model-ready grid: one layer per unit with top, bottom, K_h, K_v and starting heads.

    Writes FILE.nc (NetCDF, CF-1.8), a folder FILE_arrays/ with one .npy and one
    text file per layer and variable, and manifest.json beside it. K is in the
    store's length unit per day.

    Caution: results are screening-level estimates for planning and model set-up,
    not a substitute for site-specific investigation or for the judgement of a
    licensed professional geoscientist or engineer.

    Example: hydroatlas grid district.gpkg --cell 250 --layers CAP,ULS,SHL,LCL --out model/district.nc
    """
    with open_store(store) as s:
        res = workflows.model_grid(s, cell=cell, out=out, origin=origin, shape=shape, rotation=rotation,
                                   layers=[c.strip() for c in layers.split(",")] if layers else None,
                                   kv_ratio=kv_ratio, k_source=k_source, min_thickness=min_thickness,
                                   surfaces=surfaces, max_cells=max_cells)
    nl, nr, nc = res["shape"]
    click.echo(f"model grid: {nl} layers ({', '.join(res['layers'])}) x {nr} rows x {nc} columns")
    for kind, path in res["files"].items():
        click.echo(f"  {kind}: {path}")


@main.command()
@click.argument("store")
@click.option("--method", type=click.Choice(workflows.SLUG_METHODS), default="hvorslev", show_default=True)
@click.option("--no-write", is_flag=True, help="Only report; do not store the K values as K tests.")
@click.option("--format", "fmt", type=_FORMATS, default="table", show_default=True)
def slugs(store, method, no_write, fmt):
    """Reduce slug-test records to K (Hvorslev 1951 or Bouwer and Rice 1976) and store them as K tests.

    Fits ln(H/H0) over H/H0 0.15-0.25 (Hvorslev) or 0.20-0.30 (Bouwer and Rice); repeat
    tests of a zone that differ by more than 25 % are flagged. Import the records
    (kind slugtests) and the well geometry (kind sluggeometry) first.
    """
    with open_store(store) as s:
        out = workflows.reduce_slug_tests(s, method=method, write=not no_write)
    cols = [c for c in ("well_id", "zone_id", "test_id", "method", "k_ms", "r2", "repeat_disagree", "problem")
            if c in out]
    _emit(out[cols], fmt)


@main.command()
@click.option("--out", default="demo_out", show_default=True, type=click.Path(file_okay=False),
              help="Folder for the demo store and its outputs.")
def demo(out):
    """Build the invented demo region and run the whole pipeline on it."""
    from .demo import run_demo

    run_demo(out, echo=click.echo)


if __name__ == "__main__":  # pragma: no cover
    main()


_RECORD_ID_HELP = ("Each ID is the record's key, its parts joined by '/': a well 'W1', a zone 'W1/P2', a K test "
                   "'W1/P2/T7' (or 'W1/P2/slug@2024-05-01' when the file gave no test_id), a head "
                   "'W1/P2/2024-05-01T10:00:00'.")


@main.command()
@click.argument("store")
@click.argument("kind", type=click.Choice(KINDS))
@click.argument("ids", nargs=-1, required=True)
@click.option("--reason", required=True, help="Why the records are retired (kept with them).")
def retire(store, kind, ids, reason):
    """Take records out of every computation without deleting them.

    Retired records stay in the store, are listed by 'check' and come back
    with 'restore'. Zones, tests and readings of a retired well (or zone, or
    spring) leave the computations with it.

    Example: hydroatlas retire district.gpkg ktests W1/P2/T7 --reason "packer leak found in the field log"
    """
    with open_store(store) as s:
        n = workflows.retire_records(s, kind, list(ids), reason=reason)
    click.echo(f"retired {n} {kind} record(s)" + (f"; {len(ids) - n} already retired" if n < len(ids) else ""))


retire.help += "\n\n" + _RECORD_ID_HELP


@main.command()
@click.argument("store")
@click.argument("kind", type=click.Choice(KINDS))
@click.argument("ids", nargs=-1, required=True)
def restore(store, kind, ids):
    """Bring retired records back into the computations.

    Example: hydroatlas restore district.gpkg ktests W1/P2/T7
    """
    with open_store(store) as s:
        n = workflows.restore_records(s, kind, list(ids))
    click.echo(f"restored {n} {kind} record(s)" + (f"; {len(ids) - n} were not retired" if n < len(ids) else ""))


restore.help += "\n\n" + _RECORD_ID_HELP


@main.command()
@click.argument("store")
@click.argument("kind", type=click.Choice(KINDS))
@click.argument("id_")
@click.option("--format", "fmt", type=_FORMATS, default="table", show_default=True)
def history(store, kind, id_, fmt):
    """Print every version of one record, oldest first; the last line is the current version.

    Example: hydroatlas history district.gpkg wells W1
    """
    with open_store(store) as s:
        versions = workflows.record_history(s, kind, id_)
    _emit(pd.DataFrame(versions), fmt, versions)


history.help += "\n\n" + _RECORD_ID_HELP


@main.command()
@click.argument("store")
def upgrade(store):
    """Migrate a store made by an older hydroatlas to this release's schema, in one transaction.

    Example: hydroatlas upgrade district.gpkg
    """
    from .store import upgrade_store

    old, new = upgrade_store(store)
    click.echo(f"{store}: schema version {old} is current" if old == new
               else f"{store}: schema version {old} upgraded to {new}")
