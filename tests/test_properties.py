"""Property tests over random messy tables: nothing lost, nothing crashes, conversions round-trip.

Hypothesis writes wide and long tables full of what real sheets hold (decimal commas, blanks,
missing tokens, qualifiers, ranges, units in cells, spreadsheet errors, formulas, odd Unicode,
line breaks in quoted cells, blank and repeated header names, cells above the size limit) and
runs them through `build_tables` with the tiny fixture vocabulary. For every generated table:

- the build either finishes or stops with a HarmonizeError (a one-line message), nothing else;
- when it finishes, every source balances: rows read x trait columns = values written + cells
  rejected + cells empty by declaration (DESIGN.md, "Accounting invariant").

Profiles: `quick` (default, a few seconds) and `thorough` (HYPOTHESIS_PROFILE=thorough, for CI).
The profiles are applied to this module's tests only, so other test modules keep their settings.
"""

from __future__ import annotations

import csv
import math
import os
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st

from harmonize.build import build_tables
from harmonize.errors import HarmonizeError
from harmonize.project import LongColumns, ReadOptions, single_file_project
from harmonize.units import conversion
from harmonize.values import parse_numbers

TINY_VOCABULARY = Path(__file__).parent / "fixtures" / "vocab_tiny"
MAX_CELL_CHARS = 256  # project.Limits default, which single_file_project uses

