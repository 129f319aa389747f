"""Write the output tables as a byte-reproducible Frictionless Data Package.

Given one frame per resource of `harmonize.tables`, this module conforms each frame to its
resource, sorts rows (by the primary key; individual values by source and source row), writes
one CSV (the canonical, validated format) or Parquet file per resource, and writes
`datapackage.json` describing them (the descriptor itself is built by `harmonize.descriptor`).

It leaves the column definitions to `harmonize.tables`, the checking of the written package to
`harmonize.package_validate`, and what goes into the frames to the earlier pipeline stages.

Reproducibility: the same frames give byte-identical files. CSV floats are written in Python's
shortest round-trip form, lines end in '\\n'; the descriptor is built in a fixed key order; the
Parquet writer gets a fixed schema, compression and statistics setting and no pandas metadata.
Nothing records wall-clock time unless `PackageInfo.created` is given.
"""

from __future__ import annotations

import base64
import hashlib
import json
import re
from collections.abc import Callable, Mapping
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from harmonize import tables as data_model
from harmonize.csv_text import csv_text, small_text
from harmonize.descriptor import (  # noqa: F401 - some are re-exported for callers
    MISSING_VALUES,
    PackageInfo,
    WrittenFile,
    merge_field_units,
    package_descriptor,
    resource_descriptor,
    schema_descriptor,
)
from harmonize.errors import BuildError, ConfigError

# v1 names must match this pattern (Data Package v1 spec, "name"); keeping to it stays portable.
NAME_PATTERN = re.compile(r"^[-a-z0-9._/]+$")

_ARROW_TYPES = {
    "string": pa.string(),
    "integer": pa.int64(),
    "number": pa.float64(),
    "boolean": pa.bool_(),
    "date": pa.date32(),
}


def write_package(
    tables: Mapping[str, pd.DataFrame],
    folder: Path,
    info: PackageInfo,
    *,
    fmt: str = "csv",
    field_units: Mapping[str, Mapping[str, str]] | None = None,
    written: Mapping[str, WrittenFile] | None = None,
) -> Path:
    """Write every resource of `harmonize.tables.RESOURCES` and `datapackage.json` into `folder`.

    `tables` maps resource names to frames; a resource left out is written empty so the
    package always has the same shape (the foreign keys need `traits` and `sources`).
    `written` names resources already streamed into `folder` by a `ResourceWriter` (a large
    build writes `individual_values` batch by batch); they are described, not written again.
    `field_units` adds `"unit"` to fields: {resource: {column: pint unit}}.
    Returns the path of `datapackage.json`.
    """
    if fmt not in _FORMATS:
        raise ConfigError(
            f"unknown package format {fmt!r}", hint=f"use one of: {', '.join(_FORMATS)}"
        )
    if not NAME_PATTERN.match(info.name):
        raise ConfigError(
            f"package name {info.name!r} is not allowed",
            hint="use lower-case letters, digits and - . _ / only",
        )
    unknown = sorted(set(tables) - set(data_model.BY_NAME))
    if unknown:
        raise BuildError(
            f"no such resource(s) {unknown}", hint=f"known: {', '.join(data_model.BY_NAME)}"
        )
    units = merge_field_units(field_units)

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    resources = []
    roles: dict[str, str] = {}
    for resource in data_model.RESOURCES:
        done = (written or {}).get(resource.name)
        if done is None:
            frame = sorted_rows(prepare_frame(tables.get(resource.name), resource), resource)
            if resource.name == data_model.TRAITS.name:
                roles = _trait_roles(frame)
            writer = ResourceWriter(resource, folder, fmt)
            writer.write(frame)
            done = writer.close()
        resources.append(resource_descriptor(resource, done, units.get(resource.name, {})))

    descriptor = package_descriptor(info, roles, resources)
    target = folder / "datapackage.json"
    target.write_bytes((json.dumps(descriptor, indent=2, ensure_ascii=False) + "\n").encode())
    return target


# --- frames -------------------------------------------------------------------------------


def prepare_frame(frame: pd.DataFrame | None, resource: data_model.Resource) -> pd.DataFrame:
    """The frame as it is written: the resource's columns and dtypes, empty strings missing."""
    conformed = data_model.conform(_with_missing_columns(frame, resource), resource)
    return _empty_strings_to_missing(conformed, resource)


