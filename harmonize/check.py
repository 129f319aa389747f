"""Find unit mistakes in trait values already put in one unit per trait; flag, never change.

The check works on an *observations* frame (columns `trait`, `value` in the trait's canonical
unit, `group`, `taxon`) and returns findings as frozen dataclasses. It looks for values outside a
trait's plausible range and for groups of values (per source, taxon or column) whose level sits
a known conversion factor away from the rest of the same trait: robust statistics (medians,
MAD) on log10 values, or on the Celsius scale for temperatures. The method and its sources are
in docs/methods.md, "Unit-consistency check".

Left to others: reading a package or a raw table into observations and reporting unparsable,
mismatched or mixed units (`harmonize.check_sources`), drawing the report
(`harmonize.report_html`), printing and exit codes (`harmonize.cli.check_cmd`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from enum import StrEnum

import numpy as np
import pandas as pd

GROUP_BY = ("source", "taxon", "column")
MAD_TO_SD = 1.4826  # 1/Φ⁻¹(3/4): MAD of normal data times this estimates σ (Rousseeuw & Croux 1993)
MEDIAN_SE = math.sqrt(math.pi / 2)  # SE of a median ≈ √(π/2)·σ/√n for normal data (large n)


class FindingKind(StrEnum):
    SUSPECTED_UNIT_ERROR = "suspected-unit-error"
    IMPLAUSIBLE_VALUE = "implausible-value"
    MISSING_UNIT = "missing-unit"
    UNPARSABLE_UNIT = "unparsable-unit"
    DIMENSION_MISMATCH = "dimension-mismatch"
    UNIT_CONFLICT = "unit-conflict"
    MIXED_UNITS = "mixed-units"


SEVERITY = {
    FindingKind.SUSPECTED_UNIT_ERROR: "warning",
    FindingKind.IMPLAUSIBLE_VALUE: "warning",
    FindingKind.MISSING_UNIT: "error",
    FindingKind.UNPARSABLE_UNIT: "error",
    FindingKind.DIMENSION_MISMATCH: "error",
    FindingKind.UNIT_CONFLICT: "error",  # the source contradicts itself
    FindingKind.MIXED_UNITS: "note",  # legitimate when declared; worth a look, not an alarm
}


@dataclass(frozen=True)
class Hypothesis:
    """One way a group of values can be off: `undo` maps its values back to the right scale."""

    label: str  # e.g. '×1000', '÷25.4', '°F scale'
    cause: str  # the usual mistake behind it
    scale: str  # 'log10' or 'celsius'
    shift: float  # log10 factor (log10 scale) or the offset (Celsius scale); 0 for the °F scale
    fahrenheit: int = 0  # +1: °F recorded as °C; -1: °C recorded as °F

    def undo(self, level: np.ndarray) -> np.ndarray:
        if self.fahrenheit == 1:
            return (level - 32.0) * 5.0 / 9.0  # NIST SP 811, B.8: t/°C = (t/°F − 32)/1.8
        if self.fahrenheit == -1:
            return level * 9.0 / 5.0 + 32.0
        return level - self.shift


# Exact factors from NIST SP 811 (2008), Appendix B.8: 1 in = 25.4 mm, 1 lb = 0.45359237 kg,
# 1 cal (thermochemical) = 4.184 J, 1 h = 3600 s, 1 d = 86400 s; powers of ten are SI prefixes.
_FACTORS = (
    (1e3, "1000", "g recorded as kg, mm as m or mL as L, or the reverse"),
    (1e6, "10^6", "mg recorded as kg or µm as m, or the reverse"),
    (10.0, "10", "mm recorded as cm, or the reverse"),
    (100.0, "100", "cm recorded as m, or a percentage as a fraction, or the reverse"),
    (25.4, "25.4", "inches recorded as mm, or the reverse"),
    (1 / 0.45359237, "2.2046", "pounds recorded as kg, or the reverse"),
    (4.184, "4.184", "calories recorded as joules, or the reverse"),
    (3600.0, "3600", "per-second values recorded as per hour, or the reverse"),
    (86400.0, "86400", "per-second values recorded as per day, or the reverse"),
)
LOG_HYPOTHESES = tuple(
    Hypothesis(f"{sign}{label}", cause, "log10", direction * math.log10(factor))
    for factor, label, cause in _FACTORS
    for sign, direction in (("×", 1), ("÷", -1))
)
CELSIUS_HYPOTHESES = (
    Hypothesis("+273.15", "kelvin recorded as °C", "celsius", 273.15),  # NIST SP 811, 4.2.1.1
    Hypothesis("-273.15", "°C recorded as kelvin", "celsius", -273.15),
    Hypothesis("°F scale", "°F recorded as °C", "celsius", 0.0, fahrenheit=1),
    Hypothesis("°C read as °F", "°C recorded as °F", "celsius", 0.0, fahrenheit=-1),
)


@dataclass(frozen=True)
class CheckSettings:
    """Thresholds of the suspected-unit-error rule (docs/methods.md, "Unit-consistency check")."""

    min_values: int = 3  # a group (or a taxon within it) needs this many values to be compared
    outlier_mads: float = 3.0  # Leys et al. 2013: median ± 3 MAD is the "very conservative" rule
    tolerance_ses: float = 3.0  # a factor fits when the residual is within 3 SE of the difference
    log_tolerance: tuple[float, float] = (0.05, 0.12)  # floor, cap in log10 units (×1.12 .. ×1.32)
    celsius_tolerance: tuple[float, float] = (1.5, 4.0)  # floor, cap in kelvin
    min_spread: Mapping[str, float] = field(
        default_factory=lambda: {"log10": 0.01, "celsius": 0.1}
    )  # stops constant groups (MAD 0) from turning any difference into a huge separation


@dataclass(frozen=True)
class TraitInfo:
    trait: str
    unit: str  # canonical unit, pint text
    plausible: tuple[float, float] | None
    celsius: tuple[float, float] | None = None  # (scale, offset) to °C for a temperature trait


@dataclass(frozen=True)
class Finding:
    """One thing a reviewer should look at. Never a change to the data."""

    kind: str
    severity: str
    trait: str
    group_by: str
    group: str
    values: int  # values concerned
    message: str
    factor: str | None = None  # hypothesis label of a suspected unit error
    likely_cause: str | None = None
    shift: float | None = None  # group level minus reference level (log10 or kelvin)
    residual: float | None = None  # what is left after undoing the factor
    tolerance: float | None = None
    scale: str | None = None  # log10 | celsius
    reference: str | None = None  # what the group was compared against
    reference_values: int | None = None
    comparison: str | None = None  # within-taxon | across-taxa
    confidence: float | None = None  # 0..1, heuristic (docs/methods.md)


@dataclass(frozen=True)
class Accounting:
    """Where every row or cell went: `lines` in order; `balanced` if they add up."""

    lines: tuple[tuple[str, int], ...]
    balanced: bool


@dataclass(frozen=True)
class CheckResult:
    subject: str  # the package folder or table checked
    group_by: str
    findings: tuple[Finding, ...]
    accounting: Accounting
    observations: pd.DataFrame  # trait, group, taxon, value (canonical), flagged
    traits: Mapping[str, TraitInfo]

    @property
    def alarming(self) -> bool:
        """True when any finding is more than a note (the CLI exits 1)."""
        return any(f.severity != "note" for f in self.findings)


def findings_frame(findings: tuple[Finding, ...] | list[Finding]) -> pd.DataFrame:
    columns = list(Finding.__dataclass_fields__)
    return pd.DataFrame([asdict(f) for f in findings], columns=columns)


def findings_document(result: CheckResult) -> dict:
    """JSON-ready findings for automation (keys documented in README, "Checking a dataset")."""
    return {
        "subject": result.subject,
        "group_by": result.group_by,
        "alarming": result.alarming,
        "findings": [asdict(f) for f in result.findings],
        "accounting": {
            "lines": [{"what": what, "count": count} for what, count in result.accounting.lines],
            "balanced": result.accounting.balanced,
        },
    }


# --------------------------------------------------------------------------- robust statistics


def _group_stats(frame: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """Median, robust SD (1.4826·MAD) and count of `level` per key, vectorised."""
    grouped = frame.groupby(keys, sort=False, observed=True)["level"]
    median = grouped.transform("median")
    deviation = (frame["level"] - median).abs()
    stats = grouped.agg(median="median", n="size")
    stats["spread"] = MAD_TO_SD * deviation.groupby([frame[k] for k in keys], sort=False).median()
    return stats.reset_index()


def _weighted_medians(values: np.ndarray, weights: np.ndarray, by: np.ndarray) -> np.ndarray:
    """Per distinct `by` (codes 0..k-1) and per column of `values`: the lower weighted median,
    the value at which half the weight lies at or below. Vectorised per column."""
    groups = int(by.max()) + 1
    total = np.bincount(by, weights=weights, minlength=groups)
    out = np.empty((groups, values.shape[1]))
    for j in range(values.shape[1]):  # a loop over hypotheses, not values
        order = np.lexsort((values[:, j], by))
        code, weight, value = by[order], weights[order], values[order, j]
        cumulative = np.cumsum(weight)
        before_group = (cumulative - weight)[np.searchsorted(code, np.arange(groups))]
        reached = (cumulative - before_group[code]) >= total[code] / 2
        first = np.unique(code[reached], return_index=True)[1]
        out[:, j] = value[reached][first]
    return out


def _leave_one_out(stats: pd.DataFrame, within: str | None) -> pd.DataFrame:
    """For each row of per-group stats: median, spread and size of the *other* groups (within
    the same `within` key if given). Built from all (group, other group) pairs of a key, so
    it stays vectorised: k groups of one taxon make k² pairs, never one row per value."""
    stats = stats.reset_index(drop=True)
    stats = stats.assign(_key=stats[within] if within else "", _row=np.arange(len(stats)))
    pairs = stats[["_row", "_key", "group"]].merge(
        stats[["_key", "group", "median", "spread", "n"]], on="_key", suffixes=("", "_other")
    )
    pairs = pairs[pairs["group"] != pairs["group_other"]]
    if pairs.empty:
        return pd.DataFrame()
    by_row = pairs.groupby("_row")
    summary = by_row.agg(
        reference=("median", "median"),
        within_spread=("spread", "median"),
        reference_n=("n", "sum"),
        reference_groups=("group_other", "nunique"),
    )
    deviation = (pairs["median"] - pairs["_row"].map(summary["reference"])).abs()
    # spread of the other groups' levels around their median (Rousseeuw & Croux 1993)
    summary["between"] = MAD_TO_SD * deviation.groupby(pairs["_row"]).median()
    out = stats.join(summary, on="_row", how="inner").drop(columns=["_key", "_row"])
    out["reference_spread"] = np.hypot(out["within_spread"], out["between"])
    return out.reset_index(drop=True)


# --------------------------------------------------------------------------- unit shifts


def _comparisons(levels: pd.DataFrame, settings: CheckSettings) -> pd.DataFrame:
    """Per group: its level against the other groups', within taxon where possible."""
    per_taxon = _group_stats(levels, ["taxon", "group"])
    per_taxon = per_taxon[per_taxon["n"] >= settings.min_values]
    shared = per_taxon.groupby("taxon")["group"].transform("nunique") >= 2
    within = _leave_one_out(per_taxon[shared & (per_taxon["taxon"] != "")], "taxon")
    if not within.empty:
        within["comparison"] = "within-taxon"
        within["taxa"] = 1
    compared = set(within["group"]) if not within.empty else set()
    whole = _group_stats(levels, ["group"])
    whole = whole[whole["n"] >= settings.min_values]
    across = _leave_one_out(whole, None)
    if not across.empty:
        across = across[~across["group"].isin(compared)]
        across["comparison"] = "across-taxa"
        across["taxa"] = 0
    parts = [f for f in (within, across) if not f.empty]
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()


