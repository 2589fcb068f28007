"""Unit conversions against the exact definitions and against pint (an independent reference, test-only)."""

import math

import numpy as np
import pint
import pytest

from hydroatlas.errors import ParameterError, UnitError
from hydroatlas.quantities import (
    CANONICAL, JULIAN_YEAR_D, K_UNITS, LENGTH_UNITS, RATE_UNITS, TIME_UNITS, TRANSMISSIVITY_UNITS, StoreUnits,
    convert, crs_unit_label, k_from_ms, k_to_ms, known_units, normalize_unit, parse_quantity, split_quantity,
    store_units,
)

ureg = pint.UnitRegistry()
# pint's spelling of every unit of every table; a unit missing here fails test_every_unit_has_a_pint_reference
PINT = {
    "length": {"m": "m", "ft": "ft"},
    "hydraulic conductivity": {"m/s": "m/s", "m/d": "m/day", "cm/s": "cm/s", "ft/d": "ft/day",
                               "gpd/ft2": "gallon/day/ft**2"},
    "transmissivity": {"m2/d": "m**2/day", "m2/s": "m**2/s", "ft2/d": "ft**2/day", "gpd/ft": "gallon/day/ft"},
    "rate": {"m3/d": "m**3/day", "m3/s": "m**3/s", "L/s": "L/s", "gpm": "gallon/minute", "gpd": "gallon/day",
             "MGD": "megagallon/day", "ft3/d": "ft**3/day", "ft3/s": "ft**3/s",
             # the international acre (43 560 international ft2) times the international foot, per Julian year;
             # pint's own acre_foot is built on the US survey foot (see test_acre_foot_survey_difference)
             "acre-ft/yr": "43560 * ft**3 / year"},
    "time": {"s": "s", "min": "minute", "h": "hour", "d": "day", "yr": "year"},
}
TABLES = {"length": LENGTH_UNITS, "hydraulic conductivity": K_UNITS, "transmissivity": TRANSMISSIVITY_UNITS,
          "rate": RATE_UNITS, "time": TIME_UNITS}
PINT_CANONICAL = {"length": "m", "hydraulic conductivity": "m/s", "transmissivity": "m**2/day",
                  "rate": "m**3/day", "time": "s"}
PAIRS = [(q, a, b) for q, table in PINT.items() for a in table for b in table]


def _pint(value, quantity, unit, to):
    return (value * ureg(PINT[quantity][unit])).to(to).magnitude


def test_every_unit_has_a_pint_reference():
    """Every unit hydroatlas knows is checked against pint below (nothing left unchecked)."""
    for quantity, table in TABLES.items():
        assert set(table) == set(PINT[quantity]), quantity
        assert set(known_units(quantity)) == set(PINT[quantity])
        assert CANONICAL[quantity] in table


@pytest.mark.parametrize("quantity,src,dst", PAIRS, ids=[f"{q}:{a}->{b}" for q, a, b in PAIRS])
def test_every_pair_against_pint(quantity, src, dst):
    """Reference library: pint converts every pair of units of every quantity the same way."""
    expected = _pint(3.7, quantity, src, ureg(PINT[quantity][dst]).units) / ureg(PINT[quantity][dst]).magnitude
    assert convert(3.7, src, dst, quantity) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("quantity", list(PINT))
def test_canonical_factor_against_pint(quantity):
    """Reference library: pint; each factor leads to the canonical unit (m, m/s, m2/d, m3/d, s)."""
    for unit in PINT[quantity]:
        expected = _pint(1.0, quantity, unit, PINT_CANONICAL[quantity])
        assert TABLES[quantity][unit] == pytest.approx(expected, rel=1e-12), unit


