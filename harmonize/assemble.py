"""Turn trait cells into output rows: individual values, population statistic cells and rejects.

This stage applies, per batch of cells and always column-wise: the name decisions (made by
`match`, tabulated once per distinct name and trait by `lookup_tables`), value parsing (`values`), unit conversion (`units`, one factor per (unit, trait) group),
plausibility flags and temperature correction (`temperature`). It decides for every cell exactly
one fate: empty by declaration, rejected with a reason, or written. Pivoting population statistic
cells into summaries is left to `summaries`; writing files is left to `package`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from harmonize import cell_units, lookup_tables, second_statistics, units, values
from harmonize.errors import RejectReason
from harmonize.match import NameMatch
from harmonize.project import STATISTICS, Mapping
from harmonize.statistic_names import read_statistic
from harmonize.taxa import clean_taxon_names
from harmonize.temperature import TemperatureCorrection, correct_rates, temperature_problems
from harmonize.text_columns import Coded, choose, join_per_row, rows_frame, rows_table
from harmonize.vocab import Vocabulary

STATISTIC_CODES = STATISTICS
SPREAD_STATISTICS = ("sd", "se")  # convert by |scale|, never with an offset
# the statistics a trait's plausible range applies to
CENTRAL_STATISTICS = ("value", "mean", "median")

UNIT_ORIGINS = ("mapping", "cell", "name-hint", "none")  # the last: no unit, or not a number


@dataclass
class SourcePlan:
    """What a source's cells need, decided once before reading data."""

    mapping: Mapping
    vocabulary: Vocabulary
    names: dict[str, NameMatch]  # original name -> match (declared columns included)
    roles: dict[str, str] = field(default_factory=dict)  # original name -> role override
    correction: TemperatureCorrection | None = None
    max_cell_chars: int = 256
    taxon_synonyms: dict[str, str] | None = None
    # verbatim taxon text -> (cleaned name, qualifier), filled batch by batch
    taxa_cleaned: dict = field(default_factory=dict)


@dataclass
class BatchResult:
    individual: pd.DataFrame
    statistic_cells: pd.DataFrame  # population cells, one row per accepted statistic cell
    rejects: pd.DataFrame
    empty: int


def _labelled(prefix: str, values: np.ndarray) -> Coded:
    """`prefix` + value where a value is given, '' elsewhere; built once per distinct value."""
    coded = Coded.of(values)
    return coded.map([f"{prefix}{t}" if t else "" for t in coded.texts])


_STATISTIC_ARRAY = np.array(STATISTIC_CODES, dtype=object)
_STATISTIC_INDEX = {code: i for i, code in enumerate(STATISTIC_CODES)}
_VALUE, _MEAN, _N, _CV, _VARIANCE, _MODE = (
    _STATISTIC_INDEX[c] for c in ("value", "mean", "n", "cv", "variance", "mode")
)
_SPREAD = [_STATISTIC_INDEX[c] for c in SPREAD_STATISTICS]
_CENTRAL = [_STATISTIC_INDEX[c] for c in CENTRAL_STATISTICS]


def _statistic_index(codes) -> np.ndarray:
    """Statistic codes as indices into STATISTIC_CODES; -1 where none is given."""
    return np.array(
        [_STATISTIC_INDEX.get(c, -1) if isinstance(c, str) else -1 for c in codes], dtype=np.int8
    )


REJECT_COLUMNS = ("source_row", "column", "original_name", "raw_value", "raw_unit", "reason", "message")  # fmt: skip