def prepare_table(table: pa.Table, resource: data_model.Resource) -> pa.Table:
    """An Arrow table as `prepare_frame` prepares a frame: the resource's columns in order with
    their Arrow types (dates still as text: the writer parses them), empty strings missing.

    A text column given as a dictionary array (codes into texts) stays one: checks work once
    per text, and the writer (`ResourceWriter`) decodes it on its own thread, or takes its
    dictionary as it is for a coded column."""
    extra = set(table.column_names) - set(resource.column_names)
    if extra:
        raise ValueError(f"{resource.name}: unexpected columns {sorted(extra)}")
    arrays = []
    for column in resource.columns:
        kind = pa.string() if column.type == "date" else _ARROW_TYPES[column.type]
        if column.name in table.column_names:
            array = table[column.name]
            array = array.chunk(0) if array.num_chunks == 1 else array.combine_chunks()
            if column.type == "string" and _is_text_dictionary(array):
                array = pa.DictionaryArray.from_arrays(
                    array.indices, _empty_to_missing(array.dictionary.cast(pa.string()))
                )
            else:
                if array.type != kind:
                    array = array.cast(kind)
                if column.type in ("string", "date"):
                    array = _empty_to_missing(array)
        else:
            array = pa.nulls(len(table), type=kind)
        arrays.append(array)
    return pa.Table.from_arrays(arrays, names=resource.column_names)


def _is_text_dictionary(typed: pa.Array | pa.ChunkedArray | pa.Field) -> bool:
    return pa.types.is_dictionary(typed.type) and pa.types.is_string(typed.type.value_type)


def _empty_to_missing(array: pa.Array) -> pa.Array:
    empty = pc.equal(array, "")
    if pc.any(empty).as_py():  # copied only when an empty string is there
        return pc.if_else(empty, pa.scalar(None, pa.string()), array)
    return array


def decoded(table: pa.Table) -> pa.Table:
    """The table with dictionary-encoded text columns decoded to plain text."""
    if not any(_is_text_dictionary(c) for c in table.columns):
        return table
    return table.cast(
        pa.schema(
            pa.field(f.name, f.type.value_type) if _is_text_dictionary(f) else f
            for f in table.schema
        )
    )


# Arrow type -> pandas dtype of a prepared frame (`tables.PANDAS_DTYPES`)
_PANDAS_OF_ARROW = {
    pa.string(): pd.StringDtype(),
    pa.int64(): pd.Int64Dtype(),
    pa.bool_(): pd.BooleanDtype(),
}


def frame_of_table(table: pa.Table) -> pd.DataFrame:
    """A table from `prepare_table` as the frame `prepare_frame` would have made."""
    return decoded(table).to_pandas(types_mapper=_PANDAS_OF_ARROW.get)


def _with_missing_columns(
    frame: pd.DataFrame | None, resource: data_model.Resource
) -> pd.DataFrame:
    """Add the resource's absent columns as typed, all-missing columns.

    `tables.conform` would add them too, but `pd.Series(pd.NA, dtype="float64")` raises in
    pandas 3, so absent number columns are filled here from the typed empty frame instead.
    """
    if frame is None:
        return resource.empty_frame()
    absent = [name for name in resource.column_names if name not in frame.columns]
    if not absent:
        return frame
    filler = resource.empty_frame()[absent].reindex(frame.index)
    return pd.concat([frame, filler], axis=1)


def _empty_strings_to_missing(frame: pd.DataFrame, resource: data_model.Resource) -> pd.DataFrame:
    out = frame.copy()
    for column in resource.columns:
        if column.type in ("string", "date"):
            series = out[column.name]
            out[column.name] = series.mask(series.isin(MISSING_VALUES))
    return out


def row_order(resource: data_model.Resource) -> list[str]:
    """Columns the rows of a resource are sorted by.

    Individual values are ordered by source and source row (cells of one row keep the order
    given, i.e. the source's column order), so a large build can stream them in that order
    without sorting the whole table; every other resource is sorted by its primary key.
    """
    if resource.name == data_model.INDIVIDUAL_VALUES.name:
        return ["source_id", "source_row"]
    return list(resource.primary_key)


def sorted_rows(frame: pd.DataFrame, resource: data_model.Resource) -> pd.DataFrame:
    # A stable sort keeps input order among ties, so even duplicate keys (which validation will
    # report) give the same bytes from the same input.
    return frame.sort_values(row_order(resource), kind="mergesort", na_position="last").reset_index(
        drop=True
    )


