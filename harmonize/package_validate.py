"""Validate a written data package offline, without following paths out of its folder.

This is the only module that imports frictionless (its API changed between majors; see
pyproject.toml). It does three things, in order:

1. `check_paths`: every resource `path`/`extrapaths`/`schema`/`dialect`/`profile` and the
   package `profile` must be a plain relative path that stays inside the folder once symlinks
   are resolved; URLs, absolute paths, `..`, `~`, `$`/`%VAR%` are refused with
   `UnsafePathError`, and so is a `datapackage.json` that is itself a symlink. frictionless
   alone refuses `..` and absolute paths but fetches `http(s)://` paths and profiles and follows
   symlinks that leave the folder (ECOSYSTEM-NOTES §1 "Security").
2. CSV (and any other non-Parquet) resources go through frictionless with `trusted=False` and
   an HTTP session that refuses every request, so even a path we missed cannot reach the network.
3. Parquet resources are checked here, column-wise with pyarrow: labels, types, `required`,
   `enum`, primary-key uniqueness, foreign keys, and a declared `bytes`/`hash`. frictionless
   reads Parquet through `pandas.DataFrame` row by row, which turns a nullable integer column
   into floats (false type errors), turns a null float into `Decimal('NaN')` so `required` never
   fires, cannot check `bytes`/`hash`, and was about 6x slower than CSV (ECOSYSTEM-NOTES §1
   "What breaks", §6). Foreign keys that involve a Parquet resource on either side are
   checked here too, so frictionless never opens a Parquet file.

Problems in the data or the descriptor come back as `ValidationProblem`s; only an unsafe path
raises. `row` follows the frictionless convention for both formats: the header is row 1, so
the first data row is row 2. Writing the package is left to `harmonize.package`.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from copy import deepcopy
from dataclasses import dataclass, replace
from pathlib import Path, PurePosixPath, PureWindowsPath
from typing import TYPE_CHECKING, Any
from urllib.parse import urlparse

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq

if TYPE_CHECKING:
    from frictionless import FrictionlessException

from harmonize.errors import ConfigError, SourceNotFoundError, UnsafePathError

DESCRIPTOR_NAME = "datapackage.json"
_RESOURCE_REFERENCE_KEYS = ("path", "extrapaths", "schema", "dialect", "profile")
_WINDOWS_VARIABLE = re.compile(r"%[^%]+%")
# The header is row 1 in frictionless reports; the first data row is therefore row 2.
_FIRST_DATA_ROW = 2


@dataclass(frozen=True)
class ValidationProblem:
    """One problem. `resource` is "" for package-level problems; `row` counts the header as 1."""

    resource: str
    row: int | None
    field: str | None
    type: str
    message: str


@dataclass(frozen=True)
class ValidationResult:
    valid: bool
    problems: tuple[ValidationProblem, ...]


# --- paths --------------------------------------------------------------------------------


def check_paths(folder: Path) -> None:
    """Raise `UnsafePathError` if the package in `folder` refers to anything outside it."""
    folder = Path(folder)
    _check_descriptor_paths(folder, _load_descriptor(folder))


def _load_descriptor(folder: Path) -> dict[str, Any]:
    target = folder / DESCRIPTOR_NAME
    if target.is_symlink():
        raise UnsafePathError(
            "the package descriptor is a symbolic link",
            file=DESCRIPTOR_NAME,
            hint="copy the real file into the package folder",
        )
    if not target.is_file():
        raise SourceNotFoundError("no package descriptor here", file=str(target))
    try:
        descriptor = json.loads(target.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as error:
        raise ConfigError(f"not valid UTF-8 JSON ({error})", file=DESCRIPTOR_NAME) from error
    if not isinstance(descriptor, dict):
        raise ConfigError("the descriptor is not a JSON object", file=DESCRIPTOR_NAME)
    return descriptor


def _check_descriptor_paths(folder: Path, descriptor: dict[str, Any]) -> None:
    root = Path(os.path.realpath(folder))
    _check_reference(root, descriptor.get("profile"), "package profile")
    resources = descriptor.get("resources")
    if not isinstance(resources, list):
        return  # frictionless reports the malformed descriptor; there are no paths to follow
    for resource in resources:
        if not isinstance(resource, dict):
            continue
        name = resource.get("name", "?")
        for key in _RESOURCE_REFERENCE_KEYS:
            value = resource.get(key)
            for item in value if isinstance(value, list) else [value]:
                _check_reference(root, item, f"resource {name!r} {key}")


def _check_reference(root: Path, value: object, where: str) -> None:
    if not isinstance(value, str):
        return  # inline schema/dialect objects, or absent
    reason = _unsafe_reason(root, value)
    if reason:
        raise UnsafePathError(
            f"{where} {value!r} {reason}",
            file=DESCRIPTOR_NAME,
            hint="a package may only refer to files inside its own folder",
        )


def _unsafe_reason(root: Path, value: str) -> str | None:
    if urlparse(value).scheme:  # also catches Windows drive letters ("c:")
        return "is a URL"
    if value.startswith(("/", "\\")) or os.path.isabs(value) or PureWindowsPath(value).anchor:
        return "is absolute"
    if ".." in PurePosixPath(value.replace("\\", "/")).parts:
        return "goes up a folder ('..')"
    if value.startswith("~") or "$" in value or _WINDOWS_VARIABLE.search(value):
        return "names a home folder or an environment variable"
    resolved = Path(os.path.realpath(root / value))
    if not resolved.is_relative_to(root):
        return "leaves the package folder once symbolic links are resolved"
    return None


# --- validation ---------------------------------------------------------------------------


def validate_package(folder: Path, *, max_errors: int = 1000) -> ValidationResult:
    """Validate the package in `folder`; raise only for unsafe paths or a missing descriptor."""
    folder = Path(folder)
    try:
        descriptor = _load_descriptor(folder)
    except ConfigError as error:
        return _result([_problem("", "package-error", str(error))])
    _check_descriptor_paths(folder, descriptor)

    resources = descriptor.get("resources")
    if not isinstance(resources, list) or not all(isinstance(r, dict) for r in resources):
        message = "`resources` must be a list of objects"
        return _result([_problem("", "package-error", message)])
    parquet_names = {r.get("name") for r in resources if _is_parquet(r)}

    problems, descriptor_valid = _validate_with_frictionless(
        folder, descriptor, parquet_names, max_errors
    )
    if not descriptor_valid:
        return _result(problems[:max_errors])  # data checks against a broken schema mislead
    for resource in resources:
        if len(problems) >= max_errors:
            break
        if resource.get("name") in parquet_names:
            problems += _validate_parquet(folder, resource, max_errors - len(problems))
    for resource in resources:
        if len(problems) >= max_errors:
            break
        problems += _foreign_keys_across_formats(
            folder, resource, resources, parquet_names, max_errors - len(problems)
        )
    return _result(problems[:max_errors])


def _result(problems: list[ValidationProblem]) -> ValidationResult:
    return ValidationResult(valid=not problems, problems=tuple(problems))


def _is_parquet(resource: dict[str, Any]) -> bool:
    path = resource.get("path")
    return resource.get("format") == "parquet" or (
        isinstance(path, str) and path.lower().endswith((".parquet", ".parq"))
    )


# --- frictionless (CSV and other text formats) ---------------------------------------------


def _no_network_session() -> Any:
    """An HTTP session that refuses every request: validation must never touch the network.
    (requests is imported here, when frictionless is used: a large build never needs it.)"""
    import requests

    class NoNetworkSession(requests.Session):
        def request(self, method: str | bytes, url: str | bytes, *args: Any, **kwargs: Any):
            raise requests.ConnectionError(
                f"network access is disabled during validation ({url!r})"
            )

    return NoNetworkSession()


@contextmanager
def _hardened_frictionless() -> Iterator[None]:
    # frictionless's own `use_context` restores the previous settings only when its block ends
    # without an exception; entering and leaving it by hand restores them in every case.
    from frictionless import system  # imported when used: large builds never need it

    context = system.use_context(trusted=False, http_session=_no_network_session())
    context.__enter__()
    try:
        yield
    finally:
        context.__exit__(None, None, None)


def _validate_with_frictionless(
    folder: Path, descriptor: dict[str, Any], parquet_names: set[Any], max_errors: int
) -> tuple[list[ValidationProblem], bool]:
    """Problems found by frictionless, and whether the descriptor itself was valid."""
    text_descriptor = deepcopy(descriptor)
    for resource in text_descriptor["resources"]:
        schema = resource.get("schema")
        if resource.get("name") in parquet_names:
            continue
        if isinstance(schema, dict) and isinstance(schema.get("foreignKeys"), list):
            # Keys pointing into a Parquet resource are checked by us (see module docstring).
            schema["foreignKeys"] = [
                key for key in schema["foreignKeys"] if _referenced(key) not in parquet_names
            ]
            if not schema["foreignKeys"]:
                del schema["foreignKeys"]
    from frictionless import FrictionlessException, Package

    problems: list[ValidationProblem] = []
    with _hardened_frictionless():
        try:
            package = Package(text_descriptor, basepath=str(folder))
            package.to_descriptor(validate=True)
        except FrictionlessException as error:
            return _translate_exception(error), False
        for resource in package.resources:
            if resource.name in parquet_names or len(problems) >= max_errors:
                continue
            try:
                report = resource.validate(limit_errors=max_errors - len(problems))
            except FrictionlessException as error:
                problems += _translate_exception(error, resource.name)
                continue
            key = ",".join(resource.schema.primary_key) if resource.schema else None
            for error in [e for task in report.tasks for e in task.errors] + report.errors:
                problems.append(_translate_error(resource.name, error, primary_key=key))
    return problems, True


def _translate_exception(
    error: FrictionlessException, resource: str = ""
) -> list[ValidationProblem]:
    reasons = list(getattr(error, "reasons", None) or [])
    if any("is not safe" in reason.message for reason in reasons):
        raise UnsafePathError(
            "; ".join(reason.message for reason in reasons), file=DESCRIPTOR_NAME
        ) from error
    found = [_translate_error(resource, reason) for reason in reasons]
    return found or [_translate_error(resource, error.error)]


def _translate_error(
    resource: str, error: Any, *, primary_key: str | None = None
) -> ValidationProblem:
    field = getattr(error, "field_name", None)
    if field is None and getattr(error, "field_names", None):
        field = ",".join(error.field_names)
    if field is None and error.type == "primary-key":
        field = primary_key or None
    return ValidationProblem(
        resource=resource,
        row=getattr(error, "row_number", None),
        field=field,
        type=error.type,
        message=error.message,
    )


def _referenced(foreign_key: object) -> object:
    if isinstance(foreign_key, dict) and isinstance(foreign_key.get("reference"), dict):
        return foreign_key["reference"].get("resource")
    return None


# --- Parquet, column-wise with pyarrow -----------------------------------------------------

_TYPE_CHECKS = {
    "string": lambda t: pa.types.is_string(t) or pa.types.is_large_string(t),
    "integer": pa.types.is_integer,
    "number": lambda t: pa.types.is_floating(t) or pa.types.is_integer(t) or pa.types.is_decimal(t),
    "boolean": pa.types.is_boolean,
    "date": pa.types.is_date,
    "datetime": pa.types.is_timestamp,
    "time": pa.types.is_time,
}


def _problem(
    resource: str, kind: str, message: str, *, row: int | None = None, field: str | None = None
) -> ValidationProblem:
    return ValidationProblem(resource=resource, row=row, field=field, type=kind, message=message)


def _validate_parquet(
    folder: Path, resource: dict[str, Any], limit: int
) -> list[ValidationProblem]:
    name = str(resource.get("name", ""))
    path, schema, problems = _open_parts(folder, resource)
    if problems:
        return problems
    try:
        parquet = pq.ParquetFile(path)
    except (OSError, pa.ArrowException) as error:
        return [_problem(name, "source-error", f"cannot read Parquet ({error})")]
    problems += _size_and_hash(name, path, resource)

    fields = [f for f in schema.get("fields", []) if isinstance(f, dict) and "name" in f]
    declared = [f["name"] for f in fields]
    stored = parquet.schema_arrow.names
    for n in declared:
        if n not in stored:
            problems.append(_problem(name, "missing-label", "not in the file", field=n))
    for n in stored:
        if n not in declared:
            problems.append(_problem(name, "extra-label", "not in the schema", field=n))
    if not problems and stored != declared:
        message = f"columns are in the order {stored}, not {declared}"
        problems.append(_problem(name, "incorrect-label", message))
    missing_values = schema.get("missingValues", [""])
    primary_key = _as_list(schema.get("primaryKey"))
    for field in fields:
        if field["name"] in stored and len(problems) < limit:
            column = parquet.read(columns=[field["name"]]).column(0)
            problems += _check_column(name, field, column, missing_values, primary_key, limit)
    if primary_key and all(k in stored for k in primary_key) and len(problems) < limit:
        keys = parquet.read(columns=primary_key).to_pandas()
        problems += _check_primary_key(name, keys, primary_key, limit)
    return problems[:limit]


def _open_parts(
    folder: Path, resource: dict[str, Any]
) -> tuple[Path, dict[str, Any], list[ValidationProblem]]:
    name = str(resource.get("name", ""))
    path, schema = resource.get("path"), resource.get("schema")
    if not isinstance(path, str):
        return folder, {}, [_problem(name, "resource-error", "a Parquet resource needs one path")]
    if isinstance(schema, str):  # a schema file inside the folder (already checked as safe)
        try:
            schema = json.loads((folder / schema).read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as error:
            return folder, {}, [_problem(name, "schema-error", f"cannot read schema ({error})")]
    if not isinstance(schema, dict):
        return folder, {}, [_problem(name, "schema-error", "the resource has no schema")]
    return folder / path, schema, []


def _size_and_hash(name: str, path: Path, resource: dict[str, Any]) -> list[ValidationProblem]:
    problems = []
    size, declared_bytes = path.stat().st_size, resource.get("bytes")
    if declared_bytes is not None and declared_bytes != size:
        message = f"declared {declared_bytes} bytes, the file has {size}"
        problems.append(_problem(name, "byte-count", message))
    declared_hash = resource.get("hash")
    if isinstance(declared_hash, str) and declared_hash:
        # Data Package v1 "hash": "<algorithm>:<hex>", a bare hex digest being MD5.
        algorithm, _, expected = declared_hash.rpartition(":")
        algorithm = algorithm or "md5"
        if algorithm not in hashlib.algorithms_available:
            return problems + [_problem(name, "hash-count", f"unknown algorithm {algorithm!r}")]
        digest = hashlib.new(algorithm)
        with path.open("rb") as stream:
            for block in iter(lambda: stream.read(1 << 20), b""):
                digest.update(block)
        if digest.hexdigest() != expected.lower():
            message = f"declared {algorithm} {expected}, the file has {digest.hexdigest()}"
            problems.append(_problem(name, "hash-count", message))
    return problems


def _per_cell(
    column: pa.ChunkedArray, mask_of: Callable[[pa.ChunkedArray], pa.ChunkedArray], code_missing
) -> pa.ChunkedArray:
    """`mask_of` the column's cells. A dictionary-encoded column is worked out once per distinct
    text and taken by each cell's code; a cell without a code gets `code_missing`."""
    if not pa.types.is_dictionary(column.type):
        return mask_of(column)
    chunks = []
    for chunk in column.chunks:
        per_text = mask_of(pa.chunked_array([chunk.dictionary])).combine_chunks()
        per_text = np.append(
            pc.fill_null(per_text, False).to_numpy(zero_copy_only=False), code_missing
        )
        codes = pc.fill_null(chunk.indices, len(per_text) - 1).to_numpy(zero_copy_only=False)
        chunks.append(pa.array(per_text[codes]))
    return pa.chunked_array(chunks, type=pa.bool_())


