"""Unit conversions against the exact definitions and against pint (an independent reference)."""

import math

import pint
import pytest

from hydroatlas.errors import UnitError
from hydroatlas.quantities import convert, k_from_ms, k_to_ms, known_units, normalize_unit

ureg = pint.UnitRegistry()
PINT_K = {"m/s": "m/s", "m/d": "m/day", "cm/s": "cm/s", "ft/d": "ft/day", "gpd/ft2": "gallon/day/ft**2"}
PINT_RATE = {"m3/d": "m**3/day", "L/s": "L/s", "gpm": "gallon/minute", "ft3/d": "ft**3/day"}


def test_exact_definitions():
    """source: exact definitions 1 ft = 0.3048 m, 1 US gal = 3.785411784e-3 m3, 1 d = 86400 s (VERIFY.md)."""
    assert k_to_ms(1.0, "ft/d") == pytest.approx(0.3048 / 86400, rel=1e-15)
    assert k_to_ms(1.0, "ft/d") == pytest.approx(3.527778e-6, rel=1e-6)
    assert k_to_ms(1.0, "gpd/ft2") == pytest.approx(4.71595e-7, rel=1e-5)
    assert convert(1.0, "gpd/ft2", "ft/d", "hydraulic conductivity") == pytest.approx(0.133681, rel=1e-5)
    assert convert(1.0, "gpd/ft2", "m/d", "hydraulic conductivity") == pytest.approx(0.0407458, rel=1e-5)
    assert convert(1.0, "ft", "m", "length") == 0.3048
    assert convert(1.0, "gpm", "m3/d", "rate") == pytest.approx(3.785411784e-3 * 1440, rel=1e-15)


def test_published_conversion_table():
    """source: conversion table, Ground Water 33(5), p. 873: 1 gpd/ft2 = 4.716e-5 cm/s = 0.1337 ft/d = 4.075e-2 m/d."""
    assert round(convert(1, "gpd/ft2", "cm/s", "hydraulic conductivity"), 8) == pytest.approx(4.716e-5, abs=5e-9)
    assert round(convert(1, "gpd/ft2", "ft/d", "hydraulic conductivity"), 4) == 0.1337
    assert round(convert(1, "gpd/ft2", "m/d", "hydraulic conductivity"), 5) == pytest.approx(4.075e-2, abs=1e-5)


@pytest.mark.parametrize("src", list(PINT_K))
@pytest.mark.parametrize("dst", list(PINT_K))
def test_k_against_pint(src, dst):
    """Reference library: pint converts every pair of K units the same way."""
    expected = (3.7 * ureg(PINT_K[src])).to(PINT_K[dst]).magnitude
    assert convert(3.7, src, dst, "hydraulic conductivity") == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("src", list(PINT_RATE))
def test_rate_against_pint(src):
    """Reference library: pint."""
    expected = (2.5 * ureg(PINT_RATE[src])).to("m**3/day").magnitude
    assert convert(2.5, src, "m3/d", "rate") == pytest.approx(expected, rel=1e-12)


def test_round_trip_arrays():
    import numpy as np

    k = np.array([1e-9, 1e-6, 1e-3])
    assert np.allclose(k_to_ms(k_from_ms(k, "gpd/ft2"), "gpd/ft2"), k, rtol=1e-14)


def test_aliases_and_errors():
    assert normalize_unit("ft/day", "hydraulic conductivity") == "ft/d"
    assert normalize_unit("feet", "length") == "ft"
    assert set(known_units("hydraulic conductivity")) == set(PINT_K)
    with pytest.raises(UnitError, match="unknown hydraulic conductivity unit 'furlong/d'"):
        k_to_ms(1.0, "furlong/d")
    with pytest.raises(ValueError):  # UnitError is also a ValueError
        convert(1.0, "m", "parsec", "length")
    assert math.isclose(convert(5, "m", "m", "length"), 5.0)
