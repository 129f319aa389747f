"""Tests for harmonize.units: exact conversion factors from published standards, the pint
misreadings measured in the project's ecosystem notes, reject reasons, and caching."""

from __future__ import annotations

import pickle
from decimal import Decimal, localcontext
from fractions import Fraction

import numpy as np
import pytest
import yaml
from hypothesis import given, settings
from hypothesis import strategies as st

from harmonize import units
from harmonize.errors import ConfigError, RejectReason
from harmonize.units import (
    Conversion,
    UnitProblem,
    conversion,
    dimensionality,
    format_unit,
    is_temperature,
    normalise_unit_text,
    parse_unit,
    same_unit,
)

# --------------------------------------------------------------------------- exact factors

# (raw unit, canonical unit, exact factor, source)
EXACT_FACTORS = [
    ("lb", "kg", 0.45359237, "NIST SP 811 (2008), B.9: pound (avoirdupois) = 0.45359237 kg"),
    ("lbs", "kg", 0.45359237, "NIST SP 811 (2008), B.9: pound (avoirdupois) = 0.45359237 kg"),
    ("in", "m", 0.0254, "NIST SP 811 (2008), B.9: inch = 0.0254 m"),
    ("inches", "mm", 25.4, "NIST SP 811 (2008), B.9: inch = 2.54 cm"),
    ("oz", "g", 28.349523125, "NIST SP 811 (2008), B.9: ounce (avoirdupois) = 28.349523125 g"),
    ("ft", "m", 0.3048, "NIST SP 811 (2008), B.9: foot = 0.3048 m"),
    ("cal", "J", 4.184, "NIST SP 811 (2008), B.9: calorie (thermochemical) = 4.184 J"),
    ("kcal", "kJ", 4.184, "NIST SP 811 (2008), B.9: kilocalorie (thermochemical) = 4.184 kJ"),
    ("L", "m**3", 1e-3, "SI Brochure 9th ed. (2019), Table 8: 1 L = 1 dm3 = 1e-3 m3"),
    ("mL", "m**3", 1e-6, "SI Brochure 9th ed., Table 8 and Table 7 (milli = 1e-3)"),
    ("cc", "mL", 1.0, "SI Brochure 9th ed., Table 8: 1 L = 1 dm3, so 1 cm3 = 1 mL"),
    ("h", "s", 3600.0, "SI Brochure 9th ed., Table 8: 1 h = 3600 s"),
    ("d", "h", 24.0, "SI Brochure 9th ed., Table 8: 1 d = 24 h"),
    ("ha", "m**2", 1e4, "SI Brochure 9th ed., Table 8: 1 ha = 1e4 m2"),
    ("mg", "g", 1e-3, "SI Brochure 9th ed., Table 7: milli = 1e-3"),
    ("µg", "g", 1e-6, "SI Brochure 9th ed., Table 7: micro = 1e-6"),
    ("mcg", "g", 1e-6, "SI Brochure 9th ed., Table 7: micro = 1e-6 (mcg is pharmacy usage)"),
    ("Kg", "g", 1e3, "SI Brochure 9th ed., Table 7: kilo = 1e3"),
    ("yr", "d", 365.25, "IAU Julian year = 365.25 d (IAU Style Manual 1989, 5.15); pint's year"),
    ("%", "dimensionless", 0.01, "ISO 80000-1:2009, 3.6: % = 0.01 (from memory)"),
    ("ppt", "g/kg", 1.0, "parts per thousand = 1e-3 = 1 g/kg; common practice, no source"),
]


@pytest.mark.parametrize(("raw", "canonical", "factor", "source"), EXACT_FACTORS)
def test_exact_factors_from_standards(raw, canonical, factor, source):
    result = conversion(raw, canonical)
    assert result.ok, result.message
    assert result.scale == pytest.approx(factor, rel=1e-12), source
    assert result.offset == 0.0


