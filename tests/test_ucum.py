"""Tests for harmonize.ucum: codes written for pint units, checked against the UCUM
specification (unitsofmeasure.org) by parsing them back with ucumvert, an independent parser."""

from __future__ import annotations

import pytest

from harmonize.errors import ConfigError
from harmonize.ucum import to_ucum
from harmonize.units import UnitProblem, format_unit, registry

# Expected codes: UCUM specification (unitsofmeasure.org), tables of base units, prefixes and
# derived units; codes recalled from the specification, not copied from a tool's output.
EXPECTED_CODES = [
    ("degC", "Cel"),  # UCUM 'Cel', degree Celsius (special unit)
    ("degF", "[degF]"),  # UCUM '[degF]', degree Fahrenheit (special unit)
    ("degC/d", "K.d-1"),  # a temperature rate is a difference: no offset, size of kelvin
    ("%", "%"),
    ("dimensionless", "1"),  # UCUM: the unity is written '1'
    ("ind/m2", "{ind}.m-2"),  # UCUM annotations in braces count as 1
    ("umol m-2 s-1", "umol.m-2.s-1"),  # '.' multiplies, exponent follows the symbol
    ("umol/m**2/s", "umol.m-2.s-1"),
    ("mL/h", "mL.h-1"),  # UCUM 'L' (and 'l') for litre
    ("yr", "a"),  # UCUM 'a' = mean Julian year, 365.25 d, as pint's year
    ("lb", "[lb_av]"),
    ("in", "[in_i]"),
    ("ha", "har"),  # hecto-are
    ("mM", "mmol.L-1"),  # UCUM has no molar atom
    ("x10^3 g", "10*3.g"),  # UCUM '10*' with exponent for powers of ten
]


@pytest.mark.parametrize(("unit_text", "code"), EXPECTED_CODES)
def test_codes_follow_the_ucum_specification(unit_text, code):
    assert to_ucum(unit_text) == code


def test_chemical_annotation_is_kept():
    # UCUM specification, 2.4 "Curly braces": annotations such as {O2} do not change the unit
    assert to_ucum("mL/h", annotation="O2") == "mL{O2}.h-1"
    assert to_ucum("mL/g/h", annotation="{O2}") == "mL{O2}.g-1.h-1"
    assert to_ucum("1/h", annotation="O2") == "{O2}.h-1"


def test_units_without_a_ucum_code_raise_config_error():
    with pytest.raises(ConfigError):
        to_ucum("m**0.5")  # UCUM exponents are integers (specification 2.1)
    with pytest.raises(ConfigError):
        to_ucum("kilominute")  # UCUM allows prefixes on metric units only; 'min' is not metric
    with pytest.raises(UnitProblem):
        to_ucum("C")  # ambiguous spelling: refused before any mapping


# ---------------------------------------------------------------- round trip through ucumvert

ROUND_TRIP_UNITS = [
    "g", "mg", "kg", "mm", "cm", "um", "mL", "L", "cc", "h", "d", "min", "wk", "yr", "mo",
    "%", "ppm", "ppth", "degC", "degF", "K", "degC/d", "degF/h", "J/g/h", "W/kg",
    "umol m-2 s-1", "mL/h", "cal", "kcal", "lb", "oz", "in", "ft", "ha", "ind/m2", "g/m2/d",
    "1/d", "mM", "kPa", "x10^3 g", "kbp", "t", "deg", "dimensionless",
]  # fmt: skip


@pytest.fixture(scope="module")
def ucum_reference(ucumvert_reader):
    return ucumvert_reader


@pytest.mark.parametrize("unit_text", ROUND_TRIP_UNITS)
def test_round_trip_through_ucumvert(unit_text, ucum_reference):
    # UCUM specification (unitsofmeasure.org), ucumvert used as independent parser:
    # the code must parse as UCUM and denote the same quantity (factor 1, same dimension).
    reference, read = ucum_reference
    code = to_ucum(unit_text)
    parsed = read(code)  # raises InvalidUcumError for a code that is not UCUM
    ours = registry()
    # two values, so that an offset unit read as its difference unit would be caught
    for value in (1.0, 2.0):
        expected = ours.Quantity(value, format_unit(unit_text)).to_base_units()
        got = reference.Quantity(value * parsed.magnitude, parsed.units).to_base_units()
        assert got.magnitude == pytest.approx(expected.magnitude, rel=1e-12), code
        assert dict(got.dimensionality) == dict(expected.dimensionality), code


def test_round_trip_covers_at_least_twenty_units():
    assert len(set(ROUND_TRIP_UNITS)) >= 20
