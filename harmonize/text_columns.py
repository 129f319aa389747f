"""Text columns carried as integer codes into their distinct texts, and made Arrow at the end.

A trait table repeats a few texts (species, sites, trait names, units) millions of times. The
stages work out what they need once per distinct text and carry an integer code per cell; an
output column is then built by one Arrow `take` of the distinct texts instead of converting a
Python string per cell (measured on this project's machine: about 25 ns a cell instead of about
150 ns). It also joins per-row texts built from such columns (flags) and builds the rows of
an output table from them, as Arrow or as a pandas frame. What the texts mean is left to the
stages; this module only moves them around.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc


def _as_text(value: object) -> str | None:
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NA:
        return None
    return value if isinstance(value, str) else str(value)


def _text_objects(values: np.ndarray) -> np.ndarray:
    """An object array of str or None: a C-level check, and Python per value only when some
    value is not text already (numbers handed over by a reader, NaN for missing)."""
    values = np.asarray(values, dtype=object)
    if pd.api.types.infer_dtype(values, skipna=True) in ("string", "empty"):
        missing = pd.isna(values)
        if missing.any():
            values = values.copy()
            values[missing] = None  # NaN or pd.NA from pandas: None
        return values
    return np.array([_as_text(v) for v in values], dtype=object)


def _texts_to_arrow(texts: np.ndarray) -> pa.Array:
    return pa.array(_text_objects(texts), type=pa.string())


class Coded:
    """A text column: `texts[codes[i]]` is cell i. `texts` holds str or None (None is a missing
    cell) and may repeat a text; every code indexes `texts`.

    The texts are kept as Python objects, as an Arrow array, or both: a column read by Arrow
    keeps its distinct texts in Arrow, so a column with many distinct texts (individual ids,
    dates) goes from the reader to the writer without a Python string being made for it.
    """

    __slots__ = ("codes", "_texts", "_arrow", "distinct")

    def __init__(
        self,
        codes: np.ndarray,
        texts: np.ndarray | None = None,
        distinct: bool = False,
        *,
        arrow: pa.Array | None = None,
    ) -> None:
        if texts is None and arrow is None:
            raise ValueError("Coded needs texts or their Arrow array")
        self.codes = codes
        self._texts = None if texts is None else np.asarray(texts, dtype=object)
        self._arrow = arrow
        # True: the texts are str, none repeated, and the last is None
        self.distinct = distinct

    def __len__(self) -> int:
        return len(self.codes)

    def __repr__(self) -> str:
        return f"Coded(codes={self.codes!r}, texts={self.texts!r})"

    @property
    def texts(self) -> np.ndarray:
        if self._texts is None:
            assert self._arrow is not None
            self._texts = self._arrow.to_numpy(zero_copy_only=False).astype(object)
        return self._texts

    @property
    def text_count(self) -> int:
        return len(self._arrow) if self._texts is None else len(self._texts)

    @classmethod
    def constant(cls, text: str | None, length: int) -> Coded:
        return cls(np.zeros(length, dtype=np.int32), np.array([text], dtype=object))

    @classmethod
    def of(cls, column: pd.Series | np.ndarray | Coded | pa.Array | pa.ChunkedArray) -> Coded:
        """Codes of any column: a categorical keeps its codes, anything else is factorised."""
        if isinstance(column, Coded):
            return column
        if isinstance(column, pd.Series) and isinstance(column.dtype, pd.CategoricalDtype):
            categories = column.cat.categories
            codes = column.cat.codes.to_numpy().astype(np.int32)
            codes[codes < 0] = len(categories)
            if isinstance(categories.dtype, pd.StringDtype | pd.ArrowDtype):
                arrow = pa.array(categories, from_pandas=True)
                if isinstance(arrow, pa.ChunkedArray):
                    arrow = arrow.combine_chunks()
                arrow = pa.concat_arrays([arrow.cast(pa.string()), pa.nulls(1, pa.string())])
                return cls(codes, distinct=True, arrow=arrow)
            texts = np.append(categories.to_numpy(dtype=object), None).astype(object)
            return cls(codes, texts, distinct=categories.inferred_type == "string")
        if isinstance(column, pd.Series) and isinstance(
            column.dtype, pd.StringDtype | pd.ArrowDtype
        ):
            column = pa.array(column, from_pandas=True)
        if isinstance(column, pa.ChunkedArray | pa.Array):
            return cls._of_arrow(column)
        codes, uniques = pd.factorize(pd.Series(column, dtype=object), use_na_sentinel=True)
        texts = np.array(
            [*(_as_text(u) for u in np.asarray(uniques, dtype=object)), None], dtype=object
        )
        codes = codes.astype(np.int32)
        codes[codes < 0] = len(texts) - 1
        return cls(codes, texts)

    @classmethod
    def _of_arrow(cls, column: pa.Array | pa.ChunkedArray) -> Coded:
        if isinstance(column, pa.ChunkedArray):
            column = column.combine_chunks()
        encoded = pc.dictionary_encode(column.cast(pa.string()))
        dictionary = pa.concat_arrays([encoded.dictionary, pa.nulls(1, pa.string())])
        codes = pc.fill_null(encoded.indices, len(dictionary) - 1).to_numpy(zero_copy_only=False)
        return cls(codes.astype(np.int32), distinct=True, arrow=dictionary)

    def map(self, texts: np.ndarray) -> Coded:
        """The same codes into other texts, one per distinct text (e.g. each text cleaned)."""
        return Coded(self.codes, np.asarray(texts, dtype=object))

    def cleaned(self, missing: set[str] | frozenset[str] = frozenset()) -> Coded:
        """The same codes into stripped texts, None where a text is blank or a missing-value
        token; worked out once per distinct text."""
        stripped = [None if t is None else str(t).strip() for t in self.texts]
        return self.map([None if not t or t in missing else t for t in stripped])

    def take(self, rows: np.ndarray) -> Coded:
        return Coded(self.codes[rows], self._texts, self.distinct, arrow=self._arrow)

    def tile(self, times: int) -> Coded:
        """The column repeated end to end `times` times (same texts)."""
        return Coded(np.tile(self.codes, times), self._texts, self.distinct, arrow=self._arrow)

    def values(self) -> np.ndarray:
        """The cells as a Python-object array (None for missing)."""
        return self.texts[self.codes]

    def dictionary(self) -> pa.DictionaryArray:
        """The column as an Arrow dictionary array: its codes into its texts, no text copied
        per cell. Texts a shorter column (a slice of a batch) does not use are left out."""
        codes = self.codes.reshape(-1)
        if self.text_count > len(codes):
            used, codes = used_codes(codes, self.text_count)
            if self._arrow is not None:
                texts = self._arrow.take(pa.array(used))
            else:
                texts = _texts_to_arrow(self.texts[used])
        else:
            texts = self._arrow if self._arrow is not None else _texts_to_arrow(self.texts)
        return pa.DictionaryArray.from_arrays(pa.array(codes, pa.int32()), texts)

    def arrow(self) -> pa.Array:
        """The column as plain Arrow text (one text per cell)."""
        return self.dictionary().cast(pa.string())

    def categorical(self) -> pd.Categorical:
        """The column as a pandas categorical (repeated texts merged, None missing)."""
        if self.distinct:
            codes = np.where(self.codes == self.text_count - 1, -1, self.codes)
            if self._arrow is not None:  # categories stay Arrow text: no Python strings
                distinct = self._arrow.slice(0, len(self._arrow) - 1)
                categories = pd.Index(pd.arrays.ArrowStringArray(distinct))
            else:
                categories = pd.Index(self.texts[:-1], dtype=object)
            return pd.Categorical.from_codes(codes, categories=categories, validate=False)
        merged, distinct = pd.factorize(
            pd.Series(_text_objects(self.texts), dtype=object), use_na_sentinel=True
        )
        categories = pd.Index(np.asarray(distinct, dtype=object), dtype=object)
        return pd.Categorical.from_codes(merged[self.codes], categories=categories)


def _end_to_end(parts: list[Coded]) -> tuple[list[np.ndarray], np.ndarray]:
    """Each part's codes shifted into the texts of all parts laid end to end, and those texts."""
    offsets = np.cumsum([0, *(len(p.texts) for p in parts)])
    codes = [p.codes.astype(np.int64) + o for p, o in zip(parts, offsets, strict=False)]
    return codes, np.concatenate([p.texts for p in parts]).astype(object)