def test_celsius_to_kelvin_offset():
    # SI Brochure 9th ed., 2.3.1: t/degC = T/K - 273.15
    result = conversion("degC", "K")
    celsius = np.array([-273.15, 0.0, 20.5, 37.0])
    assert result.apply(celsius) == pytest.approx(celsius + 273.15, abs=1e-12)


def test_fahrenheit_to_kelvin_follows_nist_formula():
    # NIST SP 811 (2008), B.9: T/K = (t/degF + 459.67) / 1.8
    fahrenheit = np.array([-459.67, -40.0, 32.0, 98.6, 212.0])
    expected = (fahrenheit + 459.67) / 1.8
    assert conversion("degF", "K").apply(fahrenheit) == pytest.approx(expected, abs=1e-9)


def test_fahrenheit_to_celsius_follows_nist_formula():
    # NIST SP 811 (2008), B.9: t/degC = (t/degF - 32) / 1.8
    fahrenheit = np.array([-40.0, 32.0, 212.0])
    expected = (fahrenheit - 32.0) / 1.8
    assert conversion("deg F", "degC").apply(fahrenheit) == pytest.approx(expected, abs=1e-9)


# --------------------------------------------------------------------------- applying


def test_apply_keeps_nan_and_shape():
    values = np.array([[1500.0, np.nan], [0.0, -2.0]])
    converted = conversion("mg", "g").apply(values)  # SI Brochure 9th ed., Table 7: milli
    assert converted.shape == values.shape
    assert np.isnan(converted[0, 1])
    assert converted[0, 0] == pytest.approx(1.5)
    assert converted[1, 1] == pytest.approx(-2e-3)


def test_apply_accepts_integer_arrays():
    converted = conversion("kg", "g").apply(np.array([1, 2, 3]))  # kilo = 1e3, SI Table 7
    assert converted.dtype == np.float64
    assert converted == pytest.approx([1000.0, 2000.0, 3000.0])


# (raw, canonical, exact map as (scale, zero) in rationals, inputs as written, source)
_EXACT_MAPS = [
    ("mg", "g", (Fraction(1, 1000), 0), ["7100", "1", "333", "61.3", "0.5"], "SI Table 7"),
    ("degF", "degC", (Fraction(5, 9), 32), ["32", "212", "98.6", "-40", "104.5"], "NIST B.9"),
    ("K", "degC", (Fraction(1), Fraction("273.15")), ["310.15", "273.15", "300"], "SI 2.3.1"),
    ("in", "mm", (Fraction("25.4"), 0), ["1", "3.5", "0.1"], "NIST SP 811 B.9"),
    ("min", "h", (Fraction(1, 60), 0), ["90", "15", "1.5"], "SI Brochure Table 8"),
]


@pytest.mark.parametrize(("raw", "canonical", "exact", "written", "source"), _EXACT_MAPS)
def test_decimal_values_convert_to_the_exact_result_to_fifteen_digits(
    raw, canonical, exact, written, source
):
    # The exact result, in rational arithmetic from the standard's formula ((t - 32) x 5/9 for
    # degF, NIST SP 811 (2008), B.9; t = T - 273.15, SI Brochure 9th ed., 2.3.1), rounded once
    # to 15 significant digits (decimal's division is correctly rounded to its precision): a
    # conversion may not leave its own binary noise (32 degF gave 3.6e-14 degC, 7100 mg gave
    # 7.1000000000000005 g).
    scale, zero = exact
    exact_results = [(Fraction(w) - zero) * scale for w in written]
    with localcontext(prec=15):
        expected = [float(Decimal(r.numerator) / Decimal(r.denominator)) for r in exact_results]
    converted = conversion(raw, canonical).apply(np.array([float(w) for w in written]))
    assert converted.tolist() == expected, source


