"""The ``hydroatlas`` command line: argument parsing only; each command calls one workflow.

Exit codes: 0 success, 2 bad usage or bad input (one-line message on stderr),
1 internal error (traceback with --debug).
"""

from __future__ import annotations

import importlib
import json
import math
import sys
import traceback
from contextlib import contextmanager

import click

from .errors import HydroatlasError, ParameterError


# -- start-up: `hydroatlas --help` loads click and this module only ----------------------------------------------
# pandas, numpy, numba, scipy, the GIS and plotting libraries and the workflows are imported on first use, inside
# the commands (tests/test_startup.py checks sys.modules after --help).
class _OnFirstUse:
    """A module imported on first attribute access; attributes are looked up on the module every time, so a test
    that monkeypatches the module itself is seen here too."""

    def __init__(self, name: str):
        self._name = name

    def __getattr__(self, attr):
        return getattr(importlib.import_module(self._name), attr)


pd = _OnFirstUse("pandas")
workflows = _OnFirstUse("hydroatlas.workflows")


def open_store(path_or_url):
    """:func:`hydroatlas.store.open_store`, imported when a command opens a store."""
    from .store import open_store as _open

    return _open(path_or_url)


def convert(*args, **kwargs):
    """:func:`hydroatlas.quantities.convert`, imported on first use."""
    from .quantities import convert as _convert

    return _convert(*args, **kwargs)


# Choices shown by --help, written here so that --help imports no library module; tests/test_startup.py checks
# that each equals the library's own tuple (hydroatlas.store.importers.KINDS and so on).
KINDS = ("units", "wells", "picks", "zones", "ktests", "heads", "pumping", "springs", "discharge", "areas",
         "slugtests", "sluggeometry", "transducer")
PER_CHOICES = ("test", "zone", "well")
SURFACE_QUANTITIES = ("head", "logk", "dhead")
SURFACE_METHODS = ("kriging", "uk", "idw")
SLUG_METHODS = ("auto", "hvorslev", "bouwer-rice", "cbp", "oscillating")

CAUTION = ("Results are screening-level estimates for planning and model set-up, not a substitute for "
           "site-specific investigation or for the judgement of a licensed professional geoscientist or "
           "engineer; well construction, testing and pumping are governed by local rules and permits.")

_FORMATS = click.Choice(["table", "csv", "json"])
# Defaults used (with a warning) when a scenario parameter is not given; common practice, not site values.
DEFAULT_POROSITY = 0.1
DEFAULT_STORATIVITY = 1e-4

# options shared by several commands, declared once
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


class Quantity(click.ParamType):
    """A number with an optional unit of one quantity, e.g. "2700ft2/d", "250 m2/d", "450gpm", "2ft".

    The number is checked against ``bounds`` (a :class:`Finite`; units only scale, so a bound at 0 holds in any
    unit) and the unit against the units of ``quantity``. The value stays text: a bare number is in the store's
    units (:func:`hydroatlas.quantities.store_units`), known once the command opens the store, where
    :func:`_in_units` turns it into a number.
    """

    def __init__(self, quantity: str, bounds: Finite = FINITE, *, metavar: str = "VALUE[UNIT]"):
        self.quantity, self.bounds, self.name = quantity, bounds, metavar

    def check(self, value, label: str):
        """(number, canonical unit label or None) of ``value``; _OptionError naming ``label`` otherwise."""
        from .errors import UnitError
        from .quantities import known_units, split_quantity

        shown = value.strip() if isinstance(value, str) else value
        try:
            number, unit = split_quantity(value, self.quantity)
        except ParameterError:
            what = self.bounds.describe()
            what = what if what.startswith("a ") else f"a number {what}"
            raise _OptionError(f"{label} must be {what}, optionally with a {self.quantity} unit "
                               f"({', '.join(known_units(self.quantity))}) (got {shown})") from None
        except UnitError as exc:
            raise _OptionError(f"{label}: {exc}") from None
        try:
            self.bounds.check(number, label)
        except _OptionError:
            raise _OptionError(f"{label} must be {self.bounds.describe()} (got {shown})") from None
        return number, unit

    def convert(self, value, param, ctx):
        try:
            self.check(value, _option_label(param))
        except _OptionError as exc:
            exc.ctx, exc.param = ctx, param
            raise
        return value.strip() if isinstance(value, str) else value


class UnitName(click.ParamType):
    """A unit label of one quantity, any accepted spelling ("gal/d/ft2", "cfs"), given back in its canonical form."""

    name = "UNIT"

    def __init__(self, quantity: str):
        self.quantity = quantity

    def convert(self, value, param, ctx):
        from .errors import UnitError
        from .quantities import normalize_unit

        try:
            return normalize_unit(value, self.quantity)
        except UnitError as exc:
            raise _OptionError(f"{_option_label(param)}: {exc}", ctx=ctx, param=param) from None


def _in_units(value, quantity: str, unit: str, *, default_unit: str):
    """An option value of :class:`Quantity` (or a plain number) in ``unit``; a bare number is in ``default_unit``."""
    from .quantities import CANONICAL, convert, parse_quantity

    if value is None:
        return None
    return convert(parse_quantity(value, quantity, default_unit=default_unit), CANONICAL[quantity], unit,
                   quantity)


