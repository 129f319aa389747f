"""Check a written package column-wise with pyarrow, batch by batch, for packages of any size.

Every build runs this on the package in its staging folder. It checks what the Table Schema
and the data model promise, for CSV and Parquet resources alike: column labels, field types
(CSV cells are parsed with the declared types), `required` and `enum` constraints,
primary-key uniqueness, foreign keys, the declared `bytes`/`hash`, and the cell accounting of
every source (cells = written + rejected + empty; rejects and individual values per source
agree with the `sources` table). Files are read in record batches, so memory grows with the
primary-key column, not with the table.

The frictionless library's row-by-row validation (in `package_validate`) remains the reference
and runs on small packages or on request; this module reuses its column checks and problem
records. Only an unsafe path raises; everything else comes back as `ValidationProblem`s.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq

from harmonize import tables
from harmonize.package_validate import (
    FIRST_DATA_ROW,
    ValidationProblem,
    ValidationResult,
    as_list,
    check_column,
    check_paths,
    is_parquet,
    load_descriptor,
    problem,
    referenced,
    size_and_hash,
)

# Rows checked at once: reading 262,144-row batches of a 30-column table held about 300 MiB
# more than 65,536-row batches did, for no gain in speed.
BATCH_ROWS = 65_536
# Table Schema type -> the Arrow type a CSV column is parsed as
_CSV_TYPES = {
    "string": pa.string(),
    "integer": pa.int64(),
    "number": pa.float64(),
    "boolean": pa.bool_(),
    "date": pa.date32(),
}


def check_package_arrow(
    folder: Path,
    *,
    max_errors: int = 1000,
    streamed: Mapping[str, ResourceCheck] | None = None,
) -> ValidationResult:
    """Validate the package in `folder` column-wise (see the module docstring).

    `streamed` holds checks a build already ran on resources as it wrote them (Parquet only);
    those resources are not read back unless a problem must be located in the file."""
    folder = Path(folder)
    check_paths(folder)
    descriptor = load_descriptor(folder)
    resources = [r for r in descriptor.get("resources") or [] if isinstance(r, dict)]
    by_name = {r.get("name"): r for r in resources}
    problems: list[ValidationProblem] = []
    for resource in resources:
        if len(problems) >= max_errors:
            break
        check = (streamed or {}).get(resource.get("name"))
        if check is not None and check.matches(resource):
            problems += check.finish(folder, resource, by_name)
        else:
            problems += _check_resource(folder, resource, by_name, max_errors - len(problems))
    return ValidationResult(valid=not problems, problems=tuple(problems[:max_errors]))


def _schema(resource: dict[str, Any]) -> dict[str, Any]:
    schema = resource.get("schema")
    return schema if isinstance(schema, dict) else {}


def iter_batches(
    folder: Path, resource: dict[str, Any], columns: list[str] | None = None
) -> Iterator[pa.RecordBatch]:
    """The resource's rows in record batches, typed as its schema declares (CSV parsed)."""
    path = folder / str(resource.get("path"))
    if is_parquet(resource):
        parquet = pq.ParquetFile(path, pre_buffer=False, buffer_size=1 << 20)
        yield from parquet.iter_batches(batch_size=BATCH_ROWS, columns=columns)
        return
    schema = _schema(resource)
    fields = [f for f in schema.get("fields", []) if isinstance(f, dict) and "name" in f]
    types = {f["name"]: _CSV_TYPES.get(f.get("type"), pa.string()) for f in fields}
    options = pa_csv.ConvertOptions(
        column_types=types,
        include_columns=columns or [],
        null_values=[str(v) for v in schema.get("missingValues", [""])],
        strings_can_be_null=True,
        true_values=["true"],
        false_values=["false"],
    )
    reader = pa_csv.open_csv(
        path,
        read_options=pa_csv.ReadOptions(block_size=1 << 22),
        convert_options=options,
    )
    yield from reader


