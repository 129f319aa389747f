"""The descriptor of a harmonize package: `datapackage.json` and each resource's Table Schema.

Field types, required/enum constraints, primary and foreign keys, per-field `role` and `unit`,
the individual/population split (`x-level`) and the package-level `x-harmonize` block, built in
a fixed key order so the same tables give the same bytes. `harmonize.package` writes the files
and calls these; the column definitions are `harmonize.tables`'.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from harmonize import tables as data_model
from harmonize.errors import BuildError

# Data Package v2 profile URL; frictionless reads it as a version marker and does not fetch it.
DATAPACKAGE_SCHEMA = "https://datapackage.org/profiles/2.0/datapackage.json"
# The descriptor says empty cells are missing; string cells equal to "" are therefore written as
# missing in Parquet too, so both formats carry the same data.
MISSING_VALUES = ("",)

_LEVELS = {
    data_model.INDIVIDUAL_VALUES.name: "individual",
    data_model.POPULATION_SUMMARIES.name: "population",
}
# Columns that hold the trait's measured value (or a statistic of it, in the canonical unit).
_MEASUREMENT_COLUMNS = {
    data_model.INDIVIDUAL_VALUES.name: {"value", "value_text"},
    data_model.POPULATION_SUMMARIES.name: {
        "mean",
        "sd",
        "se",
        "min",
        "max",
        "median",
        "q1",
        "q3",
        "ci_low",
        "ci_high",
        "value_text",
    },
}
_IDENTIFIER_COLUMNS = {"record_id", "source_id", "trait_id"}
_UNIT_COLUMNS = {"unit", "ucum", "original_unit", "raw_unit", "unit_hint"}
# Fixed units that the data model states in the column description.
_DEFAULT_FIELD_UNITS = {
    data_model.INDIVIDUAL_VALUES.name: {"measurement_temperature": "degC"},
    data_model.POPULATION_SUMMARIES.name: {"measurement_temperature": "degC"},
}


@dataclass(frozen=True)
class PackageInfo:
    """Package-level metadata. `created` None leaves the timestamp out (reproducible builds)."""

    name: str
    title: str
    description: str
    version: str
    created: str | None
    vocabulary_version: str
    tool_version: str
    licenses: tuple[dict, ...] = ()


@dataclass(frozen=True)
class WrittenFile:
    """A resource file written into the package folder, as the descriptor describes it."""

    path: str  # relative to the package folder
    format: str
    mediatype: str
    size: int
    sha256: str
    rows: int = 0


def merge_field_units(
    field_units: Mapping[str, Mapping[str, str]] | None,
) -> dict[str, dict[str, str]]:
    merged = {name: dict(units) for name, units in _DEFAULT_FIELD_UNITS.items()}
    for resource_name, units in (field_units or {}).items():
        resource = data_model.BY_NAME.get(resource_name)
        if resource is None:
            raise BuildError(f"field_units names no such resource {resource_name!r}")
        unknown = sorted(set(units) - set(resource.column_names))
        if unknown:
            raise BuildError(f"field_units: {resource_name} has no column(s) {unknown}")
        merged.setdefault(resource_name, {}).update(units)
    return merged


def _field_role(resource: data_model.Resource, column: data_model.Column) -> str | None:
    if column.name in _MEASUREMENT_COLUMNS.get(resource.name, ()):
        return "measurement"
    if column.name in _IDENTIFIER_COLUMNS:
        return "identifier"
    if column.name in _UNIT_COLUMNS:
        return "unit"
    return None


def _field_descriptor(
    resource: data_model.Resource, column: data_model.Column, unit: str | None
) -> dict[str, object]:
    field: dict[str, object] = {
        "name": column.name,
        "type": column.type,
        "description": column.description,
    }
    # Custom keys sit on the field: frictionless rejects unknown keys inside `constraints`.
    role = _field_role(resource, column)
    if role is not None:
        field["role"] = role
    if unit is not None:
        field["unit"] = unit
    constraints: dict[str, object] = {}
    if column.required:
        constraints["required"] = True
    if column.enum:
        constraints["enum"] = list(column.enum)
    if constraints:
        field["constraints"] = constraints
    return field


def schema_descriptor(
    resource: data_model.Resource, units: Mapping[str, str] | None = None
) -> dict[str, object]:
    """The Table Schema of a resource as `datapackage.json` states it."""
    units = units or {}
    schema: dict[str, object] = {
        "fields": [_field_descriptor(resource, c, units.get(c.name)) for c in resource.columns],
        "missingValues": list(MISSING_VALUES),
        "primaryKey": list(resource.primary_key),
    }
    if resource.foreign_keys:
        schema["foreignKeys"] = [
            {"fields": list(fields), "reference": {"resource": target, "fields": list(keys)}}
            for fields, target, keys in resource.foreign_keys
        ]
    return schema


def resource_descriptor(
    resource: data_model.Resource, written: WrittenFile, units: Mapping[str, str]
) -> dict[str, object]:
    descriptor: dict[str, object] = {
        "name": resource.name,
        "profile": "tabular-data-resource",
        "title": resource.title,
        "description": resource.description,
    }
    if resource.name in _LEVELS:
        descriptor["x-level"] = _LEVELS[resource.name]
    descriptor["path"] = written.path
    descriptor["format"] = written.format
    descriptor["mediatype"] = written.mediatype
    if written.format == "csv":
        descriptor["encoding"] = "utf-8"
        descriptor["bytes"] = written.size
        descriptor["hash"] = f"sha256:{written.sha256}"
    descriptor["schema"] = schema_descriptor(resource, units)
    return descriptor


def package_descriptor(
    info: PackageInfo, roles: Mapping[str, str], resources: list[dict[str, object]]
) -> dict[str, object]:
    descriptor: dict[str, object] = {
        "$schema": DATAPACKAGE_SCHEMA,
        "profile": "tabular-data-package",
        "name": info.name,
        "title": info.title,
        "description": info.description,
        "version": info.version,
    }
    if info.created is not None:
        descriptor["created"] = info.created
    if info.licenses:
        descriptor["licenses"] = [dict(licence) for licence in info.licenses]
    descriptor["x-harmonize"] = {
        "tool_version": info.tool_version,
        "vocabulary_version": info.vocabulary_version,
        "roles": dict(roles),
    }
    descriptor["resources"] = resources
    return descriptor