def test_fifteen_digits_of_a_double():
    # DBL_DIG = 15 (ISO C, float.h): a double keeps any 15 significant decimal digits
    values = np.array([7.1000000000000005, 36.99999999999997, -0.1 - 0.2, 1e-9 / 3, 2e16 / 3])
    rounded = units.digits_of_a_double(values)
    assert rounded[:3].tolist() == [7.1, 37.0, -0.3]
    assert rounded[3] == 1e-9 / 3  # below 1e-8: left alone
    assert rounded[4] == 2e16 / 3  # from 1e15 up: left alone
    assert np.all(np.abs(rounded - values) <= 5e-15 * np.abs(values))  # half the 15th digit
    assert np.isnan(units.digits_of_a_double(np.array([np.nan])))[0]


def test_standard_deviation_of_temperature_has_no_offset():
    # NIST SP 811 (2008), B.9 footnote: a temperature interval of 1 degF = 5/9 K = 5/9 degC
    result = conversion("degF", "degC")
    sd = np.array([9.0, 1.8, np.nan])
    assert result.apply_difference(sd) == pytest.approx([5.0, 1.0, np.nan], nan_ok=True)
    # applying the affine form to an SD would add the -160/9 offset: the two must differ
    assert result.apply(sd)[0] != pytest.approx(5.0)


def test_temperature_rate_converts_as_a_difference():
    # a change of 1 degC per day is a change of 1 K per day (SI Brochure 9th ed., 2.3.1)
    result = conversion("degC/d", "K/d")
    assert (result.scale, result.offset) == pytest.approx((1.0, 0.0))
    per_hour = conversion("degF/h", "K/d")  # 5/9 K per degF (NIST SP 811 B.9), 24 h per d
    assert per_hour.scale == pytest.approx(24 * 5 / 9, rel=1e-12)
    assert per_hour.offset == 0.0


def test_difference_trait_reads_plain_temperature_units_as_differences():
    # a tolerance breadth of 9 degF is 5 K (NIST SP 811 (2008), B.9: 1 degF interval = 5/9 K)
    breadth = conversion("degF", "delta_degC")
    assert breadth.ok and "temperature-difference" in breadth.flags
    assert breadth.apply(np.array([9.0])) == pytest.approx([5.0])
    # the reverse has no meaning: a difference is not a temperature on a scale
    assert conversion("delta_degC", "degC").reason is RejectReason.DIMENSION_MISMATCH


@settings(max_examples=60, deadline=None)
@given(
    pair=st.sampled_from(
        [("g", "lb"), ("degC", "degF"), ("K", "degF"), ("mL/h", "L/d"), ("%", "ppth")]
    ),
    values=st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=1, max_size=20),
)
def test_conversion_there_and_back_is_identity(pair, values):
    # invariant: converting a -> b -> a returns the input (no source needed, it is algebra)
    there, back = conversion(pair[0], pair[1]), conversion(pair[1], pair[0])
    array = np.array(values)
    assert back.apply(there.apply(array)) == pytest.approx(array, rel=1e-9, abs=1e-6)


# --------------------------------------------------------------------------- pint traps

