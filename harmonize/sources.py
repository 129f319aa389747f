"""Source adapters: read a declared table in batches and reshape it into trait cells.

A reader is chosen from a dispatch table by the mapping's format; every reader yields pandas
frames of text columns (the raw cells exactly as written), so later stages can report the original
value; `iter_cells` turns each frame into trait cells with `harmonize.cells` (wide tables melted
to one row per trait cell, long tables taken as they are). This module does not parse numbers,
match names or convert units: it only reads.
"""

from __future__ import annotations

import codecs
import csv
import dataclasses
import difflib
import hashlib
from collections.abc import Callable, Iterator
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from harmonize import foreign
from harmonize.cells import (  # noqa: F401 - re-exported: readers' callers use them from here
    CELL_COLUMNS,
    CONTEXT_COLUMNS,
    CellBatch,
    cells_of_frame,
    long_trait_names,
    trait_columns,
)
from harmonize.errors import ConfigError, SourceNotFoundError, SourceReadError
from harmonize.foreign_text import first_ragged_row
from harmonize.project import Limits, Mapping


def file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


# ---------------------------------------------------------------- readers


def _delimiter(mapping: Mapping) -> str:
    if mapping.read.delimiter:
        return mapping.read.delimiter
    return "\t" if mapping.format == "tsv" else ","


def _encoding(mapping: Mapping) -> str:
    encoding = mapping.read.encoding.lower().replace("_", "-")
    return "utf-8-sig" if encoding in ("utf-8", "utf8") else mapping.read.encoding


_HEADER_MAX_BYTES = 1 << 24
_DELIMITER_GUESSES = (",", ";", "\t", "|")


def _header_text(mapping: Mapping) -> str:
    """The header record's text, decoded on its own.

    Decoding only the header's bytes keeps a bad byte further down from being reported as a
    header problem; the data rows are decoded (and their errors located) by the batch reader.
    """
    encoding = _encoding(mapping)
    if codecs.lookup(encoding).name.startswith(("utf-16", "utf-32")):
        with open(mapping.path, encoding=encoding, newline="") as handle:
            return handle.readline(_HEADER_MAX_BYTES)
    with open(mapping.path, "rb") as handle:
        raw = handle.readline(_HEADER_MAX_BYTES)
        # a quoted header name may hold a line break: read on while a quote is open
        while raw.count(b'"') % 2 and len(raw) < _HEADER_MAX_BYTES:
            more = handle.readline(_HEADER_MAX_BYTES)
            if not more:
                break
            raw += more
    return raw.decode(encoding)


_BYTE_ORDER_MARKS = (  # longest first: a UTF-32 LE mark begins like a UTF-16 LE one
    (codecs.BOM_UTF32_LE, "utf-32"),
    (codecs.BOM_UTF32_BE, "utf-32"),
    (codecs.BOM_UTF16_LE, "utf-16"),
    (codecs.BOM_UTF16_BE, "utf-16"),
)


def _byte_order_mark(path: Path) -> str | None:
    """The encoding a file's UTF-16 or UTF-32 byte-order mark names (Unicode 15, 23.8), if any."""
    with open(path, "rb") as handle:
        start = handle.read(4)
    return next((name for mark, name in _BYTE_ORDER_MARKS if start.startswith(mark)), None)


def _delimited_header(mapping: Mapping) -> list[str]:
    try:
        header = next(csv.reader([_header_text(mapping)], delimiter=_delimiter(mapping)), None)
    except UnicodeDecodeError as error:
        marked = _byte_order_mark(mapping.path)
        if marked:
            hint = f"the file starts with a {marked.upper()} byte-order mark, as spreadsheets "
            hint += f"save 'Unicode text': declare {mapping.read.spell(('encoding', marked))}"
        else:
            hint = f"{error.reason}; declare the file's encoding, e.g. "
            hint += mapping.read.spell(("encoding", "latin-1"))
        raise SourceReadError(
            f"header is not valid {mapping.read.encoding} text",
            file=str(mapping.path),
            row=0,
            hint=hint,
        ) from None
    except csv.Error as error:
        raise SourceReadError(
            f"the header row cannot be read ({error})", file=str(mapping.path), row=0
        ) from None
    if not header:
        raise SourceReadError("the file is empty (no header row)", file=str(mapping.path))
    return [h.strip() for h in header]