def _check_resource(
    folder: Path, resource: dict[str, Any], by_name: dict[Any, dict[str, Any]], limit: int
) -> list[ValidationProblem]:
    name = str(resource.get("name", ""))
    path = folder / str(resource.get("path"))
    if not path.is_file():
        return [problem(name, "scheme-error", f"file {resource.get('path')!r} not found")]
    problems = size_and_hash(name, path, resource)
    check = ResourceCheck(resource, limit)
    foreign = [_ForeignKey(folder, name, key, by_name) for key in check.foreign_keys]
    try:
        for batch in iter_batches(folder, resource):
            check.add(batch, foreign)
            if check.done:
                break
    except (pa.ArrowInvalid, pa.ArrowTypeError, OSError) as error:
        text = str(error).splitlines()[0]
        return (
            problems
            + check.problems
            + [problem(name, "type-error", f"cannot read as declared ({text})")]
        )
    return (problems + check.finish(folder, resource, by_name))[:limit]


class ResourceCheck:
    """The column-wise checks of one resource, fed its rows batch by batch: read from its
    file (`check_package_arrow`), or in a build straight from the writer as it writes them,
    so that a large table is checked without being read back."""

    def __init__(self, resource: dict[str, Any], limit: int = 1000) -> None:
        self.name = str(resource.get("name", ""))
        self.schema = _schema(resource)
        self.fields = [
            f for f in self.schema.get("fields", []) if isinstance(f, dict) and "name" in f
        ]
        self.declared = [f["name"] for f in self.fields]
        self.missing_values = self.schema.get("missingValues", [""])
        self.primary_key = as_list(self.schema.get("primaryKey"))
        self.foreign_keys = [k for k in self.schema.get("foreignKeys") or [] if isinstance(k, dict)]
        self.limit = limit
        self.problems: list[ValidationProblem] = []
        self.rows = 0
        self.source_rows: Counter[str] = Counter()  # rows per source_id (the accounting)
        self._key_hashes: list[np.ndarray] = []
        # streamed: distinct values of each one-column foreign key, checked at the end
        self._child_values: dict[str, list[pa.Array]] = {}
        self.stopped = False
        self.streamed = False  # rows came without their referenced tables (from a build)

    @property
    def done(self) -> bool:
        return self.stopped or len(self.problems) >= self.limit

    def matches(self, resource: dict[str, Any]) -> bool:
        """Whether the written resource declares, for every check, the schema this check was
        run against (names, types, constraints and keys; descriptions and units aside)."""
        return _checked_parts(_schema(resource)) == _checked_parts(self.schema)

    def add(
        self, batch: pa.RecordBatch | pa.Table, foreign: list[_ForeignKey] | None = None
    ) -> None:
        """Check a batch of rows; `foreign` are keys whose referenced rows are already known
        (reading a package); without them one-column keys are gathered for `finish`."""
        if self.done:
            self.rows += batch.num_rows
            return
        if self.rows == 0:
            self.problems += _label_problems(self.name, batch.schema.names, self.declared)
            if self.problems:
                self.stopped = True  # wrong columns: nothing else is meaningful
                return
        for field in self.fields:
            if self.done:
                break
            column = batch.column(field["name"])
            if isinstance(column, pa.Array):
                column = pa.chunked_array([column])
            found = check_column(
                self.name, field, column, self.missing_values, self.primary_key, self.limit
            )
            self.problems += [_shifted(p, self.rows) for p in found]
        if self.primary_key:
            self._key_hashes.append(_key_hashes(batch, self.primary_key))
        if "source_id" in batch.schema.names:
            for item in pc.value_counts(batch.column("source_id")).to_pylist():
                self.source_rows[str(item["values"])] += item["counts"]
        if foreign is not None:
            for key in foreign:
                self.problems += key.orphans(batch, self.rows, self.limit - len(self.problems))
        else:
            self.streamed = True
            for key in self.foreign_keys:
                fields = as_list(key.get("fields"))
                if len(fields) == 1:
                    values = pc.unique(pc.cast(batch.column(fields[0]), pa.string()))
                    self._child_values.setdefault(fields[0], []).append(values)
        self.rows += batch.num_rows

    def finish(
        self, folder: Path, resource: dict[str, Any], by_name: dict[Any, dict[str, Any]]
    ) -> list[ValidationProblem]:
        """The checks that need every row: repeated keys and, for streamed rows, foreign keys
        (the referenced tables are written last). Rows are read from the file only to locate
        a problem already found."""
        problems = list(self.problems)
        if self.stopped:
            return problems
        if self.streamed and self.foreign_keys and len(problems) < self.limit:
            problems += self._streamed_foreign_keys(folder, resource, by_name)
        if self.primary_key and self._key_hashes and len(problems) < self.limit:
            suspects = _repeated_hash_rows(np.concatenate(self._key_hashes))
            if len(suspects):
                keys = _rows_of_keys(folder, resource, self.primary_key, suspects)
                problems += _duplicate_keys(self.name, keys, self.primary_key, self.limit)
        return problems[: self.limit]

    def _streamed_foreign_keys(
        self, folder: Path, resource: dict[str, Any], by_name: dict[Any, dict[str, Any]]
    ) -> list[ValidationProblem]:
        foreign = [_ForeignKey(folder, self.name, key, by_name) for key in self.foreign_keys]
        settled = all(
            key.problem is None
            and key.parent_values is not None
            and len(key.fields) == 1
            and _all_known(self._child_values.get(key.fields[0], []), key.parent_values)
            for key in foreign
        )
        if settled:
            return []
        # an unknown value (or a key of several columns): find the rows in the written file
        problems: list[ValidationProblem] = []
        offset = 0
        for batch in iter_batches(folder, resource):
            for key in foreign:
                problems += key.orphans(batch, offset, self.limit - len(problems))
            offset += batch.num_rows
        return problems