# ECOSYSTEM-NOTES §2 table and "more pint misreadings" (measured pint 0.25.3 behaviour):
# each raw spelling must give the right unit (with the stated factor) or a reject reason,
# never a silent misreading. Factors: SI Brochure 9th ed. Tables 7 and 8 unless noted.
TRAPS_READ_RIGHT = [
    ("C", "degC", 1.0, "unit-alias:C->degC"),
    ("C", "K", 1.0, "unit-alias:C->degC"),
    ("F", "degF", 1.0, "unit-alias:F->degF"),
    ("C/d", "K/d", 1.0, "unit-alias:C->degC"),
    ("deg F", "degF", 1.0, None),
    ("deg C", "degC", 1.0, None),
    ("° C", "degC", 1.0, None),
    ("°C", "degC", 1.0, None),
    ("degrees Celsius", "degC", 1.0, None),
    ("mL O2 h-1", "mL/h", 1.0, "chemical-qualifier:O2"),
    ("ml O2 h-1", "mL/h", 1.0, "chemical-qualifier:O2"),
    ("mL O2/h", "L/d", 0.024, "chemical-qualifier:O2"),  # 1e-3 L * 24 h/d
    ("mL{O2}/h", "mL/h", 1.0, "chemical-qualifier:O2"),
    ("d-1", "1/h", 1 / 24, None),
    ("day-1", "1/d", 1.0, None),
    ("/h", "1/d", 24.0, None),
    ("per day", "1/d", 1.0, None),
    ("g m-2", "kg/m**2", 1e-3, None),
    ("µmol m-2 s-1", "mol/m**2/s", 1e-6, None),
    ("umol/m2/s", "mol/m**2/s", 1e-6, None),
    ("m s-1", "m/s", 1.0, None),
    ("cm2 g-1", "m**2/kg", 0.1, None),  # 1e-4 m2 per 1e-3 kg
    ("ind/m2", "1/m**2", 1.0, None),
    ("mmol/m2/s", "mol/m**2/s", 1e-3, None),
    ("m2", "cm**2", 1e4, None),
    ("cm3", "mL", 1.0, None),
    ("m²", "cm**2", 1e4, None),
    ("kg·m⁻²", "g/m**2", 1e3, None),
    ("ppt", "dimensionless", 1e-3, "unit-alias:ppt->ppth"),
    ("bp", "count", 1.0, "unit-alias:bp->base_pair"),
    ("kb", "count", 1e3, "unit-alias:kb->kilobase_pair"),
    ("N", "newton", 1.0, "unit-alias:N->newton"),
    ("mg N g-1", "dimensionless", 1e-3, "chemical-qualifier:N"),
    ("mg C m-2 d-1", "g/m**2/d", 1e-3, "chemical-qualifier:C"),
    ("ppb", "dimensionless", 1e-9, None),  # parts per billion = 1e-9, common practice
    ("MM", "mm", 1.0, "unit-alias:MM->millimeter"),
    ("Kg", "g", 1e3, None),
    ("bpm", "1/s", 1 / 60, None),  # 1 min = 60 s
    ("fraction", "%", 100.0, None),
    ("proportion", "dimensionless", 1.0, None),
    ("×10³ ind/m2", "ind/m**2", 1e3, None),
    ("x10^3 cells/mL", "1/mL", 1e3, None),
    ("(mm)", "m", 1e-3, None),
    ("℃", "K", 1.0, None),
]


@pytest.mark.parametrize(("raw", "canonical", "factor", "flag"), TRAPS_READ_RIGHT)
def test_trap_spellings_are_read_right(raw, canonical, factor, flag):
    result = conversion(raw, canonical)
    assert result.ok, result.message
    assert result.scale == pytest.approx(factor, rel=1e-12)
    assert "coulomb" not in (result.source_unit or "")
    if flag is not None:
        assert flag in result.flags


