"""Cells of a population table that hold two statistics: both bounds of a range or of the
interquartile range ('50-60' under a 'range' or 'iqr' statistic), or a mean with a half-width
after '±' ('4.1 ± 0.3') where the mapping says what the half-width is (`plus_minus: sd|se`).

The cell stays one cell (it is counted, written or rejected once); its first statistic is its
own (min, q1, mean) and the second (max, q3, sd, se) travels beside it to the summary, converted
with the same unit and temperature correction. A half-width the mapping does not explain is not
used, and the cell says so with a flag.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from harmonize.errors import RejectReason
from harmonize.values import ParsedValues

# first statistic <- the two-part statistic, and the second beside it
_BOUNDS = {"range": ("min", "max"), "iqr": ("q1", "q3")}


@dataclass
class TwoPartCells:
    """Per cell: the statistic (index) and number of the cell itself, and the second
    statistic (index, -1 for none) and its number."""

    stat: np.ndarray
    number: np.ndarray
    second_stat: np.ndarray
    second_number: np.ndarray
    bounds_read: np.ndarray  # a range-looking cell read as two bounds (not a parse failure)
    one_number: np.ndarray  # 'range' or 'iqr' where such a cell holds one number (its width)
    plus_minus_read: np.ndarray
    plus_minus_unused: np.ndarray


def split_cells(
    stat: np.ndarray,
    parsed: ParsedValues,
    numeric: np.ndarray,
    index: dict[str, int],
    plus_minus: str | None,
) -> TwoPartCells:
    """`stat` indexes statistic codes (`index` maps code -> index); `plus_minus` is the
    mapping's reading of '±' (sd, se or None)."""
    count = len(stat)
    stat = stat.astype(np.int16)
    number = parsed.value.copy()
    second_stat = np.full(count, -1, dtype=np.int16)
    second_number = np.full(count, np.nan)
    bounds_read = np.zeros(count, dtype=bool)
    one_number = np.full(count, None, dtype=object)
    for two_part, (first, second) in _BOUNDS.items():
        here = numeric & (stat == index[two_part])
        if not here.any():  # most sources: no compare of reasons (objects) cell by cell
            continue
        both = here.copy()  # reasons are objects: compared only where needed
        both[here] = np.asarray(parsed.reason[here] == RejectReason.RANGE_VALUE, dtype=bool)
        one_number[here & ~both & np.isfinite(parsed.value)] = two_part
        bounds_read |= both
        number[both], second_number[both] = parsed.low[both], parsed.high[both]
        stat[here], second_stat[both] = index[first], index[second]
    with_half_width = numeric & np.isfinite(parsed.plus_minus)
    plus_minus_read = np.zeros(count, dtype=bool)
    if plus_minus is not None:
        plus_minus_read = with_half_width & (stat == index["mean"])
        second_stat[plus_minus_read] = index[plus_minus]
        second_number[plus_minus_read] = parsed.plus_minus[plus_minus_read]
    return TwoPartCells(
        stat=stat,
        number=number,
        second_stat=second_stat,
        second_number=second_number,
        bounds_read=bounds_read,
        one_number=one_number,
        plus_minus_read=plus_minus_read,
        plus_minus_unused=with_half_width & ~plus_minus_read,
    )


def one_number_message(statistic: str) -> str:
    first, second = _BOUNDS[statistic]
    return (
        f"one number under '{statistic}' is a width and says neither bound: write both "
        f"('50-60'), or give {first} and {second} in their own cells"
    )
