"""Tests for harmonize.stats against published formulas, an open dataset and simulation.

External references: Cochrane Handbook v6.4 (2023) chapter 6; Wan et al. 2014 (BMC Med Res
Methodol 14:135); Hozo et al. 2005 (BMC Med Res Methodol 5:13); the palmerpenguins dataset
(Horst, Hill & Gorman 2020) computed with pandas; normal-distribution theory via scipy.
"""

from __future__ import annotations

from functools import reduce

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from palmerpenguins import load_penguins
from scipy import integrate
from scipy import stats as scipy_stats

from harmonize.errors import ConfigError, RejectReason
from harmonize.stats import (
    SD_METHODS,
    combine_group_summaries,
    combine_groups,
    combine_two_groups,
    convert_summary_units,
    mean_from_median_iqr,
    mean_from_median_iqr_and_range,
    mean_from_median_range,
    normalise_summaries,
    sd_from_ci,
    sd_from_iqr,
    sd_from_iqr_and_range,
    sd_from_range,
    sd_from_se,
    summarise_individuals,
)


@pytest.fixture(scope="module")
def penguins() -> pd.DataFrame:
    return load_penguins().dropna(subset=["body_mass_g", "sex"])


# --- SD from SE and CI -------------------------------------------------------------------


def test_sd_from_se_recovers_pandas_sd(penguins):
    # Cochrane Handbook 6.5.2.2: SD = SE * sqrt(N); pandas' sem is SD/sqrt(n) (ddof=1)
    grouped = penguins.groupby("species")["body_mass_g"]
    recovered = sd_from_se(grouped.sem(), grouped.count())
    np.testing.assert_allclose(recovered, grouped.std(), rtol=1e-12)


def test_sd_from_ci_handbook_small_sample_divisor():
    # Cochrane Handbook 6.5.2.2 (from memory, the wording also quoted by secondary pages):
    # for a group of 25 the 95 % t value is 2.0639, so 3.92 is replaced by 2 * 2.0639 = 4.128.
    lower, upper, n = 30.0, 40.0, 25
    expected = np.sqrt(n) * (upper - lower) / 4.128
    assert sd_from_ci(lower, upper, n) == pytest.approx(expected, rel=1e-4)


@pytest.mark.parametrize(
    ("level", "divisor"),
    [(0.95, 3.92), (0.90, 3.29), (0.99, 5.15)],  # Cochrane Handbook 6.5.2.2, large samples
)
def test_sd_from_ci_converges_to_handbook_z_divisors(level, divisor):
    n = 100_000
    sd = sd_from_ci(0.0, divisor / np.sqrt(n), n, level)
    # the Handbook's divisors are rounded to 2 decimals
    assert sd == pytest.approx(1.0, rel=2e-3)


def test_sd_from_ci_recovers_sd_of_scipy_t_interval(penguins):
    # CI built independently with scipy.stats.t.interval (mean +- t * SE), then inverted.
    grouped = penguins.groupby(["species", "sex"])["body_mass_g"]
    mean, sem, n, sd = grouped.mean(), grouped.sem(), grouped.count(), grouped.std()
    lower, upper = scipy_stats.t.interval(0.9, n - 1, loc=mean, scale=sem)
    np.testing.assert_allclose(sd_from_ci(lower, upper, n, 0.9), sd, rtol=1e-9)


def test_sd_from_se_and_ci_give_nan_for_impossible_n():
    assert np.isnan(sd_from_se(1.0, 0))
    assert np.isnan(sd_from_ci(1.0, 2.0, 1))  # a CI of a mean needs n >= 2 (t has n-1 df)


# --- Wan et al. 2014 estimators ----------------------------------------------------------


def _expected_range_of_standard_normal(n: int) -> float:
    # E[range] = integral of 1 - (1-Phi(x))^n - Phi(x)^n over the real line (order statistics)
    def integrand(x):
        return 1 - (1 - scipy_stats.norm.cdf(x)) ** n - scipy_stats.norm.cdf(x) ** n

    return integrate.quad(integrand, -np.inf, np.inf)[0]