TRAPS_REJECTED = [
    ("C", "g", RejectReason.AMBIGUOUS_UNIT),  # never coulomb, never degC for a mass
    ("C", "dimensionless", RejectReason.AMBIGUOUS_UNIT),
    ("F", "mm", RejectReason.AMBIGUOUS_UNIT),
    ("N", "g", RejectReason.AMBIGUOUS_UNIT),
    ("gr", "g", RejectReason.AMBIGUOUS_UNIT),  # grain and gram are both masses
    ("Cal", "kJ", RejectReason.AMBIGUOUS_UNIT),  # food Calorie or calorie: both energies
    ("ppt", "g", RejectReason.AMBIGUOUS_UNIT),
    ("MM", "g", RejectReason.AMBIGUOUS_UNIT),
    ("umol/m**2 s", "umol/m**2/s", RejectReason.AMBIGUOUS_UNIT),
    ("umol/m2.s", "umol/m**2/s", RejectReason.AMBIGUOUS_UNIT),
    ("g/m² d", "g/m**2/d", RejectReason.AMBIGUOUS_UNIT),
    ("deg", "degC", RejectReason.DIMENSION_MISMATCH),  # pint's 'deg' is the plane angle
    ("B", "g", RejectReason.DIMENSION_MISMATCH),  # pint's 'B' is the byte
    ("kb", "mm", RejectReason.AMBIGUOUS_UNIT),
    ("", "g", RejectReason.MISSING_UNIT),  # pint reads '' as dimensionless
    ("-", "g", RejectReason.MISSING_UNIT),  # pint raises AssertionError
    ("n/a", "degC", RejectReason.MISSING_UNIT),
    (None, "mm", RejectReason.MISSING_UNIT),
    (float("nan"), "mm", RejectReason.MISSING_UNIT),  # an empty pandas cell
    ("1000 g", "g", RejectReason.UNKNOWN_UNIT),  # pint: no scaling factor in a unit
    ("zorkmids", "m/s", RejectReason.UNKNOWN_UNIT),
    ("g !!", "g", RejectReason.UNKNOWN_UNIT),  # pint's tokenizer would drop the '!!'
    ("g; mm", "g", RejectReason.UNKNOWN_UNIT),
    ("x" * 300, "g", RejectReason.UNKNOWN_UNIT),
]


@pytest.mark.parametrize(("raw", "canonical", "reason"), TRAPS_REJECTED)
def test_trap_spellings_are_rejected_with_a_reason(raw, canonical, reason):
    result = conversion(raw, canonical)
    assert not result.ok
    assert result.reason is reason
    assert result.message
    assert np.isnan(result.apply(np.array([1.0]))).all()


def test_each_problem_has_its_own_reason():
    reasons = {
        conversion("mm", "g").reason,
        conversion("zorkmids", "g").reason,
        conversion("", "g").reason,
        conversion("C", "g").reason,
    }
    assert reasons == {
        RejectReason.DIMENSION_MISMATCH,
        RejectReason.UNKNOWN_UNIT,
        RejectReason.MISSING_UNIT,
        RejectReason.AMBIGUOUS_UNIT,
    }


def test_dimension_mismatch_message_names_both_dimensions():
    result = conversion("mm", "g")
    assert "[length]" in result.message and "[mass]" in result.message
    assert result.source_unit == "millimeter"


def test_ambiguous_slash_message_explains_both_readings():
    message = conversion("J/g h", "J/g/h").message
    assert "a/(b c)" in message and "(a/b) c" in message


def test_missing_unit_is_fine_for_dimensionless_traits():
    for canonical in ("count", "dimensionless", "%", "ind"):
        result = conversion(None, canonical)
        assert result.ok and result.reason is None
        assert (result.scale, result.offset) == (1.0, 0.0)
        assert result.source_unit is None


def test_conversion_is_cached():
    assert conversion("mg", "kg") is conversion("mg", "kg")
    assert conversion("mg", "kg") is not conversion("mg", "g")


def test_bad_canonical_unit_is_a_configuration_error():
    with pytest.raises(ConfigError):
        conversion("g", "not_a_unit_at_all")
    with pytest.raises(ConfigError):
        conversion("g", "C")  # a vocabulary must not use an ambiguous spelling


# --------------------------------------------------------------------------- parse_unit


def test_parse_unit_raises_unit_problem_with_reason():
    with pytest.raises(UnitProblem) as caught:
        parse_unit("C")
    assert caught.value.reason is RejectReason.AMBIGUOUS_UNIT
    assert isinstance(caught.value, ValueError)
    with pytest.raises(UnitProblem) as caught:
        parse_unit("-")
    assert caught.value.reason is RejectReason.MISSING_UNIT
    with pytest.raises(UnitProblem) as caught:
        parse_unit("mL O2 h-1 !!")
    assert caught.value.reason is RejectReason.UNKNOWN_UNIT