def _parquet_header(mapping: Mapping) -> list[str]:
    try:
        return list(pq.ParquetFile(mapping.path).schema_arrow.names)
    except (pa.ArrowInvalid, OSError) as error:
        raise SourceReadError(
            f"not a readable Parquet file ({error})", file=str(mapping.path)
        ) from None


def _encoding_problem(mapping: Mapping, header: list[str]) -> SourceReadError:
    """Only on the error path: name the first cell whose bytes do not decode, and the fix."""
    declared = mapping.read.encoding
    row = column = None
    bad = ""
    decodes_elsewhere = False  # other non-ASCII text decodes: the file mixes two encodings
    try:
        with open(
            mapping.path, encoding=_encoding(mapping), newline="", errors="surrogateescape"
        ) as handle:
            for number, fields in enumerate(csv.reader(handle, delimiter=_delimiter(mapping))):
                for index, cell in enumerate(fields):
                    if not cell.isascii():
                        undecodable = [ch for ch in cell if "\udc80" <= ch <= "\udcff"]
                        if undecodable and row is None:
                            row = number
                            column = header[index] if index < len(header) else None
                            bad = ", ".join(f"0x{ord(ch) - 0xDC00:02x}" for ch in undecodable[:3])
                        decodes_elsewhere |= len(undecodable) < sum(not c.isascii() for c in cell)
    except csv.Error:
        pass
    if decodes_elsewhere:
        hint = (
            f"the file mixes encodings: other cells are valid {declared}; re-save the file "
            f"with one encoding (fix this cell) rather than declaring another encoding"
        )
    else:
        hint = f"declare the file's encoding, e.g. {mapping.read.spell(('encoding', 'latin-1'))}"
    what = f"byte {bad} is" if bad else "text is"
    return SourceReadError(
        f"{what} not valid {declared}", file=str(mapping.path), row=row, column=column, hint=hint
    )


def _refuse_unclosed_quote(mapping: Mapping, last: pd.DataFrame, last_row: int) -> None:
    """A quote opened in the last column and never closed swallows every line after it into
    one cell, and the reader accepts that at the end of the file; refuse it, naming the row."""
    if last.empty:
        return
    cell = last.iloc[-1, -1]
    if not isinstance(cell, str) or ("\n" not in cell and "\r" not in cell):
        return
    with open(mapping.path, "rb") as handle:
        handle.seek(max(0, mapping.path.stat().st_size - 8))
        tail = handle.read()
    if tail.rstrip(b"\r\n").endswith(b'"'):
        return  # a closed quoted cell that holds line breaks on purpose
    raise SourceReadError(
        "a quote opened in this cell is never closed: every later line was read into it",
        file=str(mapping.path),
        row=last_row,
        column=str(last.columns[-1]),
        hint='add the closing quote (") or remove the stray opening one',
    )