class _Fate:
    """Tracks which cells are still undecided; each decision removes cells from the pool.

    Rejected cells are noted by position and made into one rejects frame at the end (in the
    order they were rejected)."""

    def __init__(self, cells: pd.DataFrame) -> None:
        self.cells = cells
        self.open = np.ones(len(cells), dtype=bool)
        self._rejected: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []

    def reject(self, mask: np.ndarray, reason, message) -> None:
        """Reject the still-open cells in `mask`; `reason` and `message` are text or per-cell
        arrays; `message` may be a function of the rejected cells' positions (so messages are
        only built where needed)."""
        mask = mask & self.open
        positions = np.flatnonzero(mask)
        if not len(positions):
            return
        self._rejected.append(
            (positions, _per_cell(reason, positions, str), _per_cell(message, positions))
        )
        self.open &= ~mask

    def rejected(self) -> pd.DataFrame:
        if not self._rejected:
            return pd.DataFrame(columns=list(REJECT_COLUMNS))
        positions, reasons, messages = (
            np.concatenate(p) for p in zip(*self._rejected, strict=True)
        )
        chosen = self.cells.take(positions)
        # Built as Arrow text, not Python strings: the package's tables hold Arrow-backed text
        # anyway, and at 1 million all-rejected rows gathering took 2.5 s instead of 3.5 s.
        return pa.table(
            {
                "source_row": chosen["source_row"].to_numpy(),
                "column": _arrow_text(chosen["column"]),
                "original_name": _arrow_text(chosen["original_name"]),
                "raw_value": _excerpt(_arrow_text(chosen["raw_value"])),
                "raw_unit": _arrow_text(chosen["raw_unit"]),
                "reason": pa.array(reasons, type=pa.string()),
                "message": pa.array(messages, type=pa.string()),
            }
        ).to_pandas()


def _arrow_text(series: pd.Series) -> pa.Array:
    """A text or categorical column as an Arrow string array (missing stays missing)."""
    array = pa.array(series, from_pandas=True)
    return array if array.type == pa.string() else array.cast(pa.string())


def _per_cell(given, positions: np.ndarray, scalar=lambda text: text) -> np.ndarray:
    """The rejected cells' reasons or messages from text (`scalar` of it for every cell), a
    per-cell array of all cells, or a function of the rejected cells' positions."""
    out = np.empty(len(positions), dtype=object)
    if callable(given):
        out[:] = given(positions)
    elif np.ndim(given):
        out[:] = np.asarray(given, dtype=object)[positions]
    else:
        out[:] = scalar(given)
    return out