def _trait_roles(traits: pd.DataFrame) -> dict[str, str]:
    known = traits.dropna(subset=["trait_id"])
    return dict(zip(known["trait_id"].tolist(), known["role"].astype(object).tolist(), strict=True))


# --- writers ------------------------------------------------------------------------------

# Rows per Parquet row group. Rows are buffered and written in groups of exactly this size
# whether a frame arrives whole or in batches, so a streamed build and an in-memory one give
# the same bytes.
PARQUET_ROW_GROUP_ROWS = 131_072

# A column's dictionary may grow to this many bytes per row group before the writer falls
# back to plain pages (Arrow's default is 1 MiB). Columns with few distinct texts (traits,
# units, sources, flags) stay well below it; columns of mostly distinct values (record ids,
# verbatim cells, measured values) fall back early instead of building and then discarding
# a large dictionary. At 1.2 million benchmark rows this wrote the file in about two thirds of
# the time, and with zstd level 1 the file came out about a fifth smaller than with Arrow's
# default limit at level 3 (benchmarks/, invented data; figures in the README).
_DICTIONARY_PAGE_BYTES = 65_536

# Parquet encodings other than the default (a dictionary, falling back to plain values).
# Row numbers rise through a source: delta encoding stores them in a few bits a row. Record
# ids are distinct 16-character texts: a dictionary never pays, and with their lengths stored
# apart the text compresses better. At 5 million benchmark rows (benchmarks/, invented data)
# the row numbers took 58 ms to write instead of 191 ms and 0.3 MB instead of 5.3 MB; the
# record ids 548 ms instead of 609 ms and 37.8 MB instead of 42.1 MB.
_ENCODINGS = {"source_row": "DELTA_BINARY_PACKED", "record_id": "DELTA_LENGTH_BYTE_ARRAY"}

# Rows of a frame a writer converts at a time (the bytes do not depend on it).
WRITE_SLICE_ROWS = PARQUET_ROW_GROUP_ROWS


def _arrow_table(frame: pd.DataFrame, resource: data_model.Resource, schema: pa.Schema) -> pa.Table:
    arrays = []
    for column in resource.columns:
        series = frame[column.name]
        if column.type == "date":
            strings = small_text(pa.array(series, type=pa.large_string(), from_pandas=True))
            arrays.append(_parse_dates(strings, resource, column.name))
        elif column.type == "string":
            arrays.append(small_text(pa.array(series, from_pandas=True)))
        else:
            arrays.append(pa.array(series, type=_ARROW_TYPES[column.type], from_pandas=True))
    return pa.Table.from_arrays(arrays, schema=schema)


def _parse_dates(strings: pa.Array, resource: data_model.Resource, name: str) -> pa.Array:
    try:
        parsed = pc.strptime(strings, format="%Y-%m-%d", unit="s")
    except pa.ArrowInvalid as error:
        raise BuildError(
            f"{resource.name}: column {name!r} holds a value that is not an ISO date ({error})"
        ) from error
    return pc.cast(parsed, pa.date32())


def _with_dates(table: pa.Table, resource: data_model.Resource) -> pa.Table:
    """A prepared table with its date columns parsed from their text (text columns may still
    be dictionary arrays: the writer's thread decodes them, or keeps coded columns coded)."""
    arrays = [
        _parse_dates(table[c.name], resource, c.name) if c.type == "date" else table[c.name]
        for c in resource.columns
    ]
    return pa.Table.from_arrays(arrays, names=resource.column_names)


def arrow_schema(resource: data_model.Resource) -> pa.Schema:
    """The Parquet schema of a resource. Every field is nullable: a required column with a
    missing cell must still be written, so that validation can report the row."""
    return pa.schema([pa.field(c.name, _ARROW_TYPES[c.type]) for c in resource.columns])


_CODED_TEXT = pa.dictionary(pa.int32(), pa.string())


def _written_schema(resource: data_model.Resource) -> pa.Schema:
    """The schema handed to the Parquet writer: `arrow_schema` with coded text columns as
    dictionaries (the file stores `arrow_schema` for readers, see ResourceWriter.close)."""
    return pa.schema(
        [
            pa.field(
                c.name, _CODED_TEXT if c.coded and c.type == "string" else _ARROW_TYPES[c.type]
            )
            for c in resource.columns
        ]
    )