def _checked_parts(schema: dict[str, Any]) -> tuple:
    fields = [
        (f.get("name"), f.get("type"), repr(f.get("constraints")))
        for f in schema.get("fields", [])
        if isinstance(f, dict)
    ]
    keys = (schema.get("missingValues"), schema.get("primaryKey"), schema.get("foreignKeys"))
    return (fields, repr(keys))


def _all_known(children: list[pa.Array], parents: pa.Array) -> bool:
    for values in children:
        known = pc.is_in(values.drop_null(), value_set=parents)
        if pc.all(known).as_py() is False:
            return False
    return True


def _key_hashes(batch: pa.RecordBatch, columns: list[str]) -> np.ndarray:
    """A 64-bit hash of each row's key: 8 bytes a row, whatever the key's width."""
    if len(columns) == 1:  # no frame needed for a one-column key (record_id)
        column = batch.column(columns[0])
        as_number = hex_key_numbers(column)
        if as_number is not None:
            return as_number
        values = column.to_numpy(zero_copy_only=False)
        return pd.util.hash_array(np.asarray(values, dtype=object), categorize=False)
    frame = pa.Table.from_batches([batch]).select(columns).to_pandas()
    return pd.util.hash_pandas_object(frame, index=False).to_numpy()


def hex_key_numbers(column: pa.Array | pa.ChunkedArray) -> np.ndarray | None:
    """For a text key whose every cell is 16 hex digits (record ids), the number each cell
    writes, which serves as the key's hash without hashing (one-to-one for lower-case digits;
    other spellings may collide, and the exact comparison clears a collision). None for any
    other column: the caller hashes it."""
    if isinstance(column, pa.ChunkedArray):
        column = column.combine_chunks()
    if column.type != pa.string() or column.null_count or not len(column):
        return None
    offsets = np.frombuffer(column.buffers()[1], dtype=np.int32)[
        column.offset : column.offset + len(column) + 1
    ]
    if (np.diff(offsets) != 16).any():
        return None
    data = memoryview(column.buffers()[2])[offsets[0] : offsets[-1]]
    try:
        packed = bytes.fromhex(data.tobytes().decode("ascii"))
    except ValueError:  # not hex (UnicodeDecodeError is a ValueError too)
        return None
    if len(packed) != 8 * len(column):  # fromhex skips spaces: not 16 digits a cell
        return None
    return np.frombuffer(packed, dtype=">u8").astype(np.uint64)


def _repeated_hash_rows(hashes: np.ndarray) -> np.ndarray:
    """Rows (0-based) whose key hash occurs more than once: every repeated key is among them
    (a hash collision only adds a row, which the exact comparison then clears)."""
    ordered = np.sort(hashes)
    if not (ordered[1:] == ordered[:-1]).any():  # the usual case: no key repeats
        return np.array([], dtype=np.int64)
    order = np.argsort(hashes, kind="stable")  # `ordered` is hashes[order]
    same = ordered[1:] == ordered[:-1]
    repeated = np.zeros(len(ordered), dtype=bool)
    repeated[1:] |= same
    repeated[:-1] |= same
    return np.sort(order[repeated])


