"""Reshape frames of source rows into trait cells: one row per trait cell, text as written.

A wide table gives one cell per row and trait column (unclaimed columns included, so that no
data is silently dropped), a long table one cell per row. Context columns (taxon, sex, site,
...) are cleaned once per distinct text and carried on every cell. Names, units, statistics and
context cells above `limits.max_cell_chars` refuse the file, naming row and column. Reading
files is left to `sources`; parsing numbers, matching names and converting units to later
stages.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from harmonize.errors import SourceReadError
from harmonize.project import Limits, Mapping
from harmonize.text_columns import Coded, concat

CONTEXT_COLUMNS = {
    "taxon": "taxon_verbatim",
    "individual": "individual_id",
    "sex": "sex",
    "life_stage": "life_stage",
    "site": "site",
    "date": "date",
    "sample_size": "n_raw",
}
CELL_COLUMNS = (
    "source_row", "column", "original_name", "raw_value", "raw_unit", "statistic", "n_raw",
    "taxon_verbatim", "individual_id", "sex", "life_stage", "site", "date", "temperature_raw",
)  # fmt: skip


@dataclass(frozen=True)
class CellBatch:
    """Trait cells of one batch of source rows (one row per cell, columns CELL_COLUMNS)."""

    cells: pd.DataFrame
    rows: int  # source rows in this batch
    fraction_read: float | None = None  # share of the file read so far (for progress), if known


def trait_columns(mapping: Mapping, header: list[str]) -> list[str]:
    """Wide layout: the columns holding trait values (declared ones and every unclaimed column).

    Unclaimed columns are treated as trait columns matched by name so that no data is silently
    dropped; a mapping lists columns that are neither trait nor context under `ignore`.
    """
    context = set(mapping.context.values())
    if mapping.temperature and mapping.temperature.column:
        context.add(mapping.temperature.column)
    return [c for c in header if c not in context and c not in mapping.ignore]


# ---------------------------------------------------------------- reshaping


def _clean_text(values: pd.Series, missing: set[str] | None = None) -> pd.Series | Coded:
    """Stripped text, missing where blank or a missing-value token. Arrow-backed text is
    cleaned by Arrow compute and stays Arrow text (it is taken into the output as it is);
    Python objects are cleaned once per distinct text and carried as codes."""
    if isinstance(values.dtype, pd.StringDtype | pd.ArrowDtype):
        text = pa.array(values, from_pandas=True)
        if isinstance(text, pa.ChunkedArray):
            text = text.combine_chunks()
        # in the text type as read (pandas keeps large_string): no copy for a cast
        text = pc.utf8_trim_whitespace(text)
        tokens = pa.array(sorted({"", *(missing or ())}), text.type)
        blank = pc.is_in(text, value_set=tokens)
        if pc.any(blank).as_py():
            text = pc.if_else(blank, pa.scalar(None, text.type), text)
        return pa.table({"text": text}).to_pandas()["text"]  # wraps the Arrow text
    # Python objects (numbers among text, as some readers hand them over): once per distinct
    return Coded.of(values).cleaned(frozenset(missing or ()))


def _context_arrays(
    mapping: Mapping, frame: pd.DataFrame
) -> dict[str, pd.Series | Coded | np.ndarray]:
    out: dict[str, pd.Series | Coded | np.ndarray] = {}
    missing = set(mapping.read.missing)
    for key, target in CONTEXT_COLUMNS.items():
        column = mapping.context.get(key)
        if column is None:
            out[target] = Coded.constant(None, len(frame))
            continue
        out[target] = _clean_text(frame[column], missing)
    if mapping.temperature and mapping.temperature.column:
        out["temperature_raw"] = frame[mapping.temperature.column].to_numpy(dtype=object)
    else:
        out["temperature_raw"] = np.full(len(frame), None, dtype=object)
    return out


def _cell_frame(columns: dict[str, np.ndarray | pd.Series | Coded], length: int) -> pd.DataFrame:
    """Cells as a frame without converting text back and forth: coded text becomes a pandas
    categorical (codes, never a string per cell), object arrays stay object, source columns
    stay as read (Arrow-backed text)."""
    index = pd.RangeIndex(length)
    out = {}
    for name, values in columns.items():
        if isinstance(values, Coded):
            out[name] = pd.Series(values.categorical(), index=index)
        elif isinstance(values, pd.Series):
            out[name] = pd.Series(values.array, index=index)  # no copy of Arrow text
        else:
            out[name] = pd.Series(values, index=index, dtype=values.dtype)
    return pd.DataFrame(out, index=index)


def _wide_cells(
    mapping: Mapping, frame: pd.DataFrame, columns: list[str], first_row: int
) -> pd.DataFrame:
    if not columns:
        return pd.DataFrame({name: pd.Series([], dtype=object) for name in CELL_COLUMNS})
    count = len(frame)
    context = _context_arrays(mapping, frame)
    declared = [mapping.trait_column(column) for column in columns]
    names = Coded(
        np.repeat(np.arange(len(columns), dtype=np.int32), count), np.array(columns, dtype=object)
    )
    pieces = {
        "source_row": np.tile(
            np.arange(first_row, first_row + count, dtype=np.int64), len(columns)
        ),
        "column": names,
        "original_name": names,
        "raw_value": pd.concat([frame[c] for c in columns], ignore_index=True),
        "raw_unit": concat([Coded.constant(d.unit if d else None, count) for d in declared]),
        "statistic": concat([Coded.constant(d.statistic if d else None, count) for d in declared]),
    }
    for key, values in context.items():  # the same row context for every trait column
        if isinstance(values, Coded):
            pieces[key] = values.tile(len(columns))
        elif isinstance(values, pd.Series):
            pieces[key] = pd.concat([values] * len(columns), ignore_index=True)
        else:
            pieces[key] = np.tile(values, len(columns))
    return _cell_frame(pieces, count * len(columns))[list(CELL_COLUMNS)]


def _stripped(values: pd.Series) -> Coded:
    """Stripped text (missing cells stay missing), once per distinct text."""
    coded = Coded.of(values)
    return coded.map([v.strip() if isinstance(v, str) else v for v in coded.texts])


def long_trait_names(mapping: Mapping, frame: pd.DataFrame) -> np.ndarray:
    """A long table's trait names as its cells carry them (stripped; missing stays missing)."""
    assert mapping.columns is not None
    return _stripped(frame[mapping.columns.trait]).values()