def _store_units(store):
    from .quantities import store_units

    return store_units(store.settings.length_unit)


def _in_crs_units(value, store):
    """A distance option of :class:`Quantity` in the store CRS's units; a bare number is in CRS units already."""
    from .quantities import factor, split_quantity

    if value is None:
        return None
    number, unit = split_quantity(value, "length")
    crs = store.settings.crs
    if unit is None or not crs.is_projected:  # a geographic CRS is refused by the commands that need distances
        return number
    return number * factor(unit, "length") / float(crs.axis_info[0].unit_conversion_factor)


# --k-unit of stats, map, layers and figures (declared here, after its type)
k_unit_option = click.option("--k-unit", type=UnitName("hydraulic conductivity"), default=None,
                             help="Unit of the K figures: m/s, m/d, cm/s, ft/d or gpd/ft2 (gal/d/ft2) "
                                  "(default: the store's, ft/d in a feet store, m/d in a metre store).")


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
        from .heads import TimeWindow

        try:
            TimeWindow.parse(value, name=_option_label(param))
        except ParameterError as exc:
            raise _OptionError(str(exc), ctx=ctx, param=param) from None
    return value


def _date_value(ctx, param, value):
    """Click callback: an ISO 8601 date or date-time, at least YYYY-MM-DD."""
    if value is not None:
        from .heads import parse_instant

        try:
            parse_instant(value, name=_option_label(param))
        except ParameterError as exc:
            raise _OptionError(str(exc), ctx=ctx, param=param) from None
    return value


# -- the selection policy: one set of options for every command that selects K tests or heads -------------------
def _well_ids(values) -> tuple[str, ...]:
    """Well ids from one or more comma-separated texts (``--exclude-wells W1,W2 --exclude-wells W3``)."""
    if isinstance(values, str):
        values = (values,)
    return tuple(w for text in (values or ()) for w in str(text).split(","))


def _wells_value(ctx, param, value):
    """Click callback: --exclude-wells ID,ID (no empty id); the ids are checked against the store later."""
    from .selection import SelectionPolicy

    try:
        SelectionPolicy(exclude_wells=_well_ids(value))
    except ParameterError as exc:
        raise _OptionError(str(exc), ctx=ctx, param=param) from None
    return value


def _policy(include_poor: bool, include_pumping_wells: bool, exclude_wells):
    """The :class:`hydroatlas.selection.SelectionPolicy` of the options of :func:`selection_options`."""
    from .selection import SelectionPolicy

    return SelectionPolicy(include_poor=bool(include_poor), include_pumping_wells=bool(include_pumping_wells),
                           exclude_wells=_well_ids(exclude_wells))


def selection_options(f):
    """--include-poor, --include-pumping-wells and --exclude-wells, declared once for every command that selects
    K tests or head readings (see :mod:`hydroatlas.selection`)."""
    f = click.option("--exclude-wells", "exclude_wells", multiple=True, metavar="ID,ID", callback=_wells_value,
                     help="Leave these wells out of every K test and head selection (comma separated, may be "
                          "repeated); an unknown id is an error.")(f)
    f = click.option("--include-pumping-wells", is_flag=True,
                     help="Keep water levels in wells of kind pumping or supply, and readings taken while a "
                          "pumping record of the zone or well was active (left out of heads by default: such a "
                          "level is the regional head minus the cone and the well loss).")(f)
    f = click.option("--include-poor", is_flag=True,
                     help="Keep K tests and head readings of quality 'poor' (left out by default).")(f)
    return f


def tolerance_option(f):
    """--tolerance DAYS, beside --at: how far a reading may lie from the date."""
    return click.option("--tolerance", "tolerance", type=Quantity("time", NON_NEGATIVE), default="31",
                        show_default=True,
                        help="With --at: use a zone's nearest reading only if it lies within this many days "
                             "(or with a unit: 48h, 2d); zones without one are left out, counted, with a "
                             "warning.")(f)


def _tolerance_days(value) -> float:
    return float(_in_units(value, "time", "d", default_unit="d"))


def _say_selection(selection: dict | None, only: str | None = None) -> None:
    """What a selection left out, on stderr: one note per kind of record ("heads" or "ktests"; ``only`` keeps
    one kind), and a warning for zones without a reading near --at."""
    from .selection import describe

    entries = [e for e in (selection or {}).get("left_out") or [] if only is None or e["what"] == only]
    for level, text in describe(entries):
        if level == "note":
            _note(text)
        else:
            click.echo(f"{level}: {text}", err=True)
    for e in entries:  # -v: each well and zone behind the counts above
        zone = f" zone {e['zone_id']}" if e.get("zone_id") else ""
        _detail(f"{e['what']} left out at well {e['well_id']}{zone}: {e['reason']} ({e['count']})")


# -- -q/--quiet and -v/--verbose of the main group -----------------------------------------------------------------
def _verbosity() -> int:
    """-1 with --quiet, 1 with --verbose, 0 otherwise (also outside a command, as when a test calls a helper)."""
    ctx = click.get_current_context(silent=True)
    root = ctx.find_root() if ctx is not None else None
    obj = root.obj if root is not None and isinstance(root.obj, dict) else {}
    return int(obj.get("verbosity", 0))