def _read_delimited(mapping: Mapping, header: list[str], limits: Limits) -> Iterator[pd.DataFrame]:
    encoding = _encoding(mapping)
    read_options = pacsv.ReadOptions(
        column_names=header,
        skip_rows=1,
        encoding="utf8" if encoding == "utf-8-sig" else encoding,
        block_size=1 << 22,
    )
    parse_options = pacsv.ParseOptions(delimiter=_delimiter(mapping), newlines_in_values=True)
    convert_options = pacsv.ConvertOptions(
        column_types={name: pa.string() for name in header},
        strings_can_be_null=False,
        quoted_strings_can_be_null=False,
    )
    try:
        reader = pacsv.open_csv(
            mapping.path,
            read_options=read_options,
            parse_options=parse_options,
            convert_options=convert_options,
        )
        pending: list[pa.RecordBatch] = []
        pending_rows = done_rows = 0
        for batch in reader:  # blocks of about 4 MiB, cut into frames of batch_rows rows
            pending.append(batch)
            pending_rows += batch.num_rows
            while pending_rows >= limits.batch_rows:
                table = pa.Table.from_batches(pending)
                yield table.slice(0, limits.batch_rows).to_pandas()
                rest = table.slice(limits.batch_rows)
                pending, pending_rows = rest.to_batches(), rest.num_rows
                done_rows += limits.batch_rows
        if pending_rows:
            last = pa.Table.from_batches(pending).to_pandas()
            _refuse_unclosed_quote(mapping, last, done_rows + len(last))
            yield last
    except pa.ArrowInvalid as error:
        text = str(error)
        if "Expected" in text and "columns" in text:
            row = first_ragged_row(
                lambda: open(mapping.path, "rb"),
                _delimiter(mapping),
                '"',
                skip_rows=1,
                encoding=_encoding(mapping),
                width=len(header),
            )
            raise SourceReadError(
                f"row has a different number of fields than the header ({len(header)})",
                file=str(mapping.path),
                row=row,
                hint=f"check quoting and the declared delimiter {_delimiter(mapping)!r}",
            ) from None
        if "UTF8" in text or "utf8" in text or "decode" in text.lower():
            raise _encoding_problem(mapping, header) from None
        raise SourceReadError(
            f"cannot read as {mapping.format} ({text.splitlines()[0]})", file=str(mapping.path)
        ) from None


def _as_text(array: pa.ChunkedArray) -> pa.ChunkedArray:
    if pa.types.is_dictionary(array.type):
        array = array.cast(array.type.value_type)
    if pa.types.is_string(array.type) or pa.types.is_large_string(array.type):
        return array
    if pa.types.is_timestamp(array.type):
        return _iso_timestamps(array)
    return pc.cast(array, pa.string())


def _iso_timestamps(array: pa.ChunkedArray) -> pa.ChunkedArray:
    """Timestamps as ISO 8601 text ('2024-05-01T10:00:00.123', '...T12:00:00+02:00',
    '...Z'), the form Darwin Core's eventDate takes, instead of Arrow's '2024-05-01
    10:00:00.123000' (a space, zero digits kept and a '+0200' offset)."""
    text = pc.cast(array, pa.string())
    text = pc.replace_substring_regex(text, r"^(-?\d+-\d\d-\d\d) ", r"\1T")
    text = pc.replace_substring_regex(text, r"\.(\d*?)0+(Z|[+-]\d{4})?$", r".\1\2")
    text = pc.replace_substring_regex(text, r"\.(Z|[+-]\d{4})?$", r"\1")
    return pc.replace_substring_regex(text, r"([+-]\d\d)(\d\d)$", r"\1:\2")


_NESTED_TYPES = (
    pa.types.is_list,
    pa.types.is_large_list,
    pa.types.is_fixed_size_list,
    pa.types.is_struct,
    pa.types.is_map,
    pa.types.is_union,
)


def _parquet_columns(mapping: Mapping, parquet: pq.ParquetFile) -> list[str]:
    """Columns to read: all but the ignored ones, which may hold anything; nested ones refused."""
    schema = parquet.schema_arrow
    wanted = [name for name in schema.names if name not in mapping.ignore]
    for name in wanted:
        field_type = schema.field(name).type
        if any(test(field_type) for test in _NESTED_TYPES):
            raise SourceReadError(
                f"column holds nested values ({field_type}), not one value per cell",
                file=str(mapping.path),
                column=name,
                hint="flatten it into plain columns before harmonising, or list it under `ignore`",
            )
    return wanted


def _column_as_text(mapping: Mapping, table: pa.Table, name: str, first_row: int) -> pa.Array:
    try:
        return _as_text(table.column(name))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as error:
        raise SourceReadError(
            f"column of type {table.column(name).type} cannot be read as text "
            f"({str(error).splitlines()[0]})",
            file=str(mapping.path),
            row=first_row,
            column=name,
            hint="store trait values as numbers or UTF-8 text, or list the column under `ignore`",
        ) from None


