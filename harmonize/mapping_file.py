"""A source mapping (`mappings/<source>.yaml`): what it may say, and loading it with checks.

Errors name the mapping file and the key: unknown keys (with the closest known key as a hint),
wrong types, unknown statistics or roles, paths that leave the project root. Whether declared
columns exist is checked by `sources` once it has read a header.
"""

from __future__ import annotations

from collections.abc import Mapping as MappingABC
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from harmonize.config_files import (
    as_arrhenius_temperature,
    as_choice,
    as_mapping,
    as_number,
    as_string,
    check_keys,
    load_yaml,
    resolve_inside,
)
from harmonize.errors import ConfigError

FORMATS = ("csv", "tsv", "parquet", "dwca", "datapackage")  # the last two: harmonize.foreign
LEVELS = ("individual", "population")
LAYOUTS = ("wide", "long")
# 'range' and 'iqr' are cells holding both bounds ('50-60'), read as min and max, q1 and q3;
# 'mode' is the most common category of a population (a category trait's summary)
STATISTICS = (
    "value", "mean", "sd", "se", "n", "min", "max", "median", "q1", "q3", "ci_low", "ci_high",
    "variance", "cv", "range", "iqr", "mode",
)  # fmt: skip
GROUP_CONTEXT = ("sex", "life_stage", "site", "date")  # sub-groups a population may be split by
ROLES = ("parameter", "threshold", "structure", "estimation", "forcing", "descriptive")
CONTEXT_KEYS = (
    "taxon",
    "individual",
    "sex",
    "life_stage",
    "site",
    "date",
    "temperature",
    "sample_size",
)
EXTENSION_FORMATS = {
    ".csv": "csv",
    ".tsv": "tsv",
    ".tab": "tsv",
    ".txt": "tsv",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".zip": "dwca",  # a Darwin Core Archive; an unpacked one is named by its meta.xml
    ".json": "datapackage",  # a Frictionless Data Package named by its datapackage.json
}

MAPPING_KEYS = (
    "source", "path", "format", "read", "citation", "licence", "level", "layout", "context",
    "traits", "columns", "ignore", "ci_level", "description", "combine_groups",
    "arrhenius_temperature", "plus_minus",
)  # fmt: skip
# what the half-width after '±' in a population source's mean cells is ('4.1 ± 0.3')
PLUS_MINUS = ("sd", "se")
READ_KEYS = ("delimiter", "decimal", "thousands", "encoding", "missing", "sheet", "resource")
TRAIT_KEYS = ("trait", "unit", "statistic", "role")
LONG_KEYS = ("trait", "value", "unit", "statistic", "n")


MAPPING_FILE = "mapping-file"
COMMAND_LINE = "command-line"


@dataclass(frozen=True)
class ReadOptions:
    delimiter: str | None = None
    decimal: str = "."
    thousands: str | None = None
    encoding: str = "utf-8"
    missing: tuple[str, ...] = ("", "NA")
    resource: str | None = None  # the resource of a data package source
    # Where the user declared these options, so hints name the fix in the user's own terms:
    # MAPPING_FILE (keys of a mapping's `read:`) or COMMAND_LINE (options of `harmonize quick`).
    declared_in: str = MAPPING_FILE

    def declare(self, *options: tuple[str, str]) -> str:
        """A hint's words for declaring one of `options` ((key, value) pairs)."""
        return declare_read_options(self.declared_in, *options)

    def spell(self, *options: tuple[str, str]) -> str:
        """`options` as the user writes them, without a verb (see `spell_read_options`)."""
        return spell_read_options(self.declared_in, *options)


def spell_read_options(declared_in: str, *options: tuple[str, str]) -> str:
    """Read options as their user writes them: "`decimal: ','` in the mapping's read options"
    for a mapping file, "`--decimal ,`" on the command line; several are joined by 'or'."""
    if declared_in == COMMAND_LINE:
        return " or ".join(f"`--{key} {value}`" for key, value in options)
    keys = " or ".join(f"`{key}: '{value}'`" for key, value in options)
    return f"{keys} in the mapping's read options"


