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

SCHEMA_VERSION = "3"
#: versions that ``hydroatlas upgrade`` can bring to :data:`SCHEMA_VERSION`
UPGRADABLE_VERSIONS = ("1", "2")
#: columns of every provenance table that only retire/restore change
LIFECYCLE_COLUMNS = ("retired_at", "retired_reason")
HISTORY_TABLE = "record_history"


def _in(column: str, values: tuple[str, ...], nullable: bool = True) -> str:
    allowed = ", ".join(f"'{v}'" for v in values)
    test = f"{column} IN ({allowed})"
    return f"({column} IS NULL OR {test})" if nullable else test


@dataclass(frozen=True)
class Column:
    name: str
    sql_type: str  # TEXT, REAL, INTEGER
    not_null: bool = False
    default: str | None = None


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


def C(name, sql_type="TEXT", not_null=False, default=None):
    return Column(name, sql_type, not_null, default)


TABLES: dict[str, Table] = {}


def _add(table: Table) -> None:
    TABLES[table.name] = table


_add(Table(
    "units",
    (C("code", not_null=True), C("name", not_null=True), C("rank", "INTEGER", True),
     C("role", not_null=True), C("parent")),
    key=("code",),
    foreign_keys=((("parent",), "units", ("code",)),),
    checks=(_in("role", UNIT_ROLES, nullable=False), "rank >= 1", "parent IS NULL OR parent <> code"),
    description="Hydrostratigraphic units, rank 1 at the top.",
))
_add(Table(
    "wells",
    (C("well_id", not_null=True), C("x", "REAL", True), C("y", "REAL", True),
     C("ground_elev", "REAL", True), C("total_depth", "REAL"), C("kind"), C("name"),
     C("x_input", "REAL"), C("y_input", "REAL"), C("input_crs")),
    key=("well_id",),
    checks=("total_depth IS NULL OR total_depth > 0", _in("kind", WELL_KINDS)),
    geometry="POINT",
    description="Wells; x, y in the store CRS (x_input, y_input, input_crs keep reprojected input).",
))
_add(Table(
    "picks",
    (C("well_id", not_null=True), C("unit", not_null=True),
     C("top_depth", "REAL", True), C("bottom_depth", "REAL", True)),
    key=("well_id", "unit"),
    foreign_keys=((("well_id",), "wells", ("well_id",)), (("unit",), "units", ("code",))),
    checks=("top_depth >= 0", "bottom_depth > top_depth"),
    description="Depth to the top and bottom of a unit in a well.",
))
_add(Table(
    "zones",
    (C("well_id", not_null=True), C("zone_id", not_null=True), C("top_depth", "REAL", True),
     C("bottom_depth", "REAL", True), C("kind"), C("unit")),
    key=("well_id", "zone_id"),
    foreign_keys=((("well_id",), "wells", ("well_id",)), (("unit",), "units", ("code",))),
    checks=("top_depth >= 0", "bottom_depth > top_depth", _in("kind", ZONE_KINDS)),
    description="Monitored intervals; unit is the user's override of the assignment.",
))
_add(Table(
    "ktests",
    (C("well_id", not_null=True), C("zone_id", not_null=True), C("test_id", not_null=True),
     C("tested_on", not_null=True), C("method", not_null=True), C("k", "REAL", True),
     C("k_unit", not_null=True), C("k_ms", "REAL", True), C("quality"), C("source"),
     C("orientation", default="'horizontal'")),
    key=("well_id", "zone_id", "test_id"),
    foreign_keys=((("well_id", "zone_id"), "zones", ("well_id", "zone_id")),),
    checks=("k > 0", "k_ms > 0", _in("method", KTEST_METHODS, nullable=False), _in("quality", QUALITIES),
            _in("orientation", KTEST_ORIENTATIONS)),
    description="Hydraulic-conductivity tests; k and k_unit as given, k_ms in m/s; orientation horizontal "
                "(K along the layers, the default) or vertical (K across them).",
))
_add(Table(
    "heads",
    (C("well_id", not_null=True), C("zone_id", not_null=True), C("measured_at", not_null=True),
     C("head", "REAL", True), C("depth_to_water", "REAL"), C("ref_elev", "REAL"), C("quality")),
    key=("well_id", "zone_id", "measured_at"),
    foreign_keys=((("well_id", "zone_id"), "zones", ("well_id", "zone_id")),),
    checks=(_in("quality", QUALITIES),),
    description="Head readings; head = ref_elev - depth_to_water where those were given.",
))
_add(Table(
    "pumping",
    (C("well_id", not_null=True), C("zone_id", not_null=True, default="''"), C("start", not_null=True),
     C("end"), C("rate", "REAL", True), C("rate_unit", not_null=True), C("rate_m3d", "REAL", True)),
    key=("well_id", "zone_id", "start"),
    foreign_keys=((("well_id",), "wells", ("well_id",)),),
    checks=("rate >= 0", "\"end\" IS NULL OR \"end\" >= start"),
    description="Pumping records; zone_id '' means the whole well; rate_m3d in m3/d.",
))
_add(Table(
    "springs",
    (C("spring_id", not_null=True), C("x", "REAL", True), C("y", "REAL", True), C("elev", "REAL", True),
     C("name"), C("unit"), C("x_input", "REAL"), C("y_input", "REAL"), C("input_crs")),
    key=("spring_id",),
    foreign_keys=((("unit",), "units", ("code",)),),
    geometry="POINT",
    description="Springs; unit is the unit the spring issues from (its elevation is then a head of that unit).",
))
_add(Table(
    "discharge",
    (C("spring_id", not_null=True), C("measured_at", not_null=True), C("discharge", "REAL", True),
     C("rate_unit", not_null=True), C("discharge_m3d", "REAL", True)),
    key=("spring_id", "measured_at"),
    foreign_keys=((("spring_id",), "springs", ("spring_id",)),),
    checks=("discharge >= 0",),
    description="Spring discharge readings.",
))
_add(Table(
    "areas",
    (C("area_id", not_null=True), C("kind", not_null=True), C("unit")),
    key=("area_id",),
    foreign_keys=((("unit",), "units", ("code",)),),
    checks=(_in("kind", AREA_KINDS, nullable=False),),
    geometry="MULTIPOLYGON",
    description="Recharge, model-domain and no-flow polygons.",
))
_add(Table(
    "slug_records",
    (C("well_id", not_null=True), C("zone_id", not_null=True), C("test_id", not_null=True),
     C("t_s", "REAL", True), C("displacement", "REAL", True)),
    key=("well_id", "zone_id", "test_id", "t_s"),
    foreign_keys=((("well_id", "zone_id"), "zones", ("well_id", "zone_id")),),
    checks=("t_s >= 0",),
    description="Raw slug-test displacement records.",
))
_add(Table(
    "slug_geometry",
    (C("well_id", not_null=True), C("zone_id", not_null=True), C("test_id", not_null=True),
     C("casing_radius", "REAL", True), C("well_radius", "REAL", True), C("screen_length", "REAL", True),
     C("aquifer_thickness", "REAL"), C("static_depth", "REAL"), C("tested_on")),
    key=("well_id", "zone_id", "test_id"),
    foreign_keys=((("well_id", "zone_id"), "zones", ("well_id", "zone_id")),),
    checks=("casing_radius > 0", "well_radius > 0", "screen_length > 0"),
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

FEATURE_TABLES = tuple(t for t, spec in TABLES.items() if spec.geometry)
