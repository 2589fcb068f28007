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

from ..cautions import CAUTION, help_paragraph  # noqa: F401 - CAUTION: the one text, kept for callers
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
SURFACE_QUANTITIES = ("head", "logk", "dhead", "change")
SURFACE_METHODS = ("kriging", "uk", "idw")
SLUG_METHODS = ("auto", "hvorslev", "bouwer-rice", "cbp", "oscillating")

_FORMATS = click.Choice(["table", "csv", "json"])


def _remember_format(ctx, param, value):
    """Click callback of --format: kept on the root context, so that progress bars stay off with json."""
    root = ctx.find_root()
    if isinstance(root.obj, dict):
        root.obj["format"] = value
    return value


def format_option(f=None, *, default: str | None = "table"):
    """--format table|csv|json, declared once for every command that reports results.

    json prints one JSON document on stdout (the facts the table shows: counts, files written, selection,
    warnings); notes, warnings and progress stay on stderr (progress bars are off with json).
    """
    def deco(f):
        return click.option("--format", "fmt", type=_FORMATS, default=default, show_default=default is not None,
                            callback=_remember_format,
                            help="table (for people), csv, or json (one JSON document on stdout).")(f)

    return deco if f is None else deco(f)


def with_caution(product: str = "general"):
    """Put the caution of ``product`` (:func:`hydroatlas.cautions.help_paragraph`) into a command's --help,
    before its example (decorate below ``@main.command()``)."""
    def deco(f):
        import inspect

        text = inspect.cleandoc(f.__doc__ or "")
        head, sep, example = text.partition("\n\nExample:")
        f.__doc__ = f"{head}\n\n{help_paragraph(product)}" + (f"{sep}{example}" if sep else "")
        return f

    return deco


# library parameters whose option is spelled otherwise than the parameter (the rest: the current command's
# option of that name, else --name-with-dashes)
_OPTION_OF_PARAM = {"tolerance_days": "--tolerance", "rates": "--rate", "new_wells": "--new-well",
                    "range_": "--range"}


def option_name(param: str, command: click.Command | None = None) -> str:
    """The command-line spelling of a library parameter named in an error or note (``cell`` -> ``--cell``).

    The command's own option whose Python name is ``param`` (``command`` or the current one), else
    :data:`_OPTION_OF_PARAM`, else ``--`` and the name with dashes. Library messages name parameters as
    ``name=`` (:meth:`hydroatlas.errors.HydroatlasError.renamed`); this turns them back into options.
    """
    if command is None:
        ctx = click.get_current_context(silent=True)
        command = ctx.command if ctx is not None else None
    for p in getattr(command, "params", ()):
        if isinstance(p, click.Option) and p.name == param:
            longs = [o for o in p.opts if o.startswith("--")]
            return (longs or p.opts)[0]
    return _OPTION_OF_PARAM.get(param, "--" + param.strip("_").replace("_", "-"))


# Defaults used (with a warning) when a scenario parameter is not given; common practice, not site values.
DEFAULT_POROSITY = 0.1
DEFAULT_STORATIVITY = 1e-4

# options shared by several commands, declared once
surfaces_option = click.option("--surfaces", default=None, type=click.Path(file_okay=False),
                               help="Deprecated (kept for one release): inputs now come from the store's product "
                                    "registry ('hydroatlas products STORE'); this only narrows the search to "
                                    "products whose files lie in this folder.")
allow_stale_option = click.option("--allow-stale", is_flag=True,
                                  help="Use a recorded product (surface, scenario...) even though store rows it "
                                       "was made from changed since; said on stderr and in the outputs. By "
                                       "default such a product is refused with the command that remakes it.")


def surface_option(f=None, *, multiple: bool = False, what: str = "head"):
    """--surface NAME: the recorded surface product to use instead of the latest of the unit."""
    def deco(f):
        more = " (repeat it: one per unit and quantity)" if multiple else ""
        return click.option("--surface", "surface", multiple=multiple, default=None, metavar="NAME",
                            help=f"Name of the {what} surface product to use{more}, as listed by 'hydroatlas "
                                 "products STORE' (default: the latest recorded for the unit).")(f)

    return deco if f is None else deco(f)


def _say_stale(texts) -> list[str]:
    """Warnings on stderr for stale products used with --allow-stale; returns them for --format json."""
    out = []
    for text in texts or ():
        line = text.replace("(allow_stale=True)", "(--allow-stale)")
        click.echo(f"warning: {line}", err=True)
        out.append(line)
    return out


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
        raise _OptionError(exc.renamed(lambda name: option_name(name, ctx.command)), ctx=ctx, param=param) from None
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