def _note(text: str, *, err: bool = True) -> None:
    """A note ("note: ...", stderr by default); --quiet silences it. Warnings and cautions are not notes."""
    if _verbosity() >= 0:
        click.echo(f"note: {text}", err=err)


def _detail(text: str) -> None:
    """More detail behind a note, on stderr, with --verbose only."""
    if _verbosity() > 0:
        click.echo(f"detail: {text}", err=True)


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
@click.option("-q", "--quiet", is_flag=True,
              help="No notes and no progress bars (results, warnings, cautions and errors still show).")
@click.option("-v", "--verbose", is_flag=True,
              help="More detail on stderr where there is some (e.g. each well and zone a selection left out).")
@click.option("--debug", is_flag=True, help="Show tracebacks on errors.")
@click.version_option(package_name="hydroatlas")
@click.pass_context
def main(ctx, quiet, verbose, debug):
    """hydroatlas: a spatial store and mapper of hydrostratigraphic properties.

    The store (a GeoPackage file) is the first argument of every command.
    """
    if quiet and verbose:
        raise _OptionError("-q/--quiet and -v/--verbose exclude each other: give one")
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug
    ctx.obj["verbosity"] = -1 if quiet else (1 if verbose else 0)


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

    return tqdm(desc=label, unit=unit, disable=not sys.stderr.isatty() or _verbosity() < 0, leave=False)


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
        _note(note, err=False)


@main.command()
@click.argument("store")
@click.option("--format", "fmt", type=_FORMATS, default=None, help="table (default), csv or json.")
@click.option("--json", "as_json", is_flag=True, help="The same as --format json (the older spelling).")
def check(store, fmt, as_json):
    """Report data-quality findings: straddling zones, pick gaps and overlaps,
    wells without picks, orphans, K outliers and heads far outside their unit's range."""
    if as_json and fmt not in (None, "json"):
        raise _OptionError(f"--json is the same as --format json; it cannot go with --format {fmt}")
    fmt = "json" if as_json else (fmt or "table")
    with open_store(store) as s:
        findings = workflows.check_store(s)
    frame = pd.DataFrame(findings, columns=["kind", "severity", "well_id", "zone_id", "unit", "message"])
    if fmt != "table":
        _emit(frame, fmt, findings)
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
@click.option("--exclude-poor", is_flag=True,
              help="Leave out tests of quality 'poor'. This is now the default (kept so that old scripts work); "
                   "--include-poor brings them back.")
@click.option("--wells", "by_well", is_flag=True,
              help="Per-well transmissivity and effective K_h / K_v instead of unit statistics.")
