"""Population statistics: bring every population summary to a mean, an SD, an SE and an n.

What it does: derives the standard deviation (and standard error) that pooling needs from
whatever a source reported (SE, confidence interval, quartiles, range), estimates a missing
mean from a median, summarises individual values per group, combines subgroups (e.g. sexes)
into one group, and moves statistics through an affine unit conversion. Every estimate is
named in `sd_method` / `mean_method` and flagged. Rows whose statistics contradict each other
come back with a reason code, never as an exception.

What it leaves to others: parsing cells and units (`values`, `units`), finding the
conversion factor (`units`), correcting rates for temperature (`temperature`), and writing the
result (`package`). The formulas and their sources are listed in docs/methods.md.
"""

from __future__ import annotations

from collections.abc import Sequence
from functools import lru_cache

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from harmonize.errors import ConfigError, RejectReason

SD_METHODS = (
    "given",
    "from variance",
    "from se",
    "from ci",
    "from cv",
    "from iqr (estimate)",
    "from range (estimate)",
    "from iqr and range (estimate)",
    "computed from individuals",
    "combined groups",
)
MEAN_METHODS = (
    "given",
    "from median and iqr (estimate)",
    "from median and range (estimate)",
    "from median, iqr and range (estimate)",
    "computed from individuals",
    "combined groups",
)
# Flags written to the `flags` column (semicolon-joined); their meaning is in docs/methods.md.
FLAGS = (
    "sd-estimated",
    "mean-estimated",
    "ci-level-assumed-95",
    "n-missing",
    "n-unreadable",
    "sd-inconsistent",
    "sd-underivable",
    "ci-asymmetric",
)
STATISTIC_COLUMNS = (
    "n",
    "mean",
    "sd",
    "se",
    "ci_low",
    "ci_high",
    "ci_level",
    "median",
    "q1",
    "q3",
    "min",
    "max",
    "variance",
    "cv",
)
# Statistics that are positions on the measurement scale: they follow value*scale+offset.
LOCATION_COLUMNS = ("mean", "median", "q1", "q3", "min", "max", "ci_low", "ci_high")
# Statistics that are distances on the scale: an offset cancels, only |scale| applies.
SPREAD_COLUMNS = ("sd", "se")
# A variance is a squared distance: it takes scale**2 (never an offset). A coefficient of
# variation is a ratio of two quantities in the same unit, so it does not change at all.
SQUARED_SPREAD_COLUMNS = ("variance",)
# Lower/upper pairs that trade places when the scale is negative.
_BOUND_PAIRS = (("min", "max"), ("q1", "q3"), ("ci_low", "ci_high"))

DEFAULT_CI_LEVEL = 0.95
# A given SD and a given SE*sqrt(n) further apart than this (relative) are reported.
SD_CONSISTENCY_TOLERANCE = 0.01
# A given mean further than this fraction of the CI width from the CI midpoint suggests an
# asymmetric (e.g. log-scale) interval, for which SD-from-CI does not hold.
CI_ASYMMETRY_TOLERANCE = 0.10


def _float_array(values: ArrayLike) -> np.ndarray:
    return np.asarray(values, dtype=float)


def sd_from_se(se: ArrayLike, n: ArrayLike) -> np.ndarray:
    """SD of individuals from the standard error of the mean."""
    # Cochrane Handbook v6.4 (2023) 6.5.2.2: SD = SE * sqrt(N)
    se, n = _float_array(se), _float_array(n)
    with np.errstate(invalid="ignore"):
        return np.where(n >= 1, se * np.sqrt(n), np.nan)


def sd_from_variance(variance: ArrayLike) -> np.ndarray:
    """SD as the square root of the variance (its definition); negative variances give NaN."""
    variance = _float_array(variance)
    with np.errstate(invalid="ignore"):
        return np.where(variance >= 0, np.sqrt(np.abs(variance)), np.nan)


def sd_from_cv(cv: ArrayLike, mean: ArrayLike) -> np.ndarray:
    """SD from a coefficient of variation (as a fraction, not percent): SD = CV * |mean|.

    CV = SD / mean by definition (e.g. Sokal & Rohlf, Biometry, 4th ed., section 4.10; from
    memory). Only meaningful on a ratio scale; the caller passes the mean in the same unit.
    """
    return _float_array(cv) * np.abs(_float_array(mean))