def _shift_findings(
    trait: TraitInfo, levels: pd.DataFrame, scale: str, group_by: str, settings: CheckSettings
) -> list[Finding]:
    table = _comparisons(levels, settings) if levels["group"].nunique() >= 2 else pd.DataFrame()
    if table.empty:
        return []
    hypotheses = LOG_HYPOTHESES if scale == "log10" else CELSIUS_HYPOTHESES
    table["shift"] = table["median"] - table["reference"]
    for i, hypothesis in enumerate(hypotheses):
        table[f"r{i}"] = hypothesis.undo(table["median"].to_numpy()) - table["reference"]
    # one verdict per group: taxa weighted by their values (a weighted median resists one odd taxon)
    columns = ["shift", *[f"r{i}" for i in range(len(hypotheses))]]
    codes, names = pd.factorize(table["group"])
    by_group = pd.DataFrame(
        _weighted_medians(
            table[columns].to_numpy(np.float64), table["n"].to_numpy(np.float64), codes
        ),
        columns=columns,
        index=pd.Index(names, name="group"),
    )
    sums = table.groupby("group").agg(
        n=("n", "sum"),
        reference_n=("reference_n", "sum"),
        spread=("spread", "median"),
        reference_spread=("reference_spread", "median"),
        reference_groups=("reference_groups", "max"),
        taxa=("taxa", "sum"),
        comparison=("comparison", "first"),
    )
    by_group = by_group.join(sums)
    floor = settings.min_spread[scale]
    spread = np.hypot(
        by_group["spread"].clip(lower=floor), by_group["reference_spread"].clip(lower=floor)
    )
    residuals = by_group[columns[1:]].to_numpy()
    best = np.abs(residuals).argmin(axis=1)
    best_residual = residuals[np.arange(len(best)), best]
    se = MEDIAN_SE * np.sqrt(
        by_group["spread"].clip(lower=floor) ** 2 / by_group["n"]
        + by_group["reference_spread"].clip(lower=floor) ** 2 / by_group["reference_n"]
    )
    low, high = settings.log_tolerance if scale == "log10" else settings.celsius_tolerance
    tolerance = np.clip(settings.tolerance_ses * se, low, high)
    separation = by_group["shift"].abs() / spread
    majority = (by_group["reference_groups"] >= 2) | (by_group["reference_n"] > by_group["n"])
    flagged = (
        (separation > settings.outlier_mads)
        & (np.abs(best_residual) <= tolerance)
        & (np.abs(best_residual) < by_group["shift"].abs() / 3)
        & majority
    )
    findings = []
    for position in np.flatnonzero(flagged.to_numpy()):
        row = by_group.iloc[position]
        hypothesis = hypotheses[best[position]]
        fit = 1.0 - abs(best_residual[position]) / tolerance.iloc[position]
        apart = 0.5 + 0.5 * min(1.0, (separation.iloc[position] - settings.outlier_mads) / 6.0)
        size = row["n"] / (row["n"] + 5.0)
        comparable = 1.0 if row["comparison"] == "within-taxon" else 0.75
        confidence = round(float(math.sqrt(fit) * apart * size * comparable), 2)
        if row["comparison"] == "within-taxon":
            reference = (
                f"{int(row['reference_n'])} values of the same "
                f"{int(row['taxa'])} {'taxon' if row['taxa'] == 1 else 'taxa'} "
                f"in other {group_by} groups"
            )
        else:
            reference = f"{int(row['reference_n'])} values in {int(row['reference_groups'])} other {group_by} groups (all taxa)"
        how_far = (
            f"{10 ** row['shift']:.4g} times" if scale == "log10" else f"{row['shift']:+.3g} K from"
        )
        findings.append(
            Finding(
                kind=FindingKind.SUSPECTED_UNIT_ERROR.value,
                severity=SEVERITY[FindingKind.SUSPECTED_UNIT_ERROR],
                trait=trait.trait,
                group_by=group_by,
                group=str(row.name),
                values=int(row["n"]),
                message=(
                    f"{int(row['n'])} values sit at {how_far} the median level of {reference}; "
                    f"that fits {hypothesis.label}: {hypothesis.cause}; residual "
                    f"{best_residual[position]:+.3f} {'log10' if scale == 'log10' else 'K'} "
                    f"within ±{tolerance.iloc[position]:.3f}"
                ),
                factor=hypothesis.label,
                likely_cause=hypothesis.cause,
                shift=round(float(row["shift"]), 4),
                residual=round(float(best_residual[position]), 4),
                tolerance=round(float(tolerance.iloc[position]), 4),
                scale=scale,
                reference=reference,
                reference_values=int(row["reference_n"]),
                comparison=str(row["comparison"]),
                confidence=confidence,
            )
        )
    return findings


