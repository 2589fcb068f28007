"""The store's tables, described once and turned into SQL by each backend.

A table lists its columns, its natural key (what makes a re-import an update
instead of a duplicate), its foreign keys and, for the three spatial tables,
the geometry type. Every table also carries ``attrs`` (extra input columns as
JSON), ``source_file`` and ``source_row`` (1-based data row of the input file),
and ``retired_at`` / ``retired_reason``: a retired record stays in the store
but is left out of every computation (:data:`LIFECYCLE_COLUMNS`).

Nothing is ever overwritten without a trace: every update, retirement,
restoration or deletion of a record first copies the previous version into
:data:`HISTORY_TABLE` (see ``history_triggers`` of each backend).

Each column that input files fill also declares its input contract (:class:`Column`:
required or optional, form, unit, allowed values, range, description). The
table checks follow from it (:func:`column_checks`), and so do the importer's
checks, the data dictionary and the import help (:mod:`hydroatlas.store.columns`).
"""

from __future__ import annotations

from dataclasses import dataclass

UNIT_ROLES = ("aquifer", "aquitard", "confining", "other")
WELL_KINDS = ("monitoring", "multizone", "pumping", "supply", "other")
ZONE_KINDS = ("screen", "port", "open_hole", "packer")
KTEST_METHODS = ("slug", "pumping", "packer", "core", "specific_capacity", "other")
QUALITIES = ("good", "fair", "poor")
#: what a K test measured: K along the layers (most slug and pumping tests) or across them (vertical tests)
KTEST_ORIENTATIONS = ("horizontal", "vertical")
AREA_KINDS = ("recharge", "domain", "noflow")

SCHEMA_VERSION = "4"
#: versions that ``hydroatlas upgrade`` can bring to :data:`SCHEMA_VERSION`
UPGRADABLE_VERSIONS = ("1", "2", "3")
#: columns of every provenance table that only retire/restore change
LIFECYCLE_COLUMNS = ("retired_at", "retired_reason")
HISTORY_TABLE = "record_history"


def _in(column: str, values: tuple[str, ...], nullable: bool = True) -> str:
    allowed = ", ".join(f"'{v}'" for v in values)
    test = f"{column} IN ({allowed})"
    return f"({column} IS NULL OR {test})" if nullable else test


#: how an input file gives a column (:attr:`Column.input`): the header must have it, or it may
REQUIRED = "required"
OPTIONAL = "optional"
#: how an input cell is read (:attr:`Column.form`)
FORMS = ("text", "number", "whole number", "date", "date-time", "instant", "choice", "K unit", "rate unit")


@dataclass(frozen=True)
class Column:
    """One column of a store table and, where input files fill it, its input contract (SPEC 4).

    Attributes
    ----------
    name, sql_type, not_null, default
        The SQL column (``sql_type`` TEXT, REAL or INTEGER; ``default`` an SQL literal, also the value an
        empty optional input cell takes).
    description : str
        One line saying what the column holds.
    input : str or None
        :data:`REQUIRED` (the input header must have it), :data:`OPTIONAL`, or None (not read from input
        files: computed by hydroatlas).
    form : str
        How an input cell is read, one of :data:`FORMS` (default: choice when ``allowed`` is given, else
        number for REAL, whole number for INTEGER, text for TEXT).
    unit : str
        Unit or quantity of the values in words ("store length unit", "the unit in k_unit", ...).
    allowed, aliases : tuple
        The values a choice accepts (case-insensitive), and other spellings read as one of them
        (pairs ``(spelling, value)``).
    minimum, above, maximum : float, bool, float
        The allowed range: ``value >= minimum`` (``value > minimum`` with ``above``), ``value <= maximum``.
    filled : bool
        An optional column that, when the header has it, needs a value in every row.
    hint : str
        A reminder of the meaning added to the import errors of a whole number ("1 = top unit").
    message : str
        The import error for a value out of range, where the general one would say too little.

    The SQL checks of a table follow from ``allowed`` and the range (:func:`column_checks`).
    """

    name: str
    sql_type: str  # TEXT, REAL, INTEGER
    not_null: bool = False
    default: str | None = None
    description: str = ""
    input: str | None = None
    form: str = ""
    unit: str = ""
    allowed: tuple[str, ...] = ()
    aliases: tuple[tuple[str, str], ...] = ()
    minimum: float | None = None
    above: bool = False
    maximum: float | None = None
    filled: bool = False
    hint: str = ""
    message: str = ""

    def __post_init__(self):
        if self.input not in (None, REQUIRED, OPTIONAL):
            raise ValueError(f"column {self.name}: input must be {REQUIRED!r}, {OPTIONAL!r} or None")
        if self.form and self.form not in FORMS:
            raise ValueError(f"column {self.name}: form must be one of {FORMS}")

    @property
    def value_form(self) -> str:
        """How an input cell of this column is read (:attr:`form`, or the default that follows from the type)."""
        if self.form:
            return self.form
        if self.allowed:
            return "choice"
        return {"REAL": "number", "INTEGER": "whole number"}.get(self.sql_type, "text")

    @property
    def input_default(self) -> str | None:
        """The value an empty optional input cell takes: the SQL default without its quotes (None: none)."""
        return None if self.default is None else self.default.strip("'")

    @property
    def range_text(self) -> str:
        """The allowed range in words ('> 0', '>= 0 and <= 10000'; '' when any value goes)."""
        parts = []
        if self.minimum is not None:
            parts.append(f"{'>' if self.above else '>='} {self.minimum:g}")
        if self.maximum is not None:
            parts.append(f"<= {self.maximum:g}")
        return " and ".join(parts)


