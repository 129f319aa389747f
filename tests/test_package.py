"""Tests for harmonize.package (writing) and harmonize.package_validate (checking).

All table contents below are INVENTED, schema-correct fixtures; no number is a real measurement.
External references: the Frictionless Data specifications (Data Package v1/v2, Table Schema
v1/v2) through the vendored profiles in tests/data/profiles ("Frictionless Data specifications,
datapackage.org profiles, vendored"), the frictionless command-line validator, and FIPS 180-4
(SHA-256, via hashlib).
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import shutil
import socket
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from harmonize import tables
from harmonize.csv_text import _repr_text, csv_text
from harmonize.errors import BuildError, ConfigError, UnsafePathError
from harmonize.package import PackageInfo, prepare_frame, write_package
from harmonize.package_validate import check_paths, validate_package

PROFILES = Path(__file__).parent / "data" / "profiles"
INFO = PackageInfo(
    name="invented-test-package",
    title="Invented test package",
    description="INVENTED data for tests; no value is a real measurement.",
    version="0.1.0",
    created=None,
    vocabulary_version="vocab-test",
    tool_version="0.0-test",
)


def invented_frames() -> dict[str, pd.DataFrame]:
    """Small hand-made tables (invented values) that satisfy every key of the data model."""
    traits = pd.DataFrame(
        {
            "trait_id": ["critical_thermal_max", "body_mass_wet"],
            "label": ["critical thermal maximum", "wet body mass"],
            "kind": ["quantity", "quantity"],
            "unit": ["degC", "g"],
            "ucum": ["Cel", "g"],
            "role": ["threshold", "parameter"],
            "levels": ["individual;population", "individual;population"],
            "plausible_min": [0.0, 1e-6],
            "plausible_max": [60.0, 2e8],
            "rate": [False, False],
            "vocabulary_version": ["vocab-test", "vocab-test"],
        }
    )
    sources = pd.DataFrame(
        {
            "source_id": ["station-a"],
            "path": ["sources/a.csv"],
            "format": ["csv"],
            "level": ["individual"],
            "layout": ["wide"],
            "sha256": ["0" * 64],
            "citation": ["Invented test data"],
            "rows_read": [3],
            "cells": [6],
            "values_written": [3],
            "cells_rejected": [2],
            "cells_empty": [1],
        }
    )
    individual_values = pd.DataFrame(
        {
            "record_id": ["r2", "r1", "r3"],
            "source_id": ["station-a"] * 3,
            "source_row": [2, 1, 3],
            "taxon": ["Lacerta inventa"] * 3,
            "trait_id": ["body_mass_wet", "body_mass_wet", "critical_thermal_max"],
            "role": ["parameter", "parameter", "threshold"],
            "unit": ["g", "g", "degC"],
            "ucum": ["g", "g", "Cel"],
            "value": [0.1, 12.5, 1 / 3],
            "original_value": ["0,1", "12,5", "0.333"],
            "original_name": ["mass", "mass", "CTmax"],
            "match_method": ["synonym", "synonym", "fuzzy"],
            "match_score": [100.0, 100.0, 91.2],
        }
    )
    population_summaries = pd.DataFrame(
        {
            "record_id": ["p1"],
            "source_id": ["station-a"],
            "source_row": [1],
            "trait_id": ["critical_thermal_max"],
            "role": ["threshold"],
            "n": [5],
            "mean": [40.1],
            "sd": [1.2],
            "se": [0.5366563145999496],
            "sd_method": ["from se"],
            "original_name": ["CTmax"],
            "match_method": ["exact"],
        }
    )
    rejects = pd.DataFrame(
        {
            "source_id": ["station-a", "station-a"],
            "source_row": [10, 9],  # numeric order must win over text order ("10" < "9")
            "column": ["mass", "mass"],
            "raw_value": ["n.a.x", "?"],
            "reason": ["not-a-number", "not-a-number"],
            "message": ["not a number", "not a number"],
        }
    )
    name_matches = pd.DataFrame(
        {
            "source_id": ["station-a", "station-a"],
            "name": ["mass", "CTmax"],
            "trait_id": ["body_mass_wet", "critical_thermal_max"],
            "method": ["synonym", "fuzzy"],
            "score": [100.0, 91.2],
            "status": ["accepted", "review"],
        }
    )
    return {
        "individual_values": individual_values,
        "population_summaries": population_summaries,
        "traits": traits,
        "sources": sources,
        "rejects": rejects,
        "name_matches": name_matches,
    }


def descriptor_of(folder: Path) -> dict:
    return json.loads((folder / "datapackage.json").read_text(encoding="utf-8"))


def rewrite_descriptor(folder: Path, change) -> None:
    descriptor = descriptor_of(folder)
    change(descriptor)
    (folder / "datapackage.json").write_text(json.dumps(descriptor, indent=2), encoding="utf-8")


def resource_of(descriptor: dict, name: str) -> dict:
    return next(r for r in descriptor["resources"] if r["name"] == name)


def problem_types(folder: Path) -> set[tuple[str, str]]:
    return {(p.resource, p.type) for p in validate_package(folder).problems}


@pytest.fixture(params=["csv", "parquet"])
def fmt(request) -> str:
    return request.param


@pytest.fixture
def no_network(monkeypatch):
    """Record and refuse every socket connection, so a fetch attempt is visible."""
    attempts: list[object] = []

    def refuse(self, address, *args, **kwargs):
        attempts.append(address)
        raise OSError("network disabled in tests")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket.socket, "connect_ex", refuse)
    return attempts


# --- a written package is valid ------------------------------------------------------------


def test_written_package_validates(tmp_path, fmt):
    write_package(invented_frames(), tmp_path, INFO, fmt=fmt)
    result = validate_package(tmp_path)
    assert result.problems == ()
    assert result.valid
    suffix = {"csv": ".csv", "parquet": ".parquet"}[fmt]
    assert sorted(p.name for p in tmp_path.glob(f"*{suffix}")) == sorted(
        f"{name}{suffix}" for name in invented_frames()
    )


# Frictionless Data specifications, datapackage.org profiles, vendored (tests/data/profiles).
@pytest.mark.parametrize(
    "profile", ["v1-data-package", "v1-tabular-data-package", "v2-datapackage"]
)
def test_descriptor_conforms_to_data_package_profiles(tmp_path, fmt, profile):
    write_package(invented_frames(), tmp_path, INFO, fmt=fmt)
    schema = json.loads((PROFILES / f"{profile}.json").read_text(encoding="utf-8"))
    validator = jsonschema.validators.validator_for(schema)(schema)
    errors = [e.message for e in validator.iter_errors(descriptor_of(tmp_path))]
    assert errors == []


# Frictionless Data specifications, datapackage.org profiles, vendored (tests/data/profiles).
@pytest.mark.parametrize("profile", ["v1-table-schema", "v2-table-schema"])
def test_every_resource_schema_conforms_to_table_schema_profiles(tmp_path, profile):
    write_package(invented_frames(), tmp_path, INFO)
    schema = json.loads((PROFILES / f"{profile}.json").read_text(encoding="utf-8"))
    validator = jsonschema.validators.validator_for(schema)(schema)
    for resource in descriptor_of(tmp_path)["resources"]:
        errors = [e.message for e in validator.iter_errors(resource["schema"])]
        assert errors == [], resource["name"]


# The profiles must be able to fail, or the two tests above prove nothing: both v1 and v2
# Data Package profiles require `resources` (Data Package spec, "resources" is REQUIRED).
@pytest.mark.parametrize(
    "profile", ["v1-data-package", "v1-tabular-data-package", "v2-datapackage"]
)
def test_profiles_reject_a_descriptor_without_resources(tmp_path, profile):
    write_package(invented_frames(), tmp_path, INFO)
    descriptor = descriptor_of(tmp_path)
    del descriptor["resources"]
    schema = json.loads((PROFILES / f"{profile}.json").read_text(encoding="utf-8"))
    assert not jsonschema.validators.validator_for(schema)(schema).is_valid(descriptor)


def frictionless_command() -> str:
    found = shutil.which("frictionless", path=str(Path(sys.executable).parent))
    assert found is not None, "the frictionless command belongs to the test environment"
    return found


def test_frictionless_command_line_accepts_csv_package(tmp_path):
    write_package(invented_frames(), tmp_path, INFO)
    run = subprocess.run(
        [frictionless_command(), "validate", "datapackage.json"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    # frictionless CLI: exit 0 when valid, 1 when invalid (ECOSYSTEM-NOTES §1, checked there).
    assert run.returncode == 0, run.stdout + run.stderr


# --- what the writer promises --------------------------------------------------------------


def test_same_frames_give_byte_identical_files(tmp_path, fmt):
    # Byte identity is the promise of reproducible builds, so bytes are compared here.
    shuffled = {
        name: frame.iloc[::-1].reset_index(drop=True) for name, frame in invented_frames().items()
    }
    write_package(invented_frames(), tmp_path / "one", INFO, fmt=fmt)
    write_package(shuffled, tmp_path / "two", INFO, fmt=fmt)
    names = sorted(p.name for p in (tmp_path / "one").iterdir())
    assert names == sorted(p.name for p in (tmp_path / "two").iterdir())
    for name in names:
        assert (tmp_path / "one" / name).read_bytes() == (tmp_path / "two" / name).read_bytes(), (
            name
        )


def test_rows_are_sorted_by_primary_key_with_numbers_in_numeric_order(tmp_path):
    write_package(invented_frames(), tmp_path, INFO)
    rejects = pd.read_csv(tmp_path / "rejects.csv")
    assert rejects["source_row"].tolist() == [9, 10]
    values = pd.read_csv(tmp_path / "individual_values.csv")
    assert values["record_id"].tolist() == ["r1", "r2", "r3"]


def test_csv_hash_and_bytes_describe_the_written_file(tmp_path):
    write_package(invented_frames(), tmp_path, INFO)
    for resource in descriptor_of(tmp_path)["resources"]:
        data = (tmp_path / resource["path"]).read_bytes()
        # SHA-256 as specified by FIPS 180-4; "sha256:<hex>" is the Data Package "hash" form.
        assert resource["hash"] == "sha256:" + hashlib.sha256(data).hexdigest()
        assert resource["bytes"] == len(data)
        assert b"\r\n" not in data


def test_parquet_resources_declare_no_bytes_or_hash(tmp_path):
    # frictionless cannot check either on Parquet (ECOSYSTEM-NOTES §1, "What breaks" 4).
    write_package(invented_frames(), tmp_path, INFO, fmt="parquet")
    for resource in descriptor_of(tmp_path)["resources"]:
        assert "bytes" not in resource and "hash" not in resource
        assert resource["format"] == "parquet"


def test_descriptor_carries_profiles_levels_roles_and_the_description(tmp_path, fmt):
    write_package(invented_frames(), tmp_path, INFO, fmt=fmt)
    descriptor = descriptor_of(tmp_path)
    assert descriptor["$schema"] == "https://datapackage.org/profiles/2.0/datapackage.json"
    assert descriptor["profile"] == "tabular-data-package"
    assert descriptor["description"] == INFO.description
    assert "created" not in descriptor
    assert descriptor["x-harmonize"] == {
        "tool_version": INFO.tool_version,
        "vocabulary_version": INFO.vocabulary_version,
        "roles": dict(
            zip(
                invented_frames()["traits"]["trait_id"],
                invented_frames()["traits"]["role"],
                strict=True,
            )
        ),
    }
    assert all(r["profile"] == "tabular-data-resource" for r in descriptor["resources"])
    assert resource_of(descriptor, "individual_values")["x-level"] == "individual"
    assert resource_of(descriptor, "population_summaries")["x-level"] == "population"
    fields = {
        f["name"]: f for f in resource_of(descriptor, "individual_values")["schema"]["fields"]
    }
    assert fields["value"]["role"] == "measurement"
    assert fields["trait_id"]["role"] == "identifier"
    assert fields["unit"]["role"] == "unit"
    assert fields["measurement_temperature"]["unit"] == "degC"
    for resource in descriptor["resources"]:
        for field in resource["schema"]["fields"]:
            # Custom keys inside `constraints` are a hard frictionless error (ECOSYSTEM-NOTES §1).
            assert set(field.get("constraints", {})) <= {"required", "enum"}


def test_created_and_field_units_are_written_when_given(tmp_path):
    info = replace(INFO, created="2026-01-01T00:00:00Z")
    write_package(
        invented_frames(),
        tmp_path,
        info,
        field_units={"traits": {"plausible_min": "canonical unit of the trait"}},
    )
    descriptor = descriptor_of(tmp_path)
    assert descriptor["created"] == "2026-01-01T00:00:00Z"
    fields = {f["name"]: f for f in resource_of(descriptor, "traits")["schema"]["fields"]}
    assert fields["plausible_min"]["unit"] == "canonical unit of the trait"
    assert "unit" not in fields["plausible_max"]


# Python 3.1+ writes floats in the shortest form that reads back to the same double
# (What's New in Python 3.1, "repr of a float"; Gay's algorithm), which pandas uses when no
# float_format is given: every finite double must survive the CSV unchanged.
@settings(
    max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(st.floats(allow_nan=False, allow_infinity=False))
def test_csv_numbers_read_back_to_the_same_double(tmp_path, number):
    frames = invented_frames()
    frames["individual_values"].loc[0, "value"] = number
    write_package(frames, tmp_path, INFO)
    # Read with Python's own (correctly rounded) float(), not a CSV parser's fast path.
    values = pd.read_csv(tmp_path / "individual_values.csv", dtype=str, keep_default_na=False)
    assert float(values.loc[values["record_id"] == "r2", "value"].item()) == number


def test_empty_strings_are_missing_in_both_formats(tmp_path):
    frames = invented_frames()
    frames["individual_values"]["sex"] = ["", "female", ""]
    write_package(frames, tmp_path, INFO, fmt="parquet")
    stored = pq.read_table(tmp_path / "individual_values.parquet").column("sex").to_pylist()
    assert stored == ["female", None, None]  # sorted r1, r2, r3


@pytest.mark.parametrize(
    ("change", "error"),
    [
        ({"fmt": "xlsx"}, ConfigError),
        ({"info": replace(INFO, name="Has Space")}, ConfigError),
        ({"tables": {"observations": pd.DataFrame()}}, BuildError),
        ({"field_units": {"traits": {"no_such_column": "g"}}}, BuildError),
    ],
)
def test_writer_refuses_bad_arguments(tmp_path, change, error):
    arguments = {"tables": invented_frames(), "info": INFO, "fmt": "csv", "field_units": None}
    arguments.update(change)
    with pytest.raises(error):
        write_package(
            arguments["tables"],
            tmp_path,
            arguments["info"],
            fmt=arguments["fmt"],
            field_units=arguments["field_units"],
        )


# --- broken packages are caught ------------------------------------------------------------
# Violation semantics are those of Table Schema (primaryKey unique, foreignKeys resolvable,
# field types, constraints.required/enum); the problem type names are frictionless's.


def duplicate_primary_key(frames):
    frames["individual_values"].loc[1, "record_id"] = "r2"


def foreign_key_to_missing_trait(frames):
    frames["individual_values"].loc[2, "trait_id"] = "no_such_trait"


def enum_violation(frames):
    frames["population_summaries"].loc[0, "sd_method"] = "guessed"


@pytest.mark.parametrize(
    ("damage", "resource", "expected_type", "field", "row"),
    [
        # r1 sorts first (row 2 with the header as row 1), so the second "r2" is row 3.
        (duplicate_primary_key, "individual_values", "primary-key", "record_id", 3),
        (foreign_key_to_missing_trait, "individual_values", "foreign-key", "trait_id", 4),
        (enum_violation, "population_summaries", "constraint-error", "sd_method", 2),
    ],
)
def test_broken_tables_are_reported(tmp_path, fmt, damage, resource, expected_type, field, row):
    frames = invented_frames()
    damage(frames)
    write_package(frames, tmp_path, INFO, fmt=fmt)
    result = validate_package(tmp_path)
    assert not result.valid
    found = [p for p in result.problems if p.type == expected_type]
    assert [(p.resource, p.row) for p in found] == [(resource, row)]
    if field is not None:
        assert found[0].field == field
    assert {p.type for p in result.problems} == {expected_type}


def test_type_error_in_csv_is_reported(tmp_path):
    write_package(invented_frames(), tmp_path, INFO)
    path = tmp_path / "individual_values.csv"
    path.write_text(path.read_text().replace(",12.5,", ",twelve,"), encoding="utf-8")
    rewrite_descriptor(
        tmp_path,
        lambda d: [resource_of(d, "individual_values").pop(k) for k in ("hash", "bytes")],
    )
    problems = validate_package(tmp_path).problems
    assert [(p.resource, p.row, p.field, p.type) for p in problems] == [
        ("individual_values", 2, "value", "type-error")
    ]


def test_changed_csv_fails_its_declared_hash(tmp_path):
    write_package(invented_frames(), tmp_path, INFO)
    path = tmp_path / "sources.csv"
    path.write_text(path.read_text().replace("Invented test data", "Invented test dat!"))
    assert ("sources", "hash-count") in problem_types(tmp_path)


def test_type_error_in_parquet_is_reported(tmp_path):
    write_package(invented_frames(), tmp_path, INFO, fmt="parquet")
    path = tmp_path / "individual_values.parquet"
    table = pq.read_table(path)
    position = table.schema.get_field_index("value")
    as_text = pa.array([str(v) for v in table.column("value").to_pylist()], type=pa.string())
    pq.write_table(table.set_column(position, "value", as_text), path)
    problems = validate_package(tmp_path).problems
    assert [(p.resource, p.field, p.type) for p in problems] == [
        ("individual_values", "value", "type-error")
    ]


def test_parquet_null_in_required_field_is_caught(tmp_path):
    frames = invented_frames()
    frames["individual_values"].loc[0, "original_value"] = None  # record r2 -> row 3
    frames["individual_values"].loc[1, "value"] = float("nan")  # record r1 -> row 2
    write_package(frames, tmp_path, INFO, fmt="parquet")

    def require_value(descriptor):
        fields = resource_of(descriptor, "individual_values")["schema"]["fields"]
        next(f for f in fields if f["name"] == "value")["constraints"] = {"required": True}

    rewrite_descriptor(tmp_path, require_value)
    problems = validate_package(tmp_path).problems
    assert sorted((p.row, p.field, p.type) for p in problems) == [
        (2, "value", "constraint-error"),
        (3, "original_value", "constraint-error"),
    ]


def test_frictionless_alone_misses_a_null_number_in_a_required_parquet_field(tmp_path):
    # Documents why Parquet is checked with pyarrow: frictionless reads a null float as
    # Decimal('NaN'), so `required` never fires (ECOSYSTEM-NOTES §1, "What breaks" 3). If this
    # starts failing, frictionless fixed it and our own Parquet checks could be revisited.
    frames = invented_frames()
    frames["individual_values"].loc[1, "value"] = float("nan")
    write_package(frames, tmp_path, INFO, fmt="parquet")

    def require_value_only(descriptor):
        descriptor["resources"] = [resource_of(descriptor, "individual_values")]
        schema = descriptor["resources"][0]["schema"]
        schema.pop("foreignKeys")
        schema["fields"] = [
            {**f, "constraints": {"required": True}} if f["name"] == "value" else f
            for f in schema["fields"]
            # integer columns with nulls give false type errors in frictionless; keep them out
            if f["type"] != "integer"
        ]

    rewrite_descriptor(tmp_path, require_value_only)
    table = pq.read_table(tmp_path / "individual_values.parquet")
    pq.write_table(table.drop_columns(["source_row"]), tmp_path / "individual_values.parquet")
    run = subprocess.run(
        [frictionless_command(), "validate", "--json", "datapackage.json"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    report = json.loads(run.stdout)
    assert report["valid"] is True
    assert [(p.field, p.type) for p in validate_package(tmp_path).problems] == [
        ("value", "constraint-error")
    ]


def test_malformed_descriptor_is_a_problem_not_an_exception(tmp_path):
    write_package(invented_frames(), tmp_path, INFO)
    (tmp_path / "datapackage.json").write_text("{not json", encoding="utf-8")
    result = validate_package(tmp_path)
    assert not result.valid
    assert [p.type for p in result.problems] == ["package-error"]


def test_descriptor_error_from_frictionless_is_translated(tmp_path):
    write_package(invented_frames(), tmp_path, INFO)
    rewrite_descriptor(
        tmp_path, lambda d: resource_of(d, "traits")["schema"]["fields"][0].update(type="nonsense")
    )
    result = validate_package(tmp_path)
    assert not result.valid
    assert result.problems and all(p.type.endswith("error") for p in result.problems)


def test_missing_data_file_is_a_problem(tmp_path, fmt):
    write_package(invented_frames(), tmp_path, INFO, fmt=fmt)
    next(tmp_path.glob("rejects.*")).unlink()
    result = validate_package(tmp_path)
    assert not result.valid
    assert {p.resource for p in result.problems} == {"rejects"}


def test_max_errors_caps_the_problem_list(tmp_path, fmt):
    frames = invented_frames()
    frames["individual_values"]["role"] = "not-a-role"
    write_package(frames, tmp_path, INFO, fmt=fmt)
    assert len(validate_package(tmp_path).problems) == 3
    assert len(validate_package(tmp_path, max_errors=2).problems) == 2


# --- paths that leave the folder -----------------------------------------------------------


@pytest.mark.parametrize(
    "path",
    [
        "../outside.csv",
        "data/../../outside.csv",
        "/etc/hostname",
        "https://example.org/traits.csv",
        "file:///etc/hostname",
        "~/traits.csv",
        "$HOME/traits.csv",
    ],
)
def test_unsafe_resource_paths_are_refused_without_network(tmp_path, fmt, no_network, path):
    write_package(invented_frames(), tmp_path, INFO, fmt=fmt)
    rewrite_descriptor(tmp_path, lambda d: resource_of(d, "traits").update(path=path))
    with pytest.raises(UnsafePathError):
        check_paths(tmp_path)
    with pytest.raises(UnsafePathError):
        validate_package(tmp_path)
    assert no_network == []


@pytest.mark.parametrize("key", ["schema", "dialect", "profile"])
def test_remote_schema_dialect_or_profile_is_refused_without_network(tmp_path, no_network, key):
    write_package(invented_frames(), tmp_path, INFO)
    url = "https://example.org/remote.json"
    rewrite_descriptor(tmp_path, lambda d: resource_of(d, "sources").update({key: url}))
    with pytest.raises(UnsafePathError):
        validate_package(tmp_path)
    assert no_network == []


def test_remote_package_profile_is_refused(tmp_path, no_network):
    write_package(invented_frames(), tmp_path, INFO)
    rewrite_descriptor(tmp_path, lambda d: d.update(profile="https://example.org/profile.json"))
    with pytest.raises(UnsafePathError):
        validate_package(tmp_path)
    assert no_network == []


@pytest.mark.skipif(not hasattr(os, "symlink"), reason="needs symbolic links")
def test_symlink_to_a_file_outside_is_refused(tmp_path, fmt):
    package = tmp_path / "package"
    write_package(invented_frames(), package, INFO, fmt=fmt)
    data = next(package.glob("traits.*"))
    outside = tmp_path / f"outside{data.suffix}"
    data.rename(outside)
    data.symlink_to(outside)
    with pytest.raises(UnsafePathError):
        validate_package(package)


@pytest.mark.skipif(not hasattr(os, "symlink"), reason="needs symbolic links")
def test_symlinked_descriptor_is_refused(tmp_path):
    package = tmp_path / "package"
    write_package(invented_frames(), package, INFO)
    real = tmp_path / "datapackage.json"
    (package / "datapackage.json").rename(real)
    (package / "datapackage.json").symlink_to(real)
    with pytest.raises(UnsafePathError):
        check_paths(package)


@pytest.mark.skipif(not hasattr(os, "symlink"), reason="needs symbolic links")
def test_symlink_that_stays_inside_is_accepted(tmp_path):
    write_package(invented_frames(), tmp_path, INFO)
    (tmp_path / "data").mkdir()
    (tmp_path / "traits.csv").rename(tmp_path / "data" / "traits.csv")
    (tmp_path / "traits.csv").symlink_to(tmp_path / "data" / "traits.csv")
    check_paths(tmp_path)
    assert validate_package(tmp_path).valid


# --- CSV text: Arrow-built, byte for byte what pandas writes -------------------------------------

_CSV_PROBE = tables.Resource(
    name="csv_probe",
    title="CSV probe",
    description="Every column type of the data model.",
    columns=(
        tables.Column("text", "string", "text"),
        tables.Column("count", "integer", "count"),
        tables.Column("number", "number", "number"),
        tables.Column("flag", "boolean", "flag"),
        tables.Column("day", "date", "date"),
    ),
    primary_key=("text",),
)
_CELL_TEXT = st.one_of(
    st.none(),
    st.text(alphabet=st.sampled_from(list('ab ,"\r\n;é€\t') + ["x"]), max_size=8),
    st.text(max_size=6),
)
_ROWS = st.lists(
    st.tuples(
        _CELL_TEXT,
        st.one_of(st.none(), st.integers(min_value=-(2**63), max_value=2**63 - 1)),
        st.one_of(st.none(), st.floats(allow_nan=True, allow_infinity=True)),
        st.one_of(st.none(), st.booleans()),
        st.one_of(st.none(), st.dates().map(str)),
    ),
    max_size=30,
)


def _rfc4180(pandas_text: str) -> str:
    """pandas' cells, rows ended by '\\n', a cell quoted when it holds ',', '"', '\\r' or '\\n'
    (RFC 4180 section 2). Python's csv module with '\\n' line ends leaves a lone '\\r' bare,
    which readers take for a line break; our writer quotes it."""
    rows = []
    for cells in csv.reader(io.StringIO(pandas_text, newline="")):
        buffer = io.StringIO(newline="")
        csv.writer(buffer, lineterminator="\r\n").writerow(cells)  # quotes \r and \n alike
        rows.append(buffer.getvalue()[:-2] + "\n")
    return "".join(rows)


@settings(max_examples=200, deadline=None)
@given(_ROWS, st.booleans())
def test_csv_text_is_what_pandas_writes(rows, header):
    # pandas' to_csv (Python's csv module, minimal quoting, floats in their shortest round-trip
    # form) is the reference the package's CSV bytes were written with before; the one
    # difference is a lone carriage return, now quoted as RFC 4180 asks
    texts, counts, numbers, flags, days = zip(*rows, strict=True) if rows else ([],) * 5
    frame = prepare_frame(
        pd.DataFrame(
            {
                "text": pd.array(list(texts), dtype="string"),
                "count": pd.array(list(counts), dtype="Int64"),
                "number": pd.array([float("nan") if x is None else x for x in numbers], "float64"),
                "flag": pd.array(list(flags), dtype="boolean"),
                "day": pd.array(list(days), dtype="string"),
            }
        ),
        _CSV_PROBE,
    )
    reference = frame.copy()
    reference["flag"] = reference["flag"].map({True: "true", False: "false"})
    pandas_text = reference.to_csv(index=False, header=header, lineterminator="\r\n", na_rep="")
    assert csv_text(frame, _CSV_PROBE, header) == _rfc4180(pandas_text).encode("utf-8")


def test_numbers_are_written_as_repr_writes_them():
    # repr() of a double: the shortest digits that read back to it (Python 3.1+, Gay's
    # algorithm), fixed notation for 1e-4 <= |x| < 1e16, scientific otherwise; pandas' CSV
    # writes the same. Arrow's cast gives the digits, the notation is ours: every finite double
    # of 200,000 random bit patterns, measurement-like values and the notation's edges.
    rng = np.random.default_rng(20261203)
    bits = rng.integers(0, 2**64 - 1, 200_000, dtype=np.uint64, endpoint=True)
    random = bits.view(np.float64)
    measured = np.array([float(f"{x:.{d}g}") for x, d in zip(
        rng.lognormal(2, 3, 50_000), rng.integers(1, 9, 50_000), strict=True
    )])  # fmt: skip
    edges = np.array(
        [1e-4, 9.999999999999999e-05, 1e16, 9999999999999998.0, 1e15, 123456789012345.6,
         0.0, -0.0, 100.0, -7.0, 5e-324, 2.2250738585072014e-308, 1.7976931348623157e308]
    )  # fmt: skip
    for values in (random[np.isfinite(random)], measured, edges):
        assert _repr_text(values).to_pylist() == [repr(float(v)) for v in values]