def _coded_text(chunks: list[pa.Array]) -> pa.DictionaryArray:
    """A row group's chunks of a coded text column as one dictionary array that holds exactly
    the texts used, in order of first use. That is the dictionary the Parquet writer builds when
    it hashes the decoded text, so it writes the same bytes (tests/test_scale.py) without
    hashing every cell. Chunks that are not dictionaries are encoded here instead."""
    if not chunks or not all(pa.types.is_dictionary(c.type) for c in chunks):
        text = [c.cast(pa.string()) for c in chunks]
        return pc.dictionary_encode(pa.concat_arrays(text) if text else pa.array([], pa.string()))
    position: dict[str, int] = {}  # text -> code in the joined dictionary, in order of first use
    renumbered = []
    for chunk in chunks:
        codes = chunk.indices
        used = pc.unique(codes).drop_null()  # in order of first use
        new_code = np.full(len(chunk.dictionary), -1, dtype=np.int32)  # -1: a missing text
        for code, text in zip(
            used.to_numpy(zero_copy_only=False),
            chunk.dictionary.take(used).to_pylist(),
            strict=True,
        ):
            if text is not None:  # the same text under two codes gets one code
                new_code[code] = position.setdefault(text, len(position))
        recoded = new_code[pc.fill_null(codes, 0).to_numpy(zero_copy_only=False)]
        if codes.null_count:
            recoded[codes.is_null().to_numpy(zero_copy_only=False)] = -1
        renumbered.append(recoded)
    joined = np.concatenate(renumbered)
    missing = joined < 0
    return pa.DictionaryArray.from_arrays(
        pa.array(joined, type=pa.int32(), mask=missing if missing.any() else None),
        pa.array(list(position), type=pa.string()),
    )