def column_checks(columns) -> tuple[str, ...]:
    """The SQL checks that follow from the columns' allowed values and ranges, in column order."""
    out = []
    for c in columns:
        if c.value_form == "choice" and c.allowed:
            out.append(_in(c.name, c.allowed, nullable=not c.not_null))
        tests = []
        if c.minimum is not None:
            tests.append(f"{c.name} {'>' if c.above else '>='} {c.minimum:g}")
        if c.maximum is not None:
            tests.append(f"{c.name} <= {c.maximum:g}")
        for test in tests:
            out.append(test if c.not_null else f"{c.name} IS NULL OR {test}")
    return tuple(out)


@dataclass(frozen=True)
class Table:
    name: str
    columns: tuple[Column, ...]
    key: tuple[str, ...]
    foreign_keys: tuple[tuple[tuple[str, ...], str, tuple[str, ...]], ...] = ()
    checks: tuple[str, ...] = ()
    geometry: str | None = None  # GeoPackage geometry type name, e.g. POINT
    description: str = ""
    provenance: bool = True

    @property
    def column_names(self) -> tuple[str, ...]:
        names = tuple(c.name for c in self.columns)
        if self.provenance:
            names += ("attrs", "source_file", "source_row")
        return names

    @property
    def lifecycle(self) -> tuple[str, ...]:
        return LIFECYCLE_COLUMNS if self.provenance else ()

    @property
    def cascade_parents(self) -> tuple[tuple[tuple[str, ...], str, tuple[str, ...]], ...]:
        """Foreign keys whose columns are part of the natural key: a retired parent retires these rows too."""
        return tuple(fk for fk in self.foreign_keys if set(fk[0]) <= set(self.key))

    @property
    def value_columns(self) -> tuple[str, ...]:
        """Columns an upsert may change (not the key, not provenance)."""
        skip = set(self.key) | {"source_file", "source_row"}
        return tuple(c for c in self.column_names if c not in skip)


def C(name, sql_type="TEXT", not_null=False, default=None, **contract):
    """A :class:`Column`; ``contract``: its description and input contract (see :class:`Column`)."""
    return Column(name, sql_type, not_null, default, **contract)


def _table(name: str, columns: tuple[Column, ...], *, checks: tuple[str, ...] = (), **kw) -> Table:
    """A :class:`Table` whose checks are those of its columns (:func:`column_checks`) and then ``checks``
    (rules across columns)."""
    return Table(name, columns, checks=column_checks(columns) + tuple(checks), **kw)


TABLES: dict[str, Table] = {}


def _add(table: Table) -> None:
    TABLES[table.name] = table


