"""Load and validate the project file (`harmonize.yaml`) and the source mappings (`mappings/*.yaml`).

Everything a build needs to know before reading data is checked here, with errors that name the
file and the key: unknown keys (with the closest known key as a hint), wrong types, paths that
leave the project root. Whether declared columns exist is checked by `sources` once it has read a
header. This module reads YAML only; it never opens a data file.
"""

from __future__ import annotations

import difflib
import glob
import os
from collections.abc import Mapping as MappingABC
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from harmonize.errors import ConfigError, SourceNotFoundError, UnsafePathError

FORMATS = ("csv", "tsv", "parquet", "dwca", "datapackage")  # the last two: harmonize.foreign
LEVELS = ("individual", "population")
LAYOUTS = ("wide", "long")
STATISTICS = (
    "value", "mean", "sd", "se", "n", "min", "max", "median", "q1", "q3", "ci_low", "ci_high",
    "variance", "cv",
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

PROJECT_KEYS = (
    "name", "title", "description", "vocabulary", "mappings", "output", "matching",
    "temperature_correction", "taxon_synonyms", "licence", "version", "limits",
    "aggregate_individuals",
)  # fmt: skip
MAPPING_KEYS = (
    "source", "path", "format", "read", "citation", "licence", "level", "layout", "context",
    "traits", "columns", "ignore", "ci_level", "description", "combine_groups",
    "arrhenius_temperature",
)  # fmt: skip
READ_KEYS = ("delimiter", "decimal", "thousands", "encoding", "missing", "sheet", "resource")
TRAIT_KEYS = ("trait", "unit", "statistic", "role")
LONG_KEYS = ("trait", "value", "unit", "statistic", "n")
OUTPUT_KEYS = ("folder", "format")
MATCHING_KEYS = ("accept", "review", "margin")
CORRECTION_KEYS = (
    "method",
    "reference",
    "unit",
    "activation_energy_ev",
    "arrhenius_temperature",
    "q10",
)
LIMIT_KEYS = ("max_file_bytes", "max_cell_chars", "max_columns", "batch_rows")


@dataclass(frozen=True)
class ReadOptions:
    delimiter: str | None = None
    decimal: str = "."
    thousands: str | None = None
    encoding: str = "utf-8"
    missing: tuple[str, ...] = ("", "NA")
    resource: str | None = None  # the resource of a data package source


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
    arrhenius_temperature: float | None = None  # K; overrides trait and project values

    @property
    def decisions_file(self) -> Path:
        return self.mapping_file.with_name(f"{self.source}.matches.csv")

    def trait_column(self, column: str) -> TraitColumn | None:
        for trait_column in self.traits:
            if trait_column.column == column:
                return trait_column
        return None


@dataclass(frozen=True)
class Limits:
    max_file_bytes: int = 20 * 1024**3
    max_cell_chars: int = 256
    max_columns: int = 5000
    batch_rows: int = 262_144


@dataclass(frozen=True)
class TemperatureCorrectionSpec:
    method: str
    reference_celsius: float
    activation_energy_ev: float = 0.65
    q10: float = 2.0


@dataclass(frozen=True)
class Project:
    root: Path
    project_file: Path | None
    name: str
    title: str
    description: str
    vocabulary: Path | None  # None: the bundled vocabulary
    mappings: tuple[Mapping, ...]
    output_folder: Path
    output_format: str = "csv"
    matching: dict[str, float] = field(default_factory=dict)
    temperature_correction: TemperatureCorrectionSpec | None = None
    taxon_synonyms: Path | None = None
    licence: str = ""
    version: str = ""
    limits: Limits = Limits()
    aggregate_individuals: tuple[str, ...] | None = (
        None  # None: off; else context keys besides taxon
    )


# ---------------------------------------------------------------- helpers for checked access


def _check_keys(data: MappingABC, allowed: tuple[str, ...], file: Path, where: str) -> None:
    for key in data:
        if key not in allowed:
            close = difflib.get_close_matches(str(key), allowed, n=1)
            hint = f"did you mean '{close[0]}'?" if close else f"allowed keys: {', '.join(allowed)}"
            raise ConfigError(f"unknown key '{key}' in {where}", file=str(file), hint=hint)


def _mapping(value: Any, file: Path, where: str) -> dict:
    if value is None:
        return {}
    if not isinstance(value, MappingABC):
        raise ConfigError(
            f"{where} must be a mapping of keys to values, got {type(value).__name__}",
            file=str(file),
        )
    return dict(value)


def _string(value: Any, file: Path, where: str, *, required: bool = False) -> str | None:
    if value is None:
        if required:
            raise ConfigError(f"missing required key '{where}'", file=str(file))
        return None
    if isinstance(value, bool) or not isinstance(value, (str, int, float)):
        raise ConfigError(f"'{where}' must be text, got {type(value).__name__}", file=str(file))
    return str(value)


def _choice(value: Any, choices: tuple[str, ...], file: Path, where: str) -> str:
    text = _string(value, file, where, required=True)
    if text not in choices:
        raise ConfigError(
            f"'{where}' is '{text}'", file=str(file), hint=f"use one of: {', '.join(choices)}"
        )
    return text


def _number(value: Any, file: Path, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"'{where}' must be a number, got {value!r}", file=str(file))
    return float(value)


def resolve_inside(root: Path, base: Path, text: str, file: Path, where: str) -> Path:
    """Resolve `text` relative to `base`; refuse URLs and anything whose real path leaves `root`."""
    if "://" in text or text.startswith(("file:", "~", "$")):
        raise UnsafePathError(
            f"'{where}' must be a relative file path, not '{text}'", file=str(file)
        )
    candidate = Path(text)
    if candidate.is_absolute():
        raise UnsafePathError(
            f"'{where}' is an absolute path '{text}'",
            file=str(file),
            hint="paths are relative to the mapping file",
        )
    resolved = Path(os.path.realpath(base / candidate))
    root_real = Path(os.path.realpath(root))
    if resolved != root_real and root_real not in resolved.parents:
        raise UnsafePathError(
            f"'{where}' points outside the project root: '{text}'",
            file=str(file),
            hint="keep sources inside the project folder (symbolic links are followed when checking)",
        )
    return resolved


# A YAML file may repeat a node through anchors and aliases (`&a` ... `*a`); a few lines of
# nested aliases stand for billions of values ("billion laughs"), which `yaml.safe_load` builds
# as shared references that explode once walked. Configuration files are small, so anything
# larger than these bounds is refused before its values are used.
YAML_MAX_BYTES = 1 << 20
YAML_MAX_EXPANDED_NODES = 1_000_000
# libyaml's safe loader reads the vocabulary about 7x faster and caps nesting depth itself
_SAFE_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def _expanded_size(root: yaml.Node) -> int:
    """Number of nodes once every alias is written out, counted without writing them out."""
    size: dict[int, int] = {}
    stack: list[tuple[yaml.Node, bool]] = [(root, False)]
    open_nodes: set[int] = set()
    while stack:
        node, children_done = stack.pop()
        key = id(node)
        if key in size:
            continue
        if isinstance(node, yaml.ScalarNode):
            size[key] = 1
            continue
        children = (
            [item for pair in node.value for item in pair]
            if isinstance(node, yaml.MappingNode)
            else list(node.value)
        )
        if children_done:
            open_nodes.discard(key)
            size[key] = 1 + sum(size[id(child)] for child in children)
            if size[key] > YAML_MAX_EXPANDED_NODES:
                return size[key]
            continue
        if key in open_nodes:  # an alias inside its own anchor: endless once written out
            return YAML_MAX_EXPANDED_NODES + 1
        open_nodes.add(key)
        stack.append((node, True))
        for child in children:
            if id(child) in open_nodes:
                return YAML_MAX_EXPANDED_NODES + 1
            stack.append((child, False))
    return size[id(root)]


def parse_yaml(text: str) -> tuple[yaml.Node | None, Any]:
    """Parse YAML with the safe loader (no tags that build objects), refusing alias bombs.

    Returns the composed node (for line numbers) and the data. Raises `yaml.YAMLError`, whose
    `problem` and `problem_mark` name the cause and the line, like any syntax error.
    """
    loader = _SAFE_LOADER(text)
    try:
        node = loader.get_single_node()
        if node is None:
            return None, None
        if _expanded_size(node) > YAML_MAX_EXPANDED_NODES:
            raise yaml.constructor.ConstructorError(
                None,
                None,
                f"anchors and aliases (&name, *name) expand to more than "
                f"{YAML_MAX_EXPANDED_NODES} values or refer to themselves; refused as an alias "
                "bomb: write the values out",
                None,
            )
        return node, loader.construct_document(node)
    except RecursionError:
        raise yaml.YAMLError("nested too deeply to read") from None
    finally:
        loader.dispose()


def read_yaml_text(path: Path, error_class: type[ConfigError] = ConfigError) -> str:
    """The text of a YAML configuration file, refused above YAML_MAX_BYTES or if not UTF-8."""
    try:
        size = path.stat().st_size
        if size > YAML_MAX_BYTES:
            raise error_class(
                f"file is {size} bytes, more than the {YAML_MAX_BYTES} allowed for a YAML file",
                file=str(path),
                hint="configuration files are small; check that this is the intended file",
            )
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise SourceNotFoundError("file not found", file=str(path)) from None
    except UnicodeDecodeError as error:
        raise error_class(
            f"not UTF-8 text ({error.reason})", file=str(path), hint="save the file as UTF-8"
        ) from None


def _load_yaml(path: Path) -> Any:
    text = read_yaml_text(path)
    try:
        return parse_yaml(text)[1]
    except yaml.YAMLError as error:
        mark = getattr(error, "problem_mark", None)
        row = mark.line + 1 if mark is not None else None
        problem = getattr(error, "problem", None) or str(error) or "invalid YAML"
        raise ConfigError(f"invalid YAML: {problem}", file=str(path), row=row) from None


# ---------------------------------------------------------------- mappings


def load_mapping(path: Path, root: Path) -> Mapping:
    """Read and validate one mapping file."""
    path = Path(path)
    data = _load_yaml(path)
    if not isinstance(data, MappingABC):
        raise ConfigError(
            "a mapping file must hold a YAML mapping (key: value lines)", file=str(path)
        )
    _check_keys(data, MAPPING_KEYS, path, "mapping")
    source = _string(data.get("source"), path, "source", required=True)
    if (
        not source
        or not all(ch.isalnum() or ch in "-_." for ch in source)
        or source != source.lower()
    ):
        raise ConfigError(
            f"source id '{source}' must be lower-case letters, digits, '-', '_' or '.'",
            file=str(path),
        )
    raw_path = _string(data.get("path"), path, "path", required=True)
    source_path = resolve_inside(root, path.parent, raw_path, path, "path")
    fmt = data.get("format") or EXTENSION_FORMATS.get(source_path.suffix.lower())
    if fmt is None:
        raise ConfigError(
            f"cannot tell the format of '{raw_path}' from its extension",
            file=str(path),
            hint=f"declare format: one of {', '.join(FORMATS)}",
        )
    fmt = _choice(fmt, FORMATS, path, "format")
    level = _choice(data.get("level"), LEVELS, path, "level")
    layout = _choice(data.get("layout", "wide"), LAYOUTS, path, "layout")

    read_data = _mapping(data.get("read"), path, "read")
    _check_keys(read_data, READ_KEYS, path, "read")
    missing = read_data.get("missing", ["", "NA"])
    if isinstance(missing, str) or not isinstance(missing, list):
        raise ConfigError(
            '\'read.missing\' must be a list of texts, e.g. ["NA", ""]', file=str(path)
        )
    delimiter = _string(read_data.get("delimiter"), path, "read.delimiter")
    if delimiter is not None and len(delimiter.replace("\\t", "\t")) != 1:
        raise ConfigError(
            f"'read.delimiter' must be one character, got {delimiter!r}", file=str(path)
        )
    decimal = _string(read_data.get("decimal"), path, "read.decimal") or "."
    if decimal not in (".", ","):
        raise ConfigError(f"'read.decimal' must be '.' or ',', got {decimal!r}", file=str(path))
    thousands = _string(read_data.get("thousands"), path, "read.thousands")
    if thousands is not None and thousands == decimal:
        raise ConfigError("'read.thousands' and 'read.decimal' must differ", file=str(path))
    encoding = _string(read_data.get("encoding"), path, "read.encoding") or "utf-8"
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
        resource=_string(read_data.get("resource"), path, "read.resource"),
    )
    if read.resource is not None and fmt != "datapackage":
        raise ConfigError(
            "'read.resource' picks a resource of a data package source",
            file=str(path),
            hint="set format: datapackage, or remove read.resource",
        )

    context_data = _mapping(data.get("context"), path, "context")
    _check_keys(context_data, CONTEXT_KEYS, path, "context")
    context: dict[str, str] = {}
    temperature = None
    for key, value in context_data.items():
        if key == "temperature":
            temperature = _temperature(value, path)
        elif value is not None:
            context[key] = _string(value, path, f"context.{key}")
    if level == "individual" and "sample_size" in context:
        raise ConfigError(
            "'context.sample_size' only applies to population-level sources", file=str(path)
        )

    traits: list[TraitColumn] = []
    traits_data = _mapping(data.get("traits"), path, "traits")
    for column, spec in traits_data.items():
        spec = _mapping(spec, path, f"traits.{column}")
        _check_keys(spec, TRAIT_KEYS, path, f"traits.{column}")
        statistic = _string(spec.get("statistic"), path, f"traits.{column}.statistic")
        if statistic is not None and statistic not in STATISTICS:
            raise ConfigError(
                f"unknown statistic '{statistic}' for column '{column}'",
                file=str(path),
                hint=f"use one of: {', '.join(STATISTICS)}",
            )
        role = _string(spec.get("role"), path, f"traits.{column}.role")
        if role is not None and role not in ROLES:
            raise ConfigError(
                f"unknown role '{role}' for column '{column}'",
                file=str(path),
                hint=f"use one of: {', '.join(ROLES)}",
            )
        traits.append(
            TraitColumn(
                column=str(column),
                trait=_string(spec.get("trait"), path, f"traits.{column}.trait"),
                unit=_string(spec.get("unit"), path, f"traits.{column}.unit"),
                statistic=statistic,
                role=role,
            )
        )

    columns = None
    if layout == "long":
        columns_data = _mapping(data.get("columns"), path, "columns")
        if not columns_data:
            raise ConfigError(
                "a long-layout mapping needs 'columns' (at least trait and value)",
                file=str(path),
                hint="e.g. columns: {trait: trait_name, value: value, unit: unit}",
            )
        _check_keys(columns_data, LONG_KEYS, path, "columns")
        columns = LongColumns(
            trait=_string(columns_data.get("trait"), path, "columns.trait", required=True),
            value=_string(columns_data.get("value"), path, "columns.value", required=True),
            unit=_string(columns_data.get("unit"), path, "columns.unit"),
            statistic=_string(columns_data.get("statistic"), path, "columns.statistic"),
            n=_string(columns_data.get("n"), path, "columns.n"),
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

    ignore = data.get("ignore") or []
    if not isinstance(ignore, list):
        raise ConfigError("'ignore' must be a list of column names", file=str(path))
    ci_level = _number(data.get("ci_level", 0.95), path, "ci_level")
    if not 0.5 <= ci_level < 1:
        raise ConfigError(f"'ci_level' must be between 0.5 and 1, got {ci_level}", file=str(path))

    return Mapping(
        source=source,
        mapping_file=path,
        path=source_path,
        format=fmt,
        level=level,
        layout=layout,
        read=read,
        citation=_string(data.get("citation"), path, "citation") or "",
        licence=_string(data.get("licence"), path, "licence") or "",
        description=_string(data.get("description"), path, "description") or "",
        context=context,
        temperature=temperature,
        traits=tuple(traits),
        columns=columns,
        ignore=tuple(str(c) for c in ignore),
        ci_level=ci_level,
        combine_groups=_combine_groups(data.get("combine_groups"), level, path),
        arrhenius_temperature=_arrhenius(
            data.get("arrhenius_temperature"), path, "arrhenius_temperature"
        ),
    )


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


def _arrhenius(value: Any, file: Path, where: str) -> float | None:
    if value is None:
        return None
    number = _number(value, file, where)
    if not 0 < number < 1e5:
        raise ConfigError(
            f"'{where}' must be a temperature in K, e.g. 8000; got {value!r}", file=str(file)
        )
    return number


def _temperature(value: Any, file: Path) -> TemperatureSpec:
    if isinstance(value, str):
        return TemperatureSpec(column=value, value=None, unit="degC")
    spec = _mapping(value, file, "context.temperature")
    _check_keys(spec, ("column", "value", "unit"), file, "context.temperature")
    column = _string(spec.get("column"), file, "context.temperature.column")
    fixed = spec.get("value")
    if (column is None) == (fixed is None):
        raise ConfigError(
            "'context.temperature' needs exactly one of 'column' or 'value'", file=str(file)
        )
    unit = _string(spec.get("unit"), file, "context.temperature.unit") or "degC"
    return TemperatureSpec(
        column=column,
        value=None if fixed is None else _number(fixed, file, "context.temperature.value"),
        unit=unit,
    )


# ---------------------------------------------------------------- project


def find_project_file(start: Path) -> Path:
    start = Path(start)
    if start.is_file():
        return start
    candidate = start / "harmonize.yaml"
    if candidate.is_file():
        return candidate
    raise SourceNotFoundError(
        "no harmonize.yaml here",
        file=str(start),
        hint="pass the project folder or its harmonize.yaml",
    )


def load_project(location: Path | str = ".") -> Project:
    """Load `harmonize.yaml` (a file, or a folder holding one) and every mapping it names."""
    project_file = find_project_file(Path(location))
    root = project_file.parent
    data = _load_yaml(project_file)
    if data is None:
        data = {}
    if not isinstance(data, MappingABC):
        raise ConfigError("the project file must hold a YAML mapping", file=str(project_file))
    _check_keys(data, PROJECT_KEYS, project_file, "project file")

    name = _string(data.get("name"), project_file, "name") or root.resolve().name.lower()
    vocabulary = None
    if data.get("vocabulary"):
        vocabulary = resolve_inside(
            root,
            root,
            _string(data["vocabulary"], project_file, "vocabulary"),
            project_file,
            "vocabulary",
        )

    patterns = data.get("mappings", ["mappings/*.yaml"])
    if isinstance(patterns, str):
        patterns = [patterns]
    mapping_files: list[Path] = []
    for pattern in patterns:
        if Path(pattern).is_absolute() or ".." in Path(pattern).parts:
            raise UnsafePathError(
                f"mapping pattern '{pattern}' must stay inside the project", file=str(project_file)
            )
        found = sorted(
            Path(p) for p in glob.glob(str(root / pattern)) if not p.endswith(".matches.csv")
        )
        mapping_files.extend(found)
    if not mapping_files:
        raise ConfigError(
            f"no mapping files match {patterns}",
            file=str(project_file),
            hint="add mappings/<source>.yaml",
        )
    mappings = tuple(load_mapping(p, root) for p in mapping_files)
    seen: dict[str, Path] = {}
    for mapping in mappings:
        if mapping.source in seen:
            raise ConfigError(
                f"source id '{mapping.source}' is also used by {seen[mapping.source].name}",
                file=str(mapping.mapping_file),
            )
        seen[mapping.source] = mapping.mapping_file

    output = _mapping(data.get("output"), project_file, "output")
    _check_keys(output, OUTPUT_KEYS, project_file, "output")
    output_folder = resolve_inside(
        root,
        root,
        _string(output.get("folder"), project_file, "output.folder") or "out",
        project_file,
        "output.folder",
    )
    output_format = _choice(
        output.get("format", "csv"), ("csv", "parquet"), project_file, "output.format"
    )

    matching = _mapping(data.get("matching"), project_file, "matching")
    _check_keys(matching, MATCHING_KEYS, project_file, "matching")
    matching = {k: _number(v, project_file, f"matching.{k}") for k, v in matching.items()}

    correction = None
    if data.get("temperature_correction"):
        spec = _mapping(data["temperature_correction"], project_file, "temperature_correction")
        _check_keys(spec, CORRECTION_KEYS, project_file, "temperature_correction")
        method = _choice(
            spec.get("method"), ("arrhenius", "q10"), project_file, "temperature_correction.method"
        )
        unit = spec.get("unit", "degC")
        reference = _number(spec.get("reference"), project_file, "temperature_correction.reference")
        if unit in ("K", "kelvin"):
            reference -= 273.15
        elif unit not in ("degC", "°C"):
            raise ConfigError(
                "'temperature_correction.unit' must be degC or K", file=str(project_file)
            )
        if "activation_energy_ev" in spec and "arrhenius_temperature" in spec:
            raise ConfigError(
                "give either 'activation_energy_ev' or 'arrhenius_temperature', not both",
                file=str(project_file),
            )
        if "activation_energy_ev" in spec:
            energy = _number(spec["activation_energy_ev"], project_file, "activation_energy_ev")
        else:
            # T_A = E / k; 8000 K is common practice without a single published source
            arrhenius = _arrhenius(
                spec.get("arrhenius_temperature", 8000.0), project_file, "arrhenius_temperature"
            )
            energy = arrhenius * 8.617333262e-5  # k in eV/K, CODATA 2018 (exact)
        correction = TemperatureCorrectionSpec(
            method=method,
            reference_celsius=reference,
            activation_energy_ev=energy,
            q10=_number(spec.get("q10", 2.0), project_file, "q10"),
        )

    synonyms = None
    if data.get("taxon_synonyms"):
        synonyms = resolve_inside(
            root,
            root,
            _string(data["taxon_synonyms"], project_file, "taxon_synonyms"),
            project_file,
            "taxon_synonyms",
        )

    limits_data = _mapping(data.get("limits"), project_file, "limits")
    _check_keys(limits_data, LIMIT_KEYS, project_file, "limits")
    limits = Limits(
        **{k: int(_number(v, project_file, f"limits.{k}")) for k, v in limits_data.items()}
    )

    return Project(
        root=root,
        project_file=project_file,
        name=name,
        title=_string(data.get("title"), project_file, "title") or name,
        description=_string(data.get("description"), project_file, "description") or "",
        vocabulary=vocabulary,
        mappings=mappings,
        output_folder=output_folder,
        output_format=output_format,
        matching=matching,
        temperature_correction=correction,
        taxon_synonyms=synonyms,
        licence=_string(data.get("licence"), project_file, "licence") or "",
        version=_string(data.get("version"), project_file, "version") or "",
        limits=limits,
        aggregate_individuals=_aggregate(data.get("aggregate_individuals"), project_file),
    )


def _aggregate(value: Any, file: Path) -> tuple[str, ...] | None:
    """`aggregate_individuals: true` or `{by: [site, sex]}`: context keys to group by besides taxon."""
    if value in (None, False):
        return None
    if value is True:
        return ("site",)
    spec = _mapping(value, file, "aggregate_individuals")
    _check_keys(spec, ("by",), file, "aggregate_individuals")
    by = spec.get("by", ["site"])
    if isinstance(by, str):
        by = [by]
    if not isinstance(by, list) or any(v not in GROUP_CONTEXT for v in by):
        raise ConfigError(
            f"'aggregate_individuals.by' must list keys among {', '.join(GROUP_CONTEXT)}",
            file=str(file),
        )
    return tuple(by)


def single_file_project(
    path: Path | str,
    *,
    level: str = "individual",
    layout: str = "wide",
    output: Path | str | None = None,
    context: dict[str, str] | None = None,
    traits: dict[str, TraitColumn] | None = None,
    columns: LongColumns | None = None,
    ignore: tuple[str, ...] = (),
    read: ReadOptions | None = None,
    temperature: TemperatureSpec | None = None,
    vocabulary: Path | None = None,
    output_format: str = "csv",
) -> Project:
    """A one-source project for a table without a mapping file (the CLI's quick mode).

    The same checks apply as for a mapping file: declared levels, layouts and statistics must be
    known, and the table must exist. The project root is the table's folder.
    """
    source_path = Path(os.path.realpath(path))
    if not source_path.is_file():
        raise SourceNotFoundError("file not found", file=str(path))
    fmt = EXTENSION_FORMATS.get(source_path.suffix.lower())
    if fmt is None:
        raise ConfigError(
            f"cannot tell the format of '{source_path.name}' from its extension",
            file=str(path),
            hint=f"use a file ending in one of {', '.join(EXTENSION_FORMATS)}",
        )
    if level not in LEVELS:
        raise ConfigError(f"level '{level}' is not one of {', '.join(LEVELS)}")
    if layout not in LAYOUTS:
        raise ConfigError(f"layout '{layout}' is not one of {', '.join(LAYOUTS)}")
    if layout == "long" and columns is None:
        raise ConfigError("a long table needs at least the trait and value columns named")
    stem = (
        "".join(ch if ch.isalnum() else "-" for ch in source_path.stem.lower()).strip("-")
        or "table"
    )
    mapping = Mapping(
        source=stem,
        mapping_file=source_path.with_name(f"{stem}.quick.yaml"),
        path=source_path,
        format=fmt,
        level=level,
        layout=layout,
        read=read or ReadOptions(),
        citation="",
        context=dict(context or {}),
        temperature=temperature,
        traits=tuple((traits or {}).values()),
        columns=columns,
        ignore=tuple(ignore),
    )
    root = source_path.parent
    return Project(
        root=root,
        project_file=None,
        name=stem,
        title=f"Harmonised {source_path.name}",
        description=f"Quick harmonisation of {source_path.name} without a mapping file.",
        vocabulary=Path(vocabulary) if vocabulary else None,
        mappings=(mapping,),
        output_folder=Path(output) if output else root / f"{stem}-harmonized",
        output_format=output_format,
    )