class ResourceWriter:
    """Writes one resource file frame by frame (CSV or Parquet) and describes it at the end.

    Frames must already be prepared (`prepare_frame`) and in the resource's row order
    (`row_order`); the writer neither sorts nor holds more than one row group of rows.
    """

    def __init__(
        self,
        resource: data_model.Resource,
        folder: Path,
        fmt: str,
        observe: Callable[[pa.Table], None] | None = None,
    ) -> None:
        """`observe`, if given, sees every Parquet table as it is written (the build checks
        large outputs that way instead of reading them back)."""
        if fmt not in _FORMATS:
            raise ConfigError(
                f"unknown package format {fmt!r}", hint=f"use one of: {', '.join(_FORMATS)}"
            )
        self.resource = resource
        self.fmt = fmt
        self.observe = observe
        self.name = f"{resource.name}.{fmt}"
        self.path = Path(folder) / self.name
        self.rows = 0
        self._digest = hashlib.sha256()
        self._size = 0
        self._pending: list[pa.Table] = []
        self._pending_rows = 0
        self._schema = arrow_schema(resource)
        self._written = _written_schema(resource)
        # Rows are formatted (CSV) or encoded and compressed (Parquet row groups) on one
        # background thread (mostly Arrow work, which releases the GIL) while the build
        # assembles the next batch; one thread keeps their order.
        self._encoder = ThreadPoolExecutor(max_workers=1, thread_name_prefix=f"write-{fmt}")
        self._pending_work: list[Future] = []
        if fmt == "csv":
            self._stream = open(self.path, "wb")  # noqa: SIM115 - closed in close()
            self._emit(csv_text(self.resource.empty_frame(), resource, header=True))
        else:
            encodings = {n: _ENCODINGS[n] for n in self._written.names if n in _ENCODINGS}
            self._parquet = pq.ParquetWriter(
                self.path,
                self._written,
                # readers get `arrow_schema` (text, not dictionaries): stored in close()
                store_schema=False,
                compression="zstd",
                compression_level=1,
                write_statistics=True,
                use_dictionary=[n for n in self._written.names if n not in encodings],
                column_encoding=encodings or None,
                dictionary_pagesize_limit=_DICTIONARY_PAGE_BYTES,
                version="2.6",
            )

    def _emit(self, data: bytes) -> None:
        self._stream.write(data)
        self._digest.update(data)
        self._size += len(data)

    def write(self, frame: pd.DataFrame | pa.Table) -> None:
        """Write prepared rows: a frame from `prepare_frame` or a table from `prepare_table`.

        A frame is converted WRITE_SLICE_ROWS rows at a time: a whole table of millions of
        rows (rejects) would be copied to Arrow or CSV text at once, and one text column over
        2 GiB cannot be an Arrow string array. The bytes do not depend on it. CSV rows are
        formatted later, on the writer's thread: a frame handed over must not be changed."""
        if len(frame) > WRITE_SLICE_ROWS and isinstance(frame, pd.DataFrame):
            for start in range(0, len(frame), WRITE_SLICE_ROWS):
                self.write(frame.iloc[start : start + WRITE_SLICE_ROWS])
            return
        if len(frame) == 0:
            return
        self.rows += len(frame)
        if self.fmt == "csv":
            self._in_order(self._csv_rows, frame)
            return
        if isinstance(frame, pa.Table):
            table = _with_dates(frame, self.resource)
        else:
            table = _arrow_table(frame, self.resource, self._schema)
        if self.observe is not None:
            self.observe(table)
        self._pending.append(table)
        self._pending_rows += len(frame)
        if self._pending_rows >= PARQUET_ROW_GROUP_ROWS:
            self._flush(final=False)

    def _flush(self, *, final: bool) -> None:
        """Hand every full row group (and at the end the rest) to the encoder, as the pieces
        of the tables written that make it up."""
        while self._pending_rows >= PARQUET_ROW_GROUP_ROWS or (final and self._pending_rows):
            size = min(PARQUET_ROW_GROUP_ROWS, self._pending_rows)
            group: list[pa.Table] = []
            while size:
                piece = self._pending[0]
                if len(piece) <= size:
                    group.append(self._pending.pop(0))
                else:
                    group.append(piece.slice(0, size))
                    self._pending[0] = piece.slice(size)
                size -= len(group[-1])
                self._pending_rows -= len(group[-1])
            self._in_order(self._encode, group)

    def _in_order(self, work: Callable[[Any], None], rows: Any) -> None:
        """Run `work(rows)` on the encoder's thread after the work handed to it before."""
        # at most two pieces of work wait for the encoder: memory stays bounded
        while len(self._pending_work) >= 2:
            self._pending_work.pop(0).result()
        self._pending_work.append(self._encoder.submit(work, rows))

    def _csv_rows(self, rows: pd.DataFrame | pa.Table) -> None:
        """Format rows as CSV and write them (on the encoder's thread)."""
        self._emit(csv_text(rows, self.resource, header=False))

    def _encode(self, pieces: list[pa.Table]) -> None:
        """Write one row group (on the encoder's thread): its pieces joined into one array per
        column, in the written types (text dictionaries decoded, coded columns as `_coded_text`
        gives them), so the bytes do not depend on how rows were batched; then encoded and
        compressed."""
        columns = []
        for at, field in enumerate(self._written):
            chunks = [chunk for piece in pieces for chunk in piece.column(at).chunks]
            if field.type == _CODED_TEXT:
                columns.append(_coded_text(chunks))
                continue
            columns.append(
                pa.concat_arrays(
                    [c if c.type == field.type else c.cast(field.type) for c in chunks]
                )
                if chunks
                else pa.array([], type=field.type)
            )
        self._parquet.write_table(pa.Table.from_arrays(columns, schema=self._written))

    def _drain(self) -> None:
        try:
            for work in self._pending_work:
                work.result()  # re-raises a formatting or encoding error here, in order
        finally:
            self._pending_work = []
            self._encoder.shutdown(wait=True)

    def close(self) -> WrittenFile:
        if self.fmt == "csv":
            try:
                self._drain()
            finally:
                self._stream.close()
            return WrittenFile(
                self.name, "csv", "text/csv", self._size, self._digest.hexdigest(), self.rows
            )
        self._flush(final=True)
        self._drain()
        # what the writer stores with store_schema=True, for the text types readers should get
        stored = base64.b64encode(self._schema.serialize().to_pybytes()).decode("ascii")
        self._parquet.add_key_value_metadata({"ARROW:schema": stored})
        self._parquet.close()
        # No `bytes`/`hash` for Parquet: frictionless cannot check them (ECOSYSTEM-NOTES §1).
        return WrittenFile(self.name, "parquet", "application/vnd.apache.parquet", 0, "", self.rows)

    def abort(self) -> None:
        """Close without describing (the build failed; the staging folder is removed)."""
        for work in self._pending_work:
            work.cancel()
        self._encoder.shutdown(wait=True)
        if self.fmt == "csv":
            self._stream.close()
        else:
            self._parquet.close()


_FORMATS = ("csv", "parquet")
