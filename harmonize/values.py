"""Parse raw cell text into numbers, qualifiers, ranges, ± values and in-cell unit text.

This stage turns what a spreadsheet cell says ("< 0,5", "12.3 ± 1.2", "3–5 mm", "n.d.") into
aligned numeric arrays plus a reject reason for every cell that holds no usable number. It works
column-at-a-time with Arrow compute kernels (RE2 regular expressions, string-to-float casts), so
there is no Python loop over cells.

It leaves to others: deciding what the unit text means (`units`), whether a population range or
a ± value is usable as a statistic (`stats`), and writing rejects (`package`). Category traits
only get whitespace cleaning here (`parse_categories`).
"""

from __future__ import annotations

import re
from collections.abc import Collection, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from harmonize.errors import ConfigError, RejectReason
from harmonize.mapping_file import COMMAND_LINE, MAPPING_FILE, declare_read_options

__all__ = ["ParsedValues", "parse_numbers", "parse_categories"]

DECIMAL_MARKS = (".", ",")
# Space-like thousands separators are folded to a plain space before parsing, like the cell text.
THOUSANDS_MARKS = (".", ",", " ", "'", "_", "\u00a0", "\u202f", "\u2009")
SPACE_LIKE = "\u00a0\u2007\u2009\u200a\u202f"
# Unicode minus and dash look-alikes that people paste from word processors.
MINUS_LIKE = "\u2212\u2010\u2011\u2012\ufe63\uff0d"
RANGE_DASHES = "\u2013\u2014"
MESSAGE_EXCERPT_CHARS = 40

_QUALIFIER = r"(?:<=|>=|=<|=>|[<>≤≥~≈]|(?i:approx\.?|circa|ca\.?|c\.))"
_PLUS_MINUS = r"(?:±|\+/-|\+-)"
_RANGE_SEPARATOR = rf"(?:-|[{RANGE_DASHES}]|\.\.|(?i:to))"
# A unit starts with an ASCII letter, '%', '/' ("/h") or any non-ASCII sign except the ones
# that separate numbers (µ, °, ‰, Greek letters). Spelled out instead of \p{L}, which made
# RE2 several times slower on this pattern.
_UNIT_START = r"(?:[A-Za-z%/]|[^\x00-\x7f±–—≤≥≈])"
_NON_FINITE_RE = r"^[+-]?(?i:inf|infinity|nan|∞)$"
_QUALIFIER_WORDS_RE = r"^(?i:approx\.?|circa|ca\.?|c\.|≈)$"


@dataclass(frozen=True)
class ParsedValues:
    """Result of `parse_numbers`: every array has the length of the input, aligned with it.

    Each cell is exactly one of: a finite `value` (reason None, not empty), `empty`, or has a
    `reason`. Ranges carry `low`/`high` next to their RANGE_VALUE reason.
    """

    value: np.ndarray  # float64; NaN where no single number
    qualifier: np.ndarray  # object: '' | '<' | '>' | '<=' | '>=' | '~'
    low: np.ndarray  # float64 range lower bound, NaN otherwise
    high: np.ndarray  # float64 range upper bound, NaN otherwise
    plus_minus: np.ndarray  # float64 half-width after '±', NaN otherwise
    unit_in_cell: np.ndarray  # object: unit text after the number, None otherwise
    empty: np.ndarray  # bool: missing cell (null, blank or a declared missing token)
    reason: np.ndarray  # object: RejectReason or None
    message: np.ndarray  # object: one-line message naming the fix, None when ok


@dataclass(frozen=True)
class _NumberSyntax:
    """RE2 patterns for one (decimal, thousands) choice."""

    plain: str  # digits with the decimal mark only: the common case, checked first
    signed: str
    unsigned: str
    decimal: str
    thousands: str | None
    declared_in: str  # where the read options were declared: hints name the fix there

    def declare(self, *options: tuple[str, str]) -> str:
        return declare_read_options(self.declared_in, *options)


