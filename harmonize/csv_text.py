"""CSV text of package rows, built column-wise with Arrow.

The bytes are those pandas' `to_csv` wrote (minimal quoting, floats in their shortest
round-trip form), with one deliberate difference: a lone carriage return is quoted, as RFC 4180
asks. `package.ResourceWriter` writes CSV resources with `csv_text`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from harmonize import tables as data_model


def csv_text(frame: pd.DataFrame | pa.Table, resource: data_model.Resource, header: bool) -> bytes:
    """Rows (a frame from `prepare_frame` or a table from `prepare_table`) as CSV, as
    `DataFrame.to_csv(index=False, lineterminator="\\n", na_rep="")` wrote them (minimal
    quoting; floats in their shortest round-trip form), but built column-wise with Arrow:
    pandas' writer formats cell by cell and took most of a CSV build of a million values. A
    test holds the two equal; a lone carriage return is now quoted (RFC 4180)."""
    columns = [_csv_cells(frame[c.name], c.type) for c in resource.columns]
    lines = pc.binary_join_element_wise(*columns, ",") if len(frame) else None
    text = ""
    if header:
        names = _csv_cells(pd.Series(resource.column_names, dtype=object), "string")
        text = ",".join(names.to_pylist()) + "\n"
    if lines is None:
        return text.encode("utf-8")
    body = pc.binary_join_element_wise(lines, "\n", "")
    return text.encode("utf-8") + _string_bytes(body)


def _csv_cells(series: pd.Series | pa.ChunkedArray, kind: str) -> pa.Array:
    """The text of each cell of one column as written in CSV (missing: empty). A cell is quoted
    when it holds the delimiter, a quote or a line break (RFC 4180 section 2); Python's csv
    module with '\\n' line ends left a lone '\\r' bare, which readers take for a line break:
    that one case differs from what pandas wrote."""
    if isinstance(series, pa.ChunkedArray):  # a column of a table from `prepare_table`
        series = series.combine_chunks()
        if pa.types.is_dictionary(series.type):
            series = series.dictionary_decode()
    if kind == "number":
        values = (
            series.to_numpy(zero_copy_only=False)  # missing: NaN
            if isinstance(series, pa.Array)
            else np.asarray(series, dtype=float)
        )
        present = ~np.isnan(values)
        # only the present cells are formatted (several number columns are mostly empty)
        text = pa.nulls(len(values), pa.string())
        if present.any():
            text = pc.replace_with_mask(text, pa.array(present), _repr_text(values[present]))
    elif kind == "boolean":
        # Lower-case literals are the Table Schema default trueValues/falseValues everywhere.
        text = pc.if_else(_arrow(series, pa.bool_()), "true", "false")
    elif kind == "integer":
        text = _arrow(series, pa.int64()).cast(pa.string())
    else:
        text = small_text(_arrow(series))
        needs = pc.or_(
            pc.or_(pc.match_substring(text, ","), pc.match_substring(text, '"')),
            pc.or_(pc.match_substring(text, "\r"), pc.match_substring(text, "\n")),
        )  # plain substring searches: a regular expression per cell took most of the time
        if pc.any(needs).as_py():
            quoted = pc.replace_substring(text, '"', '""')
            quoted = pc.binary_join_element_wise('"', quoted, '"', "")
            text = pc.if_else(needs, quoted, text)
    return pc.fill_null(text, "")


def _arrow(column: pd.Series | pa.Array, kind: pa.DataType | None = None) -> pa.Array:
    """A frame's column, or a table's, as an Arrow array (of type `kind` if given)."""
    if isinstance(column, pa.Array):
        return column if kind is None or column.type == kind else column.cast(kind)
    return pa.array(column, type=kind, from_pandas=True)


def _repr_text(values: np.ndarray) -> pa.Array:
    """Each double as repr() and pandas write it: its shortest round-trip digits, in fixed
    notation for 1e-4 <= |x| < 1e16 (a whole number ends in '.0'), otherwise in scientific.
    Arrow's cast writes the same shortest digits (a million measurement-like values: 0.17 s
    with the fixes below, against 0.40 s through numpy's `astype(str)`) but picks its notation
    by other limits; numbers it writes in a form repr() would not use are formatted by numpy
    (tests/test_package.py compares the result with repr())."""
    text = pa.array(values).cast(pa.string())
    magnitude = np.abs(values)
    fixed = ((magnitude >= 1e-4) & (magnitude < 1e16)) | (values == 0)
    fixed &= ~pc.match_substring(text, "e").to_numpy(zero_copy_only=False)
    whole = fixed & ~pc.match_substring(text, ".").to_numpy(zero_copy_only=False)
    if whole.any():
        text = pc.if_else(pa.array(whole), pc.binary_join_element_wise(text, ".0", ""), text)
    if not fixed.all():
        other = pa.array(values[~fixed].astype(str), type=pa.string())
        if isinstance(other, pa.ChunkedArray):  # pyarrow cuts long numpy text into chunks
            other = other.combine_chunks()
        text = pc.replace_with_mask(text, pa.array(~fixed), other)
    return text


def _string_bytes(array: pa.Array) -> bytes:
    """The characters of a string array laid end to end: its data buffer from the first offset
    to the last, copied once."""
    offsets = np.frombuffer(array.buffers()[1], dtype=np.int32)
    first, last = offsets[array.offset], offsets[array.offset + len(array)]
    data = array.buffers()[2]
    return data.slice(first, last - first).to_pybytes() if data is not None else b""


def small_text(array: pa.Array) -> pa.Array:
    """Text as Arrow `string`. pandas keeps text as `large_string`, and a slice of a column of
    more than 2 GiB of text keeps offsets beyond 2**31 into the whole column's buffer, which a
    cast refuses ("input array too large"): the slice's text is copied first."""
    if isinstance(array, pa.ChunkedArray):
        array = array.combine_chunks()
    if pa.types.is_large_string(array.type):
        array = pa.concat_arrays([array])  # a slice's own text, offsets from 0
    return array if array.type == pa.string() else array.cast(pa.string())