def text_frame(mapping: Mapping, table: pa.Table, first_row: int) -> pd.DataFrame:
    """An Arrow table of source rows as text columns, missing cells as '' (as a reader gives)."""
    columns = {
        name: _column_as_text(mapping, table, name, first_row) for name in table.column_names
    }
    return pa.table(columns).to_pandas().fillna("")


def _read_parquet(mapping: Mapping, header: list[str], limits: Limits) -> Iterator[pd.DataFrame]:
    try:
        parquet = pq.ParquetFile(mapping.path, pre_buffer=False, buffer_size=1 << 20)
        wanted = _parquet_columns(mapping, parquet)
        first_row = 1
        for batch in parquet.iter_batches(batch_size=limits.batch_rows, columns=wanted):
            frame = text_frame(mapping, pa.Table.from_batches([batch]), first_row)
            first_row += len(frame)
            yield frame
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, OSError) as error:
        raise SourceReadError(f"cannot read Parquet ({error})", file=str(mapping.path)) from None


Reader = Callable[[Mapping, list[str], Limits], Iterator[pd.DataFrame]]
READERS: dict[str, tuple[Callable[[Mapping], list[str]], Reader]] = {
    "csv": (_delimited_header, _read_delimited),
    "tsv": (_delimited_header, _read_delimited),
    "parquet": (_parquet_header, _read_parquet),
    "dwca": (foreign.dwca_header, foreign.read_dwca),
    "datapackage": (foreign.datapackage_header, foreign.read_datapackage),
}


def source_files(mapping: Mapping, limits: Limits) -> list[Path]:
    """Every file a source reads: its table, or (unpacked archives, Data Packages) the
    descriptor and the data files it names."""
    if mapping.format in ("dwca", "datapackage"):
        return foreign.source_files(mapping, limits)
    return [mapping.path]


def read_header(mapping: Mapping) -> list[str]:
    if not mapping.path.is_file():
        raise SourceNotFoundError.at(
            mapping.path, "source file", hint=f"path declared in {mapping.mapping_file.name}"
        )
    try:
        header_reader, _ = READERS[mapping.format]
    except KeyError:
        raise ConfigError(
            f"no reader for format '{mapping.format}'", hint=f"known formats: {', '.join(READERS)}"
        ) from None
    # A blank header cell (often a trailing delimiter) gets a name by its position, so its cells
    # are still accounted for and a mapping can `ignore` it; rejects then name a real column.
    header = [
        name if name else f"(unnamed column {position})"
        for position, name in enumerate(header_reader(mapping), start=1)
    ]
    seen: set[str] = set()
    for name in header:
        if name in seen:
            raise SourceReadError(
                f"column '{name}' appears twice in the header", file=str(mapping.path), column=name
            )
        seen.add(name)
    return header


# ---------------------------------------------------------------- declared columns


def _require(mapping: Mapping, header: list[str], column: str, key: str) -> None:
    if column not in header:
        close = difflib.get_close_matches(column, header, n=1)
        other = [d for d in _DELIMITER_GUESSES if d != _delimiter(mapping) and d in "".join(header)]
        if len(header) == 1 and other and mapping.format in ("csv", "tsv"):
            # the whole header came back as one name: the file uses another delimiter
            hint = (
                f"the header was read as one column; the file seems to use {other[0]!r}: "
                + mapping.read.declare(("delimiter", other[0]))
            )
        elif close:
            hint = f"did you mean '{close[0]}'?"
        else:
            hint = f"columns are: {', '.join(header[:12])}"
        raise ConfigError(
            f"declared column '{column}' ({key}) is not in {mapping.path.name}",
            file=mapping.declared_at,
            column=column,
            hint=hint,
        )


def check_declared_columns(mapping: Mapping, header: list[str]) -> None:
    for key, column in mapping.context.items():
        _require(mapping, header, column, f"context.{key}")
    if mapping.temperature and mapping.temperature.column:
        _require(mapping, header, mapping.temperature.column, "context.temperature")
    for column in mapping.ignore:
        _require(mapping, header, column, "ignore")
    for trait_column in mapping.traits:
        _require(mapping, header, trait_column.column, f"traits.{trait_column.column}")
    if mapping.columns is not None:
        for key in ("trait", "value", "unit", "statistic", "n"):
            column = getattr(mapping.columns, key)
            if column is not None:
                _require(mapping, header, column, f"columns.{key}")