def _number_syntax(
    decimal: str, thousands: str | None, declared_in: str = MAPPING_FILE
) -> _NumberSyntax:
    if decimal not in DECIMAL_MARKS:
        raise ConfigError(
            f"decimal mark {decimal!r} is not supported",
            hint="use `decimal: '.'` or `decimal: ','`",
        )
    if thousands is not None:
        if thousands not in THOUSANDS_MARKS:
            raise ConfigError(
                f"thousands separator {thousands!r} is not supported",
                hint="use one of " + ", ".join(repr(m) for m in THOUSANDS_MARKS),
            )
        if thousands in SPACE_LIKE:
            thousands = " "
        if thousands == decimal:
            raise ConfigError(
                f"decimal mark and thousands separator are both {decimal!r}",
                hint="give --decimal and --thousands different characters"
                if declared_in == COMMAND_LINE
                else "declare different characters in the mapping's read options",
            )
    # Character classes avoid escaping rules that differ between regex engines.
    mark = f"[{decimal}]"
    integer = r"\d+" if thousands is None else rf"(?:\d{{1,3}}(?:[{thousands}]\d{{3}})+|\d+)"
    unsigned = rf"(?:{integer}(?:{mark}\d*)?|{mark}\d+)(?:[eE][+-]?\d+)?"
    plain = rf"[+-]?(?:\d+(?:{mark}\d*)?|{mark}\d+)(?:[eE][+-]?\d+)?"
    return _NumberSyntax(plain, rf"[+-]?{unsigned}", unsigned, decimal, thousands, declared_in)


def _as_arrow(raw: pd.Series | pa.Array | pa.ChunkedArray | Sequence[str | None]) -> pa.Array:
    """Any supported input as one Arrow array (numeric or string)."""
    if isinstance(raw, pa.ChunkedArray):
        raw = raw.combine_chunks()
    if isinstance(raw, pa.Array):
        if pa.types.is_dictionary(raw.type):
            raw = raw.dictionary_decode()
        return raw
    series = raw if isinstance(raw, pd.Series) else pd.Series(list(raw))
    if series.dtype == object or isinstance(series.dtype, pd.CategoricalDtype):
        # Mixed objects (numbers among text, as spreadsheets deliver them) become their text.
        series = series.astype("str")
    if pd.api.types.is_bool_dtype(series.dtype):
        series = series.astype("str")
    array = pa.array(series, from_pandas=True)
    # pandas' Arrow-backed text columns may arrive in several chunks
    return array.combine_chunks() if isinstance(array, pa.ChunkedArray) else array


def _parse_numeric(arr: pa.Array) -> ParsedValues:
    """Fast path for columns already typed as numbers: only missing and non-finite remain."""
    value = arr.cast(pa.float64()).to_numpy(zero_copy_only=False).copy()
    # pandas stores missing floats as NaN, so NaN in a numeric column means "empty" here.
    empty = np.isnan(value)
    infinite = np.isinf(value)
    value[infinite] = np.nan
    n = len(value)
    reason = np.full(n, None, dtype=object)
    message = np.full(n, None, dtype=object)
    reason[infinite] = RejectReason.NON_FINITE
    message[infinite] = "value is infinite: check the source column for overflow or 'inf'"
    nan = np.full(n, np.nan)
    return ParsedValues(
        value=value,
        qualifier=np.full(n, "", dtype=object),
        low=nan,
        high=nan.copy(),
        plus_minus=nan.copy(),
        unit_in_cell=np.full(n, None, dtype=object),
        empty=empty,
        reason=reason,
        message=message,
    )


def _normalise_text(text: pa.Array) -> pa.Array:
    text = pc.replace_substring_regex(text, f"[{SPACE_LIKE}]", " ")
    text = pc.replace_substring_regex(text, f"[{MINUS_LIKE}]", "-")
    return pc.utf8_trim_whitespace(text)