@pytest.mark.parametrize(
    ("n", "xi_table_1"),
    # Wan et al. 2014, Table 1 (values of xi(n) for n <= 50, printed to 3 decimals); the same
    # numbers are the d2 constants of quality-control tables (e.g. Minitab's d2 table)
    [(2, 1.128), (3, 1.693), (5, 2.326), (10, 3.078), (17, 3.588), (25, 3.931), (50, 4.498)],
)
def test_range_divisor_reproduces_wan_table_1(n, xi_table_1):
    assert 1.0 / sd_from_range(0.0, 1.0, n) == pytest.approx(xi_table_1, abs=5e-4)


@pytest.mark.parametrize("n", [51, 100, 400])
def test_range_divisor_above_table_uses_close_approximation(n):
    # Wan et al. 2014 eq. 7 beyond Table 1; checked against the exact expected range
    assert sd_from_range(0.0, _expected_range_of_standard_normal(n), n) == pytest.approx(
        1.0, rel=5e-3
    )


def test_iqr_divisor_tends_to_normal_iqr():
    # IQR of a normal distribution is 2 * Phi^-1(0.75) sigma = 1.349 sigma (normal theory)
    half_iqr = scipy_stats.norm.ppf(0.75)
    assert sd_from_iqr(-half_iqr, half_iqr, 10**7) == pytest.approx(1.0, rel=1e-6)


def test_iqr_and_range_estimate_is_mean_of_the_two():
    # Wan et al. 2014 eq. 12 weights the range- and IQR-based estimates equally
    a, q1, q3, b, n = 1.0, 3.0, 6.0, 11.0, 40
    both = sd_from_iqr_and_range(a, q1, q3, b, n)
    assert both == pytest.approx((sd_from_range(a, b, n) + sd_from_iqr(q1, q3, n)) / 2)


@pytest.mark.parametrize("n", [50, 200])
def test_wan_estimators_unbiased_on_simulated_normal_samples(n):
    # Independent simulation (seeded): Wan et al. 2014 report small average relative error for
    # normal data at these sizes; we require the average estimate within 3 % of the true SD.
    rng = np.random.default_rng(20140101 + n)
    true_mean, true_sd = 10.0, 2.5
    samples = rng.normal(true_mean, true_sd, size=(4000, n))
    q1, median, q3 = np.quantile(samples, [0.25, 0.5, 0.75], axis=1)
    low, high = samples.min(axis=1), samples.max(axis=1)
    for estimate in (
        sd_from_iqr(q1, q3, n),
        sd_from_range(low, high, n),
        sd_from_iqr_and_range(low, q1, q3, high, n),
    ):
        assert estimate.mean() == pytest.approx(true_sd, rel=0.03)
    for estimate in (
        mean_from_median_iqr(q1, median, q3),
        mean_from_median_range(low, median, high),
        mean_from_median_iqr_and_range(low, q1, median, q3, high),
    ):
        assert estimate.mean() == pytest.approx(true_mean, abs=0.02 * true_sd)


def test_mean_estimators_follow_published_weights():
    # Hozo et al. 2005 / Wan 2014 eq. 2: (a+2m+b)/4; Wan eq. 14: (q1+m+q3)/3;
    # Wan eq. 10: (a+2q1+2m+2q3+b)/8 -- checked on a skewed five-number summary
    a, q1, m, q3, b = 2.0, 3.0, 4.0, 7.0, 20.0
    assert mean_from_median_range(a, m, b) == pytest.approx((a + 2 * m + b) / 4)
    assert mean_from_median_iqr(q1, m, q3) == pytest.approx((q1 + m + q3) / 3)
    five = mean_from_median_iqr_and_range(a, q1, m, q3, b)
    assert five == pytest.approx((a + 2 * q1 + 2 * m + 2 * q3 + b) / 8)


# --- combining groups and summarising individuals -----------------------------------------


def test_combine_groups_equals_raw_pooled_sd(penguins):
    # Cochrane Handbook Table 6.5.a; reference: SD of the raw pooled values (pandas, ddof=1)
    by_sex = penguins.groupby(["species", "sex"])["body_mass_g"].agg(["count", "mean", "std"])
    for species, table in by_sex.groupby(level="species"):
        raw = penguins.loc[penguins["species"] == species, "body_mass_g"]
        n, mean, sd = combine_groups(table["count"], table["mean"], table["std"])
        assert n == len(raw)
        assert mean == pytest.approx(raw.mean(), rel=1e-12)
        assert sd == pytest.approx(raw.std(), rel=1e-9)


