"""Bounded-time fuzzing of the value and unit parsers (hypothesis; marked slow).

Select them with `pytest -m slow` (or leave them out with `-m "not slow"`). The three targets
share HARMONIZE_FUZZ_SECONDS (default 24, a short run inside the normal suite; CI's thorough
run sets 60 or more): hypothesis runs batches with fresh seeds until the time is up. The properties are the parsers' contracts, not particular outputs:

- `values.parse_numbers` never raises on any text; every cell comes back as exactly one of a
  finite value, empty, or a reject reason with a message; all arrays keep the input's length;
- `units.parse_unit` raises only `UnitProblem` (with a reject reason), whatever the text;
- `units.conversion` never raises for a text unit, and gives either a finite affine factor or
  a reject reason.

Anything these runs found is kept below as a regression test named after what broke (these
regressions are not slow and run every time); the catalogue has the case `unit-empty-braces`.
(atheris was not used: it does not build for this Python here; hypothesis is enough.)
"""

from __future__ import annotations

import math
import os
import time

import numpy as np
import pytest
from hypothesis import HealthCheck, given, seed, settings
from hypothesis import strategies as st

from harmonize.errors import RejectReason
from harmonize.units import UnitProblem, conversion, normalise_unit_text, parse_unit
from harmonize.values import parse_numbers

BUDGET_SECONDS = float(os.environ.get("HARMONIZE_FUZZ_SECONDS", "24"))
CANONICAL_UNITS = ("g", "mm", "degC", "mL/h", "%", "cm**2", "J/g/h", "1/d", "count")

any_text = st.text(
    alphabet=st.characters(blacklist_categories=("Cs",)),  # surrogates cannot be UTF-8
    max_size=60,
)
# text built from the pieces the parsers look for, so the fuzzer reaches the deep branches
PIECES = (
    "1", "2.5", "0,5", "-", "+", "e", "E", "±", "+/-", "<", ">=", "~", "ca.", "to", "..", "–",
    " ", "\u00a0", "\u202f", "mg", "g", "µ", "°", "º", "C", "F", "K", "/", "**", "^", "²", "⁻¹",
    "(", ")", "[", "]", "{", "}", "O2", "per", "x10^3", "·", ".", "%", "inf", "nan", "∞", "NA",
    "deg", "ml", "h-1", "m2", "s-1", "\u200b", "'", '"', "\n", "\t",
)  # fmt: skip
structured_text = st.lists(st.sampled_from(PIECES), max_size=12).map("".join)
unit_text = st.one_of(any_text, structured_text)
cells = st.lists(st.one_of(st.none(), any_text, structured_text), min_size=1, max_size=40)


def run_for(seconds: float, check, **strategies) -> int:
    """Run `check` under hypothesis in batches with new seeds until `seconds` have passed."""
    deadline = time.monotonic() + seconds
    batches = 0
    while time.monotonic() < deadline:
        configured = settings(
            max_examples=300,
            deadline=None,
            database=None,
            suppress_health_check=list(HealthCheck),
        )
        configured(seed(batches)(given(**strategies)(check)))()
        batches += 1
    return batches


def check_parsed_cells(raw: list[str | None], decimal: str, thousands: str | None) -> None:
    parsed = parse_numbers(
        raw, decimal=decimal, thousands=thousands, missing=("NA", "n.d."), max_cell_chars=50
    )
    n = len(raw)
    for array in (parsed.value, parsed.reason, parsed.message, parsed.empty, parsed.qualifier):
        assert len(array) == n
    has_value = ~np.isnan(parsed.value)
    has_reason = np.array([r is not None for r in parsed.reason])
    empty = parsed.empty.astype(bool)
    # exactly one outcome per cell
    assert np.all(has_value.astype(int) + has_reason.astype(int) + empty.astype(int) == 1), raw
    assert np.all(np.isfinite(parsed.value[has_value]))
    for reason, message in zip(parsed.reason[has_reason], parsed.message[has_reason], strict=True):
        assert reason in set(RejectReason) and message


@pytest.mark.slow
def test_fuzz_parse_numbers() -> None:
    def target(raw, decimal, thousands) -> None:
        if thousands == decimal:
            thousands = None
        check_parsed_cells(raw, decimal, thousands)

    batches = run_for(
        BUDGET_SECONDS / 3,
        target,
        raw=cells,
        decimal=st.sampled_from([".", ","]),
        thousands=st.sampled_from([None, " ", "'", "."]),
    )
    assert batches >= 1


@pytest.mark.slow
def test_fuzz_parse_unit() -> None:
    def target(text, expected) -> None:
        normalise_unit_text(text)  # must not raise either
        try:
            unit = parse_unit(text, expected)
        except UnitProblem as problem:
            assert problem.reason in set(RejectReason) and problem.message
        else:
            assert unit is not None

    expected = st.sampled_from((None, *CANONICAL_UNITS))
    assert run_for(BUDGET_SECONDS / 3, target, text=unit_text, expected=expected) >= 1


@pytest.mark.slow
def test_fuzz_conversion() -> None:
    def target(text, canonical) -> None:
        result = conversion(text, canonical)
        if result.ok:
            assert math.isfinite(result.scale) and math.isfinite(result.offset)
            assert result.scale != 0
        else:
            assert result.reason in set(RejectReason) and result.message

    canonical = st.sampled_from(CANONICAL_UNITS)
    assert run_for(BUDGET_SECONDS / 3, target, text=unit_text, canonical=canonical) >= 1


# ------------------------------------------------------------------ regressions found by fuzzing


@pytest.mark.parametrize("text", ["{}", "mg{}", "{ }"])
def test_empty_annotation_braces_in_a_unit_do_not_crash(text) -> None:
    # found by test_fuzz_parse_unit: '{}' raised StopIteration out of the unit normaliser.
    # UCUM section 2.2 (curly-brace annotations) gives '{}' no meaning, so it qualifies nothing.
    result = conversion(text, "g")
    if text.startswith("mg"):
        assert result.ok and math.isclose(result.scale, 1e-3)  # SI prefix milli (BIPM 2019)
    else:
        assert result.reason == RejectReason.MISSING_UNIT and result.message