def _to_float(number_text: pa.Array, syntax: _NumberSyntax, *, blanks: bool = True) -> np.ndarray:
    """Matched number text to float64. Null stays NaN, and so does '' (a row the pattern did
    not match) unless `blanks` is False: the caller passes no '' then, and a pass is saved."""
    if blanks:
        number_text = pc.if_else(pc.equal(number_text, ""), None, number_text)
    if syntax.thousands is not None:
        number_text = pc.replace_substring(number_text, syntax.thousands, "")
    if syntax.decimal != ".":
        number_text = pc.replace_substring(number_text, syntax.decimal, ".")
    # Only text that matched the number pattern arrives here, so the cast cannot fail;
    # overflow such as 1e999 becomes ±inf and is rejected as non-finite by the caller.
    return pc.cast(number_text, pa.float64()).to_numpy(zero_copy_only=False)


def _field(match: pa.StructArray, name: str) -> pa.Array:
    """One group of an `extract_regex` result, null where the whole pattern did not match."""
    return pc.if_else(match.is_valid(), match.field(name), None)


def _quoted(text: pa.Array) -> pa.Array:
    """'text' for messages, cut to a readable excerpt."""
    text = text.cast(pa.string())  # the rejected subset is small; one string type for joins
    long = pc.greater(pc.utf8_length(text), MESSAGE_EXCERPT_CHARS)
    cut = pc.utf8_slice_codeunits(text, 0, MESSAGE_EXCERPT_CHARS)
    cut = pc.if_else(long, pc.binary_join_element_wise(cut, "…", ""), cut)
    return pc.binary_join_element_wise("'", cut, "'", "")


def _messages(
    message: np.ndarray, rows: np.ndarray, shown: pa.Array, before: str, after: str
) -> None:
    """Fill message[rows] with before + 'cell' + after, built by Arrow rather than per row."""
    if len(rows) == 0:
        return
    quoted = _quoted(shown.take(pa.array(rows)))
    built = pc.binary_join_element_wise(before, quoted, after, "")
    message[rows] = built.to_numpy(zero_copy_only=False)


