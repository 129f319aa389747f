"""Tests for harmonize.temperature against physical constants and the published definitions.

External references: CODATA 2018 via scipy.constants; Arrhenius 1889 / Gillooly et al. 2001
(Science 293:2248) for the Boltzmann-Arrhenius form; the Q10 definition as in Schmidt-Nielsen,
Animal Physiology, 5th ed. (from memory, page not checked).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants

from harmonize.errors import ConfigError, RejectReason
from harmonize.stats import convert_summary_units, summarise_individuals
from harmonize.temperature import (
    BOLTZMANN_EV_PER_K,
    TemperatureCorrection,
    arrhenius_factor,
    correct_rates,
    fit_q10,
    q10_factor,
    temperature_problems,
)

# temperatures on a 0.1 degC grid, as recorded in practice; avoids denormal-sized differences
biological_celsius = st.integers(-500, 700).map(lambda tenths: tenths / 10.0)
energies = st.floats(0.05, 1.5, allow_nan=False)
q10_values = st.floats(1.05, 6.0, allow_nan=False)


def test_boltzmann_constant_matches_codata_2018():
    # CODATA 2018 (exact), as shipped by scipy.constants
    k, unit, uncertainty = constants.physical_constants["Boltzmann constant in eV/K"]
    assert unit == "eV K^-1" and uncertainty == 0.0
    assert BOLTZMANN_EV_PER_K == pytest.approx(k, rel=1e-9)


def test_arrhenius_matches_manual_formula_with_scipy_constants():
    # rate_ref/rate_meas = exp((E/k)(1/T_meas - 1/T_ref)), Gillooly et al. 2001; k and the
    # kelvin offset taken independently from scipy.constants (CODATA 2018)
    k = constants.physical_constants["Boltzmann constant in eV/K"][0]
    measured = np.array([5.0, 15.0, 25.0, 35.0])
    kelvin = constants.convert_temperature(measured, "Celsius", "Kelvin")
    reference = constants.convert_temperature(20.0, "Celsius", "Kelvin")
    expected = np.exp(0.65 / k * (1 / kelvin - 1 / reference))
    np.testing.assert_allclose(arrhenius_factor(measured, 20.0, 0.65), expected, rtol=1e-9)


def test_arrhenius_q10_identity():
    # Between T and T+10 K the Arrhenius form implies Q10 = exp(10 E / (k T (T+10)))
    # (standard rearrangement, e.g. Gillooly et al. 2001; from memory)
    k = constants.physical_constants["Boltzmann constant in eV/K"][0]
    t1 = 20.0
    factor = arrhenius_factor(t1, t1 + 10.0, 0.65)  # rate at t1 taken to t1+10
    kelvin = t1 + constants.zero_Celsius
    assert factor == pytest.approx(np.exp(10 * 0.65 / (k * kelvin * (kelvin + 10))), rel=1e-9)
    assert fit_q10(1.0, t1, factor, t1 + 10.0) == pytest.approx(factor, rel=1e-12)


@settings(max_examples=60, deadline=None)
@given(t=biological_celsius, energy=energies, q10=q10_values)
def test_factor_is_one_at_reference(t, energy, q10):
    assert arrhenius_factor(t, t, energy) == pytest.approx(1.0, abs=1e-12)
    assert q10_factor(t, t, q10) == pytest.approx(1.0, abs=1e-12)


def test_q10_of_two_halves_a_rate_measured_ten_degrees_warmer():
    # Q10 definition: Q10 = 2 means the rate doubles per 10 degC, so a rate measured at 30 degC
    # brought to 20 degC is halved (Schmidt-Nielsen, Animal Physiology 5th ed.; from memory)
    assert q10_factor(30.0, 20.0, 2.0) == pytest.approx(0.5, rel=1e-12)
    assert q10_factor(10.0, 20.0, 2.0) == pytest.approx(2.0, rel=1e-12)


@pytest.mark.parametrize(
    ("rate1", "t1", "rate2", "t2", "q10"),
    [
        # textbook style: the rate doubles from 20 to 30 degC -> Q10 = 2 (definition)
        (1.0, 20.0, 2.0, 30.0, 2.0),
        # a 4-fold rise over 20 degC is a Q10 of 4**(10/20) = 2 (definition)
        (10.0, 15.0, 40.0, 35.0, 2.0),
        # a rate falling on warming gives Q10 < 1: (0.5)**(10/10)
        (2.0, 10.0, 1.0, 20.0, 0.5),
    ],
)
def test_fit_q10_definition_examples(rate1, t1, rate2, t2, q10):
    assert fit_q10(rate1, t1, rate2, t2) == pytest.approx(q10, rel=1e-12)


def test_fit_q10_undefined_cases_are_nan():
    result = fit_q10([1.0, -1.0, 1.0], [20.0, 20.0, 20.0], [2.0, 2.0, 2.0], [20.0, 30.0, 30.0])
    assert np.isnan(result[0]) and np.isnan(result[1]) and np.isfinite(result[2])


@settings(max_examples=60, deadline=None)
@given(
    measured=biological_celsius,
    reference=biological_celsius,
    q10=q10_values,
    rate=st.floats(1e-3, 1e3),
)
def test_q10_round_trip_is_identity(measured, reference, q10, rate):
    there = TemperatureCorrection("q10", reference, q10=q10)
    back = TemperatureCorrection("q10", measured, q10=q10)
    at_reference, _ = correct_rates([rate], [measured], there)
    again, _ = correct_rates(at_reference, [reference], back)
    assert again[0] == pytest.approx(rate, rel=1e-9)
    if abs(measured - reference) >= 1.0:  # Q10 from two rates is ill-conditioned below that
        implied = fit_q10(rate, measured, at_reference[0], reference)
        assert implied == pytest.approx(q10, rel=1e-6)


@settings(max_examples=60, deadline=None)
@given(
    temperatures=st.lists(biological_celsius, min_size=2, max_size=10, unique=True),
    energy=energies,
    q10=q10_values,
)
def test_factor_falls_as_measurement_temperature_rises(temperatures, energy, q10):
    # a rate measured warmer is brought down more: the factor is decreasing in T_meas
    ordered = np.sort(np.array(temperatures))
    for factor in (arrhenius_factor(ordered, 20.0, energy), q10_factor(ordered, 20.0, q10)):
        assert np.all(np.diff(factor) < 0)


def test_correct_rates_rejects_unusable_temperatures():
    correction = TemperatureCorrection("arrhenius", 20.0)
    temperatures = [20.0, np.nan, np.inf, -300.0, 298.15, 95.0, 25.0]
    rates = [1.0, 1.0, 1.0, 1.0, 1.0, 1.0, np.nan]
    corrected, reasons = correct_rates(rates, temperatures, correction)
    messages = temperature_problems(temperatures)
    bad = [RejectReason.BAD_TEMPERATURE.value] * 5
    assert list(reasons) == [None, *bad, None]
    assert np.isnan(corrected[1:]).all() and corrected[0] == pytest.approx(1.0)
    assert "kelvin" in messages[4] and "absolute zero" in messages[3] and messages[0] == ""


def test_dispersion_takes_the_same_factor_as_the_mean():
    # multiplying every value by c multiplies mean, SD, SE and CI bounds by c (c > 0);
    # invented rates drawn with a seed, all measured at 28 degC
    rng = np.random.default_rng(7)
    rates = pd.DataFrame({"group": "g", "value": rng.lognormal(0.0, 0.4, size=200)})
    correction = TemperatureCorrection("arrhenius", 20.0)
    corrected, _ = correct_rates(rates["value"], np.full(200, 28.0), correction)
    direct = summarise_individuals(rates.assign(value=corrected), ["group"])
    factor = correction.factor(28.0)
    moved = convert_summary_units(summarise_individuals(rates, ["group"]), scale=factor)
    for column in ("mean", "sd", "se", "median", "q1", "q3", "min", "max"):
        assert moved[column].iloc[0] == pytest.approx(direct[column].iloc[0], rel=1e-12)


def test_label_names_method_parameters_and_reference():
    # T_A = E / k = 0.65 eV / 8.617333262e-5 eV/K = 7543 K (CODATA 2018 k)
    assert (
        TemperatureCorrection("arrhenius", 20.0).label()
        == "arrhenius E=0.65 eV (T_A=7543 K) to 20 degC"
    )


def test_arrhenius_temperature_override_matches_the_textbook_factor():
    # factor exp(T_A/T_ref - T_A/T) with T_A = 8000 K, T = 30 degC, T_ref = 20 degC (the
    # Arrhenius relation written with the Arrhenius temperature; 8000 K is common practice)
    correction = TemperatureCorrection("arrhenius", 20.0).with_arrhenius_temperature(8000.0)
    expected = np.exp(8000.0 / 293.15 - 8000.0 / 303.15)
    assert correction.factor(30.0) == pytest.approx(1 / expected, rel=1e-12)
    assert correction.arrhenius_temperature_k == pytest.approx(8000.0)
    assert TemperatureCorrection("q10", 25.0, q10=2.5).label() == "q10 Q10=2.5 to 25 degC"


@pytest.mark.parametrize(
    "arguments",
    [
        {"method": "eyring", "reference_celsius": 20.0},
        {"method": "q10", "reference_celsius": 293.15},
        {"method": "q10", "reference_celsius": 20.0, "q10": 0.0},
        {"method": "arrhenius", "reference_celsius": 20.0, "activation_energy_ev": float("nan")},
    ],
)
def test_bad_correction_settings_raise_config_error(arguments):
    with pytest.raises(ConfigError):
        TemperatureCorrection(**arguments)
