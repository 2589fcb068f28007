"""What every ``hydroatlas`` command shares: the group, option types, shared options, output helpers.

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

from ..errors import HydroatlasError, ParameterError


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
    from ..store import open_store as _open

    return _open(path_or_url)


def convert(*args, **kwargs):
    """:func:`hydroatlas.quantities.convert`, imported on first use."""
    from ..quantities import convert as _convert

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
        from ..errors import UnitError
        from ..quantities import known_units, split_quantity

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
        from ..errors import UnitError
        from ..quantities import normalize_unit

        try:
            return normalize_unit(value, self.quantity)
        except UnitError as exc:
            raise _OptionError(f"{_option_label(param)}: {exc}", ctx=ctx, param=param) from None


def _in_units(value, quantity: str, unit: str, *, default_unit: str):
    """An option value of :class:`Quantity` (or a plain number) in ``unit``; a bare number is in ``default_unit``."""
    from ..quantities import CANONICAL, convert, parse_quantity

    if value is None:
        return None
    return convert(parse_quantity(value, quantity, default_unit=default_unit), CANONICAL[quantity], unit,
                   quantity)


def _store_units(store):
    from ..quantities import store_units

    return store_units(store.settings.length_unit)


def _in_crs_units(value, store):
    """A distance option of :class:`Quantity` in the store CRS's units; a bare number is in CRS units already."""
    from ..quantities import factor, split_quantity

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
        from ..heads import TimeWindow

        try:
            TimeWindow.parse(value, name=_option_label(param))
        except ParameterError as exc:
            raise _OptionError(str(exc), ctx=ctx, param=param) from None
    return value


def _date_value(ctx, param, value):
    """Click callback: an ISO 8601 date or date-time, at least YYYY-MM-DD."""
    if value is not None:
        from ..heads import parse_instant

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
    from ..selection import SelectionPolicy

    try:
        SelectionPolicy(exclude_wells=_well_ids(value))
    except ParameterError as exc:
        raise _OptionError(str(exc), ctx=ctx, param=param) from None
    return value


def _policy(include_poor: bool, include_pumping_wells: bool, exclude_wells):
    """The :class:`hydroatlas.selection.SelectionPolicy` of the options of :func:`selection_options`."""
    from ..selection import SelectionPolicy

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
    from ..selection import describe

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