def assemble_batch(cells: pd.DataFrame, plan: SourcePlan) -> BatchResult:
    mapping = plan.mapping
    vocabulary = plan.vocabulary
    cells = cells.reset_index(drop=True)
    fate = _Fate(cells)
    count = len(cells)

    # 1. values: one parse per batch (read options are per source)
    parsed = values.parse_numbers(
        cells["raw_value"],
        decimal=mapping.read.decimal,
        thousands=mapping.read.thousands,
        missing=mapping.read.missing,
        max_cell_chars=plan.max_cell_chars,
        declared_in=mapping.read.declared_in,
    )
    empty = parsed.empty.copy()
    fate.open &= ~empty

    # 2. names: one lookup table per distinct name, taken per cell by integer codes
    name_coded = Coded.of(cells["original_name"])
    name_coded = name_coded.map([t if t is not None else "" for t in name_coded.texts])
    name_codes = name_coded.codes
    name_table = lookup_tables.name_table(list(name_coded.texts), plan)
    name_trait_ids = name_table["trait_id"].to_numpy(dtype=object)
    name_messages = name_table["message"].to_numpy(dtype=object)
    trait_id = name_trait_ids[name_codes]
    fate.reject(
        (name_table["status"].to_numpy(dtype=object) == "rejected")[name_codes],
        RejectReason.NAME_REJECTED,
        lambda at: name_messages[name_codes[at]],
    )
    fate.reject(
        pd.isna(name_trait_ids)[name_codes],
        RejectReason.UNMATCHED_NAME,
        lambda at: name_messages[name_codes[at]],
    )

    # per-trait facts: a trait follows from the name, so they are looked up once per name too
    trait_of_name, traits_met = pd.factorize(
        pd.Series(name_trait_ids, dtype=object), use_na_sentinel=False
    )
    name_traits = lookup_tables.trait_table(list(traits_met), vocabulary, mapping.level)
    name_traits = name_traits.iloc[trait_of_name].reset_index(drop=True)
    terms = {t: vocabulary.terms[t] for t in traits_met if isinstance(t, str)}
    canonical_by_name = name_traits["unit"].to_numpy(dtype=object)
    is_category = np.isin(name_traits["kind"].to_numpy(dtype=object), ["category", "text"])[
        name_codes
    ]
    by_name = {  # output columns that follow from the name alone
        "trait_id": name_coded.map(name_trait_ids),
        "match_method": name_coded.map(name_table["method"].to_numpy(dtype=object)),
        "unit": name_coded.map(name_traits["unit_text"].to_numpy(dtype=object)),
        "ucum": name_coded.map(name_traits["ucum"].to_numpy(dtype=object)),
        "role": name_coded.map(
            np.where(pd.notna(name_table["role"]), name_table["role"], name_traits["role"]).astype(
                object
            )
        ),
    }

    # 3. level allowed for the trait
    level_bad = (name_traits["level_ok"].to_numpy(dtype=object) == False)[name_codes]  # noqa: E712
    fate.reject(
        level_bad,
        RejectReason.LEVEL_NOT_ALLOWED,
        f"trait is not recorded at {mapping.level} level in the vocabulary",
    )

    # 4. taxon
    if "taxon" in mapping.context:
        no_taxon = cells["taxon_verbatim"].isna().to_numpy()
        message = f"no taxon name in column '{mapping.context['taxon']}'"
        if mapping.format == "dwca":  # the taxon is the core's: an extension row may lack one
            message += " (or the row's coreid is not an id of the archive's core)"
        fate.reject(no_taxon, RejectReason.MISSING_TAXON, message)

    # 5. statistic, as an index into STATISTIC_CODES (-1: none given): declared spellings are
    # worked out once each, hints once per name
    declared = Coded.of(cells["statistic"])
    readings = [read_statistic(t) for t in declared.texts]
    known = np.array([code for code, _ in readings], dtype=object)
    given = np.array([isinstance(t, str) and t.strip() != "" for t in declared.texts], dtype=bool)
    # a bound naming its confidence level must agree with the mapping's `ci_level`
    other_level = np.array(
        [level is not None and abs(level - mapping.ci_level) > 1e-9 for _, level in readings],
        dtype=bool,
    )
    # messages once per distinct spelling, taken by each rejected cell's code
    unknown_message = np.array(
        [
            f"unknown statistic '{t}'; use one of {', '.join(STATISTIC_CODES)}"
            for t in declared.texts
        ],
        dtype=object,
    )
    level_message = np.array(
        [
            f"'{t}' is a bound of a {level * 100:g}% interval, but this source's ci_level is "
            f"{mapping.ci_level:g}; set ci_level: {level:g} in the mapping (quick mode: "
            f"--ci-level {level:g})"
            if wrong
            else None
            for t, (_, level), wrong in zip(declared.texts, readings, other_level, strict=True)
        ],
        dtype=object,
    )
    fate.reject(
        (given & pd.isna(known))[declared.codes],
        RejectReason.UNKNOWN_STATISTIC,
        lambda at: unknown_message[declared.codes[at]],
    )
    fate.reject(
        other_level[declared.codes],
        RejectReason.INVALID_STATISTIC,
        lambda at: level_message[declared.codes[at]],
    )
    stat = _statistic_index(known)[declared.codes]
    stat = np.where(stat >= 0, stat, _statistic_index(name_table["statistic_hint"])[name_codes])
    assumed_mean = np.zeros(count, dtype=bool)
    if mapping.level == "individual":
        fate.reject(
            (stat >= 0) & (stat != _VALUE),
            RejectReason.UNKNOWN_STATISTIC,
            lambda at: [
                f"statistic '{s}' in an individual-level source: declare level: population"
                for s in _STATISTIC_ARRAY[stat[at]]
            ],
        )
        stat = np.full(count, _VALUE, dtype=np.int8)
    else:
        fate.reject(  # the mode of a category trait is kept; of numbers, no column holds it
            (stat == _MODE) & ~is_category,
            RejectReason.INVALID_STATISTIC,
            "the mode of a number trait is not one of the summaries kept (mean, median, sd, ...): "
            "give the mean or median",
        )
        # a number given as an individual's value has no place among population statistics
        fate.reject(
            (stat == _VALUE) & ~is_category,
            RejectReason.INVALID_STATISTIC,
            lambda at: [
                f"statistic '{t if isinstance(t, str) else 'value'}' is an individual's "
                "measurement, not a population statistic: name the statistic (mean, median, "
                "...) or declare level: individual in the mapping (quick mode: --level "
                "individual)"
                for t in declared.texts[declared.codes[at]]
            ],
        )
        assumed = stat < 0
        stat = np.where(assumed, _MEAN, stat)
        assumed_mean = assumed & ~is_category

    # 6. category traits
    text_values = np.full(count, None, dtype=object)
    if is_category.any():
        cleaned, _ = values.parse_categories(cells["raw_value"], missing=mapping.read.missing)
        text_values = np.where(is_category, cleaned, None)
        allowed = {
            t: {c.lower() for c in terms[t].categories} for t in terms if terms[t].categories
        }
        lowered = pd.Series(text_values, dtype=object).str.lower()
        bad_category = np.zeros(count, dtype=bool)
        for trait, choices in allowed.items():  # one pass per category trait, not per cell
            here = is_category & (trait_id == trait)
            bad_category |= here & lowered.notna().to_numpy() & ~lowered.isin(choices).to_numpy()
        fate.reject(
            bad_category,
            RejectReason.UNKNOWN_CATEGORY,
            lambda at: [
                f"'{v}' is not a category of {t}: use one of {sorted(allowed[t])}"
                for t, v in zip(trait_id[at], text_values[at], strict=True)
            ],
        )

    # 7. numbers: reasons from parsing (ranges are never a single value); cells that hold two
    # statistics (both bounds of a 'range' or 'iqr'; a mean '± x' the mapping explains) carry
    # the second beside them
    numeric = ~is_category
    two = second_statistics.split_cells(stat, parsed, numeric, _STATISTIC_INDEX, mapping.plus_minus)
    stat, number = two.stat, two.number
    fate.reject(
        pd.notna(two.one_number),
        RejectReason.INVALID_STATISTIC,
        lambda at: [second_statistics.one_number_message(s) for s in two.one_number[at]],
    )
    parse_failed = numeric & pd.notna(parsed.reason) & ~two.bounds_read
    fate.reject(parse_failed, parsed.reason, parsed.message)

    # 8. units: effective unit text and where it came from
    declared_coded = Coded.of(cells["raw_unit"]).cleaned()
    cell_coded = Coded.of(parsed.unit_in_cell).cleaned()
    hint_texts = name_table["unit_hint"].to_numpy(dtype=object)
    has_declared = pd.notna(declared_coded.texts)[declared_coded.codes]
    has_cell = pd.notna(cell_coded.texts)[cell_coded.codes]
    has_hint = pd.notna(hint_texts)[name_codes]
    unit_coded = choose(
        [has_declared, has_cell], [declared_coded, cell_coded], name_coded.map(hint_texts)
    )
    origin = np.select([has_declared, has_cell, has_hint], [0, 1, 2], 3)  # UNIT_ORIGINS
    # A unit in the cell that names another unit than the declared one (the mapping's unit or
    # the row's unit column): two explicit statements disagree and either could be the typo, so
    # the cell is rejected rather than converted with a guess. A cell unit other than the one in
    # the column's name is used (the name is a default for the column) and flagged.
    conflict = cell_units.units_differ(
        has_declared & has_cell & numeric & (stat != _N) & fate.open, cell_coded, declared_coded
    )
    fate.reject(
        conflict,
        RejectReason.UNIT_CONFLICT,
        lambda at: [
            f"the cell says '{c}' but the declared unit is '{d}': correct the cell or the "
            "declaration (the value is not converted with either)"
            for c, d in zip(
                cell_coded.texts[cell_coded.codes[at]],
                declared_coded.texts[declared_coded.codes[at]],
                strict=True,
            )
        ],
    )
    cell_not_hint = cell_units.units_differ(
        has_cell & has_hint & ~has_declared, cell_coded, Coded(name_codes, hint_texts)
    )
    needs_unit = numeric & (stat != _N) & fate.open
    by_pair = cell_units.convert_by_pair(
        needs_unit,
        unit_coded,
        canonical_by_name,
        name_codes,
        is_cv=stat == _CV,
        is_variance=stat == _VARIANCE,
        mapping=mapping,
    )
    scale, zero, conversion_flags = by_pair.scale, by_pair.zero, by_pair.flags
    fate.reject(pd.notna(by_pair.reason), by_pair.reason, by_pair.message)

    # 9. converted numbers (CV by its own unit only: its scale came from %, a fraction or none)
    is_n = stat == _N
    is_variance = stat == _VARIANCE
    converted = _in_canonical_unit(number, stat, scale, zero)
    has_second = two.second_stat >= 0  # a second statistic: a location (max, q3) or sd, se
    second = np.full(count, np.nan)
    if has_second.any():
        second = _in_canonical_unit(two.second_number, two.second_stat, scale, zero)

    # 10. temperature of measurement, in degC
    temperature, temperature_reason = cell_units.measurement_temperature(cells, plan.mapping)
    correction_label = np.full(count, None, dtype=object)
    correction_factor = np.full(count, np.nan)
    as_measured = np.full(count, np.nan)
    # CV is a ratio and n a count: a temperature factor applies to neither
    is_rate = name_traits["rate"].to_numpy(dtype=bool)[name_codes] & numeric & ~is_n & (stat != _CV)
    # Correct only where the source declares its measurement temperature; elsewhere rates stay
    # as measured and say so (a flag, not a guess of the temperature).
    uncorrected = np.zeros(count, dtype=bool)
    if plan.correction is not None and plan.mapping.temperature is None:
        uncorrected = is_rate
    elif plan.correction is not None and is_rate.any():
        bad = is_rate & pd.notna(temperature_reason)
        fate.reject(bad, RejectReason.BAD_TEMPERATURE, temperature_reason)
        for trait in pd.unique(trait_id[is_rate]):
            here = is_rate & (trait_id == trait)
            correction = _correction_for(plan, terms.get(trait))
            corrected, reasons = correct_rates(converted[here], temperature[here], correction)
            bad = np.zeros(count, dtype=bool)
            bad[here] = pd.notna(reasons)
            fate.reject(bad, RejectReason.BAD_TEMPERATURE, temperature_problems(temperature))
            as_measured[here] = converted[here]
            factor = correction.factor(temperature[here])
            # a variance is a squared rate: it takes the factor squared
            factor = np.where(is_variance[here], factor**2, factor)
            correction_factor[here] = factor
            converted[here] = np.where(is_variance[here], converted[here] * factor, corrected)
            second[here] = second[here] * factor
            correction_label[here] = correction.label()

    # 11. flags a reviewer should see
    lo = name_traits["plausible_min"].to_numpy(dtype=float)[name_codes]
    hi = name_traits["plausible_max"].to_numpy(dtype=float)[name_codes]
    location = np.isin(stat, _CENTRAL)
    outside = location & numeric & ((converted < lo) | (converted > hi))
    qualifier = np.asarray(parsed.qualifier, dtype=object)
    flags = join_per_row(
        (outside, "outside-plausible-range"),
        _labelled("qualifier:", qualifier),
        conversion_flags,
        (cell_not_hint, "cell-unit-differs-from-name"),
        (origin == 2, "unit-from-name"),
        (assumed_mean, "statistic-assumed-mean"),
        (two.plus_minus_read, f"plus-minus-read-as-{mapping.plus_minus}"),
        (two.plus_minus_unused, "plus-minus-unused"),
        (pd.notna(correction_label), "temperature-corrected"),
        (uncorrected, "rate-not-corrected:no-measurement-temperature"),
    )

    written = np.flatnonzero(fate.open)
    taxon_verbatim = Coded.of(cells["taxon_verbatim"])
    taxon, taxon_qualifier = _cleaned_taxa(taxon_verbatim.texts, plan)
    origin_codes = np.where(numeric, origin, len(UNIT_ORIGINS) - 1)
    columns = {
        "source_row": cells["source_row"].to_numpy(),
        "column": Coded.of(cells["column"]),
        "taxon_verbatim": taxon_verbatim,
        "taxon": taxon_verbatim.map(taxon),
        "taxon_qualifier": taxon_verbatim.map(taxon_qualifier),
        # context passes through as read (Arrow text, or codes for Python-object readers)
        **{key: cells[key] for key in ("sex", "life_stage", "site", "date", "individual_id")},
        **by_name,
        "value": np.where(numeric, converted, np.nan),
        "value_as_measured": as_measured,
        "correction_factor": correction_factor,
        "value_text": text_values,
        "qualifier": np.where(qualifier == "", None, qualifier),
        "original_value": cells["raw_value"],
        "original_name": name_coded,
        "original_unit": unit_coded,
        "unit_origin": Coded(origin_codes.astype(np.int32), np.array(UNIT_ORIGINS, dtype=object)),
        "match_score": name_table["score"].to_numpy(dtype=float)[name_codes],
        "measurement_temperature": temperature,
        "temperature_correction": correction_label,
        "flags": flags,
    }
    if mapping.level == "individual":
        individual = rows_table(written, columns)
        statistic_cells = pd.DataFrame()
    else:
        individual = pa.table({})
        columns["statistic"] = _STATISTIC_ARRAY[stat]
        columns["second_statistic"] = np.where(
            has_second, _STATISTIC_ARRAY[np.maximum(two.second_stat, 0)], None
        )
        columns["second_value"] = second  # NaN where none
        columns["n_raw"] = cells["n_raw"]
        statistic_cells = rows_frame(written, columns)
    return BatchResult(
        individual=individual,
        statistic_cells=statistic_cells,
        rejects=fate.rejected(),
        empty=int(empty.sum()),
    )