def sd_from_ci(
    lower: ArrayLike, upper: ArrayLike, n: ArrayLike, level: ArrayLike = DEFAULT_CI_LEVEL
) -> np.ndarray:
    """SD from a confidence interval of a mean, using the t distribution for every n."""
    # Cochrane Handbook v6.4 6.5.2.2: SD = sqrt(N) * (upper - lower) / (2 * t_{(1+level)/2, N-1}).
    # The Handbook uses z (3.92 for 95 %) for large samples; t converges to z, so we keep t.
    from scipy import stats as scipy_stats  # imported on use: scipy takes ~0.7 s to import

    lower, upper, n, level = map(_float_array, (lower, upper, n, level))
    with np.errstate(invalid="ignore", divide="ignore"):
        t_quantile = scipy_stats.t.ppf((1.0 + level) / 2.0, n - 1.0)
        sd = np.sqrt(n) * (upper - lower) / (2.0 * t_quantile)
    return np.where((n >= 2) & np.isfinite(sd), sd, np.nan)


# Wan et al. 2014 use the exact expected range of n standard-normal values for n <= 50 (their
# Table 1, the "d2" constants of quality control) and the approximation of eq. 7 above that.
WAN_EXACT_RANGE_MAX_N = 50


@lru_cache(maxsize=1)
def _expected_normal_ranges() -> np.ndarray:
    """E[range] of n standard-normal values for n = 0..50 (0 and 1 are 0)."""
    # E[range] = integral over x of 1 - Phi(x)^n - (1 - Phi(x))^n (order statistics theory),
    # integrated once per process on a fine grid; beyond |x| = 12 the integrand is < 1e-30.
    from scipy import integrate
    from scipy import stats as scipy_stats

    x = np.linspace(-12.0, 12.0, 24_001)
    n = np.arange(WAN_EXACT_RANGE_MAX_N + 1, dtype=float)[:, None]
    lower, upper = scipy_stats.norm.cdf(x), scipy_stats.norm.sf(x)
    integrand = 1.0 - lower**n - upper**n
    table = integrate.simpson(integrand, x=x, axis=1)
    table[:2] = 0.0
    return table


def _wan_range_divisor(n: np.ndarray) -> np.ndarray:
    # Wan et al. 2014, BMC Med Res Methodol 14:135: xi(n) from Table 1 for n <= 50, else eq. 7
    # xi(n) = 2 * Phi^-1((n-0.375)/(n+0.25))
    from scipy import stats as scipy_stats

    with np.errstate(invalid="ignore"):
        approximate = 2.0 * scipy_stats.norm.ppf((n - 0.375) / (n + 0.25))
    small = (n >= 2) & (n <= WAN_EXACT_RANGE_MAX_N) & (n == np.floor(n))
    exact = _expected_normal_ranges()[np.where(small, n, 0).astype(int)]
    return np.where(small, exact, approximate)


def _wan_iqr_divisor(n: np.ndarray) -> np.ndarray:
    # Wan et al. 2014 eq. 16: eta(n) = 2 * Phi^-1((0.75n-0.125)/(n+0.25))
    from scipy import stats as scipy_stats

    with np.errstate(invalid="ignore"):
        return 2.0 * scipy_stats.norm.ppf((0.75 * n - 0.125) / (n + 0.25))