def test_exact_definitions():
    """source: exact definitions 1 ft = 0.3048 m, 1 US gal = 231 in3 = 3.785411784e-3 m3, 1 d = 86400 s,
    1 acre = 43 560 ft2 (VERIFY.md and the definitions of the units); the Julian year is 365.25 d."""
    assert k_to_ms(1.0, "ft/d") == pytest.approx(0.3048 / 86400, rel=1e-15)
    assert k_to_ms(1.0, "ft/d") == pytest.approx(3.527778e-6, rel=1e-6)
    assert k_to_ms(1.0, "gpd/ft2") == pytest.approx(4.71595e-7, rel=1e-5)
    assert convert(1.0, "gpd/ft2", "ft/d", "hydraulic conductivity") == pytest.approx(0.133681, rel=1e-5)
    assert convert(1.0, "gpd/ft2", "m/d", "hydraulic conductivity") == pytest.approx(0.0407458, rel=1e-5)
    assert convert(1.0, "ft", "m", "length") == 0.3048
    assert convert(1.0, "gpm", "m3/d", "rate") == pytest.approx(3.785411784e-3 * 1440, rel=1e-15)
    assert RATE_UNITS["gpd"] == pytest.approx(231 * 0.0254**3, rel=1e-15)
    assert convert(1.0, "MGD", "m3/d", "rate") == pytest.approx(3785.411784, rel=1e-15)
    assert convert(1.0, "ft3/s", "m3/d", "rate") == pytest.approx(0.3048**3 * 86400, rel=1e-15)
    # one acre-foot = 43 560 ft3 = 1233.48183754752 m3 exactly
    assert convert(1.0, "acre-ft/yr", "m3/d", "rate") * 365.25 == pytest.approx(1233.48183754752, rel=1e-15)
    assert JULIAN_YEAR_D == 365.25 and convert(1.0, "yr", "d", "time") == 365.25
    # VERIFY.md: 1 gpd/ft = 0.0124193 m2/d
    assert convert(1.0, "gpd/ft", "m2/d", "transmissivity") == pytest.approx(0.0124193, rel=1e-5)
    assert convert(1.0, "ft2/d", "m2/d", "transmissivity") == pytest.approx(0.09290304, rel=1e-15)


def test_published_conversion_table():
    """source: conversion table, Ground Water 33(5), p. 873: 1 gpd/ft2 = 4.716e-5 cm/s = 0.1337 ft/d = 4.075e-2 m/d."""
    assert round(convert(1, "gpd/ft2", "cm/s", "hydraulic conductivity"), 8) == pytest.approx(4.716e-5, abs=5e-9)
    assert round(convert(1, "gpd/ft2", "ft/d", "hydraulic conductivity"), 4) == 0.1337
    assert round(convert(1, "gpd/ft2", "m/d", "hydraulic conductivity"), 5) == pytest.approx(4.075e-2, abs=1e-5)


def test_kuo_example_transmissivity():
    """source: Kuo, Practical Design Calculations for Groundwater and Soil Remediation, 2nd ed., Example 3.13
    (VERIFY.md): K = 400 gpd/ft2 over b = 30 ft gives T = 12 000 gpd/ft."""
    k_ftd = convert(400, "gpd/ft2", "ft/d", "hydraulic conductivity")
    t = convert(k_ftd * 30, "ft2/d", "gpd/ft", "transmissivity")
    assert t == pytest.approx(12_000, rel=1e-12)


def test_acre_foot_survey_difference():
    """Reference library: pint's acre_foot is an acre of US survey feet times a survey foot; ours uses the
    international foot (acre = 43 560 ft2). The two differ by 3 x 2 ppm, which this pins down."""
    ours = convert(1.0, "acre-ft/yr", "m3/d", "rate")
    survey = (1 * ureg("acre_foot/year")).to("m**3/day").magnitude
    assert ours == pytest.approx(survey, rel=1e-5)
    assert survey / ours == pytest.approx((1200 / 3937 / 0.3048) ** 3, rel=1e-12)


def test_round_trip_arrays():
    k = np.array([1e-9, 1e-6, 1e-3])
    assert np.allclose(k_to_ms(k_from_ms(k, "gpd/ft2"), "gpd/ft2"), k, rtol=1e-14)


@pytest.mark.parametrize("label,quantity,canonical", [
    ("ft/day", "hydraulic conductivity", "ft/d"), ("gal/d/ft2", "hydraulic conductivity", "gpd/ft2"),
    ("gal/day/ft2", "hydraulic conductivity", "gpd/ft2"), ("gpd/ft^2", "hydraulic conductivity", "gpd/ft2"),
    ("gpd/ft²", "hydraulic conductivity", "gpd/ft2"), ("feet", "length", "ft"), ("cfs", "rate", "ft3/s"),
    ("CFS", "rate", "ft3/s"), ("mgd", "rate", "MGD"), ("acre-ft/year", "rate", "acre-ft/yr"),
    ("l/s", "rate", "L/s"), ("m^3/d", "rate", "m3/d"), ("ft3 / day", "rate", "ft3/d"), ("gal/day", "rate", "gpd"),
    ("ft^2/day", "transmissivity", "ft2/d"), ("m²/d", "transmissivity", "m2/d"),
    ("gal/d/ft", "transmissivity", "gpd/ft"), ("days", "time", "d"), ("years", "time", "yr"),
])
def test_aliases(label, quantity, canonical):
    assert normalize_unit(label, quantity) == canonical