def _levels(values: pd.DataFrame, trait: TraitInfo) -> tuple[pd.DataFrame, str]:
    """Values on the scale the check compares: Celsius for temperatures, log10 otherwise."""
    value = values["value"].to_numpy(dtype=np.float64)
    if trait.celsius is not None:
        scale, offset = trait.celsius
        level, keep, name = value * scale + offset, np.isfinite(value), "celsius"
    else:
        keep = np.isfinite(value) & (value > 0)  # log10 needs positive values
        level, name = np.log10(np.where(keep, value, 1.0)), "log10"
    frame = values.loc[keep, ["group", "taxon"]].copy()
    frame["level"] = level[keep]
    return frame, name


def _implausible_findings(trait: TraitInfo, values: pd.DataFrame, group_by: str) -> list[Finding]:
    if trait.plausible is None:
        return []
    low, high = trait.plausible
    value = values["value"]
    outside = values[(value < low) | (value > high)]
    findings = []
    for group, part in outside.groupby("group", sort=True):
        findings.append(
            Finding(
                kind=FindingKind.IMPLAUSIBLE_VALUE.value,
                severity=SEVERITY[FindingKind.IMPLAUSIBLE_VALUE],
                trait=trait.trait,
                group_by=group_by,
                group=str(group),
                values=len(part),
                message=(
                    f"{len(part)} values outside the plausible range [{low:g}, {high:g}] "
                    f"{trait.unit} (seen {part['value'].min():.4g} .. {part['value'].max():.4g})"
                ),
                reference=f"vocabulary plausible range [{low:g}, {high:g}] {trait.unit}",
            )
        )
    return findings


