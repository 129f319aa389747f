"""Tests for harmonize.values: reading numbers out of raw cell text.

Sources for the notation conventions checked here:
- SI Brochure, 9th ed. (BIPM 2019), section 5.4.4: the decimal marker is a point or a comma on
  the line; digits may be grouped in threes. (Section number from memory.)
- Python Language Reference, "Floating-point literals", and `float.__repr__` producing the
  shortest string that round-trips (Python 3.1 "What's New"): the exact round-trip property.
- '±' for a value with its half-width, '<'/'>' for censored values below or above a limit, an
  en dash or 'to' for a range: common practice in trait tables, no single standard.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from harmonize.errors import ConfigError, RejectReason
from harmonize.mapping_file import COMMAND_LINE, MAPPING_FILE
from harmonize.values import parse_categories, parse_numbers

# (cell, decimal, thousands, value, qualifier, unit_in_cell)
READS_AS_A_NUMBER = [
    ("12.5", ".", None, 12.5, "", None),
    ("  12.5  ", ".", None, 12.5, "", None),
    ("\u00a012.5\u00a0", ".", None, 12.5, "", None),  # non-breaking spaces from spreadsheets
    ("+4", ".", None, 4.0, "", None),
    ("-3", ".", None, -3.0, "", None),  # a negative number, not a range
    ("\u22122.5", ".", None, -2.5, "", None),  # Unicode minus sign U+2212
    (".5", ".", None, 0.5, "", None),
    ("5.", ".", None, 5.0, "", None),
    ("1.2e-3", ".", None, 0.0012, "", None),  # Python Language Reference, float literals
    ("1.2E+3", ".", None, 1200.0, "", None),
    ("12,5", ",", None, 12.5, "", None),  # SI Brochure 5.4.4: comma as decimal marker
    ("1,2E3", ",", None, 1200.0, "", None),
    ("1.234,5", ",", ".", 1234.5, "", None),  # point groups thousands when comma is decimal
    ("1,234,567.5", ".", ",", 1234567.5, "", None),
    ("1 234,5", ",", " ", 1234.5, "", None),  # SI Brochure 5.4.4: digits grouped by a space
    ("1\u202f234.5", ".", "\u202f", 1234.5, "", None),  # narrow no-break space as grouping
    ("1234.5", ".", ",", 1234.5, "", None),  # grouping is optional even when declared
    ("12.5 g", ".", None, 12.5, "", "g"),
    ("12.5g", ".", None, 12.5, "", "g"),
    ("3,4 mm", ",", None, 3.4, "", "mm"),
    ("25 °C", ".", None, 25.0, "", "°C"),
    ("12 %", ".", None, 12.0, "", "%"),
    ("4.1 µm", ".", None, 4.1, "", "µm"),
    ("0.3 /h", ".", None, 0.3, "", "/h"),
    ("5 tonnes", ".", None, 5.0, "", "tonnes"),  # 'to' starting a unit is not a range
    ("<0.5", ".", None, 0.5, "<", None),
    ("> 10", ".", None, 10.0, ">", None),
    ("<=2", ".", None, 2.0, "<=", None),
    ("≤3", ".", None, 3.0, "<=", None),
    ("≥3", ".", None, 3.0, ">=", None),
    ("~4", ".", None, 4.0, "~", None),
    ("≈4", ".", None, 4.0, "~", None),
    ("ca. 4", ".", None, 4.0, "~", None),
    ("CA 4", ".", None, 4.0, "~", None),
    ("approx. 4 g", ".", None, 4.0, "~", "g"),
    ("< 0,5 mg", ",", None, 0.5, "<", "mg"),
]


@pytest.mark.parametrize(
    ("cell", "decimal", "thousands", "value", "qualifier", "unit"), READS_AS_A_NUMBER
)
def test_cell_reads_as_a_number(cell, decimal, thousands, value, qualifier, unit):
    parsed = parse_numbers([cell], decimal=decimal, thousands=thousands)
    assert parsed.reason[0] is None, parsed.message[0]
    assert parsed.value[0] == value
    assert parsed.qualifier[0] == qualifier
    assert parsed.unit_in_cell[0] == unit
    assert not parsed.empty[0]


# (cell, decimal, thousands, reason, words the message must contain)
REJECTED = [
    ("12,5", ".", None, RejectReason.NOT_A_NUMBER, "decimal: ','"),  # never 125, never 12.5
    ("<12,5 g", ".", None, RejectReason.NOT_A_NUMBER, "decimal: ','"),
    ("12,5", ".", ",", RejectReason.NOT_A_NUMBER, "thousands separator"),  # not 3-digit groups
    ("12.5", ",", None, RejectReason.NOT_A_NUMBER, "decimal: '.'"),
    ("12.5", ",", ".", RejectReason.NOT_A_NUMBER, "thousands separator"),
    ("1.234,5", ",", None, RejectReason.NOT_A_NUMBER, "thousands: '.'"),  # grouping undeclared
    ("12.345.678 mg", ",", None, RejectReason.NOT_A_NUMBER, "thousands: '.'"),
    ("1,234.5", ".", None, RejectReason.NOT_A_NUMBER, "thousands: ','"),
    ("1,234", ".", None, RejectReason.NOT_A_NUMBER, "decimal: ','` or `thousands: ','"),  # either
    ("1.234", ",", None, RejectReason.NOT_A_NUMBER, "decimal: '.'` or `thousands: '.'"),
    ("abc", ".", None, RejectReason.NOT_A_NUMBER, "not a number"),
    ("1 234", ".", None, RejectReason.NOT_A_NUMBER, "not a number"),  # grouping not declared
    ("12 (n=3)", ".", None, RejectReason.NOT_A_NUMBER, "not a number"),
    ("12 ± -1", ".", None, RejectReason.NOT_A_NUMBER, "not a number"),  # half-width has no sign
    ("<", ".", None, RejectReason.NOT_A_NUMBER, "not a number"),
    ("inf", ".", None, RejectReason.NON_FINITE, "finite"),
    ("-Infinity", ".", None, RejectReason.NON_FINITE, "finite"),
    ("NaN", ".", None, RejectReason.NON_FINITE, "finite"),
    ("1e999", ".", None, RejectReason.NON_FINITE, "finite"),  # overflows IEEE 754 binary64
    ("3-5", ".", None, RejectReason.RANGE_VALUE, "with the statistic range"),
]


@pytest.mark.parametrize(("cell", "decimal", "thousands", "reason", "words"), REJECTED)
def test_cell_is_rejected_with_a_message_naming_the_fix(cell, decimal, thousands, reason, words):
    parsed = parse_numbers([cell], decimal=decimal, thousands=thousands)
    assert parsed.reason[0] is reason
    assert math.isnan(parsed.value[0])
    assert words in parsed.message[0]
    assert parsed.message[0].startswith(f"'{cell}'")
    assert "\n" not in parsed.message[0]


# (cell, decimal, low, high, unit)
RANGES = [
    ("3-5", ".", 3.0, 5.0, None),
    ("3–5", ".", 3.0, 5.0, None),  # en dash, the typographic range sign
    ("3 – 5 mm", ".", 3.0, 5.0, "mm"),
    ("3 to 5", ".", 3.0, 5.0, None),
    ("5 TO 7 d", ".", 5.0, 7.0, "d"),
    ("-3 - -1", ".", -3.0, -1.0, None),
    ("-3--1", ".", -3.0, -1.0, None),
    ("2,5-3,5 g", ",", 2.5, 3.5, "g"),
]


@pytest.mark.parametrize(("cell", "decimal", "low", "high", "unit"), RANGES)
def test_range_keeps_bounds_but_is_flagged(cell, decimal, low, high, unit):
    parsed = parse_numbers([cell], decimal=decimal)
    assert parsed.reason[0] is RejectReason.RANGE_VALUE
    assert math.isnan(parsed.value[0])
    assert (parsed.low[0], parsed.high[0]) == (low, high)
    assert parsed.unit_in_cell[0] == unit


@pytest.mark.parametrize(
    ("cell", "decimal", "value", "half_width", "unit"),
    [
        ("12.3 ± 1.2", ".", 12.3, 1.2, None),
        ("12.3 +/- 1.2", ".", 12.3, 1.2, None),
        ("12.3+-1.2", ".", 12.3, 1.2, None),
        ("12,3 ± 1,2 g", ",", 12.3, 1.2, "g"),
        ("-0.5 ± 0.1", ".", -0.5, 0.1, None),
    ],
)
def test_plus_minus_splits_value_and_half_width(cell, decimal, value, half_width, unit):
    parsed = parse_numbers([cell], decimal=decimal)
    assert parsed.reason[0] is None
    assert (parsed.value[0], parsed.plus_minus[0]) == (value, half_width)
    assert parsed.unit_in_cell[0] == unit


def test_missing_cells_are_empty_not_rejected():
    cells = [None, "", "   ", "NA", " n.d. ", "-999", "-999.5"]
    parsed = parse_numbers(cells, missing=["NA", "n.d.", "-999"])
    assert parsed.empty.tolist() == [True, True, True, True, True, True, False]
    assert parsed.reason[:6].tolist() == [None] * 6
    # A declared numeric missing token wins over the number it looks like.
    assert math.isnan(parsed.value[5]) and parsed.value[6] == -999.5


def test_oversized_cell_is_rejected_without_parsing():
    parsed = parse_numbers(["1" * 300, "12"], max_cell_chars=256)
    assert parsed.reason[0] is RejectReason.CELL_TOO_LARGE
    assert "300 characters" in parsed.message[0]
    assert math.isnan(parsed.value[0])
    assert parsed.value[1] == 12.0


def test_long_cells_are_cut_in_messages():
    parsed = parse_numbers(["x" * 200])
    assert parsed.reason[0] is RejectReason.NOT_A_NUMBER
    assert len(parsed.message[0]) < 200


def test_numeric_columns_take_the_fast_path():
    parsed = parse_numbers(pd.Series([1.5, np.nan, np.inf, -2.0]))
    assert parsed.value[0] == 1.5 and parsed.value[3] == -2.0
    assert parsed.empty.tolist() == [False, True, False, False]
    assert parsed.reason[2] is RejectReason.NON_FINITE
    assert math.isnan(parsed.value[2])
    ints = parse_numbers(pa.array([3, None, 7], type=pa.int32()))
    assert ints.value[0] == 3.0 and ints.value[2] == 7.0
    assert ints.empty.tolist() == [False, True, False]


def test_inputs_of_every_supported_kind_agree():
    cells = ["1.5", None, "<2 g", "x"]
    from_list = parse_numbers(cells)
    from_series = parse_numbers(pd.Series(cells, index=[10, 3, 7, 1]))  # index is ignored
    from_chunked = parse_numbers(pa.chunked_array([cells[:2], cells[2:]]))
    from_dictionary = parse_numbers(pa.array(cells).dictionary_encode())
    for other in (from_series, from_chunked, from_dictionary):
        np.testing.assert_array_equal(other.value, from_list.value)
        assert other.reason.tolist() == from_list.reason.tolist()
        assert other.unit_in_cell.tolist() == from_list.unit_in_cell.tolist()


def test_mixed_object_column_reads_numbers_and_text():
    # Readers can deliver floats among strings in one object column; numbers keep their value.
    parsed = parse_numbers(pd.Series([0.1, "0.2", "<3", None, 7], dtype=object))
    assert parsed.value[[0, 1, 4]].tolist() == [0.1, 0.2, 7.0]
    assert parsed.qualifier[2] == "<" and parsed.empty[3]


@pytest.mark.parametrize(
    ("decimal", "thousands"), [(".", "."), (",", ","), (";", None), (".", "#")]
)
def test_unsupported_separators_are_config_errors(decimal, thousands):
    with pytest.raises(ConfigError):
        parse_numbers(["1"], decimal=decimal, thousands=thousands)


def test_palmer_penguins_exported_with_decimal_commas_reads_back():
    # Horst, Hill & Gorman (2020), palmerpenguins R package, doi:10.5281/zenodo.3960218:
    # 344 penguins, 2 without bill length. Written out as a European lab would (decimal comma).
    palmerpenguins = pytest.importorskip("palmerpenguins")
    bill = palmerpenguins.load_penguins()["bill_length_mm"]
    as_text = bill.map(lambda v: None if pd.isna(v) else repr(v).replace(".", ","))
    parsed = parse_numbers(as_text, decimal=",")
    assert int(parsed.empty.sum()) == 2
    np.testing.assert_array_equal(parsed.value, bill.to_numpy())


def test_categories_are_trimmed_with_case_kept():
    cleaned, empty = parse_categories(
        ["  Dark  brown ", "dark\u00a0brown", None, "", "NA", "Striped\tdorsal"], missing=["NA"]
    )
    assert cleaned.tolist() == ["Dark brown", "dark brown", None, None, None, "Striped dorsal"]
    assert empty.tolist() == [False, False, True, True, True, False]


finite_floats = st.floats(allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(st.lists(finite_floats, min_size=1, max_size=50))
def test_repr_of_any_finite_float_parses_back_exactly(values):
    # float.__repr__ gives the shortest string that round-trips (Python 3.1 "What's New").
    parsed = parse_numbers([repr(v) for v in values])
    assert parsed.reason.tolist() == [None] * len(values)
    assert parsed.value.tolist() == values
    assert np.signbit(parsed.value).tolist() == [math.copysign(1, v) < 0 for v in values]


@settings(max_examples=60, deadline=None)
@given(st.lists(finite_floats, min_size=1, max_size=50))
def test_decimal_comma_of_any_finite_float_parses_back_exactly(values):
    parsed = parse_numbers([repr(v).replace(".", ",") for v in values], decimal=",")
    assert parsed.value.tolist() == values


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(min_value=-1e15, max_value=1e15), min_size=1, max_size=30))
def test_thousands_grouping_of_any_float_parses_back(values):
    # Python's format mini-language "{:,}" groups integer digits in threes (PEP 378).
    cells = [f"{v:,.3f}".replace(",", " ").replace(".", ",") for v in values]
    parsed = parse_numbers(cells, decimal=",", thousands=" ")
    expected = [float(f"{v:.3f}") for v in values]
    assert parsed.value.tolist() == expected


@settings(max_examples=150, deadline=None)
@given(st.lists(st.one_of(st.none(), st.text(max_size=30)), min_size=1, max_size=40))
def test_any_text_gets_exactly_one_outcome(cells):
    parsed = parse_numbers(cells, missing=["NA"], max_cell_chars=20)
    has_value = np.isfinite(parsed.value)
    has_reason = np.array([r is not None for r in parsed.reason])
    outcomes = has_value.astype(int) + parsed.empty.astype(int) + has_reason.astype(int)
    assert outcomes.tolist() == [1] * len(cells)
    # A message accompanies every reason and nothing else.
    assert [m is not None for m in parsed.message] == has_reason.tolist()
    # Bounds exist only for ranges.
    is_range = np.array([r is RejectReason.RANGE_VALUE for r in parsed.reason])
    assert (np.isfinite(parsed.low) == is_range).all()


number_like_text = st.text(alphabet="0123456789.,-+ <>~±eE%g–to\u00a0", max_size=20)


@settings(max_examples=150, deadline=None)
@given(st.lists(number_like_text, min_size=1, max_size=40), st.sampled_from([".", ","]))
def test_number_like_text_gets_exactly_one_outcome(cells, decimal):
    parsed = parse_numbers(cells, decimal=decimal)
    has_value = np.isfinite(parsed.value)
    has_reason = np.array([r is not None for r in parsed.reason])
    assert (has_value.astype(int) + parsed.empty + has_reason == 1).all()
    # A value never appears where the text has no digit at all.
    digitless = np.array([not any(c.isdigit() for c in cell) for cell in cells])
    assert not (has_value & digitless).any()


def test_underflow_is_not_silently_zero():
    # IEEE 754 binary64: the smallest positive subnormal is about 4.9e-324, so 1e-400 underflows
    parsed = parse_numbers(["1e-400", "0e5", "0", "2.5E-500"])
    assert parsed.reason[0] == RejectReason.NON_FINITE and np.isnan(parsed.value[0])
    assert parsed.value[1] == 0 and parsed.reason[1] is None  # a real zero stays zero
    assert parsed.value[2] == 0 and parsed.reason[2] is None
    assert parsed.reason[3] == RejectReason.NON_FINITE


@pytest.mark.parametrize(
    ("declared_in", "words"),
    [
        (MAPPING_FILE, "declare `decimal: ','` in the mapping's read options"),
        (COMMAND_LINE, "use `--decimal ,`"),
    ],
)
def test_hints_name_read_options_where_they_were_declared(declared_in: str, words: str) -> None:
    parsed = parse_numbers(["12,5"], declared_in=declared_in)
    assert parsed.reason[0] == RejectReason.NOT_A_NUMBER
    assert parsed.message[0].endswith(words), parsed.message[0]


def test_a_missing_token_that_reads_as_a_number_is_missing() -> None:
    # Sentinels such as -999 for "not measured" are common practice in field data (no
    # published source). Declared as missing, the token is no value; other numbers are, and
    # the token is compared as text after trimming ('-999.0' is a number).
    parsed = parse_numbers(["-999", " -999 ", "12.5", "-999.0"], missing=["-999"])
    assert parsed.empty.tolist() == [True, True, False, False]
    assert parsed.value[2:].tolist() == [12.5, -999.0]
    assert all(r is None for r in parsed.reason)
    plain = parse_numbers(["-999"], missing=["NA"])  # not declared: a value
    assert plain.value.tolist() == [-999.0] and not plain.empty[0]