def _say_selection(selection: dict | None, only: str | None = None) -> list[str]:
    """What a selection left out, on stderr: one note per kind of record ("heads" or "ktests"; ``only`` keeps
    one kind), and a warning for zones without a reading near --at. Returns the warnings (for --format json)."""
    from ..selection import describe

    entries = [e for e in (selection or {}).get("left_out") or [] if only is None or e["what"] == only]
    warnings = []
    for level, text in describe(entries, names=option_name):
        if level == "note":
            _note(text)
        else:
            click.echo(f"{level}: {text}", err=True)
            warnings.append(text)
    for e in entries:  # -v: each well and zone behind the counts above
        zone = f" zone {e['zone_id']}" if e.get("zone_id") else ""
        _detail(f"{e['what']} left out at well {e['well_id']}{zone}: {e['reason']} ({e['count']})")
    return warnings


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
            sub = self.get_command(ctx, ctx.invoked_subcommand) if ctx.invoked_subcommand else None
            # the library names its parameters (cell=); the command line names its options (--cell)
            click.echo(f"hydroatlas: error: {exc.renamed(lambda name: option_name(name, sub))}", err=True)
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

    The store (a GeoPackage file, or a postgresql://user@host/database URL of a PostGIS store) is the first
    argument of every command.
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


def _plain(value):
    """``value`` with paths, dates, tables and sets made JSON values (numbers are left to :func:`_json_safe`)."""
    import os

    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, (set, frozenset)):
        return sorted(_plain(v) for v in value)
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if isinstance(value, pd.DataFrame):
        return _plain(value.to_dict(orient="records"))
    if isinstance(value, (pd.Timestamp, pd.Timedelta)):
        return None if pd.isna(value) else value.isoformat()
    return value


def _flat(facts: dict, prefix: str = "") -> dict:
    """One CSV row of ``facts``: nested keys joined by '.', lists as JSON text."""
    row = {}
    for key, value in facts.items():
        if isinstance(value, dict):
            row.update(_flat(value, f"{prefix}{key}."))
        elif isinstance(value, list):
            row[f"{prefix}{key}"] = json.dumps(value)
        else:
            row[f"{prefix}{key}"] = value
    return row


def _report(fmt: str, facts: dict, rows=None) -> None:
    """The result of a command for ``--format csv`` or ``json`` (``table`` is the command's own lines).

    json: ``facts`` as one JSON document on stdout. csv: ``rows`` (a DataFrame or list of dicts) where the
    command has a table of its own, else ``facts`` as one row (nested keys joined by '.', lists as JSON text).
    """
    facts = _json_safe(_plain(facts))
    if fmt == "json":
        click.echo(json.dumps(facts, indent=2))
        return
    if rows is None:
        frame = pd.DataFrame([_flat(facts)])
    elif isinstance(rows, pd.DataFrame):
        frame = rows
    else:
        frame = pd.DataFrame(_json_safe(_plain(list(rows))))
    click.echo(frame.to_csv(index=False), nl=False)


def _format() -> str | None:
    """The --format of the running command (None outside a command or before it is read)."""
    ctx = click.get_current_context(silent=True)
    root = ctx.find_root() if ctx is not None else None
    return root.obj.get("format") if root is not None and isinstance(root.obj, dict) else None


def _show_progress() -> bool:
    """Progress bars only on a terminal (stderr), never with -q/--quiet or --format json."""
    return sys.stderr.isatty() and _verbosity() >= 0 and _format() != "json"


def _progress(label, unit=" rows"):
    """A progress bar on a terminal; silent when stderr is not a terminal, with -q or with --format json."""
    from tqdm import tqdm

    return tqdm(desc=label, unit=unit, disable=not _show_progress(), leave=False)


class _Progress:
    """The progress callback a command hands to the library: ``progress(n)`` adds n done; the library sets
    ``progress.total`` (the whole job's count) first where it knows it, so the bar shows how far along it is."""

    def __init__(self, bar):
        self.bar = bar

    def __call__(self, n: int = 1) -> None:
        self.bar.update(n)

    update = __call__

    @property
    def total(self):
        return self.bar.total

    @total.setter
    def total(self, value) -> None:
        self.bar.total = value
        self.bar.refresh()


@contextmanager
def _progress_bar(label, unit=" rows"):
    """A :class:`_Progress` over :func:`_progress`, closed at the end."""
    bar = _progress(label, unit)
    try:
        yield _Progress(bar)
    finally:
        bar.close()