def test_unknown_units_are_refused():
    with pytest.raises(UnitError, match="unknown hydraulic conductivity unit 'furlong/d'"):
        k_to_ms(1.0, "furlong/d")
    with pytest.raises(ValueError):  # UnitError is also a ValueError
        convert(1.0, "m", "parsec", "length")
    with pytest.raises(UnitError, match="unknown quantity"):
        convert(1.0, "m", "m", "speed")
    with pytest.raises(UnitError):  # a K unit is not a transmissivity unit
        normalize_unit("ft/d", "transmissivity")
    assert math.isclose(convert(5, "m", "m", "length"), 5.0)


def test_parse_quantity_with_and_without_units():
    """Reference library: pint gives the expected values in the canonical units."""
    t_ft = (2700 * ureg("ft**2/day")).to("m**2/day").magnitude
    assert parse_quantity("2700ft2/d", "transmissivity", default_unit="m2/d") == pytest.approx(t_ft, rel=1e-12)
    assert parse_quantity("2700", "transmissivity", default_unit="ft2/d") == pytest.approx(t_ft, rel=1e-12)
    assert parse_quantity(2700, "transmissivity", default_unit="ft2/d") == pytest.approx(t_ft, rel=1e-12)
    assert parse_quantity("250 m2/d", "transmissivity", default_unit="ft2/d") == 250.0
    assert parse_quantity("450gpm", "rate", default_unit="ft3/d") == pytest.approx(
        (450 * ureg("gallon/minute")).to("m**3/day").magnitude, rel=1e-12)
    assert parse_quantity("2ft", "length", default_unit="m") == pytest.approx(0.6096, rel=1e-15)
    assert parse_quantity("1.5e1 cfs", "rate", default_unit="m3/d") == pytest.approx(
        (15 * ureg("ft**3/s")).to("m**3/day").magnitude, rel=1e-12)
    assert parse_quantity("-3 ft", "length", default_unit="m") == pytest.approx(-0.9144)
    assert split_quantity(" 12 gal/d/ft2 ", "hydraulic conductivity") == (12.0, "gpd/ft2")
    assert split_quantity("7", "rate") == (7.0, None)


@pytest.mark.parametrize("text,error,words", [
    ("abc", ParameterError, ["'abc'", "not a transmissivity", "ft2/d"]),
    ("", ParameterError, ["not a transmissivity"]),
    ("2700 ft/d", UnitError, ["unknown transmissivity unit 'ft/d'", "gpd/ft"]),
    ("2700 furlongs", UnitError, ["'furlongs'"]),
    ("inf", ParameterError, ["not a finite transmissivity"]),
    ("nan ft2/d", ParameterError, ["not a finite"]),
])
def test_parse_quantity_errors(text, error, words):
    with pytest.raises(error) as info:
        parse_quantity(text, "transmissivity", default_unit="ft2/d")
    for word in words:
        assert word in str(info.value)


def test_store_units_follow_the_length_unit():
    assert store_units("ft") == StoreUnits(length="ft", k="ft/d", transmissivity="ft2/d", rate="ft3/d", time="d")
    assert store_units("m") == StoreUnits(length="m", k="m/d", transmissivity="m2/d", rate="m3/d", time="d")
    assert store_units("feet").log_k == "log10(ft/d)"
    units = store_units("ft")
    for quantity, unit in (("hydraulic conductivity", units.k), ("transmissivity", units.transmissivity),
                           ("rate", units.rate), ("length", units.length), ("time", units.time)):
        assert normalize_unit(unit, quantity) == unit  # every default is a known unit
    with pytest.raises(UnitError):
        store_units("furlong")


def test_crs_unit_labels():
    """The names pyproj gives to the axis units of common projected CRSs."""
    from pyproj import CRS

    assert crs_unit_label(CRS.from_epsg(32615).axis_info[0].unit_name) == "m"
    assert crs_unit_label(CRS.from_epsg(2246).axis_info[0].unit_name) == "ftUS"
    assert crs_unit_label(CRS.from_epsg(2264).axis_info[0].unit_name) == "ftUS"
    assert crs_unit_label("") == "CRS units"