def test_sequential_handbook_formula_equals_k_group_closed_form(penguins):
    # Table 6.5.a applied island by island (3 groups) vs the closed form vs raw data
    groups = penguins.groupby("island")["body_mass_g"].agg(["count", "mean", "std"])
    rows = list(groups.itertuples(index=False))
    n, mean, sd = reduce(
        lambda acc, g: combine_two_groups(*acc, *g), rows[1:], tuple(map(float, rows[0]))
    )
    closed = combine_groups(groups["count"], groups["mean"], groups["std"])
    assert float(sd) == pytest.approx(closed[2], rel=1e-12)
    assert float(sd) == pytest.approx(penguins["body_mass_g"].std(), rel=1e-9)
    assert float(n) == closed[0] and float(mean) == pytest.approx(closed[1], rel=1e-12)


def test_combine_group_summaries_matches_raw_groups(penguins):
    per_sex = summarise_individuals(penguins, ["species", "sex"], value="body_mass_g")
    pooled = combine_group_summaries(per_sex, ["species"]).set_index("species")
    raw = penguins.groupby("species")["body_mass_g"]
    np.testing.assert_allclose(pooled["sd"], raw.std(), rtol=1e-9)
    np.testing.assert_allclose(pooled["mean"], raw.mean(), rtol=1e-12)
    assert set(pooled["sd_method"]) == {"combined groups"}


def test_combine_group_summaries_refuses_to_guess_a_missing_sd():
    frame = pd.DataFrame(
        {
            "g": ["a", "a", "b", "b"],
            "n": [5, 6, 1, 4],
            "mean": [1, 2, 3, 4],
            "sd": [1, None, None, 1],
        }
    )
    out = combine_group_summaries(frame, ["g"]).set_index("g")
    assert np.isnan(out.loc["a", "sd"])  # n=6 without SD: unknown
    assert np.isfinite(out.loc["b", "sd"])  # n=1 without SD: zero within-group spread


def test_summarise_individuals_matches_pandas_groupby(penguins):
    out = summarise_individuals(penguins, ["species", "island"], value="body_mass_g")
    out = out.set_index(["species", "island"])
    reference = penguins.groupby(["species", "island"])["body_mass_g"]
    for column, expected in {
        "n": reference.count(),
        "mean": reference.mean(),
        "sd": reference.std(ddof=1),
        "se": reference.sem(),
        "min": reference.min(),
        "max": reference.max(),
        "median": reference.median(),
        "q1": reference.quantile(0.25),
        "q3": reference.quantile(0.75),
    }.items():
        np.testing.assert_allclose(out[column], expected.loc[out.index], rtol=1e-9)
    assert set(out["sd_method"]) == {"computed from individuals"}


def test_summarise_individuals_quartiles_follow_numpy_linear_definition(penguins):
    adelie = penguins.loc[penguins["species"] == "Adelie", "flipper_length_mm"].dropna()
    out = summarise_individuals(
        penguins.assign(all="x").dropna(subset=["flipper_length_mm"])[
            lambda f: f["species"] == "Adelie"
        ],
        ["all"],
        value="flipper_length_mm",
    )
    expected = np.quantile(adelie.to_numpy(), [0.25, 0.75], method="linear")
    np.testing.assert_allclose(out[["q1", "q3"]].to_numpy()[0], expected, rtol=1e-12)


def test_summarise_individuals_keeps_unknown_group_key_and_needs_columns():
    frame = pd.DataFrame({"sex": ["f", None, None], "value": [1.0, 2.0, 4.0]})
    out = summarise_individuals(frame, ["sex"])
    assert out["n"].sum() == 3 and out["sex"].isna().sum() == 1
    with pytest.raises(ConfigError):
        summarise_individuals(frame, ["site"])


@settings(max_examples=40, deadline=None)
@given(
    values=st.lists(
        st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False), min_size=4, max_size=60
    ),
    cut=st.integers(2, 58),
)
def test_summaries_of_parts_combine_to_summary_of_whole(values, cut):
    cut = min(cut, len(values) - 2)
    labels = ["a"] * cut + ["b"] * (len(values) - cut)
    frame = pd.DataFrame({"part": labels, "whole": "w", "value": values})
    parts = summarise_individuals(frame, ["whole", "part"])
    whole = summarise_individuals(frame, ["whole"])
    combined = combine_group_summaries(parts, ["whole"])
    assert combined["n"].iloc[0] == whole["n"].iloc[0]
    assert combined["sd"].iloc[0] == pytest.approx(whole["sd"].iloc[0], rel=1e-7, abs=1e-7)