def _missing_mask(column: pa.ChunkedArray, missing_values: list[Any]) -> pa.ChunkedArray:
    return _per_cell(column, lambda texts: _missing_cells(texts, missing_values), True)


def _missing_cells(column: pa.ChunkedArray, missing_values: list[Any]) -> pa.ChunkedArray:
    mask = pc.is_null(column)
    if pa.types.is_floating(column.type):
        # A NaN is what a missing float becomes on its way through pandas; our CSV writes it
        # as an empty cell, so both formats agree that it is missing.
        mask = pc.or_(mask, pc.fill_null(pc.is_nan(column), False))
    if pa.types.is_string(column.type) or pa.types.is_large_string(column.type):
        tokens = [str(v) for v in missing_values]
        if len(tokens) == 1:  # the usual [""]: a plain comparison, cheaper than a set lookup
            found = pc.equal(column, tokens[0])
        else:
            found = pc.is_in(column, value_set=pa.array(tokens, type=pa.string()))
        mask = pc.or_(mask, pc.fill_null(found, False))
    return mask


def _first_rows(mask: pa.ChunkedArray | pa.Array, limit: int) -> pa.Array:
    """Positions (0-based) of the first `limit` true cells."""
    return pc.indices_nonzero(mask).slice(0, limit)


def _check_column(
    resource: str,
    field: dict[str, Any],
    column: pa.ChunkedArray,
    missing_values: list[Any],
    primary_key: list[str],
    limit: int,
) -> list[ValidationProblem]:
    name, declared_type = field["name"], field.get("type", "any")
    stored = column.type.value_type if pa.types.is_dictionary(column.type) else column.type
    is_expected = _TYPE_CHECKS.get(declared_type)
    if is_expected is not None and not is_expected(stored):
        message = f'stored as {column.type}, but the schema says "{declared_type}"'
        return [_problem(resource, "type-error", message, field=name)]
    constraints = field.get("constraints") or {}
    enum = constraints.get("enum")
    if not (constraints.get("required") or name in primary_key or enum):
        return []  # the type was all there was to check
    missing = _missing_mask(column, missing_values)
    problems = []
    # A primary-key cell may not be missing either (Table Schema: key fields are implicitly
    # required; frictionless reports such cells too).
    if constraints.get("required") or name in primary_key:
        problems += [
            _problem(resource, "constraint-error", "a value is required", row=i, field=name)
            for i in _first_rows(missing, limit).to_pylist()
        ]
    if isinstance(enum, list) and enum:
        try:
            allowed = pa.array(enum).cast(stored)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError, pa.ArrowTypeError):
            message = f"enum {enum} cannot be compared with a {stored} column"
            return problems + [_problem(resource, "schema-error", message, field=name)]
        known = _per_cell(column, lambda texts: pc.is_in(texts, value_set=allowed), False)
        outside = pc.and_(pc.invert(missing), pc.invert(known))
        indices = _first_rows(outside, limit)
        problems += [
            _problem(
                resource, "constraint-error", f"{value!r} is not one of {enum}", row=i, field=name
            )
            for i, value in zip(indices.to_pylist(), column.take(indices).to_pylist(), strict=True)
        ]
    return [replace(p, row=p.row + _FIRST_DATA_ROW) if p.row is not None else p for p in problems]