def declare_read_options(declared_in: str, *options: tuple[str, str]) -> str:
    """'declare `decimal: ','` in the mapping's read options' for a mapping file, 'use
    `--decimal ,`' on the command line."""
    verb = "use" if declared_in == COMMAND_LINE else "declare"
    return f"{verb} {spell_read_options(declared_in, *options)}"


@dataclass(frozen=True)
class TemperatureSpec:
    """Temperature at which rates were measured: a column of the source or one fixed value."""

    column: str | None
    value: float | None
    unit: str


@dataclass(frozen=True)
class TraitColumn:
    column: str
    trait: str | None = None
    unit: str | None = None
    statistic: str | None = None
    role: str | None = None


@dataclass(frozen=True)
class LongColumns:
    trait: str
    value: str
    unit: str | None = None
    statistic: str | None = None
    n: str | None = None


@dataclass(frozen=True)
class Mapping:
    source: str
    mapping_file: Path
    path: Path  # absolute, resolved, inside the project root
    format: str
    level: str
    layout: str
    read: ReadOptions = ReadOptions()
    citation: str = ""
    licence: str = ""
    description: str = ""
    context: dict[str, str] = field(default_factory=dict)  # taxon/individual/sex/... -> column
    temperature: TemperatureSpec | None = None
    traits: tuple[TraitColumn, ...] = ()
    columns: LongColumns | None = None
    ignore: tuple[str, ...] = ()
    ci_level: float = 0.95
    combine_groups: tuple[str, ...] = ()  # population sub-groups to pool (Cochrane Table 6.5.a)
    plus_minus: str | None = None  # PLUS_MINUS: what '± x' after a mean is; None: not used
    arrhenius_temperature: float | None = None  # K; overrides trait and project values

    @property
    def declared_at(self) -> str:
        """Where messages say this mapping was declared: its file, or the command line (a table
        given to a command without a mapping file, as in quick mode)."""
        if self.read.declared_in == COMMAND_LINE:
            return "command line"
        return str(self.mapping_file)

    @property
    def decisions_file(self) -> Path:
        return self.mapping_file.with_name(f"{self.source}.matches.csv")

    def trait_column(self, column: str) -> TraitColumn | None:
        for trait_column in self.traits:
            if trait_column.column == column:
                return trait_column
        return None


def checked_ci_level(ci_level: float, path: Path | None = None) -> float:
    """A source's confidence level, a fraction from 0.5 to below 1 (a percent is refused)."""
    if not 0.5 <= ci_level < 1:
        raise ConfigError(
            f"'ci_level' must be between 0.5 and 1, got {ci_level}",
            file=str(path) if path else None,
        )
    return ci_level


