"""Physical units of length, hydraulic conductivity, transmissivity, flow rate and time.

One table per quantity maps a unit label to its factor to the canonical unit
of that quantity (m, m/s, m2/d, m3/d, s). Factors follow the exact
definitions 1 ft = 0.3048 m, 1 in = 0.0254 m, 1 US gallon = 231 in3
(= 3.785411784e-3 m3), 1 acre = 43 560 ft2, 1 d = 86 400 s and the Julian
year of 365.25 d, so every conversion is exact up to floating-point rounding.

Option values and other typed quantities ("2700ft2/d", "250 m2/d", "450gpm",
"2ft") are read by :func:`parse_quantity`; a bare number takes a default unit,
which for a store is the one :func:`store_units` gives (the store's length
unit and days).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError, UnitError

FOOT_M = 0.3048
INCH_M = 0.0254
US_GALLON_M3 = 3.785411784e-3  # 231 in3 = 231 * 0.0254**3 m3, exactly this
ACRE_FT2 = 43_560.0  # international acre, in international square feet
DAY_S = 86_400.0
JULIAN_YEAR_D = 365.25  # the year of 'acre-ft/yr' and 'yr' (the Julian year, as pint's 'year')

#: length unit -> metres
LENGTH_UNITS = {"m": 1.0, "ft": FOOT_M}

#: hydraulic conductivity unit -> m/s
K_UNITS = {
    "m/s": 1.0,
    "m/d": 1.0 / DAY_S,
    "cm/s": 0.01,
    "ft/d": FOOT_M / DAY_S,
    # gallons per day per square foot of aquifer cross-section
    "gpd/ft2": US_GALLON_M3 / FOOT_M**2 / DAY_S,
}

#: transmissivity unit -> m2/d
TRANSMISSIVITY_UNITS = {
    "m2/d": 1.0,
    "m2/s": DAY_S,
    "ft2/d": FOOT_M**2,
    # US gallons per day per foot of aquifer width
    "gpd/ft": US_GALLON_M3 / FOOT_M,
}

#: volumetric rate unit -> m3/d
RATE_UNITS = {
    "m3/d": 1.0,
    "m3/s": DAY_S,
    "L/s": 1e-3 * DAY_S,
    "gpm": US_GALLON_M3 * 1440.0,
    "gpd": US_GALLON_M3,
    "MGD": 1e6 * US_GALLON_M3,  # million US gallons per day
    "ft3/d": FOOT_M**3,
    "ft3/s": FOOT_M**3 * DAY_S,
    "acre-ft/yr": ACRE_FT2 * FOOT_M**3 / JULIAN_YEAR_D,
}

#: time unit -> s
TIME_UNITS = {"s": 1.0, "min": 60.0, "h": 3600.0, "d": DAY_S, "yr": JULIAN_YEAR_D * DAY_S}

_TABLES = {
    "length": LENGTH_UNITS,
    "hydraulic conductivity": K_UNITS,
    "transmissivity": TRANSMISSIVITY_UNITS,
    "rate": RATE_UNITS,
    "time": TIME_UNITS,
}

#: the unit every factor of a table leads to
CANONICAL = {"length": "m", "hydraulic conductivity": "m/s", "transmissivity": "m2/d", "rate": "m3/d",
             "time": "s"}

# Spellings accepted on input and mapped to one canonical label (looked up after spaces, '^', '**' and
# superscript digits are taken out, and again in lower case).
_ALIASES = {
    "meter": "m", "metre": "m", "meters": "m", "metres": "m",
    "feet": "ft", "foot": "ft",
    "m/day": "m/d", "ft/day": "ft/d", "gpd/sqft": "gpd/ft2",
    "gal/d/ft2": "gpd/ft2", "gal/day/ft2": "gpd/ft2", "gpd/sq.ft": "gpd/ft2",
    "m2/day": "m2/d", "m2/sec": "m2/s", "ft2/day": "ft2/d", "gal/d/ft": "gpd/ft", "gal/day/ft": "gpd/ft",
    "m3/day": "m3/d", "m3/sec": "m3/s", "l/s": "L/s", "ft3/day": "ft3/d", "ft3/sec": "ft3/s", "cfs": "ft3/s",
    "gal/min": "gpm", "gal/d": "gpd", "gal/day": "gpd", "mgd": "MGD",
    "acre-ft/y": "acre-ft/yr", "acre-ft/year": "acre-ft/yr", "acre-feet/yr": "acre-ft/yr",
    "acre-feet/year": "acre-ft/yr", "ac-ft/yr": "acre-ft/yr", "af/yr": "acre-ft/yr",
    "sec": "s", "second": "s", "seconds": "s", "minute": "min", "minutes": "min", "hr": "h", "hour": "h",
    "hours": "h", "day": "d", "days": "d", "year": "yr", "years": "yr",
}
_SUPERSCRIPTS = str.maketrans({"²": "2", "³": "3"})


def _table(quantity: str) -> dict[str, float]:
    try:
        return _TABLES[quantity]
    except KeyError:
        raise UnitError(f"unknown quantity {quantity!r}; expected one of {sorted(_TABLES)}") from None


def _compact(text: str) -> str:
    """A unit label without spaces, '^', '**' or superscript digits: 'ft^2 / d' -> 'ft2/d'."""
    return re.sub(r"\s+", "", text.translate(_SUPERSCRIPTS)).replace("**", "").replace("^", "")


def normalize_unit(label: str, quantity: str) -> str:
    """Return the canonical label of ``label`` for ``quantity`` or raise UnitError.

    >>> normalize_unit("ft/day", "hydraulic conductivity")
    'ft/d'
    >>> normalize_unit("cfs", "rate")
    'ft3/s'
    """
    table = _table(quantity)
    text = str(label).strip()
    if text in table:
        return text
    compact = _compact(text)
    lowered = {k.lower(): k for k in table}
    for candidate in (compact, _ALIASES.get(compact), _ALIASES.get(compact.lower()), lowered.get(compact.lower())):
        if candidate in table:
            return candidate
    raise UnitError(f"unknown {quantity} unit {label!r}; expected one of {', '.join(table)}")


def factor(label: str, quantity: str) -> float:
    """Factor that turns a value in ``label`` into the canonical unit of ``quantity``."""
    return _table(quantity)[normalize_unit(label, quantity)]


def convert(value, from_unit: str, to_unit: str, quantity: str):
    """Convert a scalar or array between two units of one quantity.

    >>> round(convert(1.0, "gpd/ft2", "m/d", "hydraulic conductivity"), 7)
    0.0407458
    """
    scale = factor(from_unit, quantity) / factor(to_unit, quantity)
    if np.isscalar(value):
        return float(value) * scale
    return np.asarray(value, dtype=float) * scale


def k_to_ms(value, unit: str):
    """Hydraulic conductivity in ``unit`` to m/s."""
    return convert(value, unit, "m/s", "hydraulic conductivity")


def k_from_ms(value, unit: str):
    """Hydraulic conductivity in m/s to ``unit``."""
    return convert(value, "m/s", unit, "hydraulic conductivity")


def known_units(quantity: str) -> tuple[str, ...]:
    """Canonical labels accepted for ``quantity``."""
    return tuple(_table(quantity))


# -- typed quantities: "2700ft2/d", "250 m2/d", "450gpm", "2ft" ----------------------------------------------
_NUMBER = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?|[+-]?(?:inf|infinity|nan))(.*)$",
                     re.IGNORECASE)


def split_quantity(text, quantity: str) -> tuple[float, str | None]:
    """The number and the canonical unit label of a typed quantity; the label is None for a bare number.

    Raises
    ------
    ParameterError
        No number at the start of ``text``.
    UnitError
        The text after the number is not a unit of ``quantity``.

    >>> split_quantity("2700 ft^2/day", "transmissivity")
    (2700.0, 'ft2/d')
    >>> split_quantity("450", "rate")
    (450.0, None)
    """
    if isinstance(text, (int, float, np.integer, np.floating)) and not isinstance(text, bool):
        return float(text), None
    raw = str(text)
    match = _NUMBER.match(raw)
    if not match:
        raise ParameterError(f"{raw.strip()!r} is not a {quantity}: expected a number, optionally followed by a "
                             f"unit ({', '.join(known_units(quantity))})")
    number = float(match.group(1))
    rest = match.group(2).strip()
    if not rest:
        return number, None
    try:
        return number, normalize_unit(rest, quantity)
    except UnitError:
        raise UnitError(f"{raw.strip()!r}: unknown {quantity} unit {rest!r}; expected one of "
                        f"{', '.join(known_units(quantity))}") from None


def parse_quantity(text, quantity: str, *, default_unit: str) -> float:
    """A typed quantity in the canonical unit of ``quantity`` (m, m/s, m2/d, m3/d or s).

    Parameters
    ----------
    text : str or number
        A number with or without a unit: "2700ft2/d", "250 m2/d", "450gpm", "2ft", "2700".
    quantity : str
        'length', 'hydraulic conductivity', 'transmissivity', 'rate' or 'time'.
    default_unit : str
        Unit of a bare number (for a store: the field of :func:`store_units`).

    Raises
    ------
    ParameterError
        No number, or a number that is not finite.
    UnitError
        An unknown unit.

    >>> parse_quantity("2700ft2/d", "transmissivity", default_unit="m2/d")  # doctest: +ELLIPSIS
    250.83...
    >>> parse_quantity("2", "length", default_unit="ft")
    0.6096
    """
    number, unit = split_quantity(text, quantity)
    if not math.isfinite(number):
        raise ParameterError(f"{str(text).strip()!r} is not a finite {quantity}")
    return number * factor(unit or default_unit, quantity)


def format_quantity(value: float, unit: str, *, digits: int = 4) -> str:
    """A value with its unit for an echo: ``format_quantity(2700, 'ft2/d')`` -> '2700 ft2/d'."""
    return f"{value:.{digits}g} {unit}"


@dataclass(frozen=True)
class StoreUnits:
    """The units a store reports in by default: its length unit and days.

    Attributes
    ----------
    length : str
        'm' or 'ft' (depths, elevations, heads, drawdown).
    k : str
        Hydraulic conductivity, length per day ('m/d' or 'ft/d').
    transmissivity : str
        Length squared per day ('m2/d' or 'ft2/d').
    rate : str
        Length cubed per day ('m3/d' or 'ft3/d').
    time : str
        'd'.
    """

    length: str
    k: str
    transmissivity: str
    rate: str
    time: str = "d"

    @property
    def log_k(self) -> str:
        """Label of log10 K in the store's K unit, e.g. 'log10(ft/d)'."""
        return f"log10({self.k})"


def store_units(length_unit: str) -> StoreUnits:
    """Default units of a store whose length unit is ``length_unit`` ('m' or 'ft').

    >>> store_units("ft")
    StoreUnits(length='ft', k='ft/d', transmissivity='ft2/d', rate='ft3/d', time='d')
    """
    length = normalize_unit(length_unit, "length")
    return StoreUnits(length=length, k=f"{length}/d", transmissivity=f"{length}2/d", rate=f"{length}3/d")


#: short labels of the linear units of coordinate reference systems (pyproj's ``unit_name``)
_CRS_UNIT_LABELS = {"metre": "m", "meter": "m", "foot": "ft", "us survey foot": "ftUS",
                    "foot_survey_us": "ftUS", "kilometre": "km"}


def crs_unit_label(unit_name: str) -> str:
    """Short label of a CRS axis unit: 'metre' -> 'm', 'US survey foot' -> 'ftUS'; other names unchanged."""
    text = str(unit_name or "").strip()
    return _CRS_UNIT_LABELS.get(text.lower(), text or "CRS units")