@selection_options
def stats(store, unit, k_unit, per, fmt, exclude_straddles, exclude_poor, by_well, include_poor,
          include_pumping_wells, exclude_wells):
    """Hydraulic-conductivity statistics per unit (geometric mean, log variance, 95 % CI).

    Variances are sample variances (ddof = 1) of log10 K and ln K. Tests of quality
    poor and tests in wells given to --exclude-wells are left out: n_left_out counts
    them per unit, and a note on stderr says how many and why.

    Example: hydroatlas stats district.gpkg --per zone --k-unit ft/d --format json
    """
    policy = _policy(include_poor, include_pumping_wells, exclude_wells)
    with open_store(store) as s:
        if by_well:
            frame = workflows.well_profiles(s, k_unit=k_unit, unit=unit, exclude_poor=exclude_poor, policy=policy)
            _say_selection(frame.attrs.get("selection"))
            _emit(frame, fmt)
            return
        rows = workflows.unit_stats(s, unit=unit, per=per, k_unit=k_unit, exclude_straddles=exclude_straddles,
                                    exclude_poor=exclude_poor, policy=policy)
    _say_selection(getattr(rows, "selection", None))
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
                       "k_min", "k_max", "log10k_mean", "log10k_std", "lnk_var", "n_left_out"]]
        click.echo(f"K in {rows[0]['k_unit']} (log10 K of K in {rows[0]['k_unit']}); statistics per {per}")
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
@tolerance_option
@click.option("--profiles", is_flag=True, help="Print the head profile of each multi-zone well instead of pairs.")
@click.option("--format", "fmt", type=_FORMATS, default="table", show_default=True)
@selection_options
def verticals(store, window, at, tolerance, profiles, fmt, include_poor, include_pumping_wells, exclude_wells):
    """Head differences, vertical gradients and aquitard leakage at multi-zone wells.

    One row per pair of successive zones (top down): dhead is the upper head minus
    the lower head (positive = downward flow), vertical_gradient is dhead over the
    distance between the zone midpoints, and leakage_flux is the Darcy flux across
    the aquitard and confining units between them, dhead / sum(b / K), with K the
    unit's geometric-mean K used as vertical K.

    Example: hydroatlas verticals district.gpkg --window 2024-03-01/2024-03-31 --format json
    """
    with open_store(store) as s:
        pairs, prof = workflows.verticals(s, window=window, at=at, tolerance_days=_tolerance_days(tolerance),
                                          policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    _say_selection(pairs.attrs.get("selection"), only="heads")  # the K tests only set the leakage K
    frame = prof if profiles else pairs
    _emit(frame, fmt)


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code.")
@click.option("--quantity", type=click.Choice(SURFACE_QUANTITIES), default="head", show_default=True,
              help="head, logk (log10 K in the store's K unit: ft/d or m/d) or dhead (head minus the head of "
                   "the unit below).")
@click.option("--method", type=click.Choice(SURFACE_METHODS), default="kriging", show_default=True,
              help="kriging (ordinary), uk (universal, linear drift) or idw.")
@click.option("--window", default=None, callback=_window_value,
              help="ISO 8601 interval FROM/TO for heads (median per zone).")
@click.option("--at", default=None, callback=_date_value, help="Date: the head reading nearest to it, per zone.")
@tolerance_option
@click.option("--cell", type=POSITIVE, default=None, help="Cell size in CRS units (default: 1/200 of the extent).")
@click.option("--variogram", type=click.Choice(["spherical", "exponential", "gaussian"]), default="spherical",
              show_default=True, help="Variogram model, fitted by weighted least squares unless fixed.")
@click.option("--nugget", type=NON_NEGATIVE, default=None, help="Fix the nugget.")
@click.option("--sill", type=POSITIVE, default=None, help="Fix the total sill (with --range).")
@click.option("--range", "range_", type=POSITIVE, default=None, help="Fix the practical range (with --sill).")
@click.option("--neighbors", type=Finite(min=0, integer=True), default=None,
              help="Nearest points per cell; 0 = all (one global system). Default: all up to 400 points, else 16.")
@click.option("--lower-unit", default=None,
              help="For dhead: the unit whose head is subtracted (default: the next aquifer below, across any "
                   "aquitard or confining unit; the sidecar names it).")
@click.option("--buffer", type=Quantity("length", POSITIVE), default=None,
              help="Mask distance around the data when no domain polygon (CRS units, or a length with its unit).")
@click.option("--fallback-idw", is_flag=True, help="Use IDW when no variogram can be fitted (all values equal).")
@click.option("--max-cells", type=COUNT, default=None, help="Refuse grids larger than this (default 50,000,000).")
@click.option("--compare-methods", is_flag=True,
              help="Cross-validate kriging, uk and idw (leave-one-out) and record all three; default: only --method.")
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
@selection_options
def surface(store, unit, quantity, method, window, at, tolerance, cell, variogram, nugget, sill, range_, neighbors,
            lower_unit, buffer, fallback_idw, max_cells, compare_methods, out, include_poor, include_pumping_wells,
            exclude_wells):
    """Interpolate head, log K or head difference of one unit onto a grid.

    Writes OUT/<unit>_<quantity>.tif (band 1 estimate, band 2 kriging standard
    deviation), OUT/<unit>_<quantity>.json (method, variogram, neighbourhood,
    leave-one-out cross-validation of the method, or of every method with
    --compare-methods, window) and, for heads,
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
                                         buffer=_in_crs_units(buffer, s), out=out,
                                         fallback_idw=fallback_idw, max_cells=max_cells, lower_unit=lower_unit,
                                         progress=bar.update, tolerance_days=_tolerance_days(tolerance),
                                         policy=_policy(include_poor, include_pumping_wells, exclude_wells),
                                         compare_methods=compare_methods)
    _say_selection(result.get("selection"))
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
@tolerance_option
@click.option("--format", "fmt", type=_FORMATS, default="table", show_default=True)
@selection_options
def threepoint(store, unit, wells, window, at, tolerance, fmt, include_poor, include_pumping_wells, exclude_wells):
    """Hydraulic gradient and flow direction from the heads of three wells (plane through three points).

    Example: hydroatlas threepoint district.gpkg --unit ULS --wells W1,W2,W3
    """
    with open_store(store) as s:
        res = workflows.three_point_wells(s, unit, [w.strip() for w in wells.split(",")], window=window, at=at,
                                          tolerance_days=_tolerance_days(tolerance),
                                          policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    _say_selection(res.get("selection"), only="heads")
    if fmt == "json":
        _emit(pd.DataFrame(), "json", res)
    else:
        _emit(pd.DataFrame([{k: v for k, v in res.items() if k not in ("wells", "heads", "selection")}]), fmt)


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
@click.option("--seed-spacing", type=Quantity("length", POSITIVE), default=None,
              help="Spacing of seeds in recharge areas (CRS units, or a length with its unit, e.g. 100ft).")
@click.option("--capture-radius", type=Quantity("length", POSITIVE), default=None,
              help="Particles end within this of any spring or pumping well (CRS units, or a length with its "
                   "unit, e.g. 50m; default: each sink's stagnation distance Q / (2 pi b K i), Javandel and "
                   "Tsang 1986, kept between a quarter cell and a quarter of the grid; 2 cells for a spring "
                   "without discharge readings).")
@click.option("--scenario", default=None,
              help="Trace on the head surface of the drawdown scenario NAME ('drawdown --name NAME', files "
                   "<unit>_head_<NAME>.tif and <unit>_drawdown_<NAME>.json in the surfaces folder), with its "
                   "proposed wells as sinks.")
@click.option("--max-years", type=Quantity("time", POSITIVE), default=1000.0, show_default=True,
              help="Longest travel time tracked, in years (or with a time unit, e.g. 500d).")
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
@selection_options
def paths(store, unit, porosity, backward, k_source, surfaces, seed_spacing, capture_radius, scenario, max_years,
          out, include_poor, include_pumping_wells, exclude_wells):
    """Likely pathways from recharge areas to springs, pumping wells or the domain edge.

    Particles move with the Darcy seepage velocity v = K i / n_e on the unit's head
    surface (made by 'hydroatlas surface --quantity head'), integrated by an adaptive
    Dormand-Prince 5(4) scheme. Forward: seeds over each recharge area. --backward:
    paths from each spring and its contributing area. Sinks are the springs and the
    wells pumping at the end of the head window (stopped wells are not sinks), each
    capturing within its stagnation distance. Writes the pathlines (and
    contributing_areas) layers of OUT/layers.gpkg and OUT/<unit>_pathways.csv
    (backward: OUT/<unit>_pathways_backward.csv; --scenario NAME adds _NAME).

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
        seed_spacing = _in_crs_units(seed_spacing, s)
        capture_radius = _in_crs_units(capture_radius, s)
        max_years = _in_units(max_years, "time", "yr", default_unit="yr")
        result = workflows.trace_paths(s, unit, porosity=porosity, out=out, surfaces=surfaces, backward=backward,
                                       k_source=k_source, seed_spacing=seed_spacing, capture_radius=capture_radius,
                                       max_years=max_years, scenario=scenario,
                                       policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    for line in result.get("warnings", []):
        click.echo(f"warning: {line}", err=True)
    _say_selection(result.get("selection"))
    click.echo(f"{result['n_particles']} particles tracked {result['direction']} on the {unit} head surface")
    click.echo(result["table"].to_string(index=False, float_format=lambda v: f"{v:.4g}"))
    click.echo(f"Caution: {workflows.KARST_WARNING}")
    for kind, path in result["files"].items():
        click.echo(f"  {kind}: {path}")


RATE = Quantity("rate", FINITE, metavar="Q[UNIT]")


class _RateUnitError(_OptionError):
    """A rate whose number is fine but whose unit is unknown (said as such, not as a malformed item)."""


def _rate_m3d(q, label: str, rate_unit: str) -> float:
    """A rate typed in an option (e.g. "450gpm", "0.5 cfs", "2000") in m3/d; a bare number is in ``rate_unit``."""
    from .errors import UnitError
    from .quantities import factor, split_quantity

    try:
        split_quantity(q, "rate")
    except UnitError as exc:
        raise _RateUnitError(f"{label}: {exc}") from None
    except ParameterError:
        pass  # not a number: RATE.check says so
    number, unit = RATE.check(q, label)
    return number * factor(unit or rate_unit, "rate")


def _parse_rates(values, rate_unit: str = "m3/d"):
    """WELL=Q items as {well: rate in m3/d}; Q may carry a rate unit, a bare Q is in ``rate_unit``."""
    out = {}
    for item in values:
        wid, sep, q = item.partition("=")
        try:
            if not (sep and wid.strip()):
                raise ValueError
            out[wid.strip()] = _rate_m3d(q, "--rate", rate_unit)
        except _RateUnitError:
            raise
        except (ValueError, _OptionError):
            raise _OptionError(f"--rate must be WELL=Q with Q a finite number (got {item})") from None
    return out


def _parse_new_wells(values, rate_unit: str = "m3/d"):
    """[NAME,]X,Y,Q items as (name, x, y, rate in m3/d); X, Y in the store CRS, Q as in :func:`_parse_rates`."""
    out = []
    for n, item in enumerate(values, start=1):
        parts = item.split(",")
        try:
            if len(parts) not in (3, 4):
                raise ValueError
            x, y = (FINITE.check(p, "--new-well") for p in parts[-3:-1])
            q = _rate_m3d(parts[-1], "--new-well", rate_unit)
        except _RateUnitError:
            raise
        except (ValueError, _OptionError):
            raise _OptionError(f"--new-well must be [NAME,]X,Y,Q with X, Y, Q finite numbers "
                               f"(got {item})") from None
        name = parts[0].strip() if len(parts) == 4 else ""
        out.append((name or f"proposed-{n}", x, y, q))
    return out


@main.command()
@click.argument("store")
@click.option("--unit", required=True, help="Unit code (its head surface must exist).")
@click.option("--days", type=Quantity("time", POSITIVE), required=True,
              help="Pumping duration: days, or a number with a time unit (s, min, h, d, yr; e.g. 1yr).")
@click.option("--storativity", "-S", type=OPEN_FRACTION, default=None,
              help=f"Storage coefficient S, in (0, 1) (default {DEFAULT_STORATIVITY}, a confined aquifer, "
                   "with a warning).")
@click.option("--rate", "rates", multiple=True, type=_Checked(lambda v: _parse_rates(v)),
              help="WELL=Q: rate of a stored well (replaces its stored rate); Q may name its unit "
                   "(PW-1=450gpm, PW-2=0.5cfs).")
@click.option("--new-well", "new_wells", multiple=True, type=_Checked(lambda v: _parse_new_wells(v)),
              help="[NAME,]X,Y,Q: a proposed well (X, Y in the store CRS; Q may name its unit, e.g. 450gpm).")
@click.option("--rate-unit", type=UnitName("rate"), default=None,
              help="Unit of rates given without one in --rate and --new-well: m3/d, m3/s, L/s, gpm, gpd, MGD, "
                   "ft3/d, ft3/s (cfs), acre-ft/yr (default: the store's, ft3/d or m3/d).")
@click.option("--transmissivity", "-T", type=Quantity("transmissivity", POSITIVE), default=None,
              help="T, e.g. 2700ft2/d, '250 m2/d' or 20000gpd/ft; a bare number is in the store's length unit "
                   "squared per day (default: the unit's geometric-mean K times its thickness).")
@click.option("--threshold", type=Quantity("length", NON_NEGATIVE), default=0.5, show_default=True,
              help="List springs and monitoring zones losing more head than this, e.g. 2ft (a bare number is "
                   "in the store's length unit).")
@click.option("--name", default=None,
              help="Scenario name: outputs OUT/<unit>_drawdown_<name>.tif, OUT/<unit>_head_<name>.tif, "
                   "OUT/<unit>_drawdown_<name>_impacts.csv and .json, which 'paths --scenario NAME' traces on.")
@click.option("--from-unpumped", is_flag=True,
              help="Total drawdown of all pumping (baseline wells at their rates plus the scenario) on the head "
                   "surface adjusted to unpumped conditions by adding back the baseline wells' Theis drawdown at "
                   "the end of the head window.")
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False), help="Output folder.")
@selection_options
def drawdown(store, unit, days, storativity, rates, new_wells, rate_unit, transmissivity, threshold, surfaces, out,
             name, from_unpumped, include_poor, include_pumping_wells, exclude_wells):
    """Theis drawdown of a pumping scenario, superposed on the unit's head surface.

    The baseline: measured heads already hold the cones of the wells that pumped
    during the head window of the surface (pumping records of the unit active
    in that window, at their rates at its end). By default the result is the
    change the scenario makes against that baseline: proposed wells (--new-well)
    and changed rates (--rate WELL=Q) add drawdown, stopped wells (--rate WELL=0)
    give recovery (negative drawdown), unchanged baseline wells add nothing.
    --from-unpumped gives the total drawdown of all pumping instead, on the head
    surface adjusted to unpumped conditions (the baseline wells' Theis drawdown
    at the end of the head window added back). T is the unit's geometric-mean K
    times its thickness at each well, from wells that penetrate the unit fully.
    Writes OUT/<unit>_drawdown.tif, OUT/<unit>_head_drawdown.tif (head after the
    scenario), OUT/<unit>_drawdown_impacts.csv (springs and monitoring zones
    above the threshold or taken below the unit's top or bottom) and a JSON
    sidecar with the head window, the baseline wells and the changes; with
    --name NAME the files carry the name.

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
        su = _store_units(s)  # a bare number is in the store's units; rates in --rate-unit when given
        days = _in_units(days, "time", "d", default_unit="d")
        transmissivity = _in_units(transmissivity, "transmissivity", "m2/d", default_unit=su.transmissivity)
        threshold = _in_units(threshold, "length", su.length, default_unit=su.length)
        q_unit = rate_unit or su.rate
        res = workflows.drawdown_scenario(s, unit, days=days, storativity=storativity,
                                          rates=_parse_rates(rates, q_unit),
                                          new_wells=_parse_new_wells(new_wells, q_unit), rate_unit="m3/d",
                                          transmissivity=transmissivity, surfaces=surfaces, out=out,
                                          threshold=threshold, name=name, from_unpumped=from_unpumped,
                                          policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    _say_selection(res.get("selection"))
    for line in res.get("warnings", []):
        click.echo(f"warning: {line}", err=True)
    base = res["baseline"]
    click.echo(f"{res['mode']}: {len(base['wells'])} baseline wells pumping in the head window "
               f"{base['head_window']['text']}, {len(res['changes'])} changes")
    t_m2d = res["transmissivity_m2_per_d"]
    t_text = (f"{convert(t_m2d, 'm2/d', su.transmissivity, 'transmissivity'):.4g} {su.transmissivity}"
              + (f" ({t_m2d:.4g} m2/d)" if su.transmissivity != "m2/d" else ""))
    click.echo(f"{days:g} d, T = {t_text}, "
               f"S = {storativity:g}; largest drawdown {res['max_drawdown']:.3g} {res['length_unit']}"
               + (f", largest recovery {-res['min_drawdown']:.3g} {res['length_unit']}"
                  if (res["min_drawdown"] or 0) < 0 else ""))
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
@click.option("--unit", default=None,
              help="Unit whose K, head contours, extent and results are shown (default: the aquifer with the most "
                   "zones with heads).")
@k_unit_option
@surfaces_option
@click.option("--tiles", default=None, help="Basemap URL template (needs internet); none by default.")
@click.option("--out", default="map.html", show_default=True, type=click.Path(dir_okay=False))
@selection_options
def map_(store, unit, k_unit, surfaces, tiles, out, include_poor, include_pumping_wells, exclude_wells):
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
        path = workflows.build_map(s, unit=unit, out=out, surfaces=surfaces, k_unit=k_unit, tiles=tiles,
                                   policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    click.echo(f"map: {path}")


@main.command()
@click.argument("store")
@k_unit_option
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False))
@selection_options
def layers(store, k_unit, surfaces, out, include_poor, include_pumping_wells, exclude_wells):
    """Vector layers to OUT/layers.gpkg and OUT/geojson/*.geojson (RFC 7946, WGS 84).

    wells (with per-unit K columns), zones (points at mid-depth), head contours, and
    the flow arrows, pathlines and contributing areas made by 'surface' and 'paths'.
    """
    with open_store(store) as s:
        files = workflows.export_layers(s, out=out, surfaces=surfaces, k_unit=k_unit,
                                        policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    for kind, path in files.items():
        click.echo(f"  {kind}: {path}")


@main.command()
@click.argument("store")
@k_unit_option
@surfaces_option
@click.option("--out", default=".", show_default=True, type=click.Path(file_okay=False))
@selection_options
def figures(store, k_unit, surfaces, out, include_poor, include_pumping_wells, exclude_wells):
    """PNG and SVG figures: head against elevation at each multi-zone well (units as bands, head
    difference across each aquitard), log10 K per unit with the geometric mean and its 95 % CI,
    fitted over experimental variograms, and leave-one-out cross-validation of each surface."""
    with open_store(store) as s:
        files = workflows.make_figures(s, out=out, surfaces=surfaces, k_unit=k_unit,
                                       policy=_policy(include_poor, include_pumping_wells, exclude_wells))
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
@click.option("--kv-ratio", type=POSITIVE, default=10.0, show_default=True,
              help="K_h / K_v of a unit without vertical K tests (ktests column orientation).")
@click.option("--k-source", type=click.Choice(["mean", "surface"]), default="mean", show_default=True)
@click.option("--min-thickness", type=Quantity("length", POSITIVE), default=1.0, show_default=True,
              help="Smallest layer thickness (store length unit, or a length with its unit, e.g. 0.5m); a thinner "
                   "cell, or one where the unit is absent, is a vertical pass-through cell (idomain -1) and no "
                   "other layer moves.")
@click.option("--merge-down", is_flag=True,
              help="A unit left out of --layers between two chosen ones joins the layer below (default: above).")
@click.option("--base", type=Quantity("length", FINITE, metavar="ELEV[UNIT]"), default=None,
              help="Elevation of the bottom of the lowest layer (store length unit), for a unit no well goes "
                   "through.")
@click.option("--base-thickness", type=Quantity("length", POSITIVE), default=None,
              help="Thickness of the lowest layer below its top (store length unit), instead of --base. Without "
                   "either, a lowest unit no well goes through gets its mean penetrated thickness, with a warning.")
@click.option("--mf6", type=click.Path(file_okay=False), default=None,
              help="Also write a MODFLOW 6 simulation into this folder (needs flopy): DIS, NPF, IC, WEL for the "
                   "wells pumping now, DRN for the springs, OC, and an IMS file without settings.")
@click.option("--spring-conductance", type=Quantity("transmissivity", POSITIVE, metavar="C[UNIT]"), default=None,
              help="Drain conductance of each spring cell in the --mf6 simulation, length squared per day (store "
                   "units, e.g. 1000 or 500m2/d); needed when a spring lies in the grid, no default.")
@surfaces_option
@click.option("--max-cells", type=COUNT, default=None, help="Refuse grids larger than this (default 20,000,000).")
@click.option("--out", default="model.nc", show_default=True, type=click.Path(dir_okay=False))
@selection_options
def grid(store, cell, origin, shape, rotation, layers, kv_ratio, k_source, min_thickness, merge_down, base,
         base_thickness, mf6, spring_conductance, surfaces, max_cells, out, include_poor, include_pumping_wells,
         exclude_wells):
    """Model-ready grid: one layer per unit with top, bottom, K_h, K_v and starting heads.

    Writes FILE.nc (NetCDF, CF-1.8), a folder FILE_arrays/ with one .npy and one
    text file per layer and variable, and manifest.json beside it. K is in the
    store's length unit per day. With --mf6 DIR, also a MODFLOW 6 simulation
    (steady state; springs as drains with --spring-conductance).

    Caution: results are screening-level estimates for planning and model set-up,
    not a substitute for site-specific investigation or for the judgement of a
    licensed professional geoscientist or engineer.

    Example: hydroatlas grid district.gpkg --cell 250 --layers CAP,ULS,SHL,LCL --out model/district.nc
    """
    with open_store(store) as s:
        L = s.settings.length_unit
        min_thickness, base, base_thickness = (_in_units(v, "length", L, default_unit=L)
                                               for v in (min_thickness, base, base_thickness))
        su = _store_units(s)
        spring_conductance = _in_units(spring_conductance, "transmissivity", su.transmissivity,
                                       default_unit=su.transmissivity)
        res = workflows.model_grid(s, cell=cell, out=out, origin=origin, shape=shape, rotation=rotation,
                                   layers=[c.strip() for c in layers.split(",")] if layers else None,
                                   kv_ratio=kv_ratio, k_source=k_source, min_thickness=min_thickness,
                                   merge_down=merge_down, base=base, base_thickness=base_thickness, mf6=mf6,
                                   spring_conductance=spring_conductance,
                                   surfaces=surfaces, max_cells=max_cells,
                                   policy=_policy(include_poor, include_pumping_wells, exclude_wells))
    _say_selection(res.get("selection"))
    for note in res.get("notes", []):
        if note.startswith("warning: "):
            click.echo(note, err=True)
    nl, nr, nc = res["shape"]
    click.echo(f"model grid: {nl} layers ({', '.join(res['layers'])}) x {nr} rows x {nc} columns")
    for kind, path in res["files"].items():
        click.echo(f"  {kind}: {path}")
    m6 = res.get("mf6")
    if m6:
        cond = ("" if m6["spring_conductance"] is None else
                f", conductance {m6['spring_conductance']:g} {m6['spring_conductance_unit']}")
        click.echo(f"MODFLOW 6 simulation {m6['name']}: {len(m6['wells'])} pumped zone(s) in WEL (rates in "
                   f"{m6['rate_unit']}), {len(m6['springs'])} spring(s) in DRN{cond}; IMS without settings "
                   "(MODFLOW 6 defaults); not run by hydroatlas")
        for w in m6["wells_left_out"]:
            click.echo(f"left out of WEL: well {w['well_id']} zone {w['zone_id']}: {w['reason']}", err=True)
        for sp in m6["springs_left_out"]:
            click.echo(f"left out of DRN: spring {sp['spring_id']}: {sp['reason']}", err=True)


@main.command()
@click.argument("store")
@click.option("--method", type=click.Choice(SLUG_METHODS), default="auto", show_default=True,
              help="auto: the method the response and geometry call for, with the reason shown.")
@click.option("--no-write", is_flag=True, help="Only report; do not store the K values as K tests.")
@click.option("--figures", "figures_dir", default=None, type=click.Path(file_okay=False),
              help="Folder for one figure per test (normalised head against time, repeats overlaid).")
@click.option("--format", "fmt", type=_FORMATS, default="table", show_default=True)
def slugs(store, method, no_write, figures_dir, fmt):
    """Reduce slug-test records to K and store one K test per physical test.

    Methods: Hvorslev (1951) and Bouwer and Rice (1976), fitted as the slope of
    ln(H/H0) over H/H0 0.15-0.25 and 0.20-0.30; Cooper, Bredehoeft and Papadopulos
    (1967) for confined intervals with storage; a damped-oscillator model for
    oscillating responses in very permeable units. Each record is diagnosed first
    (response type, points in the fit window, r2, residual pattern, normalised-head
    range fitted, shape-factor validity, agreement of the zone's repeats); with
    --method auto the method is chosen from the response and the geometry and the
    reason is shown. Every applicable method's result is kept in the K test's
    attributes; the K test is 'slug:<test_id>' and a re-run updates it (see
    'history'). K is in the store's K unit (ft/d in a feet store, m/d in a metre
    store). Import the records (kind slugtests or transducer) and the geometry
    (kind sluggeometry) first.

    Example: hydroatlas slugs district.gpkg --method auto --figures figures/slugs
    """
    with open_store(store) as s:
        out = workflows.reduce_slug_tests(s, method=method, write=not no_write, figures=figures_dir)
    # K in the store's K unit (named in k_unit); csv and json also carry k_ms (m/s) and, json, the alternatives
    cols = ["well_id", "zone_id", "test_id", "method", "k", "k_unit", "response", "n_points", "r2",
            "residual_pattern", "h_range", "shape_valid", "repeat_disagree", "quality", "reason", "problem"]
    if fmt != "table":
        cols += ["k_ms", "valid", "unit"]
    if fmt == "json":
        cols += ["alternatives"]
    shown = out[[c for c in cols if c in out]]
    if fmt == "table":
        shown = shown.assign(alternatives=[", ".join(f"{a['method']} " + ("refused" if a["k"] is None else
                                                                          f"{a['k']:.3g}") for a in alts) or "-"
                                           for alts in out["alternatives"]])
    if fmt != "table":
        _emit(shown, fmt)
        return
    # the table holds the figures; the reasons and problems (sentences) follow it, one line per test
    _emit(shown.drop(columns=["reason", "problem"], errors="ignore"), fmt)
    for r in out.itertuples():
        ident = f"{r.well_id}/{r.zone_id}/{r.test_id}"
        if isinstance(r.reason, str):
            click.echo(f"{ident}: {r.method}: {r.reason}")
        if isinstance(r.problem, str):
            click.echo(f"{ident}: problem: {r.problem}")
    if figures_dir is not None:
        click.echo(f"{len(out.attrs.get('figures', []))} figure files in {figures_dir}")


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