def _divide_positive(numerator: np.ndarray, divisor: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(divisor > 0, numerator / divisor, np.nan)


def sd_from_iqr(q1: ArrayLike, q3: ArrayLike, n: ArrayLike) -> np.ndarray:
    """Estimated SD from the interquartile range (assumes a normal distribution)."""
    # Wan et al. 2014 eq. 16 (scenario S3)
    q1, q3, n = map(_float_array, (q1, q3, n))
    return _divide_positive(q3 - q1, _wan_iqr_divisor(n))


def sd_from_range(minimum: ArrayLike, maximum: ArrayLike, n: ArrayLike) -> np.ndarray:
    """Estimated SD from the range (assumes a normal distribution)."""
    # Wan et al. 2014 eq. 7 with Table 1 for n <= 50 (scenario S1)
    minimum, maximum, n = map(_float_array, (minimum, maximum, n))
    return _divide_positive(maximum - minimum, _wan_range_divisor(n))


def sd_from_iqr_and_range(
    minimum: ArrayLike, q1: ArrayLike, q3: ArrayLike, maximum: ArrayLike, n: ArrayLike
) -> np.ndarray:
    """Estimated SD from range and interquartile range together (normal distribution)."""
    # Wan et al. 2014 eq. 12 (scenario S2): the mean of the two half-weighted estimates,
    # (b-a)/(2*xi(n)) + (q3-q1)/(2*eta(n)).
    minimum, q1, q3, maximum, n = map(_float_array, (minimum, q1, q3, maximum, n))
    return 0.5 * sd_from_range(minimum, maximum, n) + 0.5 * sd_from_iqr(q1, q3, n)


def mean_from_median_iqr(q1: ArrayLike, median: ArrayLike, q3: ArrayLike) -> np.ndarray:
    """Estimated mean from median and quartiles."""
    # Wan et al. 2014 eq. 14: (q1 + m + q3) / 3
    q1, median, q3 = map(_float_array, (q1, median, q3))
    return (q1 + median + q3) / 3.0


def mean_from_median_range(minimum: ArrayLike, median: ArrayLike, maximum: ArrayLike) -> np.ndarray:
    """Estimated mean from median and range."""
    # Hozo et al. 2005, BMC Med Res Methodol 5:13; Wan et al. 2014 eq. 2: (a + 2m + b) / 4
    minimum, median, maximum = map(_float_array, (minimum, median, maximum))
    return (minimum + 2.0 * median + maximum) / 4.0


def mean_from_median_iqr_and_range(
    minimum: ArrayLike, q1: ArrayLike, median: ArrayLike, q3: ArrayLike, maximum: ArrayLike
) -> np.ndarray:
    """Estimated mean from median, quartiles and range."""
    # Wan et al. 2014 eq. 10 (scenario S2): (a + 2 q1 + 2 m + 2 q3 + b) / 8
    minimum, q1, median, q3, maximum = map(_float_array, (minimum, q1, median, q3, maximum))
    return (minimum + 2.0 * q1 + 2.0 * median + 2.0 * q3 + maximum) / 8.0


def combine_two_groups(
    n1: ArrayLike, mean1: ArrayLike, sd1: ArrayLike, n2: ArrayLike, mean2: ArrayLike, sd2: ArrayLike
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Combine two groups' n, mean and SD into one group, element-wise."""
    # Cochrane Handbook v6.4 Table 6.5.a (combining groups), written as in the Handbook.
    n1, mean1, sd1, n2, mean2, sd2 = map(_float_array, (n1, mean1, sd1, n2, mean2, sd2))
    # A single individual has no SD; its within-group sum of squares is zero, not unknown.
    within1 = np.where(n1 == 1, 0.0, (n1 - 1.0) * sd1**2)
    within2 = np.where(n2 == 1, 0.0, (n2 - 1.0) * sd2**2)
    n = n1 + n2
    mean = (n1 * mean1 + n2 * mean2) / n
    between = n1 * n2 / n * (mean1**2 + mean2**2 - 2.0 * mean1 * mean2)
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.sqrt((within1 + within2 + between) / (n - 1.0))
    return n, mean, np.where(n >= 2, sd, np.nan)


def combine_groups(n: ArrayLike, mean: ArrayLike, sd: ArrayLike) -> tuple[float, float, float]:
    """Combine k groups into one: total n, pooled mean, SD of all individuals together.

    Equals applying Cochrane Table 6.5.a to the groups one after another (tested), written in
    closed form: SD^2 = (sum (n_i-1) sd_i^2 + sum n_i (mean_i - M)^2) / (N - 1).
    """
    n, mean, sd = map(_float_array, (n, mean, sd))
    total = n.sum()
    pooled_mean = (n * mean).sum() / total
    within = np.where(n == 1, 0.0, (n - 1.0) * sd**2).sum()
    between = (n * (mean - pooled_mean) ** 2).sum()
    pooled_sd = np.sqrt((within + between) / (total - 1.0)) if total >= 2 else np.nan
    return float(total), float(pooled_mean), float(pooled_sd)


def combine_group_summaries(frame: pd.DataFrame, by: Sequence[str]) -> pd.DataFrame:
    """Combine rows with columns n, mean, sd into one row per `by` group (vectorised).

    A group with any row lacking n or mean, or lacking sd where n > 1, gets NaN statistics:
    guessing would hide the gap.
    """
    by = list(by)
    _require_columns(frame, [*by, "n", "mean", "sd"], "combine_group_summaries")
    n = frame["n"].astype(float)
    mean = frame["mean"].astype(float)
    sd = frame["sd"].astype(float)
    gap = n.isna() | mean.isna() | (sd.isna() & (n != 1))
    parts = frame[by].assign(
        _n=n,
        _sum=n * mean,
        _within=np.where(n == 1, 0.0, (n - 1.0) * sd**2),
        _gap=gap,
    )
    grouped = parts.groupby(by, dropna=False, sort=True)
    totals = grouped[["_n", "_sum", "_within"]].sum()
    has_gap = grouped["_gap"].any()
    pooled_mean = totals["_sum"] / totals["_n"]
    # between-group sum of squares needs each row's distance to its own group's pooled mean
    row_pooled_mean = parts.join(pooled_mean.rename("_pooled"), on=by)["_pooled"]
    parts["_between"] = n * (mean - row_pooled_mean) ** 2
    between = parts.groupby(by, dropna=False, sort=True)["_between"].sum()
    with np.errstate(invalid="ignore", divide="ignore"):
        pooled_sd = np.sqrt((totals["_within"] + between) / (totals["_n"] - 1.0))
    out = pd.DataFrame(
        {
            "n": totals["_n"].where(~has_gap),
            "mean": pooled_mean.where(~has_gap),
            "sd": pooled_sd.where(~has_gap & (totals["_n"] >= 2)),
        }
    )
    out["se"] = out["sd"] / np.sqrt(out["n"])
    out["sd_method"] = "combined groups"
    out["mean_method"] = "combined groups"
    return out.reset_index()


def summarise_individuals(frame: pd.DataFrame, by: list[str], value: str = "value") -> pd.DataFrame:
    """n, mean, SD (ddof=1), SE, min, max, median and quartiles of individual values per group.

    Quartiles use linear interpolation between order statistics (numpy/pandas 'linear',
    Hyndman & Fan 1996 definition 7). Missing values are left out; a group key that is missing
    (e.g. unknown sex) is a group of its own. Groups without any value are dropped.
    """
    _require_columns(frame, [*by, value], "summarise_individuals")
    values = frame[by].assign(_value=pd.to_numeric(frame[value], errors="coerce").astype(float))
    grouped = values.groupby(by, dropna=False, sort=True)["_value"]
    out = grouped.agg(n="count", mean="mean", sd="std", min="min", max="max", median="median")
    out["q1"] = grouped.quantile(0.25)
    out["q3"] = grouped.quantile(0.75)
    out = out[out["n"] > 0]
    out["se"] = out["sd"] / np.sqrt(out["n"])
    out["sd_method"] = "computed from individuals"
    out["mean_method"] = "computed from individuals"
    columns = ["n", "mean", "sd", "se", "min", "max", "median", "q1", "q3"]
    return out[[*columns, "sd_method", "mean_method"]].reset_index()


def _require_columns(frame: pd.DataFrame, columns: Sequence[str], caller: str) -> None:
    missing = [column for column in columns if column not in frame.columns]
    if missing:
        raise ConfigError(
            f"{caller} needs columns {missing}", hint=f"present: {list(frame.columns)}"
        )


def _join_where(masks: list[np.ndarray], texts: list[str], separator: str) -> np.ndarray:
    """Per row, the texts whose mask is true, joined by `separator` ('' where none).

    Rows are encoded as a bit pattern, so strings are built once per distinct pattern
    rather than once per row.
    """
    if not masks:
        return np.array([], dtype=object)
    bits = np.stack([np.asarray(mask, dtype=bool) for mask in masks], axis=1)
    codes = bits @ (1 << np.arange(len(masks), dtype=np.int64))
    patterns, inverse = np.unique(codes, return_inverse=True)
    joined = np.array(
        [separator.join(t for i, t in enumerate(texts) if p >> i & 1) for p in patterns],
        dtype=object,
    )
    return joined[inverse.reshape(-1)]


def _first_available(candidates: list[tuple[str, pd.Series]], index: pd.Index):
    """Pick, per row, the first candidate that is a number; return values and method names."""
    chosen = pd.Series(np.nan, index=index)
    method = pd.Series(pd.NA, index=index, dtype="string")
    for name, candidate in reversed(candidates):
        available = candidate.notna()
        chosen = chosen.where(~available, candidate)
        method = method.where(~available, name)
    return chosen, method


def _validity_problems(s: pd.DataFrame, not_numbers: dict[str, pd.Series]) -> list:
    """(mask, message) for every way a row's statistics can be impossible."""
    problems = [(mask, f"{column} is not a number") for column, mask in not_numbers.items()]
    problems += [(np.isinf(s[column]), f"{column} is not finite") for column in STATISTIC_COLUMNS]
    problems += [
        (
            (s["n"] < 1) | (s["n"].notna() & (s["n"] != np.floor(s["n"]))),
            "n must be a whole number of at least 1",
        ),
        (s["sd"] < 0, "sd is negative"),
        (s["se"] < 0, "se is negative"),
        (s["variance"] < 0, "variance is negative"),
        (s["cv"] < 0, "cv is negative"),
        ((s["ci_level"] <= 0) | (s["ci_level"] >= 1), "ci_level must lie between 0 and 1"),
        (s["ci_low"] > s["ci_high"], "ci_low is above ci_high"),
        (s["q1"] > s["q3"], "q1 is above q3"),
        (s["min"] > s["max"], "min is above max"),
        ((s["median"] < s["q1"]) | (s["median"] > s["q3"]), "median lies outside q1..q3"),
        ((s["q1"] < s["min"]) | (s["q3"] > s["max"]), "quartiles lie outside min..max"),
    ]
    for centre in ("mean", "median"):
        outside = (s[centre] < s["min"]) | (s[centre] > s["max"])
        problems.append((outside, f"{centre} lies outside min..max"))
    outside_ci = (s["mean"] < s["ci_low"]) | (s["mean"] > s["ci_high"])
    problems.append((outside_ci, "mean lies outside its confidence interval"))
    return problems


def normalise_summaries(frame: pd.DataFrame) -> pd.DataFrame:
    """Fill sd, se and mean of population summaries, name how, flag estimates, reject nonsense.

    Input columns (any may be absent or NaN): n, mean, sd, se, ci_low, ci_high, ci_level,
    median, q1, q3, min, max; other columns pass through. ci_level is a fraction (0.95); values
    from 50 to below 100 are read as percent. Output adds sd_method, mean_method, flags, reason
    (an errors.RejectReason value or NA) and message. Rows with a reason keep their statistics
    as given and get nothing derived.
    """
    out = frame.copy()
    not_numbers: dict[str, pd.Series] = {}
    for column in STATISTIC_COLUMNS:
        if column not in out.columns:
            out[column] = np.nan
        numeric = pd.to_numeric(out[column], errors="coerce").astype(float)
        not_numbers[column] = out[column].notna() & numeric.isna()
        out[column] = numeric
    # 90 or 95 means percent; a level below 50 % is nobody's choice, so 1..50 stays invalid
    percent = (out["ci_level"] >= 50) & (out["ci_level"] < 100)
    out["ci_level"] = out["ci_level"].where(~percent, out["ci_level"] / 100.0)

    problems = _validity_problems(out, not_numbers)
    problem_masks = [np.asarray(mask, dtype=bool) for mask, _ in problems]
    invalid = pd.Series(np.logical_or.reduce(problem_masks), index=out.index)
    message = pd.Series(_join_where(problem_masks, [t for _, t in problems], "; "), index=out.index)
    has_centre = out["mean"].notna() | out["median"].notna()
    # An SD or SE says nothing without the centre it spreads around; a range, quartiles or a
    # confidence interval on their own still describe the population and are kept.
    has_dispersion = out[[*SPREAD_COLUMNS, *SQUARED_SPREAD_COLUMNS, "cv"]].notna().any(axis=1)
    orphan = ~invalid & has_dispersion & ~has_centre
    message = message.where(~orphan, "a dispersion statistic without a mean or median")
    reason = pd.Series(pd.NA, index=out.index, dtype="string")
    reason = reason.where(~invalid, RejectReason.INVALID_STATISTIC.value)
    reason = reason.where(~orphan, RejectReason.ORPHAN_STATISTIC.value)
    usable = ~(invalid | orphan)

    n = out["n"]
    has_ci = out["ci_low"].notna() & out["ci_high"].notna()
    level_assumed = has_ci & out["ci_level"].isna() & usable
    out["ci_level"] = out["ci_level"].where(~level_assumed, DEFAULT_CI_LEVEL)
    index = out.index

    def series(values: np.ndarray) -> pd.Series:
        return pd.Series(values, index=index)

    # Preference: given > variance > se > ci > cv > iqr+range > iqr > range (exact before
    # estimated, more information before less). SD from a CV needs a given mean.
    sd_candidates = [
        ("given", out["sd"]),
        ("from variance", series(sd_from_variance(out["variance"]))),
        ("from se", series(sd_from_se(out["se"], n))),
        ("from ci", series(sd_from_ci(out["ci_low"], out["ci_high"], n, out["ci_level"]))),
        ("from cv", series(sd_from_cv(out["cv"], out["mean"]))),
        (
            "from iqr and range (estimate)",
            series(sd_from_iqr_and_range(out["min"], out["q1"], out["q3"], out["max"], n)),
        ),
        ("from iqr (estimate)", series(sd_from_iqr(out["q1"], out["q3"], n))),
        ("from range (estimate)", series(sd_from_range(out["min"], out["max"], n))),
    ]
    sd, sd_method = _first_available(sd_candidates, index)
    given_sd, given_se = out["sd"], out["se"]
    out["sd"] = given_sd.where(~usable, sd)
    out["sd_method"] = sd_method.where(usable, pd.NA)
    derived_se = out["sd"] / np.sqrt(n)
    out["se"] = given_se.where(given_se.notna() | ~usable, derived_se)

    mean_candidates = [
        ("given", out["mean"]),
        (
            "from median, iqr and range (estimate)",
            series(
                mean_from_median_iqr_and_range(
                    out["min"], out["q1"], out["median"], out["q3"], out["max"]
                )
            ),
        ),
        (
            "from median and iqr (estimate)",
            series(mean_from_median_iqr(out["q1"], out["median"], out["q3"])),
        ),
        (
            "from median and range (estimate)",
            series(mean_from_median_range(out["min"], out["median"], out["max"])),
        ),
    ]
    mean, mean_method = _first_available(mean_candidates, index)
    given_mean = out["mean"]
    out["mean"] = given_mean.where(~usable, mean)
    out["mean_method"] = mean_method.where(usable, pd.NA)

    with np.errstate(invalid="ignore", divide="ignore"):
        sd_gap = (given_sd - given_se * np.sqrt(n)).abs() / given_sd
        ci_offset = (given_mean - (out["ci_low"] + out["ci_high"]) / 2.0).abs()
        asymmetric = ci_offset > CI_ASYMMETRY_TOLERANCE * (out["ci_high"] - out["ci_low"])
    flag_masks = [
        (out["sd_method"].str.contains("(estimate)", regex=False).fillna(False), "sd-estimated"),
        (
            out["mean_method"].str.contains("(estimate)", regex=False).fillna(False),
            "mean-estimated",
        ),
        (level_assumed, "ci-level-assumed-95"),
        (n.isna(), "n-missing"),
        (sd_gap > SD_CONSISTENCY_TOLERANCE, "sd-inconsistent"),
        (has_dispersion & out["sd"].isna(), "sd-underivable"),
        (asymmetric & (out["ci_high"] > out["ci_low"]), "ci-asymmetric"),
    ]
    usable_rows = usable.to_numpy()
    masks = [np.asarray(mask, dtype=bool) & usable_rows for mask, _ in flag_masks]
    out["flags"] = _join_where(masks, [name for _, name in flag_masks], ";")
    out["reason"] = reason
    out["message"] = message
    return out


def convert_summary_units(
    frame: pd.DataFrame, scale: ArrayLike, offset: ArrayLike = 0.0
) -> pd.DataFrame:
    """Move summary statistics to another unit given the affine map value*scale + offset.

    Locations (mean, median, quartiles, min, max, CI bounds) take the full map; spreads (SD,
    SE) take |scale| only, because an offset shifts every value alike and cancels in a
    difference (SD of temperatures degF -> degC is x5/9). A negative scale swaps each
    lower/upper pair. `scale` and `offset` are scalars or one value per row.
    """
    scale = np.broadcast_to(_float_array(scale), (len(frame),))
    offset = np.broadcast_to(_float_array(offset), (len(frame),))
    if not (np.all(np.isfinite(scale)) and np.all(scale != 0) and np.all(np.isfinite(offset))):
        raise ConfigError("unit conversion needs a finite, non-zero scale and a finite offset")
    out = frame.copy()
    for column in LOCATION_COLUMNS:
        if column in out.columns:
            out[column] = out[column].astype(float) * scale + offset
    for column in SPREAD_COLUMNS:
        if column in out.columns:
            out[column] = out[column].astype(float) * np.abs(scale)
    for column in SQUARED_SPREAD_COLUMNS:
        if column in out.columns:
            out[column] = out[column].astype(float) * scale**2
    flipped = scale < 0
    for lower, upper in _BOUND_PAIRS:
        if lower in out.columns and upper in out.columns and flipped.any():
            low, high = out[lower].copy(), out[upper].copy()
            out[lower] = low.where(~flipped, high)
            out[upper] = high.where(~flipped, low)
    return out