def _rows_of_keys(
    folder: Path, resource: dict[str, Any], columns: list[str], rows: np.ndarray
) -> pa.Table:
    """The key columns of the given rows (ascending), with their row numbers in `__at`."""
    parts = []
    offset = 0
    for batch in iter_batches(folder, resource, columns):
        here = rows[(rows >= offset) & (rows < offset + batch.num_rows)] - offset
        if len(here):
            table = pa.Table.from_batches([batch]).select(columns).take(pa.array(here))
            parts.append(table.append_column("__at", pa.array(here + offset, type=pa.int64())))
        offset += batch.num_rows
    return pa.concat_tables(parts)


def _shifted(found: ValidationProblem, offset: int) -> ValidationProblem:
    if found.row is None or offset == 0:
        return found
    return ValidationProblem(
        found.resource, found.row + offset, found.field, found.type, found.message
    )


def _label_problems(name: str, stored: list[str], declared: list[str]) -> list[ValidationProblem]:
    problems = [
        problem(name, "missing-label", "not in the file", field=n)
        for n in declared
        if n not in stored
    ]
    problems += [
        problem(name, "extra-label", "not in the schema", field=n)
        for n in stored
        if n not in declared
    ]
    if not problems and stored != declared:
        problems.append(
            problem(name, "incorrect-label", f"columns are in the order {stored}, not {declared}")
        )
    return problems


def _duplicate_keys(
    name: str, keys: pa.Table, columns: list[str], limit: int
) -> list[ValidationProblem]:
    """Rows whose key repeats an earlier row (grouped in Arrow: no Python per row). `keys`
    holds candidate rows only, their row numbers in `__at`."""
    indexed = keys.rename_columns([*columns, "__row"])
    groups = indexed.group_by(columns, use_threads=False).aggregate(
        [("__row", "min"), ("__row", "count")]
    )
    repeated = groups.filter(pc.greater(groups["__row_count"], 1))
    if len(repeated) == 0:
        return []
    joined = indexed.join(repeated.select([*columns, "__row_min"]), keys=columns, join_type="inner")
    later = joined.filter(pc.greater(joined["__row"], joined["__row_min"]))
    later = later.sort_by("__row").slice(0, limit)
    return [
        problem(
            name,
            "primary-key",
            f"the key {columns} repeats row {earlier + FIRST_DATA_ROW}",
            row=row + FIRST_DATA_ROW,
            field=",".join(columns),
        )
        for row, earlier in zip(
            later["__row"].to_pylist(), later["__row_min"].to_pylist(), strict=True
        )
    ]


class _ForeignKey:
    """One foreign key: the referenced keys read once, child batches checked as they come."""

    def __init__(
        self, folder: Path, name: str, key: dict[str, Any], by_name: dict[Any, dict[str, Any]]
    ):
        self.name = name
        self.fields = as_list(key.get("fields"))
        target_name = referenced(key) or name
        self.target_name = target_name
        target = by_name.get(target_name)
        reference = key.get("reference") if isinstance(key.get("reference"), dict) else {}
        self.target_fields = as_list(reference.get("fields"))
        self.problem: ValidationProblem | None = None
        self.parent: pd.MultiIndex | None = None
        # one-column keys (trait_id, source_id) are checked in Arrow, per distinct child value
        self.parent_values: pa.Array | None = None
        if target is None or len(self.fields) != len(self.target_fields):
            message = f"foreign key {self.fields} names a missing resource or mismatched fields"
            self.problem = problem(name, "schema-error", message, field=",".join(self.fields))
            return
        try:
            parts = [
                pa.Table.from_batches([b]) for b in iter_batches(folder, target, self.target_fields)
            ]
        except (pa.ArrowInvalid, pa.ArrowTypeError, OSError, KeyError) as error:
            message = f"cannot read key columns of {target_name!r} ({error})"
            self.problem = problem(name, "source-error", message, field=",".join(self.fields))
            return
        parent = pa.concat_tables(parts) if parts else None
        if parent is not None and len(self.target_fields) == 1:
            column = pc.cast(parent.column(self.target_fields[0]), pa.string())
            self.parent_values = pc.unique(column.combine_chunks()).drop_null()
        frame = _as_text(parent, self.target_fields) if parent is not None else pd.DataFrame()
        self.parent = (
            pd.MultiIndex.from_frame(frame)
            if len(frame)
            else pd.MultiIndex.from_tuples([], names=self.target_fields)
        )

    def orphans(self, batch: pa.RecordBatch, offset: int, limit: int) -> list[ValidationProblem]:
        if self.problem is not None:
            found, self.problem = [self.problem], None  # reported once
            return found
        if self.parent is None or limit <= 0:
            return []
        if self.parent_values is not None and len(self.fields) == 1:
            column = pc.cast(batch.column(self.fields[0]), pa.string())
            distinct = pc.unique(column).drop_null()  # a missing cell is not checked
            if _all_known([distinct], self.parent_values):
                return []  # every value known: the common case, settled without Python
        child = _as_text(pa.Table.from_batches([batch]), self.fields)
        complete = child.notna().all(axis=1).to_numpy()  # a missing foreign-key cell is not checked
        # distinct child keys only: a 5-million-row table names a few dozen traits
        distinct = child[complete].drop_duplicates()
        if distinct.empty:
            return []
        known = pd.MultiIndex.from_frame(distinct).isin(self.parent)
        if known.all():
            return []
        bad = pd.MultiIndex.from_frame(distinct[~known])
        orphan = complete & pd.MultiIndex.from_frame(child.fillna("")).isin(bad)
        rows = orphan.nonzero()[0][:limit]
        return [
            problem(
                self.name,
                "foreign-key",
                f'values {list(child.iloc[i])} not found in "{self.target_name}" {self.target_fields}',
                row=int(i) + offset + FIRST_DATA_ROW,
                field=",".join(self.fields),
            )
            for i in rows
        ]


