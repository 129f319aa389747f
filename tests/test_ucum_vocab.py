"""Every canonical unit of the bundled vocabulary has a UCUM code that an independent parser
(ucumvert, test-only) reads as the same quantity as the pint unit the build converts to.

Reference: the UCUM specification (unitsofmeasure.org); ucumvert on its own pint registry as
ECOSYSTEM-NOTES §3 "Fix I tested" describes, so nothing is shared with the registry under test.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from harmonize.ucum import to_ucum
from harmonize.units import format_unit, registry
from harmonize.vocab import load_vocabulary

VOCABULARY = Path(__file__).resolve().parents[1] / "vocab"
CANONICAL_UNITS = sorted({term.unit for term in load_vocabulary(VOCABULARY) if term.unit})
# UCUM specification §2.4 (curly braces): an annotation alone stands for the unity '1'.
_ANNOTATION = re.compile(r"\{[^{}]*\}")


@pytest.fixture(scope="module")
def read_ucum(ucumvert_reader):
    reference, parse = ucumvert_reader

    def read(code: str):
        # ucumvert fails on a factor that is only an annotation ('{count}', ECOSYSTEM-NOTES §3),
        # so annotations are stripped and a factor left empty is dropped.
        factors = [_ANNOTATION.sub("", factor) for factor in code.split(".")]
        plain = ".".join(f for f in factors if f) or "1"
        return reference, parse(plain)

    return read


def test_the_vocabulary_has_units_to_check():
    # the bundled vocabulary states canonical units for dozens of traits (vocab/README.md)
    assert len(CANONICAL_UNITS) >= 20


@pytest.mark.parametrize("unit", CANONICAL_UNITS)
def test_canonical_unit_has_an_equivalent_ucum_code(unit, read_ucum):
    code = to_ucum(unit)
    reference, parsed = read_ucum(code)  # raises for a code that is not UCUM
    ours = registry()
    # Two values: an offset unit (Cel) read as a plain scale, or the reverse, differs at one of
    # them; comparing in base units checks factor and dimension together.
    for value in (1.0, 37.0):
        expected = ours.Quantity(value, format_unit(unit)).to_base_units()
        got = reference.Quantity(value * parsed.magnitude, parsed.units).to_base_units()
        assert got.magnitude == pytest.approx(expected.magnitude, rel=1e-12), (unit, code)
        assert {str(k): v for k, v in got.dimensionality.items()} == {
            str(k): v for k, v in expected.dimensionality.items()
        }, (unit, code)


def test_annotations_are_kept_in_the_code_but_do_not_change_the_quantity(read_ucum):
    # UCUM specification §2.4: '{ind}.m-2' is individuals per square metre, i.e. m-2
    reference, with_annotation = read_ucum("{ind}.m-2")
    _, without = read_ucum("m-2")
    assert with_annotation == without