def _check_primary_key(
    resource: str, keys: pd.DataFrame, columns: list[str], limit: int
) -> list[ValidationProblem]:
    first = keys.reset_index().groupby(columns, sort=False, dropna=False)["index"].transform("min")
    repeated = keys.duplicated(keep="first").to_numpy()
    return [
        _problem(
            resource,
            "primary-key",
            f"the key {columns} repeats row {int(earlier) + _FIRST_DATA_ROW}",
            row=int(index) + _FIRST_DATA_ROW,
            field=",".join(columns),
        )
        for index, earlier in zip(
            keys.index[repeated][:limit], first[repeated][:limit], strict=True
        )
    ]


# --- foreign keys involving a Parquet resource ---------------------------------------------


def _foreign_keys_across_formats(
    folder: Path,
    resource: dict[str, Any],
    resources: list[dict[str, Any]],
    parquet_names: set[Any],
    limit: int,
) -> list[ValidationProblem]:
    schema, name = resource.get("schema"), str(resource.get("name", ""))
    if not isinstance(schema, dict):
        return []
    by_name = {r.get("name"): r for r in resources}
    problems: list[ValidationProblem] = []
    for key in schema.get("foreignKeys") or []:
        target_name = _referenced(key)
        target_name = resource.get("name") if target_name == "" else target_name
        if resource.get("name") not in parquet_names and target_name not in parquet_names:
            continue  # frictionless checked it
        fields = _as_list(key.get("fields"))
        target_fields = _as_list(key["reference"].get("fields"))
        target, where = by_name.get(target_name), ",".join(fields)
        if target is None or len(fields) != len(target_fields):
            message = f"foreign key {fields} names a missing resource or mismatched fields"
            problems.append(_problem(name, "schema-error", message, field=where))
            continue
        try:
            child = _key_columns(folder, resource, fields)
            parent = _key_columns(folder, target, target_fields)
        except (OSError, KeyError, pa.ArrowException) as error:
            message = f"cannot read key columns ({error})"
            problems.append(_problem(name, "source-error", message, field=where))
            continue
        complete = child.notna().all(axis=1).to_numpy()  # a missing foreign-key cell is not checked
        parent.columns = fields
        found = pd.MultiIndex.from_frame(child).isin(pd.MultiIndex.from_frame(parent))
        orphans = child[complete & ~found].head(limit)
        problems += [
            _problem(
                name,
                "foreign-key",
                f'values {list(values)} not found in "{target_name}" {target_fields}',
                row=int(index) + _FIRST_DATA_ROW,
                field=where,
            )
            for index, values in zip(orphans.index, orphans.itertuples(index=False), strict=True)
        ]
    return problems[:limit]


