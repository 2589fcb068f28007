"""One selection layer over a store: each table read once, the selection policy applied in one place.

A :class:`Study` is what one computation sees of a store. It reads each table the first time it is asked for
and keeps it; it computes the inferred unit picks, the zone-to-unit assignment and each unit's presence at the
wells once; and it applies the selection policy (:class:`~hydroatlas.selection.SelectionPolicy`: quality,
pumping wells, excluded wells, windows; retired records never leave the store) through the functions of
:mod:`hydroatlas.selection`, keeping what each selection left out. Workflows take a store or a Study and hand
the numeric core the plain frames and arrays a Study gives::

    study = Study(store, SelectionPolicy(include_poor=True))
    heads = study.heads(window="2024-03-01/2024-03-31")  # one head per zone, with its unit and elevations
    tests = study.ktests()                                # K tests that pass the policy, with their zone's unit
    study.left_out                                        # what those selections left out, and why

A Study reads and never writes. It is a snapshot: it does not see what is written to the store after it read
a table, so make a new one after an import. Frames it hands out are copies; changing them changes nothing
in the Study.

A Study also answers :meth:`read` and :meth:`read_geometries` like a store, from its cache for the tables that
input files fill (:data:`CACHED_TABLES`) and straight from the store for the others (products, history); any
other attribute (``settings``, ``location``, ``transaction`` ...) is the store's. So a function written for a
store reads through the cache when it is given a Study.
"""

from __future__ import annotations

import pandas as pd

from . import assign, selection
from .errors import ParameterError
from .selection import DEFAULT_TOLERANCE_DAYS, SelectionPolicy


def as_window(window):
    """``window`` as a :class:`~hydroatlas.heads.TimeWindow` (None stays None; a text 'FROM/TO' is parsed)."""
    from .heads import TimeWindow

    if window is None or isinstance(window, TimeWindow):
        return window
    return TimeWindow.parse(window)


def metres_per_length_unit(settings) -> float:
    """Metres per unit of the length unit of a store's ``settings`` (depths, elevations, heads)."""
    from .quantities import LENGTH_UNITS

    return LENGTH_UNITS[settings.length_unit]


def metres_per_crs_unit(settings) -> float:
    """Metres per unit of x and y in the CRS of a store's ``settings``; ParameterError for a geographic CRS."""
    crs = settings.crs
    if not crs.is_projected:
        raise ParameterError("surfaces, gradients and distances need a projected store CRS; this store uses "
                             f"{crs.name} (geographic). Create the store with a projected CRS (e.g. a UTM zone)")
    return float(crs.axis_info[0].unit_conversion_factor)


def _input_tables() -> frozenset:
    from .store.columns import INPUTS

    return frozenset(k.table for k in INPUTS.values())


#: the tables a Study reads once and keeps: those that input files fill
CACHED_TABLES = _input_tables()


class _Cache:
    """What a Study keeps that does not depend on the selection policy (shared by :meth:`Study.with_policy`)."""

    def __init__(self, store):
        self.store = store
        self.frames: dict = {}
        self.derived: dict = {}

    def table(self, name: str, columns, include_retired: bool) -> pd.DataFrame:
        from .store.schema import TABLES

        spec = TABLES.get(name)
        if spec is None or name not in CACHED_TABLES:  # the store's own answer (or error), never kept
            kw = {"include_retired": True} if include_retired else {}
            return self.store.read(name, columns, **kw)
        own = [c.name for c in spec.columns]
        want = list(columns) if columns is not None else list(spec.column_names)
        for part in ("own", "all"):
            frame = self.frames.get((name, include_retired, part))
            if frame is not None and set(want) <= set(frame.columns):
                return frame[want]
        # the table's own columns serve every computation; provenance columns (attrs, source_file, ...)
        # are read with the rest only when somebody asks for them
        part, cols = ("own", own) if set(want) <= set(own) else \
            ("all", list(spec.column_names) + [c for c in want if c not in spec.column_names])
        kw = {"include_retired": True} if include_retired else {}
        frame = self.store.read(name, cols, **kw)
        self.frames[(name, include_retired, part)] = frame
        return frame[want]

    def once(self, key, make):
        if key not in self.derived:
            self.derived[key] = make()
        return self.derived[key]