_add(_table(
    "units",
    (C("code", not_null=True, input=REQUIRED, description="unit code: 1 to 64 letters, digits, '-', '_' or '.', "
       "not starting with '.' (codes name output files)"),
     C("name", not_null=True, input=REQUIRED, description="name of the unit"),
     C("rank", "INTEGER", True, input=REQUIRED, minimum=1, maximum=10_000, hint="1 = top unit",
       description="order from the top (1 = top unit), unique across the store; sub-units take their own ranks"),
     C("role", not_null=True, input=REQUIRED, allowed=UNIT_ROLES, description="hydrostratigraphic role"),
     C("parent", input=OPTIONAL, description="code of the enclosing unit (in this file or the store); statistics "
       "of a parent include its sub-units")),
    key=("code",),
    foreign_keys=((("parent",), "units", ("code",)),),
    checks=("parent IS NULL OR parent <> code",),
    description="Hydrostratigraphic units, rank 1 at the top.",
))
_add(_table(
    "wells",
    (C("well_id", not_null=True, input=REQUIRED, description="well identifier"),
     C("x", "REAL", True, input=OPTIONAL, unit="store CRS (or the input CRS)", description="easting of the well"),
     C("y", "REAL", True, input=OPTIONAL, unit="store CRS (or the input CRS)", description="northing of the well"),
     C("ground_elev", "REAL", True, input=REQUIRED, unit="store length unit above the vertical datum",
       description="ground elevation at the well"),
     C("total_depth", "REAL", input=OPTIONAL, unit="store length unit", minimum=0, above=True,
       description="drilled depth below ground"),
     C("kind", input=OPTIONAL, allowed=WELL_KINDS, description="kind of well; levels in pumping and supply "
       "wells are left out of head selections"),
     C("name", input=OPTIONAL, description="name of the well"),
     C("x_input", "REAL", description="x as given, when the file was in another CRS"),
     C("y_input", "REAL", description="y as given, when the file was in another CRS"),
     C("input_crs", description="CRS of the file, when it was not the store CRS")),
    key=("well_id",),
    geometry="POINT",
    description="Wells; x, y in the store CRS (x_input, y_input, input_crs keep reprojected input).",
))
_add(_table(
    "picks",
    (C("well_id", not_null=True, input=REQUIRED, description="well (in the store)"),
     C("unit", not_null=True, input=REQUIRED, description="unit code (in the store)"),
     C("top_depth", "REAL", True, input=REQUIRED, unit="store length unit below ground", minimum=0,
       description="depth to the top of the unit"),
     C("bottom_depth", "REAL", True, input=REQUIRED, unit="store length unit below ground",
       description="depth to the bottom of the unit, greater than top_depth")),
    key=("well_id", "unit"),
    foreign_keys=((("well_id",), "wells", ("well_id",)), (("unit",), "units", ("code",))),
    checks=("bottom_depth > top_depth",),
    description="Depth to the top and bottom of a unit in a well.",
))
_add(_table(
    "zones",
    (C("well_id", not_null=True, input=REQUIRED, description="well (in the store)"),
     C("zone_id", not_null=True, input=REQUIRED, description="zone identifier within the well"),
     C("top_depth", "REAL", True, input=REQUIRED, unit="store length unit below ground", minimum=0,
       description="depth to the top of the monitored interval"),
     C("bottom_depth", "REAL", True, input=REQUIRED, unit="store length unit below ground",
       description="depth to its bottom, greater than top_depth and not below the well's total_depth"),
     C("kind", input=OPTIONAL, allowed=ZONE_KINDS, aliases=(("open hole", "open_hole"),),
       description="kind of interval"),
     C("unit", input=OPTIONAL, description="override of the computed unit assignment (a stored unit code)")),
    key=("well_id", "zone_id"),
    foreign_keys=((("well_id",), "wells", ("well_id",)), (("unit",), "units", ("code",))),
    checks=("bottom_depth > top_depth",),
    description="Monitored intervals; unit is the user's override of the assignment.",
))
_add(_table(
    "ktests",
    (C("well_id", not_null=True, input=REQUIRED, description="well (in the store)"),
     C("zone_id", not_null=True, input=REQUIRED, description="zone of the well (in the store)"),
     C("test_id", not_null=True, input=OPTIONAL, filled=True, description="test identifier; without the column "
       "a test is known by method@tested_on"),
     C("tested_on", not_null=True, input=REQUIRED, form="date", description="day of the test"),
     C("method", not_null=True, input=REQUIRED, allowed=KTEST_METHODS,
       aliases=(("specific capacity", "specific_capacity"),), description="test method"),
     C("k", "REAL", True, input=REQUIRED, unit="the unit in k_unit", minimum=0, above=True,
       message="hydraulic conductivity must be greater than zero",
       description="hydraulic conductivity, as given; converted to m/s in k_ms"),
     C("k_unit", not_null=True, input=REQUIRED, form="K unit", description="unit of k"),
     C("k_ms", "REAL", True, unit="m/s", minimum=0, above=True, description="k converted to m/s"),
     C("quality", input=OPTIONAL, allowed=QUALITIES, description="quality of the test; poor tests are left "
       "out of computations unless asked for"),
     C("source", input=OPTIONAL, description="where the value comes from (report, file)"),
     C("orientation", default="'horizontal'", input=OPTIONAL, allowed=KTEST_ORIENTATIONS,
       description="K along the layers (horizontal, the default) or across them (vertical)")),
    key=("well_id", "zone_id", "test_id"),
    foreign_keys=((("well_id", "zone_id"), "zones", ("well_id", "zone_id")),),
    description="Hydraulic-conductivity tests; k and k_unit as given, k_ms in m/s; orientation horizontal "
                "(K along the layers, the default) or vertical (K across them).",
))
_add(_table(
    "heads",
    (C("well_id", not_null=True, input=REQUIRED, description="well (in the store)"),
     C("zone_id", not_null=True, input=REQUIRED, description="zone of the well (in the store)"),
     C("measured_at", not_null=True, input=REQUIRED, form="date-time", unit="ISO 8601 date or date-time "
       "(offsets to UTC)", description="time of the reading"),
     C("head", "REAL", True, input=OPTIONAL, unit="store length unit above the vertical datum",
       description="hydraulic head"),
     C("depth_to_water", "REAL", input=OPTIONAL, unit="store length unit below ref_elev",
       description="depth to water below the reference point"),
     C("ref_elev", "REAL", input=OPTIONAL, unit="store length unit above the vertical datum",
       description="elevation of the reference point of depth_to_water"),
     C("quality", input=OPTIONAL, allowed=QUALITIES, description="quality of the reading; poor readings are "
       "left out of computations unless asked for")),
    key=("well_id", "zone_id", "measured_at"),
    foreign_keys=((("well_id", "zone_id"), "zones", ("well_id", "zone_id")),),
    description="Head readings; head = ref_elev - depth_to_water where those were given.",
))
_add(_table(
    "pumping",
    (C("well_id", not_null=True, input=REQUIRED, description="pumping well (in the store)"),
     C("zone_id", not_null=True, default="''", input=OPTIONAL, description="zone pumped; empty: the whole well"),
     C("start", not_null=True, input=REQUIRED, form="date-time", unit="ISO 8601 date or date-time",
       description="start of pumping at this rate"),
     C("end", input=OPTIONAL, form="date-time", unit="ISO 8601 date or date-time",
       description="end of pumping, not before start; empty: still pumping"),
     C("rate", "REAL", True, input=REQUIRED, unit="the unit in rate_unit", minimum=0,
       description="pumping rate; converted to m3/d in rate_m3d"),
     C("rate_unit", not_null=True, input=REQUIRED, form="rate unit", description="unit of rate"),
     C("rate_m3d", "REAL", True, unit="m3/d", description="rate converted to m3/d")),
    key=("well_id", "zone_id", "start"),
    foreign_keys=((("well_id",), "wells", ("well_id",)),),
    checks=("\"end\" IS NULL OR \"end\" >= start",),
    description="Pumping records; zone_id '' means the whole well; rate_m3d in m3/d.",
))
_add(_table(
    "springs",
    (C("spring_id", not_null=True, input=REQUIRED, description="spring identifier"),
     C("x", "REAL", True, input=OPTIONAL, unit="store CRS (or the input CRS)", description="easting"),
     C("y", "REAL", True, input=OPTIONAL, unit="store CRS (or the input CRS)", description="northing"),
     C("elev", "REAL", True, input=REQUIRED, unit="store length unit above the vertical datum",
       description="elevation of the orifice"),
     C("name", input=OPTIONAL, description="name of the spring"),
     C("unit", input=OPTIONAL, description="unit code the spring issues from (its elevation is then a head of "
       "that unit)"),
     C("x_input", "REAL", description="x as given, when the file was in another CRS"),
     C("y_input", "REAL", description="y as given, when the file was in another CRS"),
     C("input_crs", description="CRS of the file, when it was not the store CRS")),
    key=("spring_id",),
    foreign_keys=((("unit",), "units", ("code",)),),
    geometry="POINT",
    description="Springs; unit is the unit the spring issues from (its elevation is then a head of that unit).",
))
_add(_table(
    "discharge",
    (C("spring_id", not_null=True, input=REQUIRED, description="spring (in the store)"),
     C("measured_at", not_null=True, input=REQUIRED, form="date-time", unit="ISO 8601 date or date-time",
       description="time of the reading"),
     C("discharge", "REAL", True, input=REQUIRED, unit="the unit in rate_unit", minimum=0,
       description="spring discharge; converted to m3/d in discharge_m3d"),
     C("rate_unit", not_null=True, input=REQUIRED, form="rate unit", description="unit of discharge"),
     C("discharge_m3d", "REAL", True, unit="m3/d", description="discharge converted to m3/d")),
    key=("spring_id", "measured_at"),
    foreign_keys=((("spring_id",), "springs", ("spring_id",)),),
    description="Spring discharge readings.",
))
_add(_table(
    "areas",
    (C("area_id", not_null=True, input=REQUIRED, description="area identifier"),
     C("kind", not_null=True, input=REQUIRED, allowed=AREA_KINDS, description="what the polygon is"),
     C("unit", input=OPTIONAL, description="unit code the area applies to; empty: every unit")),
    key=("area_id",),
    foreign_keys=((("unit",), "units", ("code",)),),
    geometry="MULTIPOLYGON",
    description="Recharge, model-domain and no-flow polygons.",
))
_add(_table(
    "slug_records",
    (C("well_id", not_null=True, input=REQUIRED, description="well (in the store)"),
     C("zone_id", not_null=True, input=REQUIRED, description="zone of the well (in the store)"),
     C("test_id", not_null=True, input=REQUIRED, description="slug test identifier"),
     C("t_s", "REAL", True, input=REQUIRED, unit="s", minimum=0,
       description="time since the slug was added or removed"),
     C("displacement", "REAL", True, input=REQUIRED, unit="store length unit",
       description="head above (+) or below (-) the static level")),
    key=("well_id", "zone_id", "test_id", "t_s"),
    foreign_keys=((("well_id", "zone_id"), "zones", ("well_id", "zone_id")),),
    description="Raw slug-test displacement records.",
))
_add(_table(
    "slug_geometry",
    (C("well_id", not_null=True, input=REQUIRED, description="well (in the store)"),
     C("zone_id", not_null=True, input=REQUIRED, description="zone of the well (in the store)"),
     C("test_id", not_null=True, input=REQUIRED, description="slug test identifier"),
     C("casing_radius", "REAL", True, input=REQUIRED, unit="store length unit", minimum=0, above=True,
       description="r_c: radius of the pipe in which the water level moves"),
     C("well_radius", "REAL", True, input=REQUIRED, unit="store length unit", minimum=0, above=True,
       description="r_w: radius of the borehole with filter pack (screen) or of the borehole (packer, open hole)"),
     C("screen_length", "REAL", True, input=REQUIRED, unit="store length unit", minimum=0, above=True,
       description="L (Le): length of the open interval"),
     C("aquifer_thickness", "REAL", input=OPTIONAL, unit="store length unit", minimum=0, above=True,
       description="H: thickness of the tested unit below the water table (unconfined) or of the unit "
       "(confined)"),
     C("static_depth", "REAL", input=OPTIONAL, unit="store length unit below ground", minimum=0,
       description="depth to the static water level"),
     C("tested_on", input=OPTIONAL, form="date", description="day of the test")),
    key=("well_id", "zone_id", "test_id"),
    foreign_keys=((("well_id", "zone_id"), "zones", ("well_id", "zone_id")),),
    description="Well geometry of each slug test.",
))
_add(Table(
    HISTORY_TABLE,
    (C("table_name", not_null=True), C("record_key", not_null=True), C("action", not_null=True),
     C("changed_at", not_null=True), C("old_version", not_null=True), C("new_source_file"),
     C("reason")),
    key=(),
    checks=("action IN ('update', 'retire', 'restore', 'delete')",),
    description="Earlier versions of records: every update, retirement, restoration or deletion keeps the "
                "version it replaced (old_version as JSON, geometry as GeoPackage binary in hex).",
    provenance=False,
))
_add(Table(
    "imports",
    (C("kind", not_null=True), C("file", not_null=True), C("sha256", not_null=True),
     C("rows", "INTEGER", True), C("inserted", "INTEGER", True), C("updated", "INTEGER", True),
     C("imported_at", not_null=True)),
    key=(),
    description="One row per successful import.",
    provenance=False,
))

_add(Table(
    "products",
    (C("product_id", not_null=True), C("name", not_null=True), C("kind", not_null=True), C("unit"),
     C("quantity"), C("value_unit"), C("parameters"), C("head_window"), C("selection"),
     C("code_version", not_null=True), C("files", not_null=True), C("input_digests", not_null=True),
     C("inputs", not_null=True, default="'[]'"), C("command", not_null=True), C("created_utc", not_null=True)),
    key=("name",),
    checks=("kind <> ''", "name <> ''"),  # the JSON columns are written by hydroatlas.products only
    description="Derived products (surfaces, pathways, drawdown scenarios, grids, maps...): kind, unit, "
                "parameters, files, the digests of the store tables they were made from, the products they "
                "used and the command that remakes them (see hydroatlas.products).",
    provenance=False,
))

FEATURE_TABLES = tuple(t for t, spec in TABLES.items() if spec.geometry)