def choose(conditions: list[np.ndarray], choices: list[Coded], default: Coded) -> Coded:
    """Per cell, the first choice whose condition holds, else the default (like `np.select`),
    without leaving codes."""
    codes, texts = _end_to_end([*choices, default])
    return Coded(np.select(conditions, codes[:-1], codes[-1]).astype(np.int32), texts)


def concat(parts: list[Coded]) -> Coded:
    """Columns end to end (e.g. the pieces of a wide table, one per trait column)."""
    codes, texts = _end_to_end(parts)
    return Coded(np.concatenate(codes).astype(np.int32), texts)


def objects_to_arrow(values: np.ndarray) -> pa.Array:
    """A Python-object text column as Arrow, factorising only its non-missing cells (so a
    mostly empty column, such as qualifiers or category texts, costs little)."""
    values = np.asarray(values, dtype=object)
    present = np.flatnonzero(pd.notna(values))
    codes = np.zeros(len(values), dtype=np.int32)  # 0: the missing slot
    if len(present) == 0:
        return pa.nulls(len(values), type=pa.string())
    found, uniques = pd.factorize(values[present])
    codes[present] = found + 1
    texts = [None, *(_as_text(u) for u in np.asarray(uniques, dtype=object))]
    return pc.take(pa.array(texts, type=pa.string()), pa.array(codes))