def load_mapping(path: Path, root: Path) -> Mapping:
    """Read and validate one mapping file."""
    path = Path(path)
    data = load_yaml(path)
    if not isinstance(data, MappingABC):
        raise ConfigError(
            "a mapping file must hold a YAML mapping (key: value lines)", file=str(path)
        )
    check_keys(data, MAPPING_KEYS, path, "mapping")
    source = as_string(data.get("source"), path, "source", required=True)
    if (
        not source
        or not all(ch.isalnum() or ch in "-_." for ch in source)
        or source != source.lower()
    ):
        raise ConfigError(
            f"source id '{source}' must be lower-case letters, digits, '-', '_' or '.'",
            file=str(path),
        )
    raw_path = as_string(data.get("path"), path, "path", required=True)
    source_path = resolve_inside(root, path.parent, raw_path, path, "path")
    fmt = data.get("format") or EXTENSION_FORMATS.get(source_path.suffix.lower())
    if fmt is None:
        raise ConfigError(
            f"cannot tell the format of '{raw_path}' from its extension",
            file=str(path),
            hint=f"declare format: one of {', '.join(FORMATS)}",
        )
    fmt = as_choice(fmt, FORMATS, path, "format")
    level = as_choice(data.get("level"), LEVELS, path, "level")
    layout = as_choice(data.get("layout", "wide"), LAYOUTS, path, "layout")

    read_data = as_mapping(data.get("read"), path, "read")
    check_keys(read_data, READ_KEYS, path, "read")
    missing = read_data.get("missing", ["", "NA"])
    if isinstance(missing, str) or not isinstance(missing, list):
        raise ConfigError(
            '\'read.missing\' must be a list of texts, e.g. ["NA", ""]', file=str(path)
        )
    delimiter = as_string(read_data.get("delimiter"), path, "read.delimiter")
    if delimiter is not None and len(delimiter.replace("\\t", "\t")) != 1:
        raise ConfigError(
            f"'read.delimiter' must be one character, got {delimiter!r}", file=str(path)
        )
    decimal = as_string(read_data.get("decimal"), path, "read.decimal") or "."
    if decimal not in (".", ","):
        raise ConfigError(f"'read.decimal' must be '.' or ',', got {decimal!r}", file=str(path))
    thousands = as_string(read_data.get("thousands"), path, "read.thousands")
    if thousands is not None and thousands == decimal:
        raise ConfigError("'read.thousands' and 'read.decimal' must differ", file=str(path))
    encoding = as_string(read_data.get("encoding"), path, "read.encoding") or "utf-8"
    try:
        "".encode(encoding)
    except LookupError:
        raise ConfigError(
            f"unknown encoding '{encoding}'", file=str(path), hint="e.g. utf-8, latin-1, cp1252"
        ) from None
    read = ReadOptions(
        delimiter=delimiter.replace("\\t", "\t") if delimiter else None,
        decimal=decimal,
        thousands=thousands,
        encoding=encoding,
        missing=tuple("" if m is None else str(m) for m in missing),
        resource=as_string(read_data.get("resource"), path, "read.resource"),
    )
    if read.resource is not None and fmt != "datapackage":
        raise ConfigError(
            "'read.resource' picks a resource of a data package source",
            file=str(path),
            hint="set format: datapackage, or remove read.resource",
        )

    context_data = as_mapping(data.get("context"), path, "context")
    check_keys(context_data, CONTEXT_KEYS, path, "context")
    context: dict[str, str] = {}
    temperature = None
    for key, value in context_data.items():
        if key == "temperature":
            temperature = _temperature(value, path)
        elif value is not None:
            context[key] = as_string(value, path, f"context.{key}")
    if level == "individual" and "sample_size" in context:
        raise ConfigError(
            "'context.sample_size' only applies to population-level sources", file=str(path)
        )

    traits: list[TraitColumn] = []
    traits_data = as_mapping(data.get("traits"), path, "traits")
    for column, spec in traits_data.items():
        spec = as_mapping(spec, path, f"traits.{column}")
        check_keys(spec, TRAIT_KEYS, path, f"traits.{column}")
        statistic = as_string(spec.get("statistic"), path, f"traits.{column}.statistic")
        if statistic is not None and statistic not in STATISTICS:
            raise ConfigError(
                f"unknown statistic '{statistic}' for column '{column}'",
                file=str(path),
                hint=f"use one of: {', '.join(STATISTICS)}",
            )
        role = as_string(spec.get("role"), path, f"traits.{column}.role")
        if role is not None and role not in ROLES:
            raise ConfigError(
                f"unknown role '{role}' for column '{column}'",
                file=str(path),
                hint=f"use one of: {', '.join(ROLES)}",
            )
        traits.append(
            TraitColumn(
                column=str(column),
                trait=as_string(spec.get("trait"), path, f"traits.{column}.trait"),
                unit=as_string(spec.get("unit"), path, f"traits.{column}.unit"),
                statistic=statistic,
                role=role,
            )
        )

    columns = None
    if layout == "long":
        columns_data = as_mapping(data.get("columns"), path, "columns")
        if not columns_data:
            raise ConfigError(
                "a long-layout mapping needs 'columns' (at least trait and value)",
                file=str(path),
                hint="e.g. columns: {trait: trait_name, value: value, unit: unit}",
            )
        check_keys(columns_data, LONG_KEYS, path, "columns")
        columns = LongColumns(
            trait=as_string(columns_data.get("trait"), path, "columns.trait", required=True),
            value=as_string(columns_data.get("value"), path, "columns.value", required=True),
            unit=as_string(columns_data.get("unit"), path, "columns.unit"),
            statistic=as_string(columns_data.get("statistic"), path, "columns.statistic"),
            n=as_string(columns_data.get("n"), path, "columns.n"),
        )
        if traits:
            raise ConfigError(
                "'traits' is for wide layouts; a long layout names its columns in 'columns'",
                file=str(path),
            )
    elif data.get("columns"):
        raise ConfigError(
            "'columns' is for long layouts",
            file=str(path),
            hint="set layout: long, or use 'traits'",
        )
    elif fmt == "dwca" and not traits:
        # read wide, every Darwin Core term (occurrenceID, basisOfRecord ...) would be a trait
        raise ConfigError(
            "a Darwin Core Archive holds one measurement per MeasurementOrFact row: read it as "
            "a long table",
            file=str(path),
            hint="layout: long, columns: {trait: measurementType, value: measurementValue, "
            "unit: measurementUnit}, context: {taxon: scientificName}",
        )

    ignore = data.get("ignore") or []
    if not isinstance(ignore, list):
        raise ConfigError("'ignore' must be a list of column names", file=str(path))
    ci_level = checked_ci_level(as_number(data.get("ci_level", 0.95), path, "ci_level"), path)

    return Mapping(
        source=source,
        mapping_file=path,
        path=source_path,
        format=fmt,
        level=level,
        layout=layout,
        read=read,
        citation=as_string(data.get("citation"), path, "citation") or "",
        licence=as_string(data.get("licence"), path, "licence") or "",
        description=as_string(data.get("description"), path, "description") or "",
        context=context,
        temperature=temperature,
        traits=tuple(traits),
        columns=columns,
        ignore=tuple(str(c) for c in ignore),
        ci_level=ci_level,
        combine_groups=_combine_groups(data.get("combine_groups"), level, path),
        plus_minus=checked_plus_minus(
            as_string(data.get("plus_minus"), path, "plus_minus"), level, path
        ),
        arrhenius_temperature=as_arrhenius_temperature(
            data.get("arrhenius_temperature"), path, "arrhenius_temperature"
        ),
    )