def parse_numbers(
    raw: pd.Series | pa.Array | pa.ChunkedArray | Sequence[str | None],
    *,
    decimal: str = ".",
    thousands: str | None = None,
    missing: Collection[str] = (),
    max_cell_chars: int = 256,
    declared_in: str = MAPPING_FILE,
) -> ParsedValues:
    """Parse a column of raw cells into numbers, vectorised over the whole column.

    `decimal` and `thousands` come from the mapping's read options; `missing` lists tokens that
    mean "no value" (compared after trimming whitespace). Raises ConfigError for unsupported
    options; problems in cells come back in `reason` and `message`, whose hints name read
    options as they were declared (`declared_in`: a mapping file or the command line). Columns
    already typed as numbers skip the text patterns; object columns mixing numbers and text are
    read as text, numbers written as Python writes them (decimal point).
    """
    syntax = _number_syntax(decimal, thousands, declared_in)
    arr = _as_arrow(raw)
    if pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type):
        return _parse_numeric(arr)
    if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        arr = arr.cast(pa.large_string())
    n = len(arr)
    missing_tokens = pa.array(sorted({m.strip() for m in missing}), type=arr.type)

    is_null = arr.is_null().to_numpy(zero_copy_only=False)
    lengths = pc.utf8_length(arr).to_numpy(zero_copy_only=False)
    too_large = ~is_null & (np.nan_to_num(lengths, nan=0) > max_cell_chars)
    # Blank out oversized cells so no pattern runs over them.
    shown = pc.utf8_trim_whitespace(
        pc.if_else(pa.array(too_large), None, arr) if too_large.any() else arr
    )

    # Most cells are plain numbers: one cheap pattern settles them, and only the rest (text,
    # qualifiers, ranges, units, declared missing tokens) goes through the detailed patterns.
    plain = pc.match_substring_regex(shown, f"^{syntax.plain}$")
    if pc.any(pc.match_substring_regex(missing_tokens, f"^{syntax.plain}$")).as_py():
        # a missing-value token that reads as a number ('-999') is not a value
        plain = pc.and_kleene(plain, pc.invert(pc.is_in(shown, value_set=missing_tokens)))
    plain = pc.fill_null(plain, False).to_numpy(zero_copy_only=False)
    value = np.full(n, np.nan)
    plain_rows = np.flatnonzero(plain)
    value[plain_rows] = _to_float(shown.take(pa.array(plain_rows)), syntax, blanks=False)
    plain[plain_rows[np.isinf(value[plain_rows])]] = False  # overflow gets its reason below
    value[~plain] = np.nan

    rows = np.flatnonzero(~plain & ~is_null & ~too_large)
    detailed = _parse_detailed(shown.take(pa.array(rows)), syntax, missing_tokens)
    low, high, plus_minus = np.full(n, np.nan), np.full(n, np.nan), np.full(n, np.nan)
    qualifier = np.full(n, "", dtype=object)
    unit_in_cell = np.full(n, None, dtype=object)
    empty = is_null.copy()
    reason = np.full(n, None, dtype=object)
    message = np.full(n, None, dtype=object)
    value[rows], low[rows], high[rows] = detailed.value, detailed.low, detailed.high
    plus_minus[rows], qualifier[rows] = detailed.plus_minus, detailed.qualifier
    unit_in_cell[rows], empty[rows] = detailed.unit_in_cell, detailed.empty
    reason[rows], message[rows] = detailed.reason, detailed.message

    # A non-zero number too small for a double (e.g. '1e-400') reads as 0.0: never let that pass
    # silently (IEEE 754 underflow; the smallest positive double is about 4.9e-324).
    zero_rows = np.flatnonzero((value == 0) & pd.isna(reason))
    if len(zero_rows):
        nonzero = pc.match_substring_regex(
            shown.take(pa.array(zero_rows)), r"^[^eE]*[1-9][^eE]*[eE]"
        )
        under = zero_rows[pc.fill_null(nonzero, False).to_numpy(zero_copy_only=False)]
        value[under] = np.nan
        reason[under] = RejectReason.NON_FINITE
        texts = shown.take(pa.array(under)).to_pylist() if len(under) else []
        message[under] = [
            f"'{t}' is too small to represent as a number (it would read as 0)" for t in texts
        ]

    large_rows = np.flatnonzero(too_large)
    reason[large_rows] = RejectReason.CELL_TOO_LARGE
    if len(large_rows):
        built = pc.binary_join_element_wise(
            "cell has ",
            pa.array(lengths[large_rows]).cast(pa.int64()).cast(pa.string()),
            f" characters, more than the limit of {max_cell_chars}: "
            "check the column mapping or raise max_cell_chars",
            "",
        )
        message[large_rows] = built.to_numpy(zero_copy_only=False)
    return ParsedValues(
        value=value,
        qualifier=qualifier,
        low=low,
        high=high,
        plus_minus=plus_minus,
        unit_in_cell=unit_in_cell,
        empty=empty,
        reason=reason,
        message=message,
    )