def _key_columns(folder: Path, resource: dict[str, Any], columns: list[str]) -> pd.DataFrame:
    """Key columns as strings, so keys stored with different physical types still compare."""
    path = folder / str(resource.get("path"))
    if _is_parquet(resource):
        table = pq.read_table(path, columns=columns)
    else:
        schema = resource.get("schema") if isinstance(resource.get("schema"), dict) else {}
        options = pa_csv.ConvertOptions(
            include_columns=columns,
            column_types={c: pa.string() for c in columns},
            null_values=[str(v) for v in schema.get("missingValues", [""])],
            strings_can_be_null=True,
        )
        table = pa_csv.read_csv(path, convert_options=options)
    return pa.table(
        [pc.cast(table.column(c), pa.string()) for c in columns], names=columns
    ).to_pandas()


def _as_list(value: object) -> list[str]:
    if isinstance(value, str):
        return [value]
    return [str(v) for v in value] if isinstance(value, list) else []


# Shared with `arrow_validate`, which streams the same column checks over large packages.
load_descriptor = _load_descriptor
check_column = _check_column
size_and_hash = _size_and_hash
problem = _problem
is_parquet = _is_parquet
as_list = _as_list
referenced = _referenced
FIRST_DATA_ROW = _FIRST_DATA_ROW