def _as_text(table: pa.Table, columns: list[str]) -> pd.DataFrame:
    """Key columns as text, so keys stored with different physical types still compare."""
    return pd.DataFrame(
        {c: pc.cast(table.column(c), pa.string()).to_numpy(zero_copy_only=False) for c in columns},
        dtype=object,
    )


# --- the data model's own promise -----------------------------------------------------------


def accounting_problems(
    folder: Path, value_rows: Mapping[str, int] | None = None
) -> list[ValidationProblem]:
    """The cell accounting, checked on the written files: for every source, cells = written +
    rejected + empty; its rows in `rejects` number cells_rejected; for individual-level
    sources, its rows in `individual_values` number values_written (`value_rows`: those
    counts as a streamed check found them, instead of reading the values back)."""
    folder = Path(folder)
    descriptor = load_descriptor(folder)
    by_name = {r.get("name"): r for r in descriptor.get("resources") or [] if isinstance(r, dict)}
    needed = (tables.SOURCES.name, tables.REJECTS.name, tables.INDIVIDUAL_VALUES.name)
    if any(n not in by_name for n in needed):
        return [problem("", "package-error", f"the package lacks one of {list(needed)}")]
    try:
        accounts = pa.Table.from_batches(
            list(iter_batches(folder, by_name[tables.SOURCES.name]))
        ).to_pandas()
        rejected = _count_by_source(folder, by_name[tables.REJECTS.name])
        values = (
            Counter(value_rows)
            if value_rows is not None
            else _count_by_source(folder, by_name[tables.INDIVIDUAL_VALUES.name])
        )
    except (pa.ArrowInvalid, pa.ArrowTypeError, OSError, KeyError) as error:
        return [problem("", "package-error", f"cannot read the accounting ({error})")]
    problems = []
    for row in accounts.itertuples(index=False):  # one row per source, not per value
        source = row.source_id
        checks = [
            (
                row.cells == row.values_written + row.cells_rejected + row.cells_empty,
                f"cells {row.cells} != written {row.values_written} + rejected {row.cells_rejected} + empty {row.cells_empty}",
            ),
            (
                rejected.get(source, 0) == row.cells_rejected,
                f"{rejected.get(source, 0)} rows in rejects, the account says {row.cells_rejected}",
            ),
        ]
        if row.level == "individual":
            checks.append(
                (
                    values.get(source, 0) == row.values_written,
                    f"{values.get(source, 0)} rows in individual_values, the account says {row.values_written}",
                )
            )
        problems += [
            problem(
                tables.SOURCES.name, "accounting", f"source {source!r}: {message}", field="cells"
            )
            for ok, message in checks
            if not ok
        ]
    return problems


def _count_by_source(folder: Path, resource: dict[str, Any]) -> Counter[str]:
    counts: Counter[str] = Counter()
    for batch in iter_batches(folder, resource, ["source_id"]):
        counted = pc.value_counts(batch.column(0))
        for item in counted.to_pylist():  # one item per distinct source
            counts[str(item["values"])] += item["counts"]
    return counts