def _parse_detailed(
    shown: pa.Array, syntax: _NumberSyntax, missing_tokens: pa.Array
) -> ParsedValues:
    """Full parse of trimmed, non-null cells that are not plain numbers."""
    n = len(shown)
    text = _normalise_text(shown)
    blank = pc.or_kleene(pc.equal(text, ""), pc.is_in(text, value_set=missing_tokens))
    blank = pc.or_kleene(blank, pc.is_in(shown, value_set=missing_tokens))
    empty = pc.fill_null(blank, False).to_numpy(zero_copy_only=False)

    # One pattern for all shapes: [qualifier] number [separator number] [unit]. The optional
    # second number is tried first, so '3 to 5' is a range rather than 3 with unit 'to 5'.
    signed = syntax.signed
    match = pc.extract_regex(
        text,
        rf"(?s)^(?P<qualifier>{_QUALIFIER}?)\s*(?P<first>{signed})"
        rf"(?:\s*(?P<separator>{_PLUS_MINUS}|{_RANGE_SEPARATOR})\s*(?P<second>{signed}))?"
        rf"(?:\s*(?P<unit>{_UNIT_START}.*))?$",
    )
    matched = match.is_valid().to_numpy(zero_copy_only=False)
    separator = pc.fill_null(_field(match, "separator"), "")
    second = _field(match, "second")
    is_pm = pc.match_substring_regex(separator, f"^{_PLUS_MINUS}$")
    # A half-width after '±' carries no sign; '12 ± -1' is malformed, not a value.
    is_pm = pc.and_(is_pm, pc.invert(pc.starts_with(second, "-")))
    is_pm = pc.and_(is_pm, pc.invert(pc.starts_with(second, "+")))
    is_pm = matched & pc.fill_null(is_pm, False).to_numpy(zero_copy_only=False)
    is_range = pc.fill_null(pc.match_substring_regex(separator, f"^{_RANGE_SEPARATOR}$"), False)
    is_range = matched & is_range.to_numpy(zero_copy_only=False)
    is_single = matched & (separator.to_numpy(zero_copy_only=False) == "")

    first = _to_float(_field(match, "first"), syntax)
    second = _to_float(second, syntax)
    value = np.where(is_single | is_pm, first, np.nan)
    plus_minus = np.where(is_pm, second, np.nan)
    low = np.where(is_range, first, np.nan)
    high = np.where(is_range, second, np.nan)

    not_finite_text = pc.fill_null(pc.match_substring_regex(text, _NON_FINITE_RE), False)
    overflow = (is_single | is_pm | is_range) & (np.isinf(first) | np.isinf(second))
    non_finite = ~empty & (not_finite_text.to_numpy(zero_copy_only=False) | overflow)
    ok = (is_single | is_pm) & ~non_finite & ~empty
    range_value = is_range & ~non_finite & ~empty
    not_a_number = ~empty & ~non_finite & ~ok & ~range_value

    reason = np.full(n, None, dtype=object)
    reason[non_finite] = RejectReason.NON_FINITE
    reason[range_value] = RejectReason.RANGE_VALUE
    reason[not_a_number] = RejectReason.NOT_A_NUMBER

    kept = ok | range_value
    value = np.where(ok, value, np.nan)
    plus_minus = np.where(ok, plus_minus, np.nan)
    low = np.where(range_value, low, np.nan)
    high = np.where(range_value, high, np.nan)

    qualifier = pc.replace_substring_regex(_field(match, "qualifier"), _QUALIFIER_WORDS_RE, "~")
    for written, canonical in (("≤", "<="), ("≥", ">="), ("=<", "<="), ("=>", ">=")):
        qualifier = pc.replace_substring(qualifier, written, canonical)
    qualifier = pc.fill_null(qualifier, "").to_numpy(zero_copy_only=False).astype(object)
    qualifier[~kept] = ""
    unit = _field(match, "unit")
    unit_in_cell = pc.if_else(pc.equal(unit, ""), None, unit)
    unit_in_cell = unit_in_cell.to_numpy(zero_copy_only=False).astype(object)
    unit_in_cell[~kept] = None

    message = np.full(n, None, dtype=object)
    _fill_messages(message, shown, text, syntax, not_a_number, non_finite, range_value, low, high)
    return ParsedValues(
        value=value,
        qualifier=qualifier,
        low=low,
        high=high,
        plus_minus=plus_minus,
        unit_in_cell=unit_in_cell,
        empty=empty,
        reason=reason,
        message=message,
    )


