"""Physical units of length, hydraulic conductivity, flow rate and time.

One table per quantity maps a unit label to its factor to the SI-based
canonical unit (m, m/s, m3/d, s). Factors follow the exact definitions
1 ft = 0.3048 m, 1 US gallon = 3.785411784e-3 m3 and 1 d = 86 400 s, so every
conversion is exact up to floating-point rounding.
"""

from __future__ import annotations

import numpy as np

from .errors import UnitError

FOOT_M = 0.3048
US_GALLON_M3 = 3.785411784e-3
DAY_S = 86_400.0

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

#: volumetric rate unit -> m3/d
RATE_UNITS = {
    "m3/d": 1.0,
    "L/s": 1e-3 * DAY_S,
    "gpm": US_GALLON_M3 * 1440.0,
    "ft3/d": FOOT_M**3,
}

#: time unit -> s
TIME_UNITS = {"s": 1.0, "min": 60.0, "h": 3600.0, "d": DAY_S}

_TABLES = {
    "length": LENGTH_UNITS,
    "hydraulic conductivity": K_UNITS,
    "rate": RATE_UNITS,
    "time": TIME_UNITS,
}

# Spellings accepted on input and mapped to one canonical label.
_ALIASES = {
    "meter": "m", "metre": "m", "meters": "m", "metres": "m",
    "feet": "ft", "foot": "ft",
    "m/day": "m/d", "ft/day": "ft/d", "gpd/ft^2": "gpd/ft2", "gpd/sqft": "gpd/ft2",
    "m3/day": "m3/d", "m^3/d": "m3/d", "l/s": "L/s", "ft3/day": "ft3/d", "ft^3/d": "ft3/d",
    "gal/min": "gpm",
}


def _table(quantity: str) -> dict[str, float]:
    try:
        return _TABLES[quantity]
    except KeyError:
        raise UnitError(f"unknown quantity {quantity!r}; expected one of {sorted(_TABLES)}") from None


def normalize_unit(label: str, quantity: str) -> str:
    """Return the canonical label of ``label`` for ``quantity`` or raise UnitError.

    >>> normalize_unit("ft/day", "hydraulic conductivity")
    'ft/d'
    """
    table = _table(quantity)
    text = str(label).strip()
    if text in table:
        return text
    alias = _ALIASES.get(text, _ALIASES.get(text.lower()))
    if alias in table:
        return alias
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
