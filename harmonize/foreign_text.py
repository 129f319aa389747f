"""Reading pieces shared by the foreign-table readers (`harmonize.foreign`): delimited text
files streamed as Arrow text tables, archive member names checked for zip-slip, file sizes held
to the project's limit.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Callable, Iterator
from pathlib import Path, PurePosixPath, PureWindowsPath
from typing import IO

import pyarrow as pa
import pyarrow.csv as pacsv

from harmonize.errors import SourceReadError
from harmonize.project import Limits


def unsafe_member(name: str) -> str | None:
    """Why an archive path may not be followed, or None (zip-slip: absolute paths and '..')."""
    posix = name.replace("\\", "/")
    if posix.startswith("/") or PureWindowsPath(name).drive or PureWindowsPath(name).anchor:
        return "is an absolute path"
    if ".." in PurePosixPath(posix).parts:
        return "goes up a folder ('..')"
    return None


def check_size(size: int, limits: Limits, file: str) -> None:
    if size > limits.max_file_bytes:
        raise SourceReadError(
            f"file is {size} bytes, above the limit of {limits.max_file_bytes}",
            file=file,
            hint="raise limits.max_file_bytes in harmonize.yaml if this is intended",
        )


def text_tables(
    stream: IO[bytes] | Path,
    *,
    file: str,
    delimiter: str,
    quote: str,
    skip_rows: int,
    encoding: str,
    columns: dict[str, str],
    batch_rows: int,
    reopen: Callable[[], IO[bytes]],
) -> Iterator[pa.Table]:
    """Read the columns {position name 'f<i>': output name} of a delimited file as text, in
    tables of `batch_rows` rows (the last may be shorter), streaming: memory follows
    the batch, not the file. A file without rows gives one empty table. `reopen` opens the file
    again, only on the error path, to name the row a parse error is in."""
    names = list(columns)
    pending: list[pa.RecordBatch] = []
    pending_rows = 0
    try:
        reader = pacsv.open_csv(
            stream,
            read_options=pacsv.ReadOptions(
                autogenerate_column_names=True,
                skip_rows=skip_rows,
                encoding=encoding,
                block_size=1 << 22,
            ),
            parse_options=pacsv.ParseOptions(
                delimiter=delimiter, quote_char=quote or False, newlines_in_values=bool(quote)
            ),
            convert_options=pacsv.ConvertOptions(
                include_columns=names,
                column_types=dict.fromkeys(names, pa.string()),
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
            ),
        )
        schema = reader.schema
        yielded = False
        for batch in reader:  # blocks of about 4 MiB, cut into tables of batch_rows rows
            pending.append(batch)
            pending_rows += batch.num_rows
            while pending_rows >= batch_rows:
                table = pa.Table.from_batches(pending, schema=schema)
                yield renamed_columns(table.slice(0, batch_rows), columns)
                yielded = True
                rest = table.slice(batch_rows)
                pending, pending_rows = rest.to_batches(), rest.num_rows
        if pending_rows or not yielded:
            yield renamed_columns(pa.Table.from_batches(pending, schema=schema), columns)
    except KeyError as error:  # ArrowKeyError: a declared index beyond the file's columns
        raise SourceReadError(
            f"a declared column is not in the file ({error})",
            file=file,
            hint="check the field indexes in meta.xml against the file",
        ) from None
    except (pa.ArrowInvalid, UnicodeDecodeError) as error:
        text = str(error).splitlines()[0]
        if "Expected" in text and "columns" in text:
            raise SourceReadError(
                "row has a different number of fields than the first row",
                file=file,
                row=first_ragged_row(reopen, delimiter, quote, skip_rows, encoding),
                hint=f"check quoting and the declared delimiter {delimiter!r}",
            ) from None
        raise SourceReadError(
            f"cannot read as delimited text ({text})",
            file=file,
            hint="rows must have as many fields as the first one; check the declared delimiter "
            "and encoding",
        ) from None


def first_ragged_row(
    reopen: Callable[[], IO[bytes]],
    delimiter: str,
    quote: str,
    skip_rows: int,
    encoding: str,
    width: int | None = None,
) -> int | None:
    """Only on the error path: the first data row (1 = the first after the skipped header
    rows) whose field count differs from `width` (default: the first data row's), or None if
    none is found."""
    quoting = {"quotechar": quote} if quote else {"quoting": csv.QUOTE_NONE}
    try:  # Python's codecs know Arrow's 'utf8' too
        with reopen() as raw, io.TextIOWrapper(raw, encoding, errors="replace", newline="") as text:
            rows = csv.reader(text, delimiter=delimiter, **quoting)
            for number, fields in enumerate(rows, start=1 - skip_rows):
                if number < 1 or not fields:
                    continue
                if width is None:
                    width = len(fields)
                elif len(fields) != width:
                    return number
    except (csv.Error, LookupError, OSError):
        return None
    return None


def renamed_columns(table: pa.Table, columns: dict[str, str]) -> pa.Table:
    return table.rename_columns([columns[name] for name in table.column_names]).select(
        list(columns.values())
    )


def arrow_encoding(encoding: str) -> str:
    """pyarrow names UTF-8 'utf8'; other encodings are passed on to Python's codecs."""
    return "utf8" if encoding.lower().replace("-", "").replace("_", "") == "utf8" else encoding