def _long_cells(mapping: Mapping, frame: pd.DataFrame, first_row: int) -> pd.DataFrame:
    spec = mapping.columns
    assert spec is not None  # checked when the mapping was loaded
    context = _context_arrays(mapping, frame)
    none = Coded.constant(None, len(frame))
    cells = _cell_frame(
        {
            "source_row": np.arange(first_row, first_row + len(frame), dtype=np.int64),
            "column": Coded.constant(spec.value, len(frame)),
            "original_name": _stripped(frame[spec.trait]),
            "raw_value": frame[spec.value],
            "raw_unit": Coded.of(frame[spec.unit]) if spec.unit else none,
            "statistic": Coded.of(frame[spec.statistic]) if spec.statistic else none,
            **context,
            **({"n_raw": frame[spec.n]} if spec.n else {}),
        },
        len(frame),
    )
    return cells[list(CELL_COLUMNS)]


# ---------------------------------------------------------------- size limits
# Oversized trait values become `cell-too-large` rejects (see `values`). Names, units, statistics
# and context are not values: one of them above `limits.max_cell_chars` usually means the
# mapping names the wrong column (a notes column as the site), so the file is refused with the
# row and column, before fuzzy matching or writing runs over megabytes of text.


def _descriptive_columns(mapping: Mapping) -> list[str]:
    columns = list(mapping.context.values())
    if mapping.columns is not None:
        spec = mapping.columns
        columns += [c for c in (spec.trait, spec.unit, spec.statistic, spec.n) if c]
    return list(dict.fromkeys(columns))


def _text_lengths(values: pd.Series) -> np.ndarray:
    """Characters per cell (0 for a missing one)."""
    if values.dtype != object:  # Arrow-backed text: measured in one vectorised pass
        return values.astype("str").str.len().fillna(0).to_numpy(dtype=np.int64)
    # Python objects: measured once per distinct value
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    distinct = np.array([len(str(v)) for v in np.asarray(uniques, dtype=object)] + [0])
    return distinct[codes]


def _bytes_within(values: pd.Series, limit: int) -> bool:
    """Whether Arrow-backed text has no cell of more than `limit` bytes (read from its offsets,
    without counting characters); False for anything else."""
    if values.dtype == object:
        return False
    text = pa.array(values, from_pandas=True)
    if not (pa.types.is_string(text.type) or pa.types.is_large_string(text.type)):
        return False
    longest = pc.max(pc.binary_length(text)).as_py()
    return longest is None or longest <= limit


def _refuse_oversized_cells(
    mapping: Mapping, frame: pd.DataFrame, columns: list[str], first_row: int, limits: Limits
) -> None:
    for column in columns:
        if _bytes_within(frame[column], limits.max_cell_chars):
            continue  # no cell has more bytes, so none has more characters
        lengths = _text_lengths(frame[column])
        over = np.flatnonzero(lengths > limits.max_cell_chars)
        if len(over):
            raise SourceReadError(
                f"cell has {int(lengths[over[0]])} characters, more than limits.max_cell_chars "
                f"({limits.max_cell_chars})",
                file=str(mapping.path),
                row=first_row + int(over[0]),
                column=column,
                hint="check that the mapping names the right column, or raise "
                "limits.max_cell_chars in harmonize.yaml",
            )


def cells_of_frame(
    mapping: Mapping,
    frame: pd.DataFrame,
    header: list[str],
    first_row: int,
    limits: Limits,
    fraction_read: float | None = None,
) -> CellBatch:
    """The trait cells of one frame of source rows (text columns), the first being `first_row`.

    Used batch by batch by `iter_cells`, and per partition of a dataset by `distributed`."""
    _refuse_oversized_cells(mapping, frame, _descriptive_columns(mapping), first_row, limits)
    if mapping.layout == "wide":
        cells = _wide_cells(mapping, frame, trait_columns(mapping, header), first_row)
    else:
        cells = _long_cells(mapping, frame, first_row)
    return CellBatch(cells=cells, rows=len(frame), fraction_read=fraction_read)
