"""Pivot accepted population statistic cells into one summary row per population x trait.

A wide source gives one population per row (its statistic columns side by side); a long source
gives one statistic per row, gathered by context (taxon, sex, life stage, site, date) plus trait
and measurement temperature. Dispersion is normalised by `stats.normalise_summaries`; groups it
declares invalid or orphaned go to the rejects, cell by cell. Reading and conversion happened
earlier (`assemble`); writing happens later (`package`).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from harmonize import siphash, values
from harmonize.errors import RejectReason
from harmonize.project import Mapping
from harmonize.stats import (
    STATISTIC_COLUMNS,
    combine_group_summaries,
    normalise_summaries,
    summarise_individuals,
)

STATISTIC_FIELDS = tuple(c for c in STATISTIC_COLUMNS if c != "ci_level")
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
    "correction_factor",
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


# a sample size written with its name: 'n=9', 'N = 9', 'n: 9'
_N_PREFIX = re.compile(r"^\s*[nN]\s*[=:]\s*")


def _joined(series: pd.Series) -> str | None:
    parts = [str(v) for v in pd.unique(series.dropna()) if str(v) != ""]
    return "; ".join(parts) if parts else None


def _union_of_flags(*texts: object) -> str | None:
    """Semicolon-joined flags of several flag texts, each flag once, in order of appearance."""
    parts: list[str] = []
    for text in texts:
        if text is None or pd.isna(text):
            continue
        for flag in str(text).split(";"):
            if flag and flag not in parts:
                parts.append(flag)
    return ";".join(parts) if parts else None


def _flag_union(series: pd.Series) -> str | None:
    return _union_of_flags(*series.dropna())


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


def _two_statistics_note(cells: pd.DataFrame) -> pd.Series:
    """For cells holding two statistics (a range's bounds, a mean '± x'): which, since the
    first of them may be what another cell gives too."""
    second = cells["second_statistic"]
    note = (
        " (this cell gives " + cells["statistic"].astype(str) + " and " + second.astype(str) + ")"
    )
    return note.where(second.notna(), "")


def _with_second_statistics(
    wide: pd.DataFrame, numbers: pd.DataFrame
) -> tuple[pd.DataFrame, pd.Series]:
    """The statistics of each population with the second statistics its cells carry (the max
    of a 'range' cell, the SD after '±'), and per population whether one of them was dropped
    because the population also gives that statistic in a cell of its own (which is used)."""
    seconds = numbers[numbers["second_statistic"].notna()]
    if seconds.empty:
        return wide, pd.Series(False, index=wide.index)
    carried = seconds.pivot_table(
        index="group", columns="second_statistic", values="second_value", aggfunc="first"
    )
    clash = wide.reindex(columns=carried.columns).reindex(carried.index).notna() & carried.notna()
    ignored = clash.any(axis=1).reindex(wide.index, fill_value=False)
    return wide.combine_first(carried), ignored


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
            + "' given twice for this population and trait"
            + _two_statistics_note(cells.loc[duplicate]),
        )
    ]
    cells = cells[~duplicate]
    is_category = is_category[~duplicate]

    numbers = cells[~is_category]
    wide = numbers.pivot(index="group", columns="statistic", values="value")
    wide, second_ignored = _with_second_statistics(wide, numbers)
    for name in STATISTIC_FIELDS:
        if name not in wide.columns:
            wide[name] = np.nan
    wide = wide[list(STATISTIC_FIELDS)]
    # sample size from a context column (wide) or an n column (long) fills a missing n statistic;
    # 'n=9', 'N = 9' and 'n: 9' are read as 9; other text that is not a number is flagged
    n_text = numbers["n_raw"].astype(object).where(numbers["n_raw"].notna(), None)
    n_text = n_text.map(lambda v: _N_PREFIX.sub("", v) if isinstance(v, str) else v)
    n_parsed = values.parse_numbers(
        n_text,
        decimal=mapping.read.decimal,
        missing=mapping.read.missing,
        declared_in=mapping.read.declared_in,
    )
    by_group = numbers["group"]
    n_context = pd.Series(n_parsed.value, index=numbers.index).groupby(by_group).first()
    wide["n"] = wide["n"].fillna(n_context.reindex(wide.index))
    unreadable = pd.Series(pd.notna(n_parsed.reason), index=numbers.index).groupby(by_group).any()
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
    extra["cell_flags"] = [
        _union_of_flags(
            f, "n-unreadable" if bad else None, "second-statistic-ignored" if twice else None
        )
        for f, bad, twice in zip(
            extra["cell_flags"],
            unreadable.reindex(extra.index),
            second_ignored.reindex(extra.index, fill_value=False),
            strict=True,
        )
    ]
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
        _union_of_flags(a, b) for a, b in zip(good["cell_flags"], good["flags"], strict=True)
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

    if mapping.combine_groups:
        good = combine_subgroups(good, mapping.combine_groups)
    out = pd.concat([good, category_rows], ignore_index=True)
    out = out.drop(
        columns=[c for c in ("cell_flags", "reason", "message", "group") if c in out.columns]
    )
    out["n"] = out["n"].round().astype("Int64") if "n" in out.columns else pd.NA
    out["source_id"] = mapping.source
    out["record_id"] = record_ids(out, mapping.source)
    return SummaryResult(out, pd.concat(rejected, ignore_index=True), cells_written)


def combine_subgroups(summaries: pd.DataFrame, split_by: tuple[str, ...]) -> pd.DataFrame:
    """Pool populations reported separately by `split_by` (e.g. sex) into one row per rest-of-key.

    n, mean and SD are pooled with the Cochrane Handbook (v6.4) Table 6.5.a formula (via
    `stats.combine_group_summaries`); a group missing n, mean or SD in any part gets no pooled
    statistics rather than a guess. The range of the whole is the smallest minimum to the
    largest maximum, where every part gives them. Other statistics (median, quartiles, CI) do
    not pool and are dropped from the combined row; its provenance lists every part.
    """
    keep = [c for c in ("taxon_verbatim", "taxon", "taxon_qualifier", "sex", "life_stage", "site", "date",
                        "trait_id", "measurement_temperature") if c not in split_by]  # fmt: skip
    work = summaries.copy()
    for column in keep:
        work[column] = work[column].astype(object).where(work[column].notna(), "\0")
    parts = work.groupby(keep, sort=False, dropna=False)
    combined = combine_group_summaries(work[[*keep, "n", "mean", "sd"]], keep)
    first = parts.first().reset_index()
    merged = first.drop(columns=["n", "mean", "sd"]).merge(
        combined[[*keep, "n", "mean", "sd"]], on=keep, how="left"
    )
    merged["source_row"] = parts["source_row"].min().to_numpy()
    merged["original_name"] = parts["original_name"].agg(_joined).to_numpy()
    merged["original_unit"] = parts["original_unit"].agg(_joined).to_numpy()
    merged["flags"] = parts["flags"].agg(_flag_union).to_numpy()
    sizes = parts.size().to_numpy()
    merged["flags"] = [
        _union_of_flags(f, f"combined-groups:{'+'.join(split_by)}" if k > 1 else None)
        for f, k in zip(merged["flags"], sizes, strict=True)
    ]
    pooled = sizes > 1
    merged.loc[pooled, "sd_method"] = "combined groups"
    merged.loc[pooled, "mean_method"] = "combined groups"
    merged["se"] = np.where(pooled, merged["sd"] / np.sqrt(merged["n"].astype(float)), merged["se"])
    for column in ("min", "max"):  # exact: the extremes of the parts' extremes
        complete = parts[column].count().to_numpy() == sizes
        extreme = parts[column].agg(column).to_numpy(dtype=float)
        merged[column] = np.where(pooled, np.where(complete, extreme, np.nan), merged[column])
    for column in (
        "median",
        "q1",
        "q3",
        "ci_low",
        "ci_high",
        "ci_level",
        "variance",
        "cv",
    ):
        if column in merged.columns:
            merged.loc[pooled, column] = np.nan
    for column in split_by:
        merged.loc[pooled, column] = None
    for column in keep:
        as_object = merged[column].astype(object)
        merged[column] = as_object.where(as_object != "\0", None)
    merged["measurement_temperature"] = pd.to_numeric(
        merged["measurement_temperature"], errors="coerce"
    )
    return merged


def aggregate_individuals(values: pd.DataFrame, by: tuple[str, ...], source: str) -> pd.DataFrame:
    """Population summaries computed from a source's individual values (never mixed back in).

    Groups by taxon, trait, `by` (context keys such as site or sex) and, for rates that were not
    temperature-corrected, the measurement temperature. n, mean, SD (ddof=1), SE, median,
    quartiles and range come from `stats.summarise_individuals`; every row says
    'computed from individuals'.
    """
    numeric = values[values["value"].notna()].copy()
    if numeric.empty:
        return pd.DataFrame()
    keys = ["taxon", "trait_id", *by, "measurement_temperature"]
    # a corrected rate is already at the reference temperature: pool across test temperatures
    numeric.loc[numeric["temperature_correction"].notna(), "measurement_temperature"] = np.nan
    for column in keys:
        numeric[column] = numeric[column].astype(object).where(numeric[column].notna(), "\0")
    summary = summarise_individuals(numeric, keys)
    grouped = numeric.groupby(keys, sort=True, dropna=False)
    carried = grouped[["role", "unit", "ucum", "temperature_correction"]].first().reset_index()
    out = summary.merge(carried, on=keys, how="left")
    out["source_row"] = grouped["source_row"].min().to_numpy()
    out["original_name"] = grouped["original_name"].agg(_joined).to_numpy()
    out["original_unit"] = grouped["original_unit"].agg(_joined).to_numpy()
    out["match_method"] = grouped["match_method"].first().to_numpy()
    out["match_score"] = grouped["match_score"].min().to_numpy()
    for column in keys:
        as_object = out[column].astype(object)
        out[column] = as_object.where(as_object != "\0", None)
    out["taxon_verbatim"] = out["taxon"]
    out["measurement_temperature"] = pd.to_numeric(out["measurement_temperature"], errors="coerce")
    out["sd_method"] = "computed from individuals"
    out["mean_method"] = "computed from individuals"
    out["flags"] = "computed-from-individuals"
    out["source_id"] = source
    out["record_id"] = record_ids(out.assign(column="aggregate:" + "+".join(by)), source)
    return out


# What identifies a value: its place in the source, its trait and its context.
RECORD_ID_COLUMNS = (
    "source_row", "column", "trait_id", "taxon_verbatim", "sex", "life_stage", "site", "date",
    "measurement_temperature",
)  # fmt: skip


def record_ids(frame: pd.DataFrame, source: str) -> np.ndarray:
    """Stable 16-hex ids from source, row, trait and context: `record_ids_of_table` of the
    frame's columns as text."""
    columns = [c for c in RECORD_ID_COLUMNS if c in frame.columns]
    basis = pa.Table.from_pandas(frame[columns].astype(str), preserve_index=False)
    return record_ids_of_table(basis, source).to_numpy(zero_copy_only=False).astype(object)


def record_ids_of_table(table: pa.Table, source: str) -> pa.Array:
    """Stable 16-hex ids from source, row, trait and context, as an Arrow text column.

    Each id is pandas' `hash_pandas_object` of the row's texts (source first, then
    RECORD_ID_COLUMNS, each as `astype(str)` makes it), which hashes a text column by its
    distinct texts and combines the columns like a tuple hash. Here each distinct value is
    turned into text and hashed once, and its hash taken by code; row numbers are hashed as
    decimal text by `siphash`. No Python string is made per cell.
    """
    count = len(table)
    hashed = [np.full(count, _text_hashes(np.array([source], dtype=object))[0], dtype=np.uint64)]
    for name in RECORD_ID_COLUMNS:
        if name in table.column_names:
            hashed.append(_column_hashes(table[name].combine_chunks()))
    return _hex_arrow(_combine_hashes(hashed))


def _text_hashes(texts: np.ndarray) -> np.ndarray:
    return pd.util.hash_array(texts, encoding="utf8", hash_key=_PANDAS_HASH_KEY, categorize=False)


def _column_hashes(column: pa.Array) -> np.ndarray:
    """Per cell, pandas' hash of the cell's text (`astype(str)`; missing cells stay missing)."""
    if pa.types.is_integer(column.type) and column.null_count == 0:
        numbers = column.to_numpy()
        if siphash.fits_decimal(numbers):  # the same hash without a string per number
            return _pandas_finish(siphash.decimal_siphash(numbers, _PANDAS_KEY_WORDS))
        return _text_hashes(pc.cast(column, pa.string()).to_numpy(zero_copy_only=False))
    if pa.types.is_string(column.type) or pa.types.is_large_string(column.type):
        column = pc.dictionary_encode(column)
    if pa.types.is_dictionary(column.type) and pa.types.is_string(column.type.value_type):
        codes = pc.fill_null(column.indices, -1).to_numpy(zero_copy_only=False)
        texts = column.dictionary.fill_null("").to_numpy(zero_copy_only=False).astype(object)
        if column.dictionary.null_count:  # a missing text in the dictionary: a missing cell
            missing = np.append(column.dictionary.is_null().to_numpy(zero_copy_only=False), True)
            codes = np.where(missing[codes], -1, codes)  # code -1 takes the appended True
    else:
        codes, distinct = pd.factorize(column.to_numpy(zero_copy_only=False))
        as_text = pd.Series(distinct).astype(str)  # the text pandas gives each value
        texts = as_text.to_numpy(dtype=object)
        missing = np.append(as_text.isna().to_numpy(), True)  # the last: code -1
        codes = np.where(missing[codes], -1, codes)
    hashes = np.append(_text_hashes(texts), np.uint64(np.iinfo(np.uint64).max))
    return hashes[codes]  # code -1 (missing) takes the last: pandas' missing-value hash


def _combine_hashes(arrays: list[np.ndarray]) -> np.ndarray:
    """Row hashes from column hashes, as pandas combines them (after CPython's tuple hash)."""
    multiplier = np.uint64(1000003)
    out = np.zeros_like(arrays[0]) + np.uint64(0x345678)
    for i, hashes in enumerate(arrays):
        inverse = len(arrays) - i
        out ^= hashes
        out *= multiplier
        multiplier += np.uint64(82520 + inverse + inverse)
    return out + np.uint64(97531)


def _hex_arrow(hashes: np.ndarray) -> pa.Array:
    """uint64 hashes -> 16-character lower-case hex texts, built in Arrow (no loop per value)."""
    raw = np.ascontiguousarray(hashes.astype(">u8")).tobytes().hex().encode("ascii")
    offsets = np.arange(0, 16 * len(hashes) + 1, 16, dtype=np.int32)  # 16 characters each
    return pa.StringArray.from_buffers(
        len(hashes), pa.py_buffer(offsets.tobytes()), pa.py_buffer(raw)
    )


# pandas' default key for `hash_pandas_object` (pandas.core.util.hashing)
_PANDAS_HASH_KEY = "0123456789123456"
_PANDAS_KEY_WORDS = siphash.key_words(_PANDAS_HASH_KEY.encode("utf8"))


def _pandas_finish(hashes: np.ndarray) -> np.ndarray:
    """The mixing `pandas.util.hash_array` applies to each SipHash value (in place)."""
    hashes ^= hashes >> np.uint64(30)
    hashes *= np.uint64(0xBF58476D1CE4E5B9)
    hashes ^= hashes >> np.uint64(27)
    hashes *= np.uint64(0x94D049BB133111EB)
    hashes ^= hashes >> np.uint64(31)
    return hashes