def check_values(
    observations: pd.DataFrame,
    traits: Mapping[str, TraitInfo],
    group_by: str = "source",
    settings: CheckSettings | None = None,
) -> tuple[list[Finding], pd.DataFrame]:
    """Findings for implausible values and suspected unit errors, plus the observations with a
    `flagged` column (True for values in a group suspected of a unit error)."""
    settings = settings or CheckSettings()
    observations = observations.assign(
        group=observations["group"].astype("string").fillna("(none)").astype(str),
        taxon=observations["taxon"].astype("string").fillna("").astype(str),
    )
    findings: list[Finding] = []
    for trait_id, values in observations.groupby("trait", sort=True):
        trait = traits.get(trait_id)
        if trait is None:
            continue
        findings += _implausible_findings(trait, values, group_by)
        levels, scale = _levels(values, trait)
        if not levels.empty:
            findings += _shift_findings(trait, levels, scale, group_by, settings)
    suspected = {(f.trait, f.group) for f in findings if f.kind == FindingKind.SUSPECTED_UNIT_ERROR}
    keys = pd.MultiIndex.from_arrays([observations["trait"], observations["group"]])
    flagged = keys.isin(list(suspected)) if suspected else np.zeros(len(observations), bool)
    return findings, observations.assign(flagged=flagged)