# --- normalise_summaries -------------------------------------------------------------------

N = 20
CASES = [
    # (statistics given, expected sd_method, expected flags contained)
    ({"mean": 5, "sd": 2, "n": N}, "given", []),
    ({"mean": 5, "se": 0.5, "n": N}, "from se", []),
    ({"mean": 5, "ci_low": 4, "ci_high": 6, "ci_level": 0.95, "n": N}, "from ci", []),
    ({"mean": 5, "ci_low": 4, "ci_high": 6, "n": N}, "from ci", ["ci-level-assumed-95"]),
    ({"median": 5, "q1": 4, "q3": 6, "min": 1, "max": 9, "n": N}, "from iqr and range (estimate)",
     ["sd-estimated", "mean-estimated"]),
    ({"median": 5, "q1": 4, "q3": 6, "n": N}, "from iqr (estimate)", ["sd-estimated"]),
    ({"median": 5, "min": 1, "max": 9, "n": N}, "from range (estimate)", ["sd-estimated"]),
    ({"mean": 5, "sd": 2, "se": 0.3, "n": N}, "given", ["sd-inconsistent"]),
    ({"mean": 5, "se": 0.5, "ci_low": 3, "ci_high": 7, "n": N}, "from se", []),
    ({"mean": 5, "se": 0.5}, None, ["n-missing", "sd-underivable"]),
    ({"mean": 5, "ci_low": 1, "ci_high": 6, "n": N}, "from ci", ["ci-asymmetric"]),
]  # fmt: skip


@pytest.mark.parametrize(("given_stats", "method", "flags"), CASES)
def test_normalise_summaries_method_and_flags(given_stats, method, flags):
    out = normalise_summaries(pd.DataFrame([given_stats])).iloc[0]
    assert (out["sd_method"] if pd.notna(out["sd_method"]) else None) == method
    assert set(flags) <= set(filter(None, out["flags"].split(";")))
    assert pd.isna(out["reason"])
    if method is not None:
        assert out["sd_method"] in SD_METHODS
        assert ("(estimate)" in out["sd_method"]) == ("sd-estimated" in out["flags"])
        if "sd-inconsistent" not in out["flags"]:
            assert out["se"] == pytest.approx(out["sd"] / np.sqrt(out["n"]), rel=1e-12)


def test_normalise_summaries_derived_values_match_estimators():
    frame = pd.DataFrame(
        {"n": [25, 40], "median": [np.nan, 5.0], "q1": [np.nan, 4.0], "q3": [np.nan, 7.0],
         "mean": [8.0, np.nan], "ci_low": [6.0, np.nan], "ci_high": [10.0, np.nan]}
    )  # fmt: skip
    out = normalise_summaries(frame)
    assert out.loc[0, "sd"] == pytest.approx(float(sd_from_ci(6.0, 10.0, 25)))
    assert out.loc[1, "sd"] == pytest.approx(float(sd_from_iqr(4.0, 7.0, 40)))
    assert out.loc[1, "mean"] == pytest.approx(float(mean_from_median_iqr(4.0, 5.0, 7.0)))
    assert out.loc[1, "mean_method"] == "from median and iqr (estimate)"


@pytest.mark.parametrize(
    "bad",
    [
        {"mean": 5, "sd": -1, "n": 10},
        {"mean": 5, "se": -0.1, "n": 10},
        {"mean": 5, "sd": 1, "n": 0},
        {"mean": 5, "sd": 1, "n": 7.5},
        {"mean": 5, "ci_low": 6, "ci_high": 4, "n": 10},
        {"median": 5, "q1": 6, "q3": 4, "n": 10},
        {"median": 5, "min": 9, "max": 1, "n": 10},
        {"mean": 5, "sd": "about two", "n": 10},
        {"mean": 50, "min": 1, "max": 9, "n": 10},
        {"mean": 5, "sd": 1, "ci_low": 4, "ci_high": 6, "ci_level": 1.5, "n": 10},
    ],
)
def test_normalise_summaries_rejects_impossible_statistics(bad):
    out = normalise_summaries(pd.DataFrame([bad])).iloc[0]
    assert out["reason"] == RejectReason.INVALID_STATISTIC
    assert out["message"] != "" and pd.isna(out["sd_method"])


