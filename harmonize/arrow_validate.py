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
from collections.abc import Iterator
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


def check_package_arrow(folder: Path, *, max_errors: int = 1000) -> ValidationResult:
    """Validate the package in `folder` column-wise (see the module docstring)."""
    folder = Path(folder)
    check_paths(folder)
    descriptor = load_descriptor(folder)
    resources = [r for r in descriptor.get("resources") or [] if isinstance(r, dict)]
    by_name = {r.get("name"): r for r in resources}
    problems: list[ValidationProblem] = []
    for resource in resources:
        if len(problems) >= max_errors:
            break
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
    schema = _schema(resource)
    fields = [f for f in schema.get("fields", []) if isinstance(f, dict) and "name" in f]
    declared = [f["name"] for f in fields]
    missing_values = schema.get("missingValues", [""])
    primary_key = as_list(schema.get("primaryKey"))
    foreign = [_ForeignKey(folder, name, key, by_name) for key in schema.get("foreignKeys") or []]
    key_hashes: list[np.ndarray] = []
    offset = 0
    try:
        for batch in iter_batches(folder, resource):
            if offset == 0:
                problems += _label_problems(name, batch.schema.names, declared)
                if problems:
                    return problems[:limit]
            for field in fields:
                if len(problems) >= limit:
                    break
                column = pa.chunked_array([batch.column(field["name"])])
                found = check_column(name, field, column, missing_values, primary_key, limit)
                problems += [_shifted(p, offset) for p in found]
            if primary_key:
                key_hashes.append(_key_hashes(batch, primary_key))
            for key in foreign:
                problems += key.orphans(batch, offset, limit - len(problems))
            offset += batch.num_rows
            if len(problems) >= limit:
                return problems[:limit]
    except (pa.ArrowInvalid, pa.ArrowTypeError, OSError) as error:
        text = str(error).splitlines()[0]
        return problems + [problem(name, "type-error", f"cannot read as declared ({text})")]
    if primary_key and key_hashes:
        suspects = _repeated_hash_rows(np.concatenate(key_hashes))
        if len(suspects):
            keys = _rows_of_keys(folder, resource, primary_key, suspects)
            problems += _duplicate_keys(name, keys, primary_key, limit)
    return problems[:limit]


def _key_hashes(batch: pa.RecordBatch, columns: list[str]) -> np.ndarray:
    """A 64-bit hash of each row's key: 8 bytes a row, whatever the key's width."""
    if len(columns) == 1:  # no frame needed for a one-column key (record_id)
        values = batch.column(columns[0]).to_numpy(zero_copy_only=False)
        return pd.util.hash_array(np.asarray(values, dtype=object), categorize=False)
    frame = pa.Table.from_batches([batch]).select(columns).to_pandas()
    return pd.util.hash_pandas_object(frame, index=False).to_numpy()


def _repeated_hash_rows(hashes: np.ndarray) -> np.ndarray:
    """Rows (0-based) whose key hash occurs more than once: every repeated key is among them
    (a hash collision only adds a row, which the exact comparison then clears)."""
    order = np.argsort(hashes, kind="stable")
    ordered = hashes[order]
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
        # one-column keys (trait_id, source_id) are checked in Arrow, per distinct child value
        self.parent_values: pa.Array | None = None
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
            if pc.all(pc.is_in(distinct, value_set=self.parent_values)).as_py() is not False:
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


def accounting_problems(folder: Path) -> list[ValidationProblem]:
    """The cell accounting, checked on the written files: for every source, cells = written +
    rejected + empty; its rows in `rejects` number cells_rejected; for individual-level
    sources, its rows in `individual_values` number values_written."""
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
        values = _count_by_source(folder, by_name[tables.INDIVIDUAL_VALUES.name])
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
