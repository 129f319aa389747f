"""Statistic spellings: a confidence bound may name its level (common practice in published
tables, no single source); quartile spellings such as '25%' are not levels."""

from __future__ import annotations

import pytest

from harmonize.statistic_names import read_statistic


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("Mean", ("mean", None)),
        ("Varianz", ("variance", None)),  # German, as field sheets write it
        ("écart-type", ("sd", None)),  # French
        (" s.e. ", ("se", None)),
        ("95% CI low", ("ci_low", 0.95)),
        ("lower 95 % CI", ("ci_low", 0.95)),
        ("CI (90%) upper", ("ci_high", 0.90)),
        ("99.5% ci_upper", ("ci_high", 0.995)),
        ("LCL 95%", ("ci_low", 0.95)),
        ("25%", ("q1", None)),  # a quartile, not a confidence level
        ("Range", ("range", None)),  # both bounds in one cell ('50-60')
        ("IQR", ("iqr", None)),
        ("interquartile range", ("iqr", None)),
        ("95%", (None, None)),
        ("90% CI", (None, None)),  # which bound?
        ("95% mean", (None, None)),  # a level only belongs to a bound
        ("", (None, None)),
        (None, (None, None)),
    ],
)
def test_statistic_spellings(text, expected):
    code, level = read_statistic(text)
    assert code == expected[0]
    assert level == (pytest.approx(expected[1]) if expected[1] is not None else None)
