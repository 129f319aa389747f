"""Tests for harmonize.names: reading a raw name into trait words, unit and statistic hints,
and reading a unit written in a name into pint text.

The names below were written for this project in the style of lab spreadsheets; they carry
no data values.
"""

from __future__ import annotations

import pytest

from harmonize.match import NameHints as ReexportedNameHints
from harmonize.match import normalise_name as reexported_normalise_name
from harmonize.names import NameHints, normalise_name, unit_to_pint
from harmonize.units import dimensionality


# ------------------------------------------------------------------------- normalise_name
# The expected hints follow the conventions of harmonize.names (our own rules, no published
# source): brackets, a trailing token, ' in <unit>' or a '/' compound give the unit as
# written; statistic words at either end give the codes of the population_summaries columns.
@pytest.mark.parametrize(
    ("raw", "normalised", "unit", "statistic"),
    [
        ("SVL (mm)", "svl", "mm", None),
        ("snout-vent length_mm", "snout vent length", "mm", None),
        ("BodyMass_g", "body mass", "g", None),
        ("Masse (g)", "masse", "g", None),
        ("CTmax_°C", "ctmax", "°C", None),
        ("CTmax_C", "ctmax", "C", None),
        ("ct_max", "ct", None, "max"),
        ("VO2 (ml O2/h)", "vo2", "ml O2/h", None),
        ("VO2 (ml O2 h-1)", "vo2", "ml O2 h-1", None),
        ("VO2_mgO2/h", "vo2", "mgO2/h", None),
        ("VO2_ml_h", "vo2", "ml/h", None),
        ("mean_mass_g", "mass", "g", "mean"),
        ("mass_g_sd", "mass", "g", "sd"),
        ("mass_sd_g", "mass", "g", "sd"),
        ("tail.length.cm", "tail length", "cm", None),
        ("Tb [°C]", "tb", "°C", None),
        ("body length in mm", "body length", "mm", None),
        ("Body_Mass_kg", "body mass", "kg", None),
        ("BMR_mW", "bmr", "mW", None),
        ("SVL s.d.", "svl", None, "sd"),
        ("mass (SD)", "mass", None, "sd"),
        ("SVL std dev", "svl", None, "sd"),
        ("mass_SEM", "mass", None, "se"),
        ("mass s.e.", "mass", None, "se"),
        ("mass_se", "mass", None, "se"),
        ("N_mass", "mass", None, "n"),
        ("mass n", "mass", None, "n"),
        ("SVL_min", "svl", None, "min"),
        ("SVL max", "svl", None, "max"),
        ("median SVL", "svl", None, "median"),
        ("SVL_q1", "svl", None, "q1"),
        ("SVL lower quartile", "svl", None, "q1"),
        ("SVL upper quartile", "svl", None, "q3"),
        ("SVL 95% CI low", "svl", None, "ci_low"),
        ("SVL_ci_high", "svl", None, "ci_high"),
        ("SVL LCL", "svl", None, "ci_low"),
        ("SVL_UCL", "svl", None, "ci_high"),
        ("SVL range", "svl", None, "range"),
        ("avg SVL", "svl", None, "mean"),
        ("heart rate (bpm)", "heart rate", "bpm", None),
        ("water content (%)", "water content", "%", None),
        # things that look like units or statistics but are not
        ("SVL_m", "svl m", None, None),  # 'm' after a name is usually 'male'
        ("VB k", "vb k", None, None),  # a rate constant, not kelvin
        ("clutches per year", "clutches per year", None, None),
        ("n", "n", None, None),  # a lone 'n' stays a name
        ("handling time (min)", "handling time", "min", None),  # minutes in brackets
        ("Body mass (adults)", "body mass adults", None, None),
    ],
)
def test_normalise_name_extracts_hints(raw, normalised, unit, statistic):
    assert normalise_name(raw) == NameHints(normalised, unit, statistic)


@pytest.mark.parametrize(
    ("written", "expected_dimension"),
    [
        # base quantities of the units: BIPM SI Brochure, 9th ed. (2019), Tables 2 and 4
        ("mm", "[length]"),
        ("°C", "[temperature]"),
        ("deg C", "[temperature]"),
        ("ml O2 h-1", "[length] ** 3 / [time]"),
        ("mgO2/h", "[mass] / [time]"),
        ("J/g/h", "[length] ** 2 / [time] ** 3"),
        ("breaths/min", "1 / [time]"),
        ("cm²", "[length] ** 2"),
    ],
)
def test_unit_hints_read_to_the_right_dimension(written, expected_dimension):
    assert dimensionality(unit_to_pint(written)) == expected_dimension


@pytest.mark.parametrize("not_a_unit", ["adults", "eggs/clutch", "mean", "M/F", "notes"])
def test_words_are_not_read_as_units(not_a_unit):
    assert unit_to_pint(not_a_unit) is None


def test_match_module_still_exports_the_name_reader():
    # build.py and older callers import these from harmonize.match
    assert reexported_normalise_name("mass_g_sd") == ReexportedNameHints("mass", "g", "sd")