def _fill_messages(
    message: np.ndarray,
    shown: pa.Array,
    text: pa.Array,
    syntax: _NumberSyntax,
    not_a_number: np.ndarray,
    non_finite: np.ndarray,
    range_value: np.ndarray,
    low: np.ndarray,
    high: np.ndarray,
) -> None:
    """Write one-line messages for rejected cells; each names the likely fix."""
    unit_tail = rf"(?:\s*{_UNIT_START}.*)?$"
    lead = rf"(?s)^{_QUALIFIER}?\s*"
    if syntax.decimal == ".":
        # '12,5' with decimal '.' must never become 125 or 12.5 silently.
        other_mark = pc.match_substring_regex(
            text, rf"{lead}[+-]?\d+,\d+(?:[eE][+-]?\d+)?{unit_tail}"
        )
        if syntax.thousands == ",":
            hint = (
                " does not fit the declared thousands separator ',' (groups of three digits): "
                "if the comma is a decimal comma, " + syntax.declare(("decimal", ","))
            )
        else:
            hint = " looks like a decimal comma: " + syntax.declare(("decimal", ","))
    else:
        other_mark = pc.match_substring_regex(
            text, rf"{lead}[+-]?\d*\.\d+(?:[eE][+-]?\d+)?{unit_tail}"
        )
        if syntax.thousands == ".":
            hint = (
                " does not fit the declared thousands separator '.' (groups of three digits): "
                "if the point is a decimal point, " + syntax.declare(("decimal", "."))
            )
        else:
            hint = (
                " has a decimal point but the declared decimal mark is ',': fix the cell, or "
                + syntax.declare(("decimal", "."), ("thousands", "."))
            )
    other_mark = pc.fill_null(other_mark, False).to_numpy(zero_copy_only=False)
    if syntax.thousands is None:
        # '1.234,5' with decimal ',' (or '1,234.5' with '.'): groups of three digits
        group = "." if syntax.decimal == "," else ","
        grouped = pc.match_substring_regex(
            text,
            rf"{lead}[+-]?\d{{1,3}}(?:{re.escape(group)}\d{{3}})+"
            rf"(?:{re.escape(syntax.decimal)}\d+)?{unit_tail}",
        )
        grouped = pc.fill_null(grouped, False).to_numpy(zero_copy_only=False) & not_a_number
        _messages(
            message,
            np.flatnonzero(grouped & ~other_mark),
            shown,
            "",
            f" looks like '{group}' between groups of thousands: "
            + syntax.declare(("thousands", group)),
        )
        _messages(  # '1.234' with decimal ',': a decimal point or a thousands separator
            message,
            np.flatnonzero(grouped & other_mark),
            shown,
            "",
            f" has a '{group}' that is either a decimal mark or a thousands separator: "
            + syntax.declare(("decimal", group), ("thousands", group)),
        )
        not_a_number = not_a_number & ~grouped
    _messages(message, np.flatnonzero(not_a_number & other_mark), shown, "", hint)
    _messages(
        message,
        np.flatnonzero(not_a_number & ~other_mark),
        shown,
        "",
        f" is not a number (expected digits with decimal mark '{syntax.decimal}', an optional "
        "qualifier such as '<' before and an optional unit after)",
    )
    _messages(
        message,
        np.flatnonzero(non_finite),
        shown,
        "",
        " is not a finite number: fix the source cell or declare the token as missing",
    )
    range_rows = np.flatnonzero(range_value)
    if len(range_rows):
        bounds = pc.binary_join_element_wise(
            pa.array(low[range_rows]).cast(pa.string()),
            pa.array(high[range_rows]).cast(pa.string()),
            " to ",
        )
        quoted = _quoted(shown.take(pa.array(range_rows)))
        built = pc.binary_join_element_wise(
            quoted,
            " is a range (",
            bounds,
            "), not a single value: if it is the range of a population, read the table at population level with the statistic range",
            "",
        )
        message[range_rows] = built.to_numpy(zero_copy_only=False)


def parse_categories(
    raw: pd.Series | pa.Array | pa.ChunkedArray | Sequence[str | None],
    *,
    missing: Collection[str] = (),
) -> tuple[np.ndarray, np.ndarray]:
    """Clean category text: trim, collapse inner whitespace, keep case.

    Returns (cleaned text as an object array with None where empty, empty flags).
    """
    arr = _as_arrow(raw)
    if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        arr = arr.cast(pa.large_string())
    text = pc.replace_substring_regex(arr, f"[{SPACE_LIKE}]", " ")
    text = pc.replace_substring_regex(text, r"\s+", " ")
    text = pc.utf8_trim_whitespace(text)
    missing_tokens = pa.array(sorted({m.strip() for m in missing}), type=pa.large_string())
    blank = pc.or_kleene(pc.equal(text, ""), pc.is_in(text, value_set=missing_tokens))
    empty = pc.fill_null(blank, True).to_numpy(zero_copy_only=False)
    cleaned = text.to_numpy(zero_copy_only=False).astype(object)
    cleaned[empty] = None
    return cleaned, empty