class Study:
    """The records of a store that a computation uses, read once, with the selection policy applied.

    Parameters
    ----------
    store : Store
        An open store (:func:`hydroatlas.open_store`).
    policy : SelectionPolicy, optional
        Which K tests and head readings count (None: the default policy). Its excluded well ids are checked
        against the store here (ParameterError for an unknown id).

    Attributes
    ----------
    store : Store
        The store read.
    policy : SelectionPolicy
        The policy applied by every selection of this Study.
    """

    def __init__(self, store, policy: SelectionPolicy | None = None, *, _cache: _Cache | None = None):
        if isinstance(store, Study):
            raise ParameterError("store= is a Study already; use Study.of(study, policy) or study.with_policy(...)",
                                 param="store")
        self.store = store
        self._cache = _Cache(store) if _cache is None else _cache
        self.policy = selection.resolve(self, policy)
        self._selections: dict = {}
        self._left_out: list[dict] = []

    @classmethod
    def of(cls, store, policy: SelectionPolicy | None = None) -> "Study":
        """A Study of ``store``: ``store`` itself when it is a Study and ``policy`` is None or its policy; the
        same Study under ``policy`` (:meth:`with_policy`) when that differs; else a new Study."""
        if isinstance(store, Study):
            if policy is None or policy == store.policy:
                return store
            return store.with_policy(policy)
        return cls(store, policy)

    def with_policy(self, policy: SelectionPolicy | None) -> "Study":
        """A Study under another policy that shares this one's tables, assignment and picks (read once)."""
        return Study(self.store, policy, _cache=self._cache)

    def __repr__(self) -> str:
        return f"Study({self.location!r}, {self.policy!r})"

    def __getattr__(self, name):
        # anything a Study does not define is the store's (settings, transaction, retired, ...)
        if name.startswith("_") or name == "store":
            raise AttributeError(name)
        return getattr(self.store, name)

    # -- the store's face ----------------------------------------------------------------
    @property
    def settings(self):
        """The store's settings (CRS, length unit, vertical datum)."""
        return self.store.settings

    @property
    def location(self) -> str:
        return self.store.location

    def read(self, table: str, columns: list[str] | None = None, *, include_retired: bool = False) -> pd.DataFrame:
        """Rows of ``table`` as :meth:`Store.read` gives them (a copy), read from the store once."""
        return self._cache.table(table, columns, bool(include_retired))

    def read_geometries(self, table: str):
        """A GeoDataFrame of a feature table (a copy), read from the store once."""
        return self._cache.once(("geometries", table), lambda: self.store.read_geometries(table)).copy()

    # -- tables ----------------------------------------------------------------------------
    @property
    def units(self) -> pd.DataFrame:
        """Hydrostratigraphic units: code, name, rank (1 = top), role, parent."""
        return self.read("units", _own("units"))

    @property
    def wells(self) -> pd.DataFrame:
        """Wells: well_id, x, y (store CRS), ground_elev, total_depth (store length unit), kind, name, ..."""
        return self.read("wells", _own("wells"))

    @property
    def picks(self) -> pd.DataFrame:
        """Unit picks as stored: well_id, unit, top_depth, bottom_depth (store length unit, positive down)."""
        return self.read("picks", _own("picks"))

    @property
    def zones(self) -> pd.DataFrame:
        """Zones (monitored intervals): well_id, zone_id, top_depth, bottom_depth, kind, unit (override)."""
        return self.read("zones", _own("zones"))

    @property
    def pumping(self) -> pd.DataFrame:
        """Pumping records: well_id, zone_id ('' = whole well), start, end, rate, rate_unit, rate_m3d (m3/d)."""
        return self.read("pumping", _own("pumping"))

    @property
    def springs(self) -> pd.DataFrame:
        """Springs: spring_id, x, y (store CRS), elev (store length unit), name, unit."""
        return self.read("springs", _own("springs"))

    @property
    def discharge(self) -> pd.DataFrame:
        """Spring discharge readings: spring_id, measured_at, discharge, rate_unit, discharge_m3d (m3/d)."""
        return self.read("discharge", _own("discharge"))

    @property
    def areas(self):
        """Area polygons (GeoDataFrame in the store CRS): area_id, kind, unit, geometry."""
        return self.read_geometries("areas")

    # -- derived once ----------------------------------------------------------------------
    @property
    def inferred_picks(self) -> pd.DataFrame:
        """Unit tops and bottoms inferred at wells without picks (:func:`hydroatlas.assign.infer_picks`)."""
        return self._once("inferred_picks", lambda: assign.infer_picks(self.wells, self.picks, self.units))

    @property
    def assignment(self) -> pd.DataFrame:
        """Every zone with its unit, overlap fraction and flags (:func:`hydroatlas.assign.assign_zones`)."""
        return self._once("assignment", lambda: assign.assign_zones(
            self.zones, self.picks, self.wells, self.units, inferred=self._derived("inferred_picks")))

    @property
    def unit_intervals(self) -> pd.DataFrame:
        """Elevation interval of every unit at every well, picked or inferred
        (:func:`hydroatlas.assign.unit_intervals`): well_id, unit, top_elev, bottom_elev."""
        return self._once("unit_intervals", lambda: assign.unit_intervals(
            self.wells, self.picks, self.units, inferred=self._derived("inferred_picks")))

    def unit_members(self, code: str) -> set[str]:
        """The unit ``code`` and its sub-units; ParameterError naming the known units when it is not stored."""
        return set(self._once(("members", code), lambda: assign.unit_members(self._derived("units"), code),
                              copy=False))

    def presence(self, code: str) -> pd.DataFrame:
        """Presence of unit ``code`` at every well from the picks (:func:`hydroatlas.assign.unit_presence`)."""
        self.unit_members(code)
        return self._once(("presence", code), lambda: assign.unit_presence(
            self.picks, self.read("wells", ["well_id", "x", "y"]), self.units, code))

    def domain(self, unit: str):
        """The domain polygons that apply to ``unit`` (those naming it, else those naming no unit), or None."""
        areas = self._once("areas", lambda: self.areas, copy=False)
        if areas.empty:
            return None
        dom = areas[areas["kind"] == "domain"]
        own = dom[dom["unit"] == unit]
        dom = own if not own.empty else dom[dom["unit"].isna()]
        return dom.copy() if not dom.empty else None

    @property
    def length_to_m(self) -> float:
        """Metres per unit of the store's length unit."""
        return metres_per_length_unit(self.settings)

    @property
    def crs_to_m(self) -> float:
        """Metres per unit of the store CRS's x and y; ParameterError for a geographic CRS (no distances)."""
        return metres_per_crs_unit(self.settings)

    # -- selections (the policy) -----------------------------------------------------------
    def select_heads(self, *, window=None, at: str | None = None,
                     tolerance_days: float = DEFAULT_TOLERANCE_DAYS) -> tuple[pd.DataFrame, list[dict]]:
        """One head per zone from the readings that pass the policy, and what was left out.

        See :func:`hydroatlas.selection.select_heads` for ``window``, ``at`` and ``tolerance_days`` and for
        the columns (head in the store's length unit; the zone's unit, elevations and x, y).
        """
        window = as_window(window)
        key = ("heads", None if window is None else (window.start, window.end), at,
               float(tolerance_days) if at is not None else None)
        return self._select(key, lambda: selection.select_heads(
            self, self.policy, window=window, at=at, tolerance_days=tolerance_days,
            assignment=self._derived("assignment")))

    def heads(self, *, window=None, at: str | None = None,
              tolerance_days: float = DEFAULT_TOLERANCE_DAYS) -> pd.DataFrame:
        """The frame of :meth:`select_heads` (what it left out goes to :attr:`left_out`)."""
        return self.select_heads(window=window, at=at, tolerance_days=tolerance_days)[0]

    def select_readings(self, *, window=None) -> tuple[pd.DataFrame, list[dict]]:
        """Every head reading that passes the policy (:func:`hydroatlas.selection.select_readings`)."""
        window = as_window(window)
        key = ("readings", None if window is None else (window.start, window.end))
        return self._select(key, lambda: selection.select_readings(self, self.policy, window=window))

    def select_ktests(self) -> tuple[pd.DataFrame, list[dict]]:
        """K tests that pass the policy with their zone's unit, and what was left out
        (:func:`hydroatlas.selection.select_ktests`; k_ms in m/s)."""
        return self._select(("ktests",), lambda: selection.select_ktests(
            self, self.policy, self._derived("assignment")))

    def ktests(self) -> pd.DataFrame:
        """The frame of :meth:`select_ktests` (what it left out goes to :attr:`left_out`)."""
        return self.select_ktests()[0]

    @property
    def left_out(self) -> list[dict]:
        """What the selections made so far left out, in the order they were made (each entry once)."""
        return [dict(e) for e in self._left_out]

    def selection_record(self, left_out: list[dict] | None = None) -> dict:
        """The ``"selection"`` entry of an output sidecar: the policy and ``left_out`` (default: :attr:`left_out`)."""
        return selection.selection_record(self.policy, self.left_out if left_out is None else left_out)

    # -- internals -------------------------------------------------------------------------
    def _derived(self, name: str):
        """A cached frame without copying it (for use inside this class, read only)."""
        if name == "units":
            return self._cache.once("units", lambda: self.read("units", _own("units")))
        getattr(self, name)  # computes it once
        return self._cache.derived[name]

    def _once(self, key, make, *, copy: bool = True):
        value = self._cache.once(key, make)
        return value.copy() if copy and hasattr(value, "copy") else value

    def _select(self, key, make) -> tuple[pd.DataFrame, list[dict]]:
        if key not in self._selections:
            frame, left = make()
            self._selections[key] = (frame, left)
            seen = {_entry_key(e) for e in self._left_out}
            for e in left:
                if _entry_key(e) not in seen:
                    seen.add(_entry_key(e))
                    self._left_out.append(e)
        frame, left = self._selections[key]
        return frame.copy(), [dict(e) for e in left]


def _own(table: str) -> list[str]:
    from .store.schema import TABLES

    return [c.name for c in TABLES[table].columns]


def _entry_key(entry: dict) -> tuple:
    return tuple(sorted((k, str(v)) for k, v in entry.items()))
