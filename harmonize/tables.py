"""The output data model: every resource of the data package, its columns, types and meaning.

This module is the single place where output column names are defined. The build fills frames
with exactly these columns (in this order); the package writer turns the same definitions into
Frictionless field descriptors. It holds no logic beyond describing and ordering columns.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from harmonize import stats


@dataclass(frozen=True)
class Column:
    name: str
    type: str  # Frictionless type: string | integer | number | boolean | date
    description: str
    required: bool = False
    enum: tuple[str, ...] = ()
    # Text from a small closed set (vocabulary ids, units, roles, methods, flags): the build
    # carries it coded, and the Parquet writer takes its dictionary as it is (package.py).
    coded: bool = False


@dataclass(frozen=True)
class Resource:
    name: str
    title: str
    description: str
    columns: tuple[Column, ...]
    primary_key: tuple[str, ...]
    foreign_keys: tuple[tuple[tuple[str, ...], str, tuple[str, ...]], ...] = ()

    @property
    def column_names(self) -> list[str]:
        return [c.name for c in self.columns]

    def empty_frame(self) -> pd.DataFrame:
        return pd.DataFrame(
            {c.name: pd.Series([], dtype=PANDAS_DTYPES[c.type]) for c in self.columns}
        )


PANDAS_DTYPES = {
    "string": "string",
    "integer": "Int64",
    "number": "float64",
    "boolean": "boolean",
    "date": "string",
}

ROLES = ("parameter", "threshold", "structure", "estimation", "forcing", "descriptive")
MATCH_METHODS = ("exact", "synonym", "fuzzy", "manual", "declared", "unmatched", "rejected")
SD_METHODS = stats.SD_METHODS
MEAN_METHODS = stats.MEAN_METHODS

_PROVENANCE = (
    Column("source_id", "string", "Source the value came from (see `sources`).", required=True),
    Column(
        "source_row",
        "integer",
        "Data row in the source file, counting from 1 (header not counted).",
        required=True,
    ),
)
_CONTEXT = (
    Column("taxon_verbatim", "string", "Taxon name exactly as written in the source."),
    Column(
        "taxon",
        "string",
        "Cleaned taxon name (genus capitalised, authority removed, user synonyms applied).",
    ),
    Column(
        "taxon_qualifier",
        "string",
        "Open-nomenclature qualifier kept from the name (cf., aff., sp.).",
        coded=True,
    ),
    Column("sex", "string", "Sex as given."),
    Column("life_stage", "string", "Life stage as given."),
    Column("site", "string", "Site or locality as given."),
    Column("date", "string", "Date of the record as given."),
)
_TRAIT = (
    Column(
        "trait_id",
        "string",
        "Vocabulary id of the trait (see `traits`).",
        required=True,
        coded=True,
    ),
    Column(
        "role",
        "string",
        "Role of the trait in an energy/mass-budget model for this source.",
        required=True,
        enum=ROLES,
        coded=True,
    ),
    Column(
        "unit",
        "string",
        "Canonical unit of the trait (pint text); empty for categories.",
        coded=True,
    ),
    Column("ucum", "string", "The canonical unit as a UCUM code.", coded=True),
)
_ORIGINAL = (
    Column(
        "original_name",
        "string",
        "Trait name or column header as written in the source.",
        required=True,
    ),
    Column(
        "original_unit",
        "string",
        "Unit as written in the source (mapping, cell or header).",
        coded=True,
    ),
    Column(
        "unit_origin",
        "string",
        "Where the source unit came from.",
        enum=("mapping", "cell", "name-hint", "none"),
        coded=True,
    ),
    Column(
        "match_method",
        "string",
        "How the trait name was matched.",
        required=True,
        enum=MATCH_METHODS,
        coded=True,
    ),
    Column(
        "match_score", "number", "Match score 0-100 (100 for exact, synonym, declared and manual)."
    ),
)
_TEMPERATURE = (
    Column(
        "measurement_temperature",
        "number",
        "Temperature at which a rate was measured, in degC.",
    ),
    Column(
        "temperature_correction",
        "string",
        "Correction applied to a rate (e.g. `arrhenius E=0.65 eV to 20 degC`); empty when the value is as measured.",
    ),
)
_FLAGS = (
    Column(
        "flags",
        "string",
        "Semicolon-separated warnings a reviewer should see (e.g. outside-plausible-range, qualifier:<, "
        "unit-alias:C->degC, sd-estimated). Flags never change the value.",
        coded=True,
    ),
)

INDIVIDUAL_VALUES = Resource(
    name="individual_values",
    title="Individual measurements",
    description="One row per measured value of one individual organism, in the trait's canonical unit.",
    columns=(
        Column(
            "record_id", "string", "Stable hash of source, row, column and trait.", required=True
        ),
        *_PROVENANCE,
        *_CONTEXT,
        Column("individual_id", "string", "Identifier of the individual as given."),
        *_TRAIT,
        Column(
            "value",
            "number",
            "Value in the canonical unit (empty for categories; a converted value is rounded to 15 significant digits); temperature-corrected where temperature_correction says so.",
        ),
        Column(
            "value_as_measured",
            "number",
            "For a temperature-corrected rate: the value in the canonical unit before correction.",
        ),
        Column(
            "correction_factor",
            "number",
            "For a temperature-corrected rate: value = value_as_measured x correction_factor.",
        ),
        Column("value_text", "string", "Category or text value (for category and text traits)."),
        Column("qualifier", "string", "Qualifier given with the number (<, >, <=, >=, ~)."),
        Column("original_value", "string", "Cell exactly as written.", required=True),
        *_ORIGINAL,
        *_TEMPERATURE,
        *_FLAGS,
    ),
    primary_key=("record_id",),
    foreign_keys=(
        (("trait_id",), "traits", ("trait_id",)),
        (("source_id",), "sources", ("source_id",)),
    ),
)

POPULATION_SUMMARIES = Resource(
    name="population_summaries",
    title="Population summaries",
    description=(
        "One row per population x trait summary (species means and dispersion), with statistics in the "
        "trait's canonical unit. Kept apart from individual values; never mix the two."
    ),
    columns=(
        Column("record_id", "string", "Stable hash of source, row(s) and trait.", required=True),
        *_PROVENANCE,
        *_CONTEXT,
        *_TRAIT,
        Column("n", "integer", "Sample size."),
        Column("mean", "number", "Mean (estimated from the median where mean_method says so)."),
        Column("sd", "number", "Standard deviation (see sd_method: estimates are labelled)."),
        Column("se", "number", "Standard error of the mean."),
        Column("min", "number", "Minimum."),
        Column("max", "number", "Maximum."),
        Column("median", "number", "Median."),
        Column("q1", "number", "First quartile."),
        Column("q3", "number", "Third quartile."),
        Column("ci_low", "number", "Lower confidence limit of the mean."),
        Column("ci_high", "number", "Upper confidence limit of the mean."),
        Column("ci_level", "number", "Confidence level of the interval (e.g. 0.95)."),
        Column("variance", "number", "Variance, in the square of the unit."),
        Column("cv", "number", "Coefficient of variation as a fraction (unit-free)."),
        Column(
            "value_text",
            "string",
            "Category value for category traits (e.g. thermoregulatory mode).",
        ),
        Column("sd_method", "string", "How sd was obtained.", enum=SD_METHODS),
        Column(
            "mean_method",
            "string",
            "How mean was obtained (given, or estimated from median).",
            enum=MEAN_METHODS,
        ),
        Column(
            "correction_factor",
            "number",
            "For temperature-corrected rates: factor applied to every statistic but n and cv (variance: its square).",
        ),
        *_ORIGINAL,
        *_TEMPERATURE,
        *_FLAGS,
    ),
    primary_key=("record_id",),
    foreign_keys=(
        (("trait_id",), "traits", ("trait_id",)),
        (("source_id",), "sources", ("source_id",)),
    ),
)

TRAITS = Resource(
    name="traits",
    title="Traits",
    description="The vocabulary entries used in this package.",
    columns=(
        Column("trait_id", "string", "Stable vocabulary id.", required=True),
        Column("label", "string", "Human label.", required=True),
        Column("definition", "string", "Definition in the vocabulary's words."),
        Column("kind", "string", "quantity, count, category or text.", required=True),
        Column("unit", "string", "Canonical unit (pint text)."),
        Column("ucum", "string", "Canonical unit as a UCUM code."),
        Column(
            "role",
            "string",
            "Default role in an energy/mass-budget model.",
            required=True,
            enum=ROLES,
        ),
        Column("levels", "string", "Allowed levels, semicolon-separated."),
        Column("plausible_min", "number", "Lower end of the plausible range (canonical unit)."),
        Column("plausible_max", "number", "Upper end of the plausible range (canonical unit)."),
        Column("rate", "boolean", "True for temperature-dependent rates."),
        Column("vocabulary_version", "string", "Hash of the vocabulary files used."),
    ),
    primary_key=("trait_id",),
)

SOURCES = Resource(
    name="sources",
    title="Sources",
    description="Every input table, with its checksum and the accounting of its cells.",
    columns=(
        Column("source_id", "string", "Source id from the mapping.", required=True),
        Column("path", "string", "Path of the input relative to the project root.", required=True),
        Column("format", "string", "csv, tsv or parquet.", required=True),
        Column("level", "string", "individual or population.", required=True),
        Column("layout", "string", "wide or long.", required=True),
        Column(
            "sha256",
            "string",
            "SHA-256 of the input file; for an unpacked archive or a Data Package, one SHA-256 "
            "over the name and SHA-256 of the descriptor and of each data file it names.",
            required=True,
        ),
        Column("citation", "string", "How to cite the source."),
        Column("licence", "string", "Licence of the source."),
        Column("rows_read", "integer", "Data rows read.", required=True),
        Column(
            "cells",
            "integer",
            "Trait cells considered (rows x trait columns, or long rows).",
            required=True,
        ),
        Column("values_written", "integer", "Cells that became output values.", required=True),
        Column("cells_rejected", "integer", "Cells in `rejects`.", required=True),
        Column(
            "cells_empty",
            "integer",
            "Cells empty by declaration (missing-value tokens).",
            required=True,
        ),
    ),
    primary_key=("source_id",),
)

REJECTS = Resource(
    name="rejects",
    title="Rejected cells",
    description="Every cell that could not be used, with a stable reason code and a message naming the fix.",
    columns=(
        Column("source_id", "string", "Source id.", required=True),
        Column("source_row", "integer", "Data row in the source, counting from 1.", required=True),
        Column("column", "string", "Source column of the cell.", required=True),
        Column("original_name", "string", "Trait name as written."),
        Column("raw_value", "string", "Cell as written."),
        Column("raw_unit", "string", "Unit as written."),
        Column("reason", "string", "Stable reason code.", required=True),
        Column("message", "string", "What is wrong and how to fix it.", required=True),
    ),
    primary_key=("source_id", "source_row", "column"),
    foreign_keys=((("source_id",), "sources", ("source_id",)),),
)

NAME_MATCHES = Resource(
    name="name_matches",
    title="Trait-name matches",
    description="Every trait name seen in every source and what it was matched to.",
    columns=(
        Column("source_id", "string", "Source id.", required=True),
        Column("name", "string", "Name as written.", required=True),
        Column("trait_id", "string", "Matched vocabulary id (empty when not matched)."),
        Column("method", "string", "How it was matched.", required=True, enum=MATCH_METHODS),
        Column("score", "number", "Score 0-100."),
        Column(
            "status",
            "string",
            "accepted, review or rejected.",
            required=True,
            enum=("accepted", "review", "rejected"),
        ),
        Column("runner_up", "string", "Second-best trait when the margin was small."),
        Column("runner_up_score", "number", "Score of the runner-up."),
        Column("unit_hint", "string", "Unit found in the name."),
        Column("statistic_hint", "string", "Statistic found in the name."),
        Column("note", "string", "Why (margin, ambiguity, decision)."),
        Column("cells", "integer", "Cells carrying this name."),
    ),
    primary_key=("source_id", "name"),
    foreign_keys=((("source_id",), "sources", ("source_id",)),),
)

RESOURCES: tuple[Resource, ...] = (
    INDIVIDUAL_VALUES,
    POPULATION_SUMMARIES,
    TRAITS,
    SOURCES,
    REJECTS,
    NAME_MATCHES,
)
BY_NAME = {r.name: r for r in RESOURCES}


def conform(frame: pd.DataFrame, resource: Resource) -> pd.DataFrame:
    """Return `frame` with exactly the resource's columns, in order and with its dtypes.

    Missing columns are added empty; extra columns are an error (a build bug, not a data problem).
    """
    extra = set(frame.columns) - set(resource.column_names)
    if extra:
        raise ValueError(f"{resource.name}: unexpected columns {sorted(extra)}")
    out = {}
    for column in resource.columns:
        dtype = PANDAS_DTYPES[column.type]
        if column.name in frame.columns:
            out[column.name] = frame[column.name].astype(dtype)
        else:
            out[column.name] = pd.Series(None, index=frame.index, dtype=dtype)
    return pd.DataFrame(out, index=frame.index).reset_index(drop=True)
