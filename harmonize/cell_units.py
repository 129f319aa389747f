"""Units of a batch's cells: one conversion per distinct (unit text, canonical unit) pair,
taken by every cell of the pair through integer codes; whether two unit texts name different
units; and the temperature each cell was measured at, in degC."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from harmonize import lookup_tables, units, values
from harmonize.errors import RejectReason
from harmonize.mapping_file import Mapping
from harmonize.text_columns import Coded


@dataclass
class PairConversions:
    """Per cell: locations convert as (value - zero) * scale; `flags` are the conversion's
    flags (unit aliases, chemical qualifiers); `reason`/`message` where no conversion exists."""

    scale: np.ndarray
    zero: np.ndarray
    flags: Coded
    reason: np.ndarray
    message: np.ndarray


def convert_by_pair(
    needs_unit: np.ndarray,
    unit_coded: Coded,
    canonical_by_name: np.ndarray,
    name_codes: np.ndarray,
    *,
    is_cv: np.ndarray,
    is_variance: np.ndarray,
    mapping: Mapping,
) -> PairConversions:
    """One conversion per distinct (unit text, canonical unit) pair, by combined codes; a
    coefficient of variation is unit-free (its unit can only be %, a fraction or none), and a
    variance may come in the unit squared."""
    count = len(needs_unit)
    scale = np.ones(count)
    zero = np.zeros(count)
    conversion_flags = Coded(np.zeros(count, dtype=np.int32), [""])  # text per unit pair
    reason = np.full(count, None, dtype=object)
    message = np.full(count, None, dtype=object)
    if not needs_unit.any():
        return PairConversions(scale, zero, conversion_flags, reason, message)
    index = np.flatnonzero(needs_unit)
    text_of_code, unit_texts = pd.factorize(
        pd.Series(unit_coded.texts, dtype=object), use_na_sentinel=False
    )
    canon_of_name, canon_texts = pd.factorize(
        pd.Series(canonical_by_name, dtype=object), use_na_sentinel=False
    )
    targets = [*canon_texts, "dimensionless"]
    target = np.where(is_cv[index], len(canon_texts), canon_of_name[name_codes[index]])
    pair = text_of_code[unit_coded.codes[index]].astype(np.int64) * len(targets) + target
    pair = pair * 2 + is_variance[index]
    pair_codes, pair_uniques = pd.factorize(pair)
    pair_scale, pair_zero = np.ones(len(pair_uniques)), np.zeros(len(pair_uniques))
    pair_reason = np.full(len(pair_uniques), None, dtype=object)
    pair_message = np.full(len(pair_uniques), None, dtype=object)
    pair_flag = np.zeros(len(pair_uniques), dtype=np.int32)
    flag_texts = [""]
    for code, key in enumerate(pair_uniques):
        key, of_variance = divmod(key, 2)
        raw, canon = unit_texts[key // len(targets)], targets[key % len(targets)]
        convert = units.variance_conversion if of_variance else units.conversion
        conv = convert(
            raw if isinstance(raw, str) else None,
            canon if isinstance(canon, str) else "dimensionless",
        )
        if not conv.ok:
            pair_reason[code], pair_message[code] = conv.reason, conv.message
            if conv.reason is RejectReason.MISSING_UNIT:  # the fix depends on the layout
                pair_message[code] = lookup_tables.missing_unit_message(mapping, canon)
            continue
        pair_scale[code], pair_zero[code] = conv.scale, conv.zero
        if conv.flags:
            pair_flag[code] = len(flag_texts)
            flag_texts.append(";".join(conv.flags))
    scale[index], zero[index] = pair_scale[pair_codes], pair_zero[pair_codes]
    conversion_flags.codes[index] = pair_flag[pair_codes]
    reason[index], message[index] = pair_reason[pair_codes], pair_message[pair_codes]
    return PairConversions(scale, zero, conversion_flags.map(flag_texts), reason, message)


def units_differ(where: np.ndarray, first: Coded, second: Coded) -> np.ndarray:
    """Per cell, whether two unit texts (both given `where`) name different units; decided
    once per distinct pair ('g' and 'gram' are the same unit, 'mm' and 'cm' are not)."""
    differs = np.zeros(len(where), dtype=bool)
    rows = np.flatnonzero(where)
    if len(rows):
        pairs = pd.MultiIndex.from_arrays([first.codes[rows], second.codes[rows]])
        pair_codes, pair_uniques = pd.factorize(pairs)
        verdicts = [not units.same_unit(first.texts[a], second.texts[b]) for a, b in pair_uniques]
        differs[rows] = np.array(verdicts, dtype=bool)[pair_codes]
    return differs


def measurement_temperature(cells: pd.DataFrame, mapping: Mapping) -> tuple[np.ndarray, np.ndarray]:
    """Temperature of measurement per cell in degC, and a reason text where it cannot be read."""
    spec = mapping.temperature
    count = len(cells)
    reasons = np.full(count, None, dtype=object)
    if spec is None:
        reasons[:] = "no measurement temperature declared (context.temperature in the mapping)"
        return np.full(count, np.nan), reasons
    conv = units.conversion(spec.unit, "degC")
    if not conv.ok:
        reasons[:] = f"temperature unit '{spec.unit}': {conv.message}"
        return np.full(count, np.nan), reasons
    if spec.value is not None:
        return np.full(count, conv.apply(np.array([spec.value]))[0]), reasons
    parsed = values.parse_numbers(
        cells["temperature_raw"],
        decimal=mapping.read.decimal,
        missing=mapping.read.missing,
        declared_in=mapping.read.declared_in,
    )
    celsius = conv.apply(parsed.value)
    bad = ~np.isfinite(celsius)
    raw = cells["temperature_raw"].to_numpy(dtype=object)[bad]
    reasons[bad] = [
        f"measurement temperature '{r}' in column '{spec.column}' is not a number" for r in raw
    ]
    return celsius, reasons
