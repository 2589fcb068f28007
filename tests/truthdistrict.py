"""An independent test district with a known truth (not the demo region).

:func:`make_district` writes the CSV files (units, wells, picks, zones, ktests,
heads, pumping, springs, discharge) and a GeoJSON of areas (domain and
recharge) of an invented district into a folder, and returns a frozen
:class:`Truth` that holds everything the files were drawn from: the unit
geometry, the regional head of each unit as a function of place and time, the
geometric-mean K of each unit, the pumping wells, the drought and the spring.
Tests compare what hydroatlas computes from the files with that truth.

Everything here is invented: unit codes UA..UF, well ids, the spring. The
district lies in a projected CRS in US survey feet (State Plane, EPSG:3435);
its coordinates come from a longitude/latitude box inside that CRS's area of
use, transformed with pyproj, so that imports pass the strict area-of-use
check.

The design, in the district's own terms (a feet district; a metre district
scales every length and K by 0.3048):

- six units, top first: UA cover silt (other), UB upper sand (aquifer, present
  only east of a line: its picks are there, and elsewhere the UA bottom pick
  touches the UC top pick), UC clay (confining), UD limestone (aquifer, the main
  one, with the pumping wells), UE shale (aquitard, tight), UF sandstone
  (aquifer);
- every unit is a smooth thickness field (planes and a gentle bump of the
  ground), so :meth:`Truth.thickness` gives the full-penetration thickness
  anywhere;
- the regional head of UB, UD, UE and UF is a plane (UB: half-saturated upper
  sand) plus a seasonal term and a drought: heads fall by ``drought_drop``
  across the drought window and recover over the following eight months;
- pumping and supply wells in UD: their level readings sit ``level_offset``
  (cone plus well loss, 31-67 ft) below the regional head while their pumping
  record is active; one supply well stopped decades before the head record
  (1 gpm record); no other well lies within ``cone_radius`` of an active
  pumping well, so every other reading holds the regional head plus reading
  noise (``reading_noise`` standard deviation) only;
- a few poor-quality readings, far off (15-40 ft), and poor-quality K tests
  (a factor 10**2.5 off) in the aquifers UB, UD and UF;
- K tests lognormal around each unit's true geometric mean (standard deviation
  of log10 K in ``k_log10_sd``); packer tests in the shale;
- spring SP-1 issues from UD one foot below the regional head there; its
  discharge responds to the UD head, Q = Q0 exp((h - h_regional) / 6 ft); with
  ``cease_flow_depth`` (a keyword of :func:`make_district`) it follows a power law
  with a cease-flow head instead, Q = Q0 ((h - h0) / depth)^n, h0 = h_regional - depth,
  zero below h0 (:meth:`Truth.spring_cease_flow_head` gives h0 as a head of any UD zone).
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Callable, Mapping

import numpy as np
import pandas as pd
import shapely
from pyproj import CRS, Transformer

DEFAULT_CRS = "EPSG:3435"
#: a lon/lat box well inside the area of use of EPSG:3435 (west, south, east, north), degrees
LONLAT_BOX = (-88.42, 39.98, -88.30, 40.06)
#: district size in CRS units (US survey feet)
WIDTH, HEIGHT = 20_000.0, 15_000.0
FT_M = 0.3048
#: one US gallon is 231 cubic inches (exact), so 1 gpd/ft2 = 231/1728 ft/d
GPD_FT2_IN_FT_D = 231.0 / 1728.0
#: 1 gpm in ft3/s (231 in3 per gallon, 60 s per minute)
GPM_IN_CFS = 231.0 / 1728.0 / 60.0

UNITS = (  # code, name, rank, role
    ("UA", "Cover silt", 1, "other"),
    ("UB", "Upper sand", 2, "aquifer"),
    ("UC", "Clay bed", 3, "confining"),
    ("UD", "Limestone", 4, "aquifer"),
    ("UE", "Shale", 5, "aquitard"),
    ("UF", "Sandstone", 6, "aquifer"),
)
#: true geometric-mean K (ft/d) and standard deviation of log10 K of each unit
K_GEOMEAN_FT_D = {"UA": 0.5, "UB": 20.0, "UC": 0.02, "UD": 60.0, "UE": 0.004, "UF": 6.0}
K_LOG10_SD = {"UA": 0.5, "UB": 0.35, "UC": 0.5, "UD": 0.5, "UE": 0.4, "UF": 0.3}
HEAD_UNITS = ("UB", "UD", "UE", "UF")
#: how strongly each unit's head follows the seasonal and drought terms
TIME_FACTOR = {"UB": 1.3, "UD": 1.0, "UE": 0.8, "UF": 0.6}

RECORD_START = pd.Timestamp("2019-01-01")
SEASON_AMPLITUDE_FT = 1.5
DROUGHT_DROP_FT = 9.0
DROUGHT_WINDOW = "2022-06-01/2022-12-31"
DROUGHT_RECOVERED = pd.Timestamp("2023-08-31")
NORMAL_WINDOW = "2021-03-01/2021-05-31"
READING_NOISE_FT = 0.2
CONE_RADIUS_FT = 1500.0
EDGE_CLEARANCE_FT = 250.0  # no well this close to the partial unit's edge


@dataclass(frozen=True)
class PumpingWell:
    """A pumping or supply well of the truth district (all in UD)."""

    well_id: str
    zone_id: str
    kind: str
    unit: str
    x: float
    y: float
    rate_gpm: float
    start: str
    end: str | None
    level_offset: float  # in the store's length unit: how far its readings sit below the regional head when active

    def active(self, when) -> np.ndarray:
        """Whether the pumping record is active at ``when`` (one or many instants)."""
        t = pd.to_datetime(pd.Series(np.atleast_1d(when)))
        on = t >= pd.Timestamp(self.start)
        if self.end is not None:
            on &= t <= pd.Timestamp(self.end)
        return on.to_numpy()


@dataclass(frozen=True)
class Truth:
    """What the district's files were drawn from. Lengths in ``length_unit``, K in ``length_unit``/d,
    coordinates in the CRS (US survey feet)."""

    folder: Path
    seed: int
    crs: str
    length_unit: str
    files: Mapping[str, Path]
    import_order: tuple[str, ...]
    units: tuple[str, ...]
    roles: Mapping[str, str]
    unit_names: Mapping[str, str]
    partial_unit: str
    partial_extent: shapely.Polygon
    k_geomean: Mapping[str, float]
    k_unit: str
    k_log10_sd: Mapping[str, float]
    ground: Callable
    top: Callable
    bottom: Callable
    thickness: Callable
    head: Callable
    regional_head: Callable
    head_units: tuple[str, ...]
    drought_window: str
    normal_window: str
    drought_drop: Mapping[str, float]
    reading_dates: tuple[str, ...]
    reading_noise: float
    pumping_wells: tuple[PumpingWell, ...]
    cone_radius: float
    monitored_zones: Mapping[str, tuple[tuple[str, str], ...]]
    well_xy: Mapping[str, tuple[float, float]]
    well_kind: Mapping[str, str]
    full_penetrations: Mapping[str, tuple[str, ...]]
    partial_penetrations: Mapping[str, tuple[str, ...]]
    poor_readings: tuple[tuple[str, str, str], ...]
    spring_id: str
    spring_unit: str
    spring_xy: tuple[float, float]
    spring_elev: float
    discharge_unit: str
    domain: shapely.Polygon
    recharge: shapely.Polygon
    recharge_id: str
    spring_cease_flow_depth: float | None = None
    spring_exponent: float | None = None

    def spring_cease_flow_head(self, x, y) -> np.ndarray:
        """The cease-flow head of the spring as a head of the UD zone at (x, y) (store length unit): the UD head
        there when the spring's own head is at its cease-flow level (the time terms are the same across UD).
        Only with ``cease_flow_depth``."""
        if self.spring_cease_flow_depth is None:
            raise ValueError("the district was made without cease_flow_depth: its spring has no cease-flow head")
        return self.regional_head("UD", x, y) - self.spring_cease_flow_depth

    @property
    def length_factor(self) -> float:
        """Store length units per foot."""
        return 1.0 if self.length_unit == "ft" else FT_M

    def head_in_window(self, unit: str, x, y, window: str) -> np.ndarray:
        """Median over the reading dates inside ``window`` of the true regional head (what a window median of
        noise-free readings gives)."""
        start, end = (pd.Timestamp(s) for s in window.split("/"))
        end = end + pd.Timedelta(days=1)
        dates = [d for d in self.reading_dates if start <= pd.Timestamp(d) < end]
        if not dates:
            raise ValueError(f"no reading date inside {window}")
        return np.median(np.stack([self.head(unit, x, y, d) for d in dates]), axis=0)


# -- the fields ---------------------------------------------------------------------
class _Fields:
    """Unit geometry and heads in feet over local coordinates u = (x - x0) / WIDTH, v = (y - y0) / HEIGHT."""

    def __init__(self, x0: float, y0: float):
        self.x0, self.y0 = x0, y0
        # the partial unit UB is present where u > edge_u0 + edge_du * v
        self.edge_u0, self.edge_du = 0.55, 0.10

    def uv(self, x, y):
        return (np.asarray(x, float) - self.x0) / WIDTH, (np.asarray(y, float) - self.y0) / HEIGHT

    def ground(self, x, y):
        u, v = self.uv(x, y)
        return 980.0 - 30.0 * u + 12.0 * v + 8.0 * np.sin(np.pi * u) * np.sin(np.pi * v)

    def edge_u(self, v):
        return self.edge_u0 + self.edge_du * v

    def thickness(self, unit, x, y):
        u, v = self.uv(x, y)
        u, v = np.broadcast_arrays(u, v)
        if unit == "UA":
            return 12.0 + 6.0 * v
        if unit == "UB":
            e = self.edge_u(v)
            return np.where(u > e, 12.0 + 28.0 * (u - e) / (1.0 - e), 0.0)
        if unit == "UC":
            return 18.0 + 6.0 * u
        if unit == "UD":
            return 70.0 + 25.0 * u + 0.0 * v
        if unit == "UE":
            return 22.0 + 4.0 * v
        if unit == "UF":
            return 110.0 - 20.0 * v + 0.0 * u
        raise KeyError(f"unknown unit {unit!r}")

    def top(self, unit, x, y):
        codes = [c for c, *_ in UNITS]
        z = self.ground(x, y)
        for c in codes[:codes.index(unit)]:
            z = z - self.thickness(c, x, y)
        return z

    def bottom(self, unit, x, y):
        return self.top(unit, x, y) - self.thickness(unit, x, y)

    def regional_head(self, unit, x, y):
        """Head without the time terms (ft)."""
        xl = np.asarray(x, float) - self.x0
        yl = np.asarray(y, float) - self.y0
        h_d = 962.0 - 0.00175 * xl - 0.0004 * yl
        h_f = h_d - 28.0 - 0.0003 * xl
        if unit == "UD":
            return h_d
        if unit == "UF":
            return h_f
        if unit == "UE":  # the middle of the shale: halfway between the aquifers above and below
            return 0.5 * (h_d + h_f)
        if unit == "UB":  # upper sand 60 % saturated above its base; undefined where the unit is absent
            b = self.thickness("UB", x, y)
            return np.where(b > 0, self.bottom("UB", x, y) + 0.6 * b, np.nan)
        raise KeyError(f"unit {unit!r} has no head field in the truth district (heads exist for "
                       f"{', '.join(HEAD_UNITS)})")


def _days(when) -> np.ndarray:
    t = pd.to_datetime(pd.Series(np.atleast_1d(when)))
    return ((t - RECORD_START) / pd.Timedelta(days=1)).to_numpy(float)


def _time_term(when) -> np.ndarray:
    """Seasonal plus drought term (ft) of a unit with factor 1."""
    d = _days(when)
    seasonal = SEASON_AMPLITUDE_FT * np.sin(2.0 * np.pi * (d - 79.0) / 365.25)
    ds, de = (float(_days(s)[0]) for s in DROUGHT_WINDOW.split("/"))
    dr = float(_days(DROUGHT_RECOVERED)[0])
    drought = np.select([d < ds, d <= de, d <= dr],
                        [0.0, -DROUGHT_DROP_FT * (d - ds) / (de - ds), -DROUGHT_DROP_FT * (1.0 - (d - de) / (dr - de))],
                        default=0.0)
    return seasonal + drought


# -- the generator ------------------------------------------------------------------
def district_origin(crs: str = DEFAULT_CRS) -> tuple[float, float]:
    """Lower-left corner of the district: the lon/lat box transformed to ``crs``, the district inside it."""
    crs_obj = CRS.from_user_input(crs)
    aou = crs_obj.area_of_use
    west, south, east, north = LONLAT_BOX
    if aou is not None and not (aou.west < west < east < aou.east and aou.south < south < north < aou.north):
        raise ValueError(f"the lon/lat box {LONLAT_BOX} is not inside the area of use of {crs}")
    tr = Transformer.from_crs("EPSG:4326", crs_obj, always_xy=True)
    lon = np.array([west, east, east, west])
    lat = np.array([south, south, north, north])
    bx, by = tr.transform(lon, lat)
    xmin, xmax = max(bx[0], bx[3]), min(bx[1], bx[2])
    ymin, ymax = max(by[0], by[1]), min(by[2], by[3])
    if xmax - xmin < WIDTH or ymax - ymin < HEIGHT:
        raise ValueError(f"the lon/lat box is too small for a {WIDTH:g} x {HEIGHT:g} district in {crs}")
    x0 = math.ceil((xmin + 0.5 * (xmax - xmin - WIDTH)) / 100.0) * 100.0
    y0 = math.ceil((ymin + 0.5 * (ymax - ymin - HEIGHT)) / 100.0) * 100.0
    return x0, y0


def _write(path: Path, header: list[str], rows: list[list]) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)
    return path


def _num(v: float, nd: int = 3) -> str:
    return f"{v:.{nd}f}"


def make_district(folder, *, seed: int = 20240610, length_unit: str = "ft", crs: str = DEFAULT_CRS,
                  discharge_unit: str = "gpm", cease_flow_depth: float | None = None,
                  spring_exponent: float = 1.5) -> Truth:
    """Write the truth district's files into ``folder`` and return its :class:`Truth`.

    Parameters
    ----------
    folder : path-like
        Created if missing.
    seed : int
        Seed of every random draw (positions, K tests, reading noise).
    length_unit : {"ft", "m"}
        Store length unit: depths, elevations and heads are written in it, K in it per day.
        Coordinates stay in the CRS's unit.
    crs : str
        A projected CRS in US survey feet whose area of use holds :data:`LONLAT_BOX`.
    discharge_unit : {"gpm", "cfs"}
        Unit of the spring discharge file.
    cease_flow_depth : float, optional
        Feet. When given, the spring's discharge is Q0 ((h - h0) / depth)^n with h0 = h_regional - depth (zero
        below h0; n = ``spring_exponent``) instead of the default exponential response; the same Q0 = 1.8 cfs at
        the regional head.
    spring_exponent : float
        The exponent n of that power law.
    """
    if length_unit not in ("ft", "m"):
        raise ValueError(f"length_unit must be 'ft' or 'm'; got {length_unit!r}")
    if discharge_unit not in ("gpm", "cfs"):
        raise ValueError(f"discharge_unit must be 'gpm' or 'cfs'; got {discharge_unit!r}")
    crs_obj = CRS.from_user_input(crs)
    if "US survey foot" not in crs_obj.axis_info[0].unit_name:
        raise ValueError(f"{crs} is not in US survey feet")
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    L = 1.0 if length_unit == "ft" else FT_M  # store length units per foot
    x0, y0 = district_origin(crs)
    f = _Fields(x0, y0)
    codes = [c for c, *_ in UNITS]

    def at(u, v):
        return x0 + u * WIDTH, y0 + v * HEIGHT

    # -- pumping wells (UD), the spring and the recharge area: fixed places ----------
    pumping_plan = [  # id, kind, (u, v), rate gpm, start, end, level offset ft
        ("PW-1", "supply", (0.35, 0.70), 350.0, "2019-01-01", None, 31.0),
        ("PW-2", "pumping", (0.60, 0.25), 500.0, "2020-07-01", None, 67.0),
        ("PW-3", "supply", (0.22, 0.52), 200.0, "2019-01-01", "2021-06-30", 45.0),
        ("PW-4", "supply", (0.60, 0.374), 1.0, "1988-04-01", "1991-09-30", 20.0),
    ]
    spring_xy = at(0.85, 0.45)
    recharge_c = at(0.15, 0.2367)
    recharge = shapely.box(recharge_c[0] - 1200.0, recharge_c[1] - 1200.0, recharge_c[0] + 1200.0,
                           recharge_c[1] + 1200.0)
    domain = shapely.box(x0, y0, x0 + WIDTH, y0 + HEIGHT)
    e0, e1 = f.edge_u(0.0), f.edge_u(1.0)
    partial_extent = shapely.Polygon([at(e0, 0.0), at(1.0, 0.0), at(1.0, 1.0), at(e1, 1.0)])
    active_xy = np.array([at(*uv) for _, _, uv, _, _, end, _ in pumping_plan if end is None or end >= "2019"])

    # -- other wells: random places with clearances ----------------------------------
    plan = ([("MZ", "multizone", "east")] * 5 + [("MZ", "multizone", "west")] * 3
            + [("UB", "monitoring", "east")] * 6 + [("UF", "monitoring", "any")] * 4
            + [("UD", "monitoring", "any")] * 30)
    placed = [at(*uv) for _, _, uv, *_ in pumping_plan]
    sites = []
    for group, kind, side in plan:
        for _ in range(20_000):
            u, v = rng.uniform(0.03, 0.97), rng.uniform(0.04, 0.96)
            x, y = at(u, v)
            dist_edge = abs(u - f.edge_u(v)) * WIDTH
            inside = u > f.edge_u(v)
            if side == "east" and not (inside and dist_edge > 800.0):
                continue
            if side == "west" and inside:
                continue
            if dist_edge < EDGE_CLEARANCE_FT:
                continue
            if np.min(np.hypot(active_xy[:, 0] - x, active_xy[:, 1] - y)) < CONE_RADIUS_FT:
                continue
            if placed and np.min(np.hypot(np.array(placed)[:, 0] - x, np.array(placed)[:, 1] - y)) < 700.0:
                continue
            break
        else:  # pragma: no cover - the district has room for every well
            raise RuntimeError("could not place a well; loosen the clearances")
        placed.append((x, y))
        sites.append((group, kind, x, y))

    counters: dict[str, int] = {}
    wells, picks, zones = [], [], []
    zone_unit: dict[tuple[str, str], str] = {}
    zone_kind: dict[tuple[str, str], str] = {}
    stickup: dict[str, float] = {}
    full_pen: dict[str, list[str]] = {c: [] for c in codes}
    part_pen: dict[str, list[str]] = {c: [] for c in codes}

    def column(x, y):
        """Depths (ft) of the top and bottom of each unit present at (x, y)."""
        g = float(f.ground(x, y))
        out = {}
        for c in codes:
            b = float(f.thickness(c, x, y))
            if b > 0:
                out[c] = (g - float(f.top(c, x, y)), g - float(f.top(c, x, y)) + b)
        return g, out

    def add_well(wid, kind, x, y, total_depth, zone_list):
        g, col = column(x, y)
        wells.append([wid, _num(x, 1), _num(y, 1), _num(g * L), _num(total_depth * L), kind, ""])
        stickup[wid] = float(rng.uniform(1.0, 3.0))
        for c in codes:
            if c not in col:
                continue
            top, bot = col[c]
            if top >= total_depth:
                break
            if bot <= total_depth:
                full_pen[c].append(wid)
            else:
                part_pen[c].append(wid)
            picks.append([wid, c, _num(top * L), _num(min(bot, total_depth) * L)])
        for zid, c, zkind, (ztop, zbot) in zone_list:
            top, bot = col[c]
            assert top < ztop < zbot < min(bot, total_depth) + 1e-9, (wid, zid, c)
            zones.append([wid, zid, _num(ztop * L), _num(zbot * L), zkind, ""])
            zone_unit[(wid, zid)] = c
            zone_kind[(wid, zid)] = zkind

    def inside(col, c, length, where=0.5, stop=None):
        """A zone of ``length`` ft centred at fraction ``where`` of unit c (above ``stop``), 2 ft clear of its
        edges."""
        top, bot = col[c]
        bot = min(bot, stop) if stop is not None else bot
        length = min(length, bot - top - 4.0)
        mid = top + 2.0 + length / 2 + where * (bot - top - 4.0 - length)
        return (round(mid - length / 2, 2), round(mid + length / 2, 2))

    pumping_wells = []
    for wid, kind, uv, q, start, end, offset in pumping_plan:
        x, y = at(*uv)
        g, col = column(x, y)
        td = col["UD"][0] + 0.85 * (col["UD"][1] - col["UD"][0])  # stops inside the limestone
        ztop = round(col["UD"][0] + 2.0, 2)
        add_well(wid, kind, x, y, td, [("OH1", "UD", "open_hole", (ztop, round(td - 0.5, 2)))])
        pumping_wells.append(PumpingWell(wid, "OH1", kind, "UD", x, y, q, start, end, offset * L))

    for group, kind, x, y in sites:
        counters[group] = counters.get(group, 0) + 1
        wid = f"{group}-{counters[group]:02d}"
        g, col = column(x, y)
        if group == "MZ":
            n = counters[group]
            deep = n in (1, 6)  # these two go through the sandstone
            td = col["UF"][1] + 15.0 if deep else col["UF"][0] + rng.uniform(0.5, 0.8) * (col["UF"][1] - col["UF"][0])
            zl = []
            if "UB" in col:
                zl.append(("P1", "UB", "screen", inside(col, "UB", 8.0)))
            zl.append(("P2", "UD", "port", inside(col, "UD", 10.0, rng.uniform(0.3, 0.7))))
            if n not in (3, 5):  # MZ-03 and MZ-05 have no shale zone: their UD-UF pair spans the aquitard
                zl.append(("P3", "UE", "packer", inside(col, "UE", 6.0)))
            zl.append(("P4", "UF", "port", inside(col, "UF", 10.0, 0.4, stop=td)))
            add_well(wid, kind, x, y, td, zl)
        elif group == "UB":
            td = col["UC"][0] + 5.0
            add_well(wid, kind, x, y, td, [("S1", "UB", "screen", inside(col, "UB", 8.0))])
        elif group == "UF":
            td = col["UF"][0] + rng.uniform(0.4, 0.7) * (col["UF"][1] - col["UF"][0])
            add_well(wid, kind, x, y, td, [("S1", "UF", "screen", inside(col, "UF", 12.0, 0.5, stop=td))])
        else:
            n = counters[group]
            if n % 2:  # stops inside the limestone: a partial penetration
                td = col["UD"][0] + rng.uniform(0.45, 0.8) * (col["UD"][1] - col["UD"][0])
            else:  # through the limestone into the shale
                td = col["UD"][1] + rng.uniform(3.0, 8.0)
            add_well(wid, kind, x, y, td, [("S1", "UD", "screen", inside(col, "UD", 15.0, rng.uniform(0.2, 0.8),
                                                                          stop=td))])

    well_xy = {w[0]: (float(w[1]), float(w[2])) for w in wells}
    well_kind = {w[0]: w[5] for w in wells}
    pumped = {p.well_id: p for p in pumping_wells}

    # -- truth functions (in the store's length unit) --------------------------------
    def ground(x, y):
        return f.ground(x, y) * L

    def top(unit, x, y):
        return f.top(unit, x, y) * L

    def bottom(unit, x, y):
        return f.bottom(unit, x, y) * L

    def thickness(unit, x, y):
        return f.thickness(unit, x, y) * L

    def regional_head(unit, x, y):
        return f.regional_head(unit, x, y) * L

    def head(unit, x, y, t):
        """True regional head of ``unit`` at (x, y) at time ``t`` (scalar instant), no pumping cones."""
        term = float(_time_term(t)[0]) if np.ndim(t) == 0 else _time_term(t)
        return (f.regional_head(unit, x, y) + TIME_FACTOR[unit] * term) * L

    # -- heads: monthly readings for five years ----------------------------------------
    dates = pd.DatetimeIndex([d.replace(day=15, hour=10) for d in pd.date_range("2019-01-01", periods=60,
                                                                                 freq="MS")])
    iso = [d.strftime("%Y-%m-%dT%H:%M:%S") for d in dates]
    term = _time_term(dates)
    monitored = [k for k in zone_unit if k[0] not in pumped]
    poor_pick = rng.choice(len(monitored), size=10, replace=False)
    poor = {}
    for i in poor_pick:
        key = monitored[int(i)]
        j = int(rng.integers(0, len(dates)))
        poor[(key, j)] = float(rng.choice([-1.0, 1.0]) * rng.uniform(15.0, 40.0))
    head_rows = []
    for (wid, zid), c in zone_unit.items():
        x, y = well_xy[wid]
        h = f.regional_head(c, x, y) + TIME_FACTOR[c] * term + rng.normal(0.0, READING_NOISE_FT, len(dates))
        if wid in pumped:
            p = pumped[wid]
            h = h - np.where(p.active(dates), p.level_offset / L, 0.0) + rng.normal(0.0, 0.8, len(dates))
        by_depth = zone_kind[(wid, zid)] == "screen" and c == "UB"  # upper-sand wells: depth to water
        ref = float(f.ground(x, y)) + stickup[wid]
        for j, (when, value) in enumerate(zip(iso, h)):
            quality = "good"
            if ((wid, zid), j) in poor:
                value += poor[((wid, zid), j)]
                quality = "poor"
            if by_depth:
                head_rows.append([wid, zid, when, "", _num((ref - value) * L), _num(ref * L), quality])
            else:
                head_rows.append([wid, zid, when, _num(value * L), "", "", quality])
    poor_readings = tuple(sorted((k[0], k[1], iso[j]) for (k, j) in poor))

    # -- K tests ---------------------------------------------------------------------
    k_rows = []
    eligible_poor = [k for k in zone_unit if zone_unit[k] in ("UB", "UD", "UF")]
    poor_k = {eligible_poor[int(i)] for i in rng.choice(len(eligible_poor), size=6, replace=False)}
    for (wid, zid), c in zone_unit.items():
        kind = zone_kind[(wid, zid)]
        methods = {"open_hole": ["pumping", "slug"], "packer": ["packer"] * int(rng.integers(1, 3))}.get(
            kind, ["slug"] * int(rng.integers(1, 3)))
        for n, method in enumerate(methods):
            k_ftd = K_GEOMEAN_FT_D[c] * 10.0 ** rng.normal(0.0, K_LOG10_SD[c])
            quality = "good" if rng.uniform() < 0.8 else "fair"
            if (wid, zid) in poor_k and n == 0:
                k_ftd *= 10.0 ** (2.5 * rng.choice([-1.0, 1.0]))
                quality = "poor"
            day = pd.Timestamp("2018-03-01") + pd.Timedelta(days=int(rng.integers(0, 300)) + 301 * n)
            if length_unit == "ft":
                if rng.uniform() < 0.25:
                    value, unit = k_ftd / GPD_FT2_IN_FT_D, "gpd/ft2"
                else:
                    value, unit = k_ftd, "ft/d"
            else:
                value, unit = k_ftd * FT_M, "m/d"
            k_rows.append([wid, zid, day.date().isoformat(), method, f"{value:.6g}", unit, quality, "truth district"])

    # -- pumping records -------------------------------------------------------------
    pump_rows = [[p.well_id, p.zone_id, _num(p.rate_gpm, 1), "gpm", p.start, p.end or ""] for p in pumping_wells]

    # -- the spring and its discharge --------------------------------------------------
    sx, sy = spring_xy
    spring_elev = float(f.regional_head("UD", sx, sy)) - 1.0
    q_dates = pd.DatetimeIndex([d.replace(day=20, hour=9) for d in pd.date_range("2019-01-01", periods=60,
                                                                                   freq="MS")])
    h_spring = TIME_FACTOR["UD"] * _time_term(q_dates)  # head above the regional head at the spring
    if cease_flow_depth is None:
        q_cfs = 1.8 * np.exp(h_spring / 6.0) * (1.0 + rng.normal(0.0, 0.03, len(q_dates)))
    else:  # a power law with a cease-flow head depth ft below the regional head at the spring
        above = np.maximum(h_spring + float(cease_flow_depth), 0.0) / float(cease_flow_depth)
        q_cfs = 1.8 * above ** float(spring_exponent) * (1.0 + rng.normal(0.0, 0.03, len(q_dates)))
    q_out = q_cfs if discharge_unit == "cfs" else q_cfs / GPM_IN_CFS
    discharge_rows = [["SP-1", d.strftime("%Y-%m-%dT%H:%M:%S"), f"{q:.4g}", discharge_unit]
                      for d, q in zip(q_dates, q_out)]

    # -- write -----------------------------------------------------------------------
    files = {
        "units": _write(folder / "units.csv", ["code", "name", "rank", "role", "parent"],
                        [[c, n, r, role, ""] for c, n, r, role in UNITS]),
        "wells": _write(folder / "wells.csv", ["well_id", "x", "y", "ground_elev", "total_depth", "kind", "name"],
                        wells),
        "picks": _write(folder / "picks.csv", ["well_id", "unit", "top_depth", "bottom_depth"], picks),
        "zones": _write(folder / "zones.csv", ["well_id", "zone_id", "top_depth", "bottom_depth", "kind", "unit"],
                        zones),
        "ktests": _write(folder / "ktests.csv", ["well_id", "zone_id", "tested_on", "method", "k", "k_unit",
                                                 "quality", "source"], k_rows),
        "heads": _write(folder / "heads.csv", ["well_id", "zone_id", "measured_at", "head", "depth_to_water",
                                               "ref_elev", "quality"], head_rows),
        "pumping": _write(folder / "pumping.csv", ["well_id", "zone_id", "rate", "rate_unit", "start", "end"],
                          pump_rows),
        "springs": _write(folder / "springs.csv", ["spring_id", "x", "y", "elev", "name", "unit"],
                          [["SP-1", _num(sx, 1), _num(sy, 1), _num(spring_elev * L), "Spring SP-1", "UD"]]),
        "discharge": _write(folder / "discharge.csv", ["spring_id", "measured_at", "discharge", "rate_unit"],
                            discharge_rows),
    }
    areas = {"type": "FeatureCollection", "name": "areas",
             "crs": {"type": "name", "properties": {"name": crs_obj.to_string()}},
             "features": [
                 {"type": "Feature", "properties": {"area_id": "DOM", "kind": "domain", "unit": None},
                  "geometry": shapely.geometry.mapping(domain)},
                 {"type": "Feature", "properties": {"area_id": "RCH-1", "kind": "recharge", "unit": "UD"},
                  "geometry": shapely.geometry.mapping(recharge)}]}
    files["areas"] = folder / "areas.geojson"
    files["areas"].write_text(json.dumps(areas, indent=1), encoding="utf-8")

    mon = {c: tuple(sorted(k for k in monitored if zone_unit[k] == c)) for c in HEAD_UNITS}
    return Truth(
        folder=folder, seed=seed, crs=crs_obj.to_string(), length_unit=length_unit,
        files=MappingProxyType(files),
        import_order=("units", "wells", "picks", "zones", "ktests", "heads", "pumping", "springs", "discharge",
                      "areas"),
        units=tuple(codes), roles=MappingProxyType({c: r for c, _, _, r in UNITS}),
        unit_names=MappingProxyType({c: n for c, n, _, _ in UNITS}),
        partial_unit="UB", partial_extent=partial_extent,
        k_geomean=MappingProxyType({c: v * L for c, v in K_GEOMEAN_FT_D.items()}),
        k_unit=f"{length_unit}/d", k_log10_sd=MappingProxyType(dict(K_LOG10_SD)),
        ground=ground, top=top, bottom=bottom, thickness=thickness, head=head, regional_head=regional_head,
        head_units=HEAD_UNITS, drought_window=DROUGHT_WINDOW, normal_window=NORMAL_WINDOW,
        drought_drop=MappingProxyType({c: DROUGHT_DROP_FT * TIME_FACTOR[c] * L for c in HEAD_UNITS}),
        reading_dates=tuple(iso), reading_noise=READING_NOISE_FT * L,
        pumping_wells=tuple(pumping_wells), cone_radius=CONE_RADIUS_FT,
        monitored_zones=MappingProxyType(mon), well_xy=MappingProxyType(well_xy),
        well_kind=MappingProxyType(well_kind),
        full_penetrations=MappingProxyType({c: tuple(v) for c, v in full_pen.items()}),
        partial_penetrations=MappingProxyType({c: tuple(v) for c, v in part_pen.items()}),
        poor_readings=poor_readings, spring_id="SP-1", spring_unit="UD", spring_xy=(sx, sy),
        spring_elev=spring_elev * L, discharge_unit=discharge_unit, domain=domain, recharge=recharge,
        recharge_id="RCH-1",
        spring_cease_flow_depth=None if cease_flow_depth is None else float(cease_flow_depth) * L,
        spring_exponent=None if cease_flow_depth is None else float(spring_exponent))