def test_normalise_summaries_orphan_dispersion_and_passthrough():
    frame = pd.DataFrame({"trait": ["a", "b"], "sd": [1.0, 1.0], "mean": [np.nan, 3.0], "n": 5})
    out = normalise_summaries(frame)
    assert out.loc[0, "reason"] == RejectReason.ORPHAN_STATISTIC
    assert pd.isna(out.loc[1, "reason"]) and list(out["trait"]) == ["a", "b"]


def test_range_or_quartiles_alone_are_kept_not_orphaned():
    # a population described only by its range (common in field guides) is usable data
    frame = pd.DataFrame(
        {
            "min": [11.3, np.nan],
            "max": [12.9, np.nan],
            "q1": [np.nan, 2.0],
            "q3": [np.nan, 3.0],
            "n": 14,
        }
    )
    out = normalise_summaries(frame)
    assert out["reason"].isna().all()
    assert out["mean"].isna().all()  # nothing invented for the centre


def test_normalise_summaries_reads_percent_ci_level():
    out = normalise_summaries(
        pd.DataFrame([{"mean": 5, "ci_low": 4, "ci_high": 6, "ci_level": 90, "n": 30}])
    )
    assert out.loc[0, "sd"] == pytest.approx(float(sd_from_ci(4, 6, 30, 0.90)))
    assert "ci-level-assumed-95" not in out.loc[0, "flags"]


# --- statistics under unit conversion -----------------------------------------------------


def _summary_of(values: pd.Series) -> pd.DataFrame:
    frame = pd.DataFrame({"group": "all", "value": values.to_numpy()})
    return summarise_individuals(frame, ["group"])


def test_grams_to_kilograms_commutes_with_summarising(penguins):
    mass_g = penguins["body_mass_g"]
    converted = convert_summary_units(_summary_of(mass_g), scale=1e-3)
    direct = _summary_of(mass_g * 1e-3)
    for column in ("mean", "sd", "se", "median", "q1", "q3", "min", "max"):
        assert converted[column].iloc[0] == pytest.approx(direct[column].iloc[0], rel=1e-12)


def test_affine_temperature_like_conversion_leaves_offset_out_of_spread(penguins):
    # degF -> degC: x*5/9 - 160/9 (NIST SP 811, B.9); flipper lengths stand in as numbers
    scale, offset = 5 / 9, -32 * 5 / 9
    values = penguins["flipper_length_mm"].dropna()
    converted = convert_summary_units(_summary_of(values), scale, offset)
    direct = _summary_of(values * scale + offset)
    for column in ("mean", "sd", "se", "median", "q1", "q3", "min", "max"):
        assert converted[column].iloc[0] == pytest.approx(direct[column].iloc[0], rel=1e-12)
    assert converted["sd"].iloc[0] == pytest.approx(values.std() * 5 / 9, rel=1e-12)


def test_negative_scale_swaps_bounds_and_keeps_sd_positive():
    frame = pd.DataFrame(
        [{"mean": 2.0, "sd": 1.0, "min": 0.0, "max": 5.0, "ci_low": 1.0, "ci_high": 3.0}]
    )
    out = convert_summary_units(frame, scale=-2.0, offset=1.0).iloc[0]
    assert out["min"] == -9.0 and out["max"] == 1.0  # -2*5+1, -2*0+1
    assert out["ci_low"] < out["ci_high"] and out["sd"] == 2.0
    with pytest.raises(ConfigError):
        convert_summary_units(frame, scale=0.0)


def test_normalise_summaries_names_every_problem_of_a_row():
    rows = [
        {"mean": 5, "sd": -1, "n": 0},
        {"mean": 5, "sd": 1, "n": 10},
        {"mean": 5, "sd": -1, "n": 0},
    ]
    out = normalise_summaries(pd.DataFrame(rows))
    assert out.loc[0, "message"].split("; ") == [
        "n must be a whole number of at least 1",
        "sd is negative",
    ]
    assert out.loc[2, "message"] == out.loc[0, "message"] and out.loc[1, "message"] == ""