def test_unit_problem_survives_pickling():
    problem = UnitProblem(RejectReason.UNKNOWN_UNIT, "unit 'x' is not recognised")
    copy = pickle.loads(pickle.dumps(problem))
    assert (copy.reason, copy.message) == (problem.reason, problem.message)


def test_expected_unit_settles_bare_letters():
    registry = units.registry()
    assert parse_unit("C", expected_unit="K") == registry.Unit("degC")
    assert parse_unit("F", expected_unit="degC") == registry.Unit("degF")
    assert parse_unit("MM", expected_unit="cm") == registry.Unit("mm")


def test_case_matters():
    # 'mM' is millimolar and 'mm' millimetre (SI Brochure 9th ed. 3: symbols are case-sensitive)
    assert dimensionality("mM") == "[substance] / [length] ** 3"
    assert dimensionality("mm") == "[length]"


def test_unicode_spellings_match_ascii_ones():
    # U+00B5 micro sign and U+03BC Greek mu both denote micro (Unicode Standard, ch. 22)
    assert parse_unit("\u00b5g") == parse_unit("\u03bcg") == parse_unit("ug")
    assert parse_unit("m\u00b3") == parse_unit("m3") == parse_unit("m**3")
    assert parse_unit("J\u00b7g\u207b\u00b9") == parse_unit("J/g")
    assert normalise_unit_text("  deg   C ") == "degC"


def test_format_dimensionality_and_temperature_helpers():
    # names are pint's default registry names (pint documentation, "defining units")
    assert format_unit("g") == "gram"
    assert format_unit("mL/h") == "milliliter/hour"
    assert dimensionality("mL/h") == "[length] ** 3 / [time]"
    assert is_temperature("degC") and is_temperature("K") and is_temperature("deg F")
    assert not is_temperature("degC/d")
    assert not is_temperature("g")


def test_conversion_is_a_frozen_record():
    result = conversion("g", "kg")
    assert isinstance(result, Conversion)
    with pytest.raises(AttributeError):
        result.scale = 2.0  # type: ignore[misc]


# --------------------------------------------------------------------------- alias data file


def _alias_document():
    from importlib.resources import files

    return yaml.safe_load(files("harmonize").joinpath("data/unit_aliases.yaml").read_text())


def test_alias_file_readings_are_all_readable():
    registry = units.registry()
    for spelling, entry in _alias_document()["aliases"].items():
        if isinstance(entry, str):
            readings = [entry]
        else:
            readings = entry.get("readings") or [entry["unit"]]
        if isinstance(entry, dict) and entry.get("ambiguous"):
            assert len(readings) >= 2, spelling
        for reading in readings:
            if not reading.startswith("{"):
                registry.parse_units(reading)  # raises if the data file names an unknown unit


def test_every_plain_alias_reads_to_its_declared_unit():
    registry = units.registry()
    for spelling, entry in _alias_document()["aliases"].items():
        if isinstance(entry, dict) and entry.get("ambiguous"):
            with pytest.raises(UnitProblem):
                parse_unit(str(spelling))  # with no trait unit, nothing may settle it
            continue
        declared = entry if isinstance(entry, str) else entry["unit"]
        assert parse_unit(str(spelling)) == registry.parse_units(declared), spelling


@pytest.mark.parametrize(
    ("first", "second", "same"),
    [
        ("g", "gram", True),  # the SI symbol and the name (SI Brochure, 9th ed., Table 2)
        ("°C", "C", True),  # bare 'C' read by the other unit's dimension, both ways
        ("C", "°C", True),
        ("mm", "cm", False),  # 1 cm = 10 mm (NIST SP 811, App. B)
        ("degC", "K", False),  # same size of degree, different zero (SI Brochure 2.3.1)
        ("xyz", "g", False),  # unreadable: not the same
    ],
)
def test_same_unit_compares_units_not_spellings(first, second, same):
    assert same_unit(first, second) is same