def column_to_arrow(column: pd.Series | np.ndarray | Coded | pa.Array) -> pa.Array:
    """Any text column as an Arrow string array, taking the cheapest route its form allows."""
    if isinstance(column, Coded):
        return column.arrow()
    if isinstance(column, pa.ChunkedArray):
        return column.combine_chunks().cast(pa.string())
    if isinstance(column, pa.Array):
        return column.cast(pa.string())
    if isinstance(column, pd.Series):
        if isinstance(column.dtype, pd.CategoricalDtype):
            return Coded.of(column).arrow()
        if isinstance(column.dtype, pd.StringDtype | pd.ArrowDtype):
            array = pa.array(column, from_pandas=True)
            if isinstance(array, pa.ChunkedArray):
                array = array.combine_chunks()
            return array.cast(pa.string())
        column = column.to_numpy(dtype=object)
    return objects_to_arrow(column)


def used_codes(codes: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray]:
    """The codes (of `count` possible) that occur, ascending, and each cell's position among
    them: `np.unique(codes, return_inverse=True)` by counting instead of sorting."""
    present = np.bincount(codes.reshape(-1), minlength=count) > 0
    return np.flatnonzero(present), (np.cumsum(present) - 1)[codes.reshape(-1)]


def join_per_row(*parts: np.ndarray | Coded | tuple[np.ndarray, str]) -> Coded:
    """Join per-row flags with ';', skipping blanks (None where a row has none). A part is an array of texts ('' or None
    for no flag) or a (mask, text) pair: the text where the mask is true.

    Each part has few distinct texts, so rows are coded by their combination of texts and the
    joined string is built once per distinct combination, not once per row.
    """
    count = len(parts[0][0] if isinstance(parts[0], tuple) else parts[0]) if parts else 0
    combined = np.zeros(count, dtype=np.int64)
    texts: list[np.ndarray] = []
    codes_per_part: list[np.ndarray] = []
    for part in parts:
        if isinstance(part, tuple):
            mask, text = part
            codes, uniques = np.asarray(mask, dtype=np.int64), np.array(["", text], dtype=object)
        elif isinstance(part, Coded):
            used, codes = used_codes(part.codes, part.text_count)
            uniques = np.array([t or "" for t in part.texts[used]], dtype=object)
        else:
            codes, uniques = pd.factorize(pd.Series(part, dtype=object).fillna(""))
            uniques = np.asarray(uniques, dtype=object)
        if len(uniques) <= 1 and (len(uniques) == 0 or uniques[0] == ""):
            continue  # no flag from this part in this batch
        texts.append(uniques)
        codes_per_part.append(codes)
        # re-factorise after each part so the combined code stays small
        combined, _ = pd.factorize(combined * len(uniques) + codes)
    # factorised codes number combinations in order of first appearance: each code's first row
    # is where the running maximum first reaches it
    reached = np.maximum.accumulate(combined)
    first = np.flatnonzero(np.diff(reached, prepend=-1) > 0)
    joined = [
        ";".join(
            t
            for t in (text[codes[row]] for text, codes in zip(texts, codes_per_part, strict=True))
            if t
        )
        for row in first
    ]
    return Coded(combined.astype(np.int32), np.array([j or None for j in joined], dtype=object))


Column = np.ndarray | Coded | pd.Series


def rows_frame(rows: np.ndarray, columns: dict[str, Column]) -> pd.DataFrame:
    """A frame of the given rows of each column; text as Python objects (None for missing),
    for the population summaries' pandas stage."""
    out = {}
    for name, column in columns.items():
        if isinstance(column, Coded):
            taken = column.take(rows).values()
        elif isinstance(column, pd.Series):
            taken = column.to_numpy(dtype=object)[rows]
            taken = np.where(pd.isna(taken), None, taken)
        else:
            taken = np.asarray(column)[rows]
        if taken.dtype.kind in "US":  # numpy fixed-width text from np.where
            taken = taken.astype(object)
        out[name] = pd.Series(taken, dtype=taken.dtype)
    return pd.DataFrame(out)


def rows_table(rows: np.ndarray, columns: dict[str, Column]) -> pa.Table:
    """An Arrow table of the given rows of each column: numbers as they are, coded text as
    dictionary arrays, never a Python string per cell."""
    indices = pa.array(rows)
    out = {}
    for name, column in columns.items():
        if isinstance(column, Coded):  # the Parquet writer's thread decodes it
            out[name] = column.take(rows).dictionary()
        elif isinstance(column, pd.Series):
            out[name] = column_to_arrow(column).take(indices)
        elif column.dtype == object or column.dtype.kind in "US":
            out[name] = objects_to_arrow(column[rows])
        else:
            out[name] = pa.array(column[rows], from_pandas=True)  # NaN: missing
    return pa.table(out)