def _in_canonical_unit(
    number: np.ndarray, stat: np.ndarray, scale: np.ndarray, zero: np.ndarray
) -> np.ndarray:
    """Numbers of the statistics `stat` in the canonical unit: locations as (number - zero) *
    scale, SD and SE by |scale|, a variance by scale**2 (a spread has no offset), n as is;
    rounded to a double's 15 digits where converted (7100 mg: 7.1 g, not 7.1000000000000005)."""
    is_n = stat == _N
    converted = np.select(
        [is_n, np.isin(stat, _SPREAD), stat == _VARIANCE],
        [number, number * np.abs(scale), number * scale**2],
        (number - zero) * scale + 0.0,  # + 0.0: -0 becomes 0 (IEEE 754-2019, 6.3)
    )
    moved = np.flatnonzero(((scale != 1.0) | (zero != 0.0)) & ~is_n)
    if len(moved):
        converted[moved] = units.digits_of_a_double(converted[moved])
    return converted


def _cleaned_taxa(texts: np.ndarray, plan: SourcePlan) -> tuple[np.ndarray, np.ndarray]:
    """Cleaned name and qualifier per verbatim taxon text, each text parsed once per source
    (the plan keeps them: batches of one source repeat the same few hundred names)."""
    cache = plan.taxa_cleaned
    new = list(dict.fromkeys(t for t in texts if t not in cache))
    if new:
        taxa = clean_taxon_names(pd.Series(new, dtype=object), plan.taxon_synonyms)
        cleaned = zip(taxa["taxon"].to_numpy(dtype=object), taxa["taxon_qualifier"], strict=True)
        cache.update(zip(new, cleaned, strict=True))
    pairs = [cache[t] for t in texts]
    return (
        np.array([p[0] for p in pairs], dtype=object),
        np.array([p[1] for p in pairs], dtype=object),
    )


def _correction_for(plan: SourcePlan, term) -> TemperatureCorrection:
    """The project's correction with the Arrhenius temperature of the source, else of the trait."""
    correction = plan.correction
    assert correction is not None
    if correction.method != "arrhenius":
        return correction
    if plan.mapping.arrhenius_temperature is not None:
        return correction.with_arrhenius_temperature(plan.mapping.arrhenius_temperature)
    if term is not None and term.arrhenius_temperature is not None:
        return correction.with_arrhenius_temperature(term.arrhenius_temperature)
    return correction


RAW_EXCERPT_CHARS = 200


def _excerpt(raw: pa.Array) -> pa.Array:
    """Raw cells as written, cut to an excerpt: a huge rejected cell must not bloat the package."""
    lengths = pc.utf8_length(raw)
    long = pc.fill_null(pc.greater(lengths, RAW_EXCERPT_CHARS), False)
    if not pc.any(long).as_py():
        return raw
    cut = pc.binary_join_element_wise(
        pc.utf8_slice_codeunits(raw, 0, RAW_EXCERPT_CHARS),
        "… (",
        pc.cast(lengths, pa.string()),
        " characters)",
        "",
    )
    return pc.if_else(long, cut, raw)