settings.register_profile(
    "quick",
    max_examples=25,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
settings.register_profile(
    "thorough",
    max_examples=400,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
PROFILE = settings.get_profile(os.environ.get("HYPOTHESIS_PROFILE", "quick"))
if os.environ.get("HYPOTHESIS_PROFILE") not in ("quick", "thorough"):
    PROFILE = settings.get_profile("quick")

# ------------------------------------------------------------------------------ strategies

MESSY_ATOMS = (
    "", " ", "NA", "n.d.", "-", "?", "NaN", "nan", "inf", "-Infinity", "∞", "1e400", "-0",
    "<0.5", "> 3", "~4", "ca. 7", "3-5", "3 – 5", "12 ± 1.5", "12 +/- 1", "4,1", "1,234.5",
    "1.234,5", "4.1 g", "4100 mg", "0.0041 kg", "41 °C", "310 K", "3 mL/h", "#DIV/0!", "#N/A",
    "=cmd|' /C calc'!A0", "@SUM(A1)", "+1", "male", "F", "Körpermasse", "4\u00a0100", "４.１",
    "x" * (MAX_CELL_CHARS + 1), "9" * (MAX_CELL_CHARS + 5), "12\n13", 'say "hi"',
)  # fmt: skip
UNIT_ATOMS = (
    "", "g", "mg", " kg ", "µg", "ug", "lb", "mm", "cm", "in", "°C", "ºC", "degF", "K", "C",
    "mL/h", "ml O2 h-1", "L/d", "%", "m²", "g!!", "furlong", "per day", "g\u200b", "n.d.",
)  # fmt: skip
NAME_ATOMS = (
    "body mass", "mass_g", "Body mass [g]", "SVL (mm)", "SVL", "CTmax (°C)", "VO2", "Ta",
    "thermoregulation", "length", "weight (kg)", "zqx_index", "", "=HYPERLINK(1)", "peso",
    "SVL range (mm)", "mass IQR (g)", "mass mean (g)", "CTmax SD",
)  # fmt: skip
TAXA = ("Sorex minutus", "Podarcis muralis", "podarcis  muralis", "S. minutus", "", "NA", "sp.")

safe_text = st.text(
    alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00"),
    max_size=12,
)
numbers_as_text = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.floats(min_value=-1e6, max_value=1e6).map(lambda x: f"{x:.3f}"),
    st.integers(min_value=-(10**6), max_value=10**6).map(str),
)
cell = st.one_of(numbers_as_text, st.sampled_from(MESSY_ATOMS), safe_text)
unit_cell = st.one_of(st.sampled_from(UNIT_ATOMS), safe_text)
name = st.one_of(st.sampled_from(NAME_ATOMS), safe_text)
dialect = st.fixed_dictionaries(
    {
        "delimiter": st.sampled_from([",", ";", "\t"]),
        "decimal": st.sampled_from([".", ","]),
        "line_end": st.sampled_from(["\n", "\r\n"]),
        "level": st.sampled_from(["individual", "population"]),
        "plus_minus": st.sampled_from([None, "sd", "se"]),  # population sources only
    }
)


@st.composite
def wide_tables(draw) -> tuple[list[str], list[list[str]]]:
    names = draw(st.lists(name, min_size=1, max_size=5))
    rows = draw(
        st.lists(
            st.tuples(
                st.sampled_from(TAXA), st.lists(cell, min_size=len(names), max_size=len(names))
            ),
            max_size=12,
        )
    )
    return ["species", *names], [[taxon, *values] for taxon, values in rows]


@st.composite
def long_tables(draw) -> tuple[list[str], list[list[str]]]:
    rows = draw(st.lists(st.tuples(st.sampled_from(TAXA), name, cell, unit_cell), max_size=15))
    return ["species", "trait", "value", "unit"], [list(row) for row in rows]


def write_table(folder: Path, header: list[str], rows: list[list[str]], form: dict) -> Path:
    path = folder / "table.csv"
    with open(path, "w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(
            handle,
            delimiter=form["delimiter"],
            lineterminator=form["line_end"],
            quoting=csv.QUOTE_ALL,  # any text, line breaks and quotes included, stays one cell
        )
        writer.writerow(header)
        writer.writerows(rows)
    return path


def build(path: Path, form: dict, *, long: bool):
    project = single_file_project(
        path,
        level=form["level"],
        layout="long" if long else "wide",
        context={"taxon": "species"},
        columns=LongColumns("trait", "value", "unit") if long else None,
        read=ReadOptions(
            delimiter=form["delimiter"], decimal=form["decimal"], missing=("", "NA", "n.d.")
        ),
        vocabulary=TINY_VOCABULARY,
        plus_minus=form["plus_minus"] if form["level"] == "population" else None,
    )
    return build_tables(project)


def assert_accounted(accounts, rows: int, trait_columns: int) -> None:
    assert len(accounts) == 1
    account = accounts[0]
    assert account.rows_read == rows
    assert account.cells == rows * trait_columns
    # DESIGN.md, "Accounting invariant"
    assert account.cells == account.values_written + account.cells_rejected + account.cells_empty


# ------------------------------------------------------------------------------ builds


@PROFILE
@given(table=wide_tables(), form=dialect)
def test_wide_tables_are_fully_accounted_for_or_refused(table, form) -> None:
    header, rows = table
    with tempfile.TemporaryDirectory() as folder:
        path = write_table(Path(folder), header, rows, form)
        try:
            _, accounts, _ = build(path, form, long=False)
        except HarmonizeError as error:
            assert str(error) and "\n" not in error.message  # a usable one-line message
            event(f"refused: {type(error).__name__}")
            return
    event("built")
    assert_accounted(accounts, len(rows), len(header) - 1)


@PROFILE
@given(table=long_tables(), form=dialect)
def test_long_tables_are_fully_accounted_for_or_refused(table, form) -> None:
    header, rows = table
    with tempfile.TemporaryDirectory() as folder:
        path = write_table(Path(folder), header, rows, form)
        try:
            _, accounts, _ = build(path, form, long=True)
        except HarmonizeError as error:
            assert str(error) and "\n" not in error.message
            event(f"refused: {type(error).__name__}")
            return
    event("built")
    assert_accounted(accounts, len(rows), 1)


@PROFILE
@given(table=wide_tables(), form=dialect)
def test_no_value_is_written_twice_or_from_an_empty_cell(table, form) -> None:
    header, rows = table
    with tempfile.TemporaryDirectory() as folder:
        path = write_table(Path(folder), header, rows, form)
        try:
            frames, _, _ = build(path, form, long=False)
        except HarmonizeError:
            return
    values = frames["individual_values"]
    rejects = frames["rejects"]
    # one cell is written or rejected at most once (population cells may be combined)
    keys = list(zip(values["source_row"], values["original_name"], strict=True))
    assert len(keys) == len(set(keys))
    rejected = set(zip(rejects["source_row"], rejects["column"], strict=True))
    assert not rejected & set(keys)
    assert values["value"].dropna().map(math.isfinite).all()


# ------------------------------------------------------------------------------ round trips

SAME_DIMENSION = {
    "mass": ("g", "mg", "kg", "µg", "lb", "oz"),
    "length": ("mm", "cm", "m", "µm", "in", "ft"),
    "temperature": ("degC", "K", "degF"),
    "flow": ("mL/h", "L/d", "µL/min"),
    "time": ("s", "min", "h", "d"),
}
unit_pairs = st.sampled_from(sorted(SAME_DIMENSION)).flatmap(
    lambda dim: st.tuples(
        st.sampled_from(SAME_DIMENSION[dim]), st.sampled_from(SAME_DIMENSION[dim])
    )
)
magnitudes = st.floats(min_value=-1e9, max_value=1e9, allow_nan=False, allow_infinity=False)


@settings(PROFILE, max_examples=max(PROFILE.max_examples * 8, 200))
@given(pair=unit_pairs, x=magnitudes)
def test_unit_conversion_round_trips(pair, x) -> None:
    source, target = pair
    there = conversion(source, target)
    back = conversion(target, source)
    assert there.ok and back.ok, (there.message, back.message)
    result = back.apply(there.apply([x]))[0]
    assert math.isclose(result, x, rel_tol=1e-9, abs_tol=1e-9 * max(1.0, abs(x)) + 1e-6)


@settings(PROFILE, max_examples=max(PROFILE.max_examples * 8, 200))
@given(x=magnitudes)
def test_fahrenheit_follows_the_nist_formula(x) -> None:
    # NIST SP 811 (2008), section B.9 / 4.2.1.1: t/°C = (t/°F - 32) / 1.8
    assert math.isclose(
        conversion("degF", "degC").apply([x])[0], (x - 32) / 1.8, rel_tol=1e-12, abs_tol=1e-9
    )


@settings(PROFILE, max_examples=max(PROFILE.max_examples * 8, 200))
@given(x=magnitudes)
def test_pound_and_inch_follow_their_exact_definitions(x) -> None:
    # NIST SP 811 (2008), Appendix B.8: 1 lb (avoirdupois) = 0.45359237 kg and 1 in = 2.54 cm,
    # both exact by the 1959 international agreement
    assert math.isclose(conversion("lb", "g").apply([x])[0], x * 453.59237, rel_tol=1e-12)
    assert math.isclose(conversion("in", "mm").apply([x])[0], x * 25.4, rel_tol=1e-12)


@settings(PROFILE, max_examples=max(PROFILE.max_examples * 8, 200))
@given(
    x=st.floats(allow_nan=False, allow_infinity=False),
    decimal=st.sampled_from([".", ","]),
)
def test_a_written_number_reads_back_as_the_same_float(x, decimal) -> None:
    # Python writes the shortest text that reads back as the same IEEE 754 double (repr)
    text = repr(x)
    assume("e" in text or len(text) < 40)
    parsed = parse_numbers([text.replace(".", decimal)], decimal=decimal)
    assert parsed.reason[0] is None, parsed.message[0]
    assert parsed.value[0] == x or (x == 0 and parsed.value[0] == 0)


@pytest.mark.parametrize("text", ["1e400", "-1e400", "1E+999"])
def test_overflowing_numbers_are_non_finite_not_infinite_values(text) -> None:
    # IEEE 754-2019 section 7.4: overflow rounds to infinity, which is not a usable measurement
    parsed = parse_numbers([text])
    assert parsed.reason[0] == "non-finite" and math.isnan(parsed.value[0])
