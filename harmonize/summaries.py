"""Pivot accepted population statistic cells into one summary row per population x trait.

A wide source gives one population per row (its statistic columns side by side); a long source
gives one statistic per row, gathered by context (taxon, sex, life stage, site, date) plus trait
and measurement temperature. Dispersion is normalised by `stats.normalise_summaries`; groups it
declares invalid or orphaned go to the rejects, cell by cell. Reading and conversion happened
earlier (`assemble`); writing happens later (`package`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from harmonize import values
from harmonize.errors import RejectReason
from harmonize.project import Mapping
from harmonize.stats import normalise_summaries

STATISTIC_FIELDS = (
    "n",
    "mean",
    "sd",
    "se",
    "min",
    "max",
    "median",
    "q1",
    "q3",
    "ci_low",
    "ci_high",
)
LONG_GROUP = (
    "taxon_verbatim",
    "sex",
    "life_stage",
    "site",
    "date",
    "trait_id",
    "measurement_temperature",
)
CARRIED = (
    "taxon_verbatim", "taxon", "taxon_qualifier", "sex", "life_stage", "site", "date", "trait_id", "role",
    "unit", "ucum", "unit_origin", "match_method", "measurement_temperature", "temperature_correction",
)  # fmt: skip
REJECT_COLUMNS = [
    "source_row",
    "column",
    "original_name",
    "raw_value",
    "raw_unit",
    "reason",
    "message",
]


@dataclass
class SummaryResult:
    summaries: pd.DataFrame
    rejects: pd.DataFrame
    cells_written: int


def _joined(series: pd.Series) -> str | None:
    parts = [str(v) for v in pd.unique(series.dropna()) if str(v) != ""]
    return "; ".join(parts) if parts else None


def _flag_union(series: pd.Series) -> str | None:
    parts: list[str] = []
    for text in series.dropna():
        for flag in str(text).split(";"):
            if flag and flag not in parts:
                parts.append(flag)
    return ";".join(parts) if parts else None


def _rejects(cells: pd.DataFrame, reason: pd.Series, message: pd.Series) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "source_row": cells["source_row"].to_numpy(),
            "column": cells["column"].to_numpy(),
            "original_name": cells["original_name"].to_numpy(),
            "raw_value": cells["original_value"].to_numpy(),
            "raw_unit": cells["original_unit"].to_numpy(),
            "reason": reason.to_numpy(dtype=object),
            "message": message.to_numpy(dtype=object),
        },
        columns=REJECT_COLUMNS,
    )


def summarise_population_cells(cells: pd.DataFrame, mapping: Mapping) -> SummaryResult:
    """Turn a source's accepted statistic cells into population summaries (+ rejected cells)."""
    if cells.empty:
        return SummaryResult(pd.DataFrame(), pd.DataFrame(columns=REJECT_COLUMNS), 0)
    cells = cells.reset_index(drop=True)
    key_columns = ["source_row", "trait_id"] if mapping.layout == "wide" else list(LONG_GROUP)
    keys = cells[key_columns].astype(object).where(cells[key_columns].notna(), "\0")
    group, _ = pd.factorize(pd.MultiIndex.from_frame(keys.astype(str)))
    cells["group"] = group

    is_category = cells["value_text"].notna()
    # the same statistic twice in one population: keep the first, reject the rest
    duplicate = cells.duplicated(subset=["group", "statistic"], keep="first") & ~is_category
    rejected = [
        _rejects(
            cells[duplicate],
            pd.Series(RejectReason.DUPLICATE_STATISTIC.value, index=cells.index[duplicate]),
            "statistic '"
            + cells.loc[duplicate, "statistic"].astype(str)
            + "' given twice for this population and trait",
        )
    ]
    cells = cells[~duplicate]
    is_category = is_category[~duplicate]

    numbers = cells[~is_category]
    wide = numbers.pivot(index="group", columns="statistic", values="value")
    for name in STATISTIC_FIELDS:
        if name not in wide.columns:
            wide[name] = np.nan
    wide = wide[list(STATISTIC_FIELDS)]
    # sample size from a context column (wide) or an n column (long) fills a missing n statistic
    n_raw = values.parse_numbers(
        numbers["n_raw"], decimal=mapping.read.decimal, missing=mapping.read.missing
    ).value
    n_context = pd.Series(n_raw, index=numbers.index).groupby(numbers["group"]).first()
    wide["n"] = wide["n"].fillna(n_context.reindex(wide.index))
    wide["ci_level"] = (
        mapping.ci_level if numbers["statistic"].isin(["ci_low", "ci_high"]).any() else np.nan
    )
    normalised = normalise_summaries(wide)

    first = numbers.groupby("group", sort=True)
    carried = first[list(CARRIED)].first()
    extra = pd.DataFrame(
        {
            "source_row": first["source_row"].min(),
            "original_name": first["original_name"].agg(_joined),
            "original_unit": first["original_unit"].agg(_joined),
            "match_score": first["match_score"].min(),
            "cell_flags": first["flags"].agg(_flag_union),
        }
    )
    summary = pd.concat([carried, extra, normalised], axis=1)

    bad_groups = summary.index[summary["reason"].notna()]
    if len(bad_groups):
        bad_cells = numbers[numbers["group"].isin(bad_groups)]
        rejected.append(
            _rejects(
                bad_cells,
                bad_cells["group"].map(summary["reason"]),
                bad_cells["group"].map(summary["message"]),
            )
        )
    good = summary[summary["reason"].isna()].copy()
    cells_written = int(numbers["group"].isin(good.index).sum())
    good["flags"] = [
        _flag_union(pd.Series([a, b]))
        for a, b in zip(good["cell_flags"], good["flags"], strict=True)
    ]
    good["value_text"] = None

    categories = cells[is_category]
    category_rows = pd.DataFrame()
    if not categories.empty:
        category_rows = categories[
            list(CARRIED)
            + ["source_row", "original_name", "original_unit", "match_score", "flags", "value_text"]
        ].copy()
        cells_written += len(category_rows)

    out = pd.concat([good, category_rows], ignore_index=True)
    out = out.drop(
        columns=[c for c in ("cell_flags", "reason", "message", "group") if c in out.columns]
    )
    out["n"] = out["n"].round().astype("Int64") if "n" in out.columns else pd.NA
    out["source_id"] = mapping.source
    out["record_id"] = record_ids(out, mapping.source)
    return SummaryResult(out, pd.concat(rejected, ignore_index=True), cells_written)


def record_ids(frame: pd.DataFrame, source: str) -> np.ndarray:
    """Stable 16-hex ids from source, row, trait and context (vectorised hashing, no per-row calls)."""
    columns = [
        c
        for c in (
            "source_row",
            "column",
            "trait_id",
            "taxon_verbatim",
            "sex",
            "life_stage",
            "site",
            "date",
            "measurement_temperature",
        )
        if c in frame.columns
    ]
    basis = frame[columns].astype(str)
    basis.insert(0, "source_id", source)
    return hex_hashes(pd.util.hash_pandas_object(basis, index=False).to_numpy())


def hex_hashes(hashes: np.ndarray) -> np.ndarray:
    """uint64 hashes -> 16-character lower-case hex strings, without a Python loop per value."""
    raw = np.ascontiguousarray(hashes.astype(">u8")).view("S8")
    hexed = np.frombuffer(raw.tobytes().hex().encode("ascii"), dtype="S16")
    return hexed.astype(str).astype(object)
