"""Load and validate the project file (`harmonize.yaml`) and, through `mapping_file`, its mappings.

Everything a build needs to know before reading data is checked here, with errors that name the
file and the key: unknown keys (with the closest known key as a hint), wrong types, paths that
leave the project root. Whether declared columns exist is checked by `sources` once it has read a
header. This module reads YAML only; it never opens a data file.
"""

from __future__ import annotations

import glob
import os
from collections.abc import Mapping as MappingABC
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from harmonize.config_files import (  # noqa: F401 - YAML_MAX_BYTES, parse_yaml re-exported
    YAML_MAX_BYTES,
    as_arrhenius_temperature,
    as_choice,
    as_count,
    as_mapping,
    as_number,
    as_string,
    check_keys,
    load_yaml,
    parse_yaml,
    read_yaml_text,
    resolve_inside,
)
from harmonize.errors import ConfigError, SourceNotFoundError, UnsafePathError
from harmonize.mapping_file import (  # noqa: F401 - the mapping's names, re-exported
    COMMAND_LINE,
    CONTEXT_KEYS,
    EXTENSION_FORMATS,
    FORMATS,
    GROUP_CONTEXT,
    LAYOUTS,
    LEVELS,
    ROLES,
    STATISTICS,
    LongColumns,
    Mapping,
    ReadOptions,
    TemperatureSpec,
    TraitColumn,
    checked_ci_level,
    checked_plus_minus,
    load_mapping,
)

PROJECT_KEYS = (
    "name", "title", "description", "vocabulary", "mappings", "output", "matching",
    "temperature_correction", "taxon_synonyms", "licence", "version", "limits",
    "aggregate_individuals",
)  # fmt: skip
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
    data = load_yaml(project_file)
    if data is None:
        data = {}
    if not isinstance(data, MappingABC):
        raise ConfigError("the project file must hold a YAML mapping", file=str(project_file))
    check_keys(data, PROJECT_KEYS, project_file, "project file")

    name = as_string(data.get("name"), project_file, "name") or root.resolve().name.lower()
    vocabulary = None
    if data.get("vocabulary"):
        vocabulary = resolve_inside(
            root,
            root,
            as_string(data["vocabulary"], project_file, "vocabulary"),
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

    output = as_mapping(data.get("output"), project_file, "output")
    check_keys(output, OUTPUT_KEYS, project_file, "output")
    output_folder = resolve_inside(
        root,
        root,
        as_string(output.get("folder"), project_file, "output.folder") or "out",
        project_file,
        "output.folder",
    )
    output_format = as_choice(
        output.get("format", "csv"), ("csv", "parquet"), project_file, "output.format"
    )

    matching = as_mapping(data.get("matching"), project_file, "matching")
    check_keys(matching, MATCHING_KEYS, project_file, "matching")
    matching = {k: as_number(v, project_file, f"matching.{k}") for k, v in matching.items()}

    correction = None
    if data.get("temperature_correction"):
        spec = as_mapping(data["temperature_correction"], project_file, "temperature_correction")
        check_keys(spec, CORRECTION_KEYS, project_file, "temperature_correction")
        method = as_choice(
            spec.get("method"), ("arrhenius", "q10"), project_file, "temperature_correction.method"
        )
        unit = spec.get("unit", "degC")
        reference = as_number(
            spec.get("reference"), project_file, "temperature_correction.reference"
        )
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
            energy = as_number(spec["activation_energy_ev"], project_file, "activation_energy_ev")
        else:
            # T_A = E / k; 8000 K is common practice without a single published source
            arrhenius = as_arrhenius_temperature(
                spec.get("arrhenius_temperature", 8000.0), project_file, "arrhenius_temperature"
            )
            energy = arrhenius * 8.617333262e-5  # k in eV/K, CODATA 2018 (exact)
        correction = TemperatureCorrectionSpec(
            method=method,
            reference_celsius=reference,
            activation_energy_ev=energy,
            q10=as_number(spec.get("q10", 2.0), project_file, "q10"),
        )

    synonyms = None
    if data.get("taxon_synonyms"):
        synonyms = resolve_inside(
            root,
            root,
            as_string(data["taxon_synonyms"], project_file, "taxon_synonyms"),
            project_file,
            "taxon_synonyms",
        )

    limits_data = as_mapping(data.get("limits"), project_file, "limits")
    check_keys(limits_data, LIMIT_KEYS, project_file, "limits")
    limits = Limits(**{k: as_count(v, project_file, f"limits.{k}") for k, v in limits_data.items()})

    return Project(
        root=root,
        project_file=project_file,
        name=name,
        title=as_string(data.get("title"), project_file, "title") or name,
        description=as_string(data.get("description"), project_file, "description") or "",
        vocabulary=vocabulary,
        mappings=mappings,
        output_folder=output_folder,
        output_format=output_format,
        matching=matching,
        temperature_correction=correction,
        taxon_synonyms=synonyms,
        licence=as_string(data.get("licence"), project_file, "licence") or "",
        version=as_string(data.get("version"), project_file, "version") or "",
        limits=limits,
        aggregate_individuals=_aggregate(data.get("aggregate_individuals"), project_file),
    )


def _aggregate(value: Any, file: Path) -> tuple[str, ...] | None:
    """`aggregate_individuals: true` or `{by: [site, sex]}`: context keys to group by besides taxon."""
    if value in (None, False):
        return None
    if value is True:
        return ("site",)
    spec = as_mapping(value, file, "aggregate_individuals")
    check_keys(spec, ("by",), file, "aggregate_individuals")
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
    ci_level: float = 0.95,
    plus_minus: str | None = None,
) -> Project:
    """A one-source project for a table without a mapping file (the CLI's quick mode).

    The same checks apply as for a mapping file: declared levels, layouts and statistics must be
    known, and the table must exist. The project root is the table's folder.
    """
    source_path = Path(os.path.realpath(path))
    if not source_path.is_file():
        raise SourceNotFoundError.at(path)
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
    checked_ci_level(ci_level)
    checked_plus_minus(plus_minus, level)
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
        read=read or ReadOptions(declared_in=COMMAND_LINE),
        citation="",
        context=dict(context or {}),
        temperature=temperature,
        traits=tuple((traits or {}).values()),
        columns=columns,
        ignore=tuple(ignore),
        ci_level=ci_level,
        plus_minus=plus_minus,
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