def checked_plus_minus(value: str | None, level: str, file: Path | None = None) -> str | None:
    """`plus_minus` as declared: sd or se, for population sources only."""
    if value is None:
        return None
    where = str(file) if file else None
    if value not in PLUS_MINUS:
        raise ConfigError(
            f"'plus_minus' must be one of {', '.join(PLUS_MINUS)}, got {value!r}", file=where
        )
    if level != "population":
        raise ConfigError("'plus_minus' applies to population-level sources only", file=where)
    return value


def _combine_groups(value: Any, level: str, file: Path) -> tuple[str, ...]:
    if value is None:
        return ()
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or any(v not in GROUP_CONTEXT for v in value):
        raise ConfigError(
            f"'combine_groups' must list context keys among {', '.join(GROUP_CONTEXT)}, got {value!r}",
            file=str(file),
        )
    if level != "population":
        raise ConfigError(
            "'combine_groups' applies to population-level sources only", file=str(file)
        )
    return tuple(value)


def _temperature(value: Any, file: Path) -> TemperatureSpec:
    if isinstance(value, str):
        return TemperatureSpec(column=value, value=None, unit="degC")
    spec = as_mapping(value, file, "context.temperature")
    check_keys(spec, ("column", "value", "unit"), file, "context.temperature")
    column = as_string(spec.get("column"), file, "context.temperature.column")
    fixed = spec.get("value")
    if (column is None) == (fixed is None):
        raise ConfigError(
            "'context.temperature' needs exactly one of 'column' or 'value'", file=str(file)
        )
    unit = as_string(spec.get("unit"), file, "context.temperature.unit") or "degC"
    return TemperatureSpec(
        column=column,
        value=None if fixed is None else as_number(fixed, file, "context.temperature.value"),
        unit=unit,
    )