def _refuse_long_names(mapping: Mapping, header: list[str], limits: Limits) -> None:
    for name in header:
        if len(name) > limits.max_cell_chars and name not in mapping.ignore:
            raise SourceReadError(
                f"header name has {len(name)} characters, more than limits.max_cell_chars "
                f"({limits.max_cell_chars})",
                file=str(mapping.path),
                row=0,
                column=name[:40] + "…",
                hint="check the delimiter and the header row, or raise limits.max_cell_chars",
            )


def iter_cells(mapping: Mapping, limits: Limits | None = None) -> Iterator[CellBatch]:
    """Read the mapping's source batch by batch and yield its trait cells."""
    limits = limits or Limits()
    size = mapping.path.stat().st_size if mapping.path.is_file() else 0
    if size > limits.max_file_bytes:
        raise SourceReadError(
            f"file is {size} bytes, above the limit of {limits.max_file_bytes}",
            file=str(mapping.path),
            hint="raise limits.max_file_bytes in harmonize.yaml if this is intended",
        )
    header = read_header(mapping)
    if len(header) > limits.max_columns:
        raise SourceReadError(
            f"{len(header)} columns, above the limit of {limits.max_columns}",
            file=str(mapping.path),
        )
    check_declared_columns(mapping, header)
    _refuse_long_names(mapping, header, limits)
    _, reader = READERS[mapping.format]
    limits = reading_limits(mapping, header, limits)
    first_row = 1
    measure = _PROGRESS_MEASURES.get(mapping.format)
    total = measure[0](mapping, size) if measure else None
    done = 0.0
    for frame in reader(mapping, header, limits):
        fraction = None
        if measure and total:
            done += measure[1](frame)
            fraction = min(1.0, done / total)
        yield cells_of_frame(mapping, frame, header, first_row, limits, fraction)
        first_row += len(frame)


# A wide batch holds at least this many rows, however many trait columns a row has.
MIN_BATCH_ROWS = 64


def reading_limits(mapping: Mapping, header: list[str], limits: Limits) -> Limits:
    """`limits` with the rows per batch cut so a wide table's batch holds about as many cells
    as `batch_rows` rows of a long table: every trait column of a row is one cell, so 262,144
    rows of 100 trait columns would be 26 million cells at once (gigabytes) instead of a
    quarter million."""
    per_row = len(trait_columns(mapping, header)) if mapping.layout == "wide" else 1
    rows = max(MIN_BATCH_ROWS, limits.batch_rows // max(1, per_row))
    return dataclasses.replace(limits, batch_rows=min(limits.batch_rows, rows))


def _text_bytes(frame: pd.DataFrame) -> float:
    """About how many bytes of a delimited file a frame of its cells took (for progress only)."""
    lengths = sum(float(frame[c].str.len().sum()) for c in frame.columns if frame[c].dtype == "str")
    return lengths + len(frame) * len(frame.columns)


def _parquet_rows(mapping: Mapping, size: int) -> float:
    return float(pq.ParquetFile(mapping.path).metadata.num_rows)


# format -> (total of the file, amount one frame of it read): progress as a share of the file
_PROGRESS_MEASURES: dict[
    str, tuple[Callable[[Mapping, int], float], Callable[[pd.DataFrame], float]]
] = {
    "csv": (lambda mapping, size: float(size), _text_bytes),
    "tsv": (lambda mapping, size: float(size), _text_bytes),
    "parquet": (_parquet_rows, lambda frame: float(len(frame))),
}


def read_text_frame(mapping: Mapping, limits: Limits | None = None) -> pd.DataFrame:
    """The whole source as text columns (for previews and the review sheet's example values)."""
    header = read_header(mapping)
    _, reader = READERS[mapping.format]
    frames = list(reader(mapping, header, limits or Limits()))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=header)
