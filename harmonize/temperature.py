"""Temperature correction of rates: bring a rate measured at one temperature to a reference one.

What it does: computes multiplicative correction factors (Boltzmann-Arrhenius or Q10),
applies them to rate values, and returns a reason code for every row whose measurement
temperature is missing or implausible; estimates Q10 from two measurements for reviewers.
A corrected rate is a model output, not a measurement: `TemperatureCorrection.label()` names the
correction so that the output column says so.

What it leaves to others: deciding which traits are rates (the vocabulary's `rate: true`),
converting temperatures to degC and rates to canonical units (`units`), and moving summary
statistics (`stats.convert_summary_units` with scale = factor, offset = 0: the correction is a
pure multiplication, so mean, SD, SE and CI bounds all take the same factor).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from harmonize.errors import ConfigError, RejectReason

# CODATA 2018 exact value of the Boltzmann constant in eV/K (k = 1.380649e-23 J/K exactly,
# e = 1.602176634e-19 C exactly; k/e is exact but non-terminating, shown here to 10 digits).
BOLTZMANN_EV_PER_K = 8.617333262e-5
KELVIN_AT_ZERO_CELSIUS = 273.15
ABSOLUTE_ZERO_CELSIUS = -KELVIN_AT_ZERO_CELSIUS
# Body or water temperatures outside this window are taken as a unit or entry error; the
# window is common practice for ectotherm physiology, not a published limit.
PLAUSIBLE_MEASUREMENT_CELSIUS = (-60.0, 80.0)
# Typical metabolic activation energy: Gillooly et al. 2001 (Science 293:2248) report
# 0.6-0.7 eV across taxa; 0.65 eV as a default is common practice.
DEFAULT_ACTIVATION_ENERGY_EV = 0.65
DEFAULT_Q10 = 2.0
# The Arrhenius temperature T_A = E / k. 8000 K is a value common in energy-budget modelling
# practice with no single published source (it corresponds to E of about 0.69 eV); projects
# that set neither T_A nor E get it, and the output label always states the value used.
DEFAULT_ARRHENIUS_TEMPERATURE_K = 8000.0


def activation_energy_from_arrhenius_temperature(arrhenius_temperature_k: float) -> float:
    """E = k * T_A (eV), by the definition of the Arrhenius temperature."""
    return float(arrhenius_temperature_k) * BOLTZMANN_EV_PER_K


def arrhenius_factor(
    measured_celsius: ArrayLike, reference_celsius: ArrayLike, activation_energy_ev: ArrayLike
) -> np.ndarray:
    """Factor that takes a rate from the measured to the reference temperature."""
    # Arrhenius 1889 (Z. phys. Chem. 4:226); Boltzmann-Arrhenius form as in Gillooly et al.
    # 2001: rate_ref = rate_meas * exp((E/k) * (1/T_meas - 1/T_ref)), T in kelvin.
    measured_kelvin = np.asarray(measured_celsius, dtype=float) + KELVIN_AT_ZERO_CELSIUS
    reference_kelvin = np.asarray(reference_celsius, dtype=float) + KELVIN_AT_ZERO_CELSIUS
    energy = np.asarray(activation_energy_ev, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        factor = np.exp(
            energy / BOLTZMANN_EV_PER_K * (1.0 / measured_kelvin - 1.0 / reference_kelvin)
        )
    return np.where((measured_kelvin > 0) & (reference_kelvin > 0), factor, np.nan)


def q10_factor(
    measured_celsius: ArrayLike, reference_celsius: ArrayLike, q10: ArrayLike
) -> np.ndarray:
    """Factor that takes a rate from the measured to the reference temperature by Q10."""
    # Q10 definition (e.g. Schmidt-Nielsen, Animal Physiology, 5th ed., ch. 6; from memory):
    # rate_ref = rate_meas * Q10 ** ((T_ref - T_meas) / 10)
    measured = np.asarray(measured_celsius, dtype=float)
    reference = np.asarray(reference_celsius, dtype=float)
    with np.errstate(invalid="ignore", over="ignore"):
        return np.power(np.asarray(q10, dtype=float), (reference - measured) / 10.0)


def fit_q10(rate1: ArrayLike, t1: ArrayLike, rate2: ArrayLike, t2: ArrayLike) -> np.ndarray:
    """Q10 implied by two rates at two temperatures (degC); NaN where it is undefined."""
    # Q10 = (R2 / R1) ** (10 / (T2 - T1)), the definition solved for Q10.
    rate1, t1, rate2, t2 = (np.asarray(a, dtype=float) for a in (rate1, t1, rate2, t2))
    defined = (rate1 > 0) & (rate2 > 0) & (t1 != t2)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        q10 = np.power(rate2 / rate1, 10.0 / (t2 - t1))
    return np.where(defined, q10, np.nan)


@dataclass(frozen=True)
class TemperatureCorrection:
    """How rates are brought to a reference temperature."""

    method: str  # 'arrhenius' | 'q10'
    reference_celsius: float
    activation_energy_ev: float = DEFAULT_ACTIVATION_ENERGY_EV
    q10: float = DEFAULT_Q10

    def __post_init__(self) -> None:
        if self.method not in _FACTOR_BY_METHOD:
            raise ConfigError(
                f"unknown temperature correction method {self.method!r}",
                hint=f"use one of {sorted(_FACTOR_BY_METHOD)}",
            )
        low, high = PLAUSIBLE_MEASUREMENT_CELSIUS
        if not low <= float(self.reference_celsius) <= high:
            raise ConfigError(
                f"reference temperature {self.reference_celsius} degC is outside {low}..{high}",
                hint="give the reference temperature in degC",
            )
        if not (np.isfinite(self.activation_energy_ev) and self.activation_energy_ev >= 0):
            raise ConfigError("activation energy must be a finite number of eV, at least 0")
        if not (np.isfinite(self.q10) and self.q10 > 0):
            raise ConfigError("Q10 must be a finite number above 0")

    def label(self) -> str:
        """Text for the output column, so a corrected rate is never read as a measured one."""
        if self.method == "arrhenius":
            return (
                f"arrhenius E={self.activation_energy_ev:.4g} eV "
                f"(T_A={self.arrhenius_temperature_k:.0f} K) to {self.reference_celsius:g} degC"
            )
        return f"q10 Q10={self.q10:g} to {self.reference_celsius:g} degC"

    @property
    def arrhenius_temperature_k(self) -> float:
        """T_A = E / k in kelvin."""
        return self.activation_energy_ev / BOLTZMANN_EV_PER_K

    def with_arrhenius_temperature(self, arrhenius_temperature_k: float) -> TemperatureCorrection:
        """The same correction with another T_A (a per-trait or per-source override)."""
        energy = activation_energy_from_arrhenius_temperature(arrhenius_temperature_k)
        return dataclasses.replace(self, activation_energy_ev=energy)

    def factor(self, measured_celsius: ArrayLike) -> np.ndarray:
        """Multiplicative factor per measurement temperature (NaN where undefined)."""
        return _FACTOR_BY_METHOD[self.method](self, np.asarray(measured_celsius, dtype=float))


_FACTOR_BY_METHOD: dict[str, Callable[[TemperatureCorrection, np.ndarray], np.ndarray]] = {
    "arrhenius": lambda c, t: arrhenius_factor(t, c.reference_celsius, c.activation_energy_ev),
    "q10": lambda c, t: q10_factor(t, c.reference_celsius, c.q10),
}


def temperature_problems(
    measured_celsius: ArrayLike,
    plausible_celsius: tuple[float, float] = PLAUSIBLE_MEASUREMENT_CELSIUS,
) -> np.ndarray:
    """Per row, why a measurement temperature cannot be used ('' where it can)."""
    t = np.asarray(measured_celsius, dtype=float)
    low, high = plausible_celsius
    with np.errstate(invalid="ignore"):
        looks_kelvin = (t >= low + KELVIN_AT_ZERO_CELSIUS) & (t <= high + KELVIN_AT_ZERO_CELSIUS)
        conditions = [
            np.isnan(t),
            np.isinf(t),
            t < ABSOLUTE_ZERO_CELSIUS,
            looks_kelvin,
            (t < low) | (t > high),
        ]
    messages = [
        "measurement temperature is missing (declare it under context: temperature)",
        "measurement temperature is not finite",
        "measurement temperature is below absolute zero",
        f"measurement temperature is outside {low:g}..{high:g} degC and looks like kelvin "
        "(declare unit: K)",
        f"measurement temperature is outside the plausible {low:g}..{high:g} degC (check its unit)",
    ]
    return np.select(conditions, messages, default="").astype(object)


def correct_rates(
    values: ArrayLike,
    measured_celsius: ArrayLike,
    correction: TemperatureCorrection,
    plausible_celsius: tuple[float, float] = PLAUSIBLE_MEASUREMENT_CELSIUS,
) -> tuple[np.ndarray, np.ndarray]:
    """Rates at the reference temperature, and a reason per row (None where fine).

    Rows with an unusable temperature get NaN and RejectReason.BAD_TEMPERATURE; the matching
    message comes from `temperature_problems`. A missing rate stays missing without a reason.
    """
    values = np.asarray(values, dtype=float)
    measured = np.broadcast_to(np.asarray(measured_celsius, dtype=float), values.shape)
    bad = temperature_problems(measured, plausible_celsius) != ""
    corrected = np.where(bad, np.nan, values * correction.factor(measured))
    reasons = np.where(bad, RejectReason.BAD_TEMPERATURE.value, None).astype(object)
    return corrected, reasons
