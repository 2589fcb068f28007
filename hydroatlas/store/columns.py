"""The input column contract (SPEC 4), declared once.

Each importable kind (``hydroatlas import STORE KIND FILE``) reads the columns of one store table, declared with
their input contract in :mod:`hydroatlas.store.schema` (:class:`~hydroatlas.store.schema.Column`: required or
optional, how a cell is read, unit, allowed values, range, description), plus a few columns that only input
files have (coordinates in degrees, transducer readings, slug-test geometry kept in ``attrs``), declared here.
From this one declaration come:

- the SQL of the store tables (their checks: :func:`hydroatlas.store.schema.column_checks`);
- the importer's column checks (:mod:`hydroatlas.store.importers`: required columns, types, allowed values,
  ranges);
- the column tables of the data dictionary, ``docs/data-dictionary.md`` (:func:`data_dictionary` renews its
  generated blocks; the prose around them is written by hand);
- the column list of ``hydroatlas import --help`` (:func:`column_help`).

This module itself imports nothing heavy (the package :mod:`hydroatlas.store` around it does).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from .schema import OPTIONAL, REQUIRED, TABLES, C, Column

#: what every CSV input is
CSV = "CSV (UTF-8, comma-separated, one header row)"

_DEGREES = "degrees, WGS 84 (EPSG:4326) unless the input CRS says otherwise"
_COORDINATE_RULE = ("Coordinates: one pair of columns, x and y (in the store CRS, or in the input CRS given to "
                    "the import), or lon and lat, or longitude and latitude (degrees).")


def _coordinates():
    return (C("lon", "REAL", input=OPTIONAL, unit=_DEGREES, description="longitude (instead of x)"),
            C("lat", "REAL", input=OPTIONAL, unit=_DEGREES, description="latitude (instead of y)"),
            C("longitude", "REAL", input=OPTIONAL, unit=_DEGREES, description="longitude (instead of x)"),
            C("latitude", "REAL", input=OPTIONAL, unit=_DEGREES, description="latitude (instead of y)"))


@dataclass(frozen=True)
class InputKind:
    """The columns of one kind of input file, in the order the documentation lists them.

    Attributes
    ----------
    kind : str
        The kind named on the command line (``hydroatlas import STORE KIND FILE``).
    table : str
        The store table it fills.
    columns : tuple of Column
        Its input columns (each :attr:`Column.input` is required or optional).
    rules : tuple of str
        Rules across columns or rows, one sentence each.
    file_format : str
        What the file is.
    description : str
        One line: what one row (or feature) is.
    input_key : tuple of str
        The columns that identify a row of the file when they are not the store table's key.
    """

    kind: str
    table: str
    columns: tuple[Column, ...]
    rules: tuple[str, ...] = ()
    file_format: str = CSV
    description: str = ""
    input_key: tuple[str, ...] = ()

    @property
    def required(self) -> tuple[str, ...]:
        """Names of the columns the header must have, in order."""
        return tuple(c.name for c in self.columns if c.input == REQUIRED)

    @property
    def optional(self) -> tuple[str, ...]:
        """Names of the columns the header may have, in order."""
        return tuple(c.name for c in self.columns if c.input == OPTIONAL)

    @property
    def key(self) -> tuple[str, ...]:
        """The columns that identify a row (the store table's natural key, unless :attr:`input_key` says)."""
        return self.input_key or TABLES[self.table].key

    def column(self, name: str) -> Column:
        """The declaration of one input column; KeyError for a name the kind does not read."""
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(f"{self.kind} files have no column {name!r}")


def _kind(kind: str, table: str, names, *, rules=(), file_format: str = CSV, description: str = "",
          input_key=()) -> InputKind:
    """An :class:`InputKind` of ``table``: ``names`` are its columns, names of table columns or Column objects
    that only input files have."""
    own = {c.name: c for c in TABLES[table].columns}
    cols = tuple(own[n] if isinstance(n, str) else n for n in names)
    for col in cols:
        if col.input is None:
            raise ValueError(f"{kind}: column {col.name} is not an input column")
    return InputKind(kind, table, cols, tuple(rules), file_format, description, tuple(input_key))


INPUTS: dict[str, InputKind] = {k.kind: k for k in (
    _kind("units", "units", ("code", "name", "rank", "role", "parent"),
          description="one hydrostratigraphic unit",
          rules=("code and rank are unique; parent is a unit in this file or in the store, and parent links form "
                 "no cycle.",)),
    _kind("wells", "wells", ("well_id", "x", "y", *_coordinates(), "ground_elev", "total_depth", "kind", "name"),
          description="one well", rules=(_COORDINATE_RULE,
                                         "total_depth is not shallower than a zone already stored for the well.")),
    _kind("picks", "picks", ("well_id", "unit", "top_depth", "bottom_depth"),
          description="the top and bottom of one unit in one well",
          rules=("The well and the unit are in the store.",)),
    _kind("zones", "zones", ("well_id", "zone_id", "top_depth", "bottom_depth", "kind", "unit"),
          description="one monitored interval (screen, port, open hole, packer interval)",
          rules=("The well (and an override unit) are in the store.",)),
    _kind("ktests", "ktests", ("well_id", "zone_id", "test_id", "tested_on", "method", "k", "k_unit", "quality",
                               "source", "orientation"),
          description="one hydraulic-conductivity test of one zone",
          rules=("The zone is in the store.",
                 "Without a test_id column, two tests of one zone by one method on one day cannot be told apart.")),
    _kind("heads", "heads", ("well_id", "zone_id", "measured_at", "head", "depth_to_water", "ref_elev", "quality"),
          description="one head reading in one zone",
          rules=("Give head, or depth_to_water with ref_elev (head = ref_elev - depth_to_water); where all three "
                 "are given they agree within 0.01 store length units.",
                 "The zone is in the store.")),
    _kind("pumping", "pumping", ("well_id", "zone_id", "rate", "rate_unit", "start", "end"),
          description="one period of pumping at one rate",
          rules=("The well (and a zone, when given) are in the store.",)),
    _kind("springs", "springs", ("spring_id", "x", "y", *_coordinates(), "elev", "name", "unit"),
          description="one spring", rules=(_COORDINATE_RULE,)),
    _kind("discharge", "discharge", ("spring_id", "measured_at", "discharge", "rate_unit"),
          description="one discharge reading of one spring", rules=("The spring is in the store.",)),
    _kind("areas", "areas", ("area_id", "kind", "unit"), file_format="GeoJSON or GeoPackage polygon file",
          description="one polygon (feature); the columns are the features' fields",
          rules=("Each feature is a valid polygon or multipolygon with an area; a file without a CRS needs the "
                 "input CRS given to the import.",)),
    _kind("slugtests", "slug_records", ("well_id", "zone_id", "test_id", "t_s", "displacement"),
          description="one displacement reading of one slug test",
          rules=("Each test also needs its well geometry (kind sluggeometry).",)),
    _kind("sluggeometry", "slug_geometry",
          ("well_id", "zone_id", "test_id", "casing_radius", "well_radius", "screen_length", "aquifer_thickness",
           "static_depth", "tested_on",
           C("screen_top_depth", "REAL", input=OPTIONAL, unit="store length unit below ground", minimum=0,
             description="depth to the top of the screen (kept in attrs)"),
           C("confined", input=OPTIONAL, allowed=("true", "false"),
             aliases=(("yes", "true"), ("no", "false"), ("1", "true"), ("0", "false")),
             description="whether the interval tested is confined (kept in attrs)"),
           C("geometry_kind", input=OPTIONAL, allowed=("screen", "packer", "open_hole"),
             aliases=(("open hole", "open_hole"), ("open-hole", "open_hole")),
             description="kind of open interval (kept in attrs)")),
          description="the well geometry of one slug test",
          rules=("The screen (screen_top_depth to screen_top_depth + screen_length) lies inside its zone.",)),
    _kind("transducer", "slug_records",
          ("well_id", "zone_id", "test_id",
           C("timestamp", input=REQUIRED, form="instant", unit="ISO 8601 date and time, fractions of a second "
             "kept, offsets to UTC", description="time of the reading"),
           C("value", "REAL", input=REQUIRED, unit="the unit in value_unit",
             description="pressure or water level read by the transducer"),
           C("value_unit", input=REQUIRED, allowed=("psi", "kpa", "m", "ft"),
             aliases=(("m_water", "m"), ("ft_water", "ft"), ("mh2o", "m"), ("fth2o", "ft"), ("m of water", "m"),
                      ("ft of water", "ft")),
             description="unit of value: pressure (psi, kPa) or height of water (m, ft)"),
           C("test_start", input=OPTIONAL, form="instant", unit="ISO 8601 date and time",
             description="start of the test (one per test); without it, the reading with the largest change")),
          description="one reading of a pressure transducer during a slug test",
          input_key=("well_id", "zone_id", "test_id", "timestamp"),
          rules=("Each test keeps a few readings of the static level before its start and at least 3 after it; "
                 "they become slug-test displacements (kind slugtests).",)),
)}


# -- text made from the declaration -------------------------------------------------------
def allowed_text(col: Column) -> str:
    """The values or range a column accepts, in words ('' when any value of its form goes)."""
    form = col.value_form
    if form in ("K unit", "rate unit"):
        from ..quantities import K_UNITS, RATE_UNITS

        return ", ".join(K_UNITS if form == "K unit" else RATE_UNITS) + " (common other spellings read too)"
    if form == "choice":
        text = ", ".join(col.allowed)
        if col.aliases:
            text += "; also " + ", ".join(f"'{a}' for {v}" for a, v in col.aliases)
        if col.input_default:
            text += f"; empty: {col.input_default}"
        return text
    return col.range_text


def _type_text(col: Column) -> str:
    return "date-time" if col.value_form == "instant" else col.value_form


#: the longest line of :func:`column_help`
HELP_WIDTH = 110


def column_help(kind: str | None = None) -> str:
    """The input columns as plain text for ``hydroatlas import --help``.

    With a ``kind``: one line per column (name, required or optional, form, unit, allowed values or range,
    description), then the kind's rules. Without: one line per kind listing its columns (optional ones
    marked ``?``), as in SPEC section 4. Lines are at most :data:`HELP_WIDTH` characters; a front end that
    rewraps paragraphs (click) must be told to keep them (click: a line holding only ``\\b`` before the block).
    """
    import textwrap

    if kind is None:
        lines = []
        for k in INPUTS.values():
            cols = ", ".join(c.name + ("" if c.input == REQUIRED else "?") for c in k.columns)
            lines += textwrap.wrap(f"{k.kind}: {cols}", HELP_WIDTH, subsequent_indent="    ")
        return "\n".join(lines)
    if kind not in INPUTS:
        raise KeyError(f"unknown kind {kind!r}; expected one of {', '.join(INPUTS)}")
    import textwrap

    k = INPUTS[kind]
    width = max(len(c.name) for c in k.columns)
    types = max(len(_type_text(c)) for c in k.columns)
    lines = textwrap.wrap(f"{k.kind}: {k.file_format}; one row is {k.description}; key: {', '.join(k.key)}",
                          HELP_WIDTH, subsequent_indent="  ")
    for c in k.columns:
        extra = "; ".join(p for p in (c.unit, allowed_text(c)) if p)
        head = f"  {c.name:<{width}}  {c.input:<8}  {_type_text(c):<{types}}  "
        lines += textwrap.wrap(head + c.description + (f" ({extra})" if extra else ""), HELP_WIDTH,
                               subsequent_indent=" " * len(head))
    for r in k.rules:
        lines += textwrap.wrap(r, HELP_WIDTH, initial_indent="  - ", subsequent_indent="    ")
    return "\n".join(lines)


def _cell(text: str) -> str:
    return text.replace("|", "\\|")


def kind_table(kind: str) -> str:
    """The Markdown table of one kind's input columns (a generated block of the data dictionary), with the
    kind's file format, row, key and rules."""
    k = INPUTS[kind]
    out = [f"{k.file_format}; one row is {k.description}. Key: {', '.join(k.key)}. Store table: `{k.table}`.", "",
           "| column | required | type | unit | allowed values or range | description |",
           "| --- | --- | --- | --- | --- | --- |"]
    for c in k.columns:
        out.append(f"| `{c.name}` | {'yes' if c.input == REQUIRED else 'no'} | {_type_text(c)} | "
                   f"{_cell(c.unit)} | {_cell(allowed_text(c))} | {_cell(c.description)} |")
    if k.rules:
        out.append("")
        out += [f"- {r}" for r in k.rules]
    return "\n".join(out) + "\n"


def added_columns_table() -> str:
    """The Markdown table of the store columns that hydroatlas computes (not read from input files)."""
    out = ["| table | column | SQL type | unit | description |", "| --- | --- | --- | --- | --- |"]
    read = {(k.table, c.name) for k in INPUTS.values() for c in k.columns}
    for table in dict.fromkeys(k.table for k in INPUTS.values()):
        for c in TABLES[table].columns:
            if (table, c.name) not in read:
                out.append(f"| `{table}` | `{c.name}` | {c.sql_type} | {_cell(c.unit)} | {_cell(c.description)} |")
    return "\n".join(out) + "\n"


#: a generated block of the data dictionary: what it holds ('columns KIND' or 'added columns') between markers
_BLOCK = re.compile(r"(<!-- generated: (?P<what>[a-z ]+) -->\n)(?P<body>.*?)(<!-- end generated -->)", re.S)
DATA_DICTIONARY = "docs/data-dictionary.md"


def data_dictionary(text: str) -> str:
    """``text`` (the data dictionary, ``docs/data-dictionary.md``) with each generated block made anew.

    A block is the text between ``<!-- generated: columns KIND -->`` (or ``<!-- generated: added columns -->``)
    and ``<!-- end generated -->``; everything outside the blocks is hand-written and kept. Raises ValueError
    for a block that names no kind, and when a kind has no block.
    """
    def render(m):
        what = m.group("what").split()
        if what == ["added", "columns"]:
            body = added_columns_table()
        elif len(what) == 2 and what[0] == "columns" and what[1] in INPUTS:
            body = kind_table(what[1])
        else:
            raise ValueError(f"unknown generated block {m.group('what')!r}")
        return m.group(1) + body + m.group(4)

    found = {m.group("what") for m in _BLOCK.finditer(text)}
    missing = [k for k in INPUTS if f"columns {k}" not in found]
    if missing:
        raise ValueError(f"the data dictionary has no block of the columns of {', '.join(missing)}")
    return _BLOCK.sub(render, text)


def write_data_dictionary(path=DATA_DICTIONARY) -> bool:
    """Renew the generated blocks of the data dictionary file in place; True when the file changed."""
    from pathlib import Path

    path = Path(path)
    old = path.read_text(encoding="utf-8")
    new = data_dictionary(old)
    if new != old:
        path.write_text(new, encoding="utf-8")
    return new != old
