"""Read what the unit-consistency check looks at: a built package, or one raw table.

A built package is read from its `datapackage.json` with pandas/pyarrow after
`package_validate.check_paths` has refused anything that points outside the folder; frictionless
is never called on a package handed to the check. A raw table is read through the same readers
as a build (`sources`), its values parsed with `values.parse_numbers` and put in each trait's
canonical unit with `units.conversion`, once per (trait, unit) pair. Units that cannot be used
and columns that mix units become findings here; everything else is judged by
`harmonize.check.check_values`.

Left to others: the detection method (`harmonize.check`), drawing and printing.
"""

from __future__ import annotations

import json
from collections.abc import Mapping as MappingABC
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from harmonize.check import (
    GROUP_BY,
    SEVERITY,
    Accounting,
    CheckResult,
    CheckSettings,
    Finding,
    FindingKind,
    TraitInfo,
    check_values,
)
from harmonize.errors import ConfigError, RejectReason, SourceReadError
from harmonize.match import match_names
from harmonize.package_validate import check_paths
from harmonize.project import ReadOptions, single_file_project
from harmonize.sources import read_text_frame
from harmonize.units import conversion, format_unit, is_temperature
from harmonize.values import parse_numbers
from harmonize.vocab import Vocabulary, load_vocabulary

_UNIT_REASONS = {
    RejectReason.MISSING_UNIT: FindingKind.MISSING_UNIT,
    RejectReason.UNKNOWN_UNIT: FindingKind.UNPARSABLE_UNIT,
    RejectReason.AMBIGUOUS_UNIT: FindingKind.UNPARSABLE_UNIT,
    RejectReason.DIMENSION_MISMATCH: FindingKind.DIMENSION_MISMATCH,
    RejectReason.UNIT_CONFLICT: FindingKind.UNIT_CONFLICT,
}
_READERS = {".csv": pd.read_csv, ".parquet": pd.read_parquet}


def _celsius(unit: str) -> tuple[float, float] | None:
    """(scale, offset) from a temperature unit to °C; None for any other unit."""
    try:
        if not is_temperature(unit):
            return None
    except ValueError:
        return None
    to_celsius = conversion(unit, "degC")
    return (to_celsius.scale, to_celsius.offset) if to_celsius.ok else None


def _unit_name(spelling: str) -> str:
    try:
        return format_unit(spelling)
    except ValueError:
        return spelling


def _check_group_by(group_by: str) -> None:
    if group_by not in GROUP_BY:
        raise ConfigError(f"cannot group by {group_by!r}; choose one of {', '.join(GROUP_BY)}")


def _finish(subject, group_by, observations, traits, unit_findings, accounting, settings):
    observations = observations.assign(group=observations[group_by])
    findings, observations = check_values(observations, traits, group_by, settings)
    return CheckResult(
        subject=str(subject),
        group_by=group_by,
        findings=tuple(unit_findings) + tuple(findings),
        accounting=accounting,
        observations=observations,
        traits=traits,
    )


def _mixed_unit_findings(frame: pd.DataFrame, group_by: str) -> list[Finding]:
    """One note per (trait, column) holding values in more than one unit."""
    frame = frame.dropna(subset=["unit"])
    spellings = frame["unit"].astype(str)
    # 'degC', '°C' and 'C' are one unit: compare pint's reading of each distinct spelling
    frame = frame.assign(unit=spellings.map({s: _unit_name(s) for s in spellings.unique()}))
    counts = frame.groupby(["trait", "column", "unit"], sort=True).size()
    findings = []
    for (trait, column), units in counts.groupby(level=[0, 1], sort=True):
        if len(units) < 2:
            continue
        listed = ", ".join(f"{u} ({n})" for (_, _, u), n in units.items())
        findings.append(
            Finding(
                kind=FindingKind.MIXED_UNITS.value,
                severity=SEVERITY[FindingKind.MIXED_UNITS],
                trait=str(trait),
                group_by="column",
                group=str(column),
                values=int(units.sum()),
                message=f"one column holds {len(units)} units: {listed}; make sure each is right",
            )
        )
    return findings


# --------------------------------------------------------------------------- built package


def _resource_path(folder: Path, descriptor: dict, name: str) -> Path | None:
    for resource in descriptor.get("resources") or ():
        if isinstance(resource, dict) and resource.get("name") == name:
            path = resource.get("path")
            return folder / path if isinstance(path, str) else None
    return None


def _read_resource(folder: Path, descriptor: dict, name: str, columns: list[str]) -> pd.DataFrame:
    path = _resource_path(folder, descriptor, name)
    if path is None or not path.is_file():
        return pd.DataFrame(columns=columns)
    reader = _READERS.get(path.suffix.lower())
    if reader is None:
        raise SourceReadError(f"cannot read resource format {path.suffix!r}", file=path.name)
    try:
        frame = (
            reader(path, dtype_backend="pyarrow")
            if reader is pd.read_parquet
            else reader(path, dtype=str, keep_default_na=False, na_values=[""])
        )
    except (OSError, ValueError) as error:
        raise SourceReadError(f"cannot read resource {name!r}: {error}", file=path.name) from error
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise SourceReadError(f"resource {name!r} lacks columns {missing}", file=path.name)
    return frame[columns]


def check_package(
    folder: Path | str, group_by: str = "source", settings: CheckSettings | None = None
) -> CheckResult:
    """Check the values of a package written by `harmonize build`."""
    _check_group_by(group_by)
    folder = Path(folder)
    check_paths(folder)  # refuses URLs, absolute paths, '..' and escaping symlinks first
    descriptor = json.loads((folder / "datapackage.json").read_text(encoding="utf-8"))
    common = ["source_id", "taxon", "trait_id", "original_name", "original_unit"]
    individual = _read_resource(folder, descriptor, "individual_values", [*common, "value"])
    population = _read_resource(
        folder, descriptor, "population_summaries", [*common, "mean", "median"]
    )
    population = population.assign(value=population["mean"].fillna(population["median"]))
    both = pd.concat([individual, population[[*common, "value"]]], ignore_index=True)
    value = pd.to_numeric(both["value"], errors="coerce").astype("float64")
    observations = pd.DataFrame(
        {
            "trait": both["trait_id"].astype(str),
            "value": value,
            "source": both["source_id"].astype(str),
            "taxon": both["taxon"].fillna("").astype(str),
            "column": both["source_id"].astype(str) + ": " + both["original_name"].astype(str),
            "unit": both["original_unit"],
        }
    )
    numeric = observations["value"].notna().to_numpy()
    trait_rows = _read_resource(
        folder, descriptor, "traits", ["trait_id", "unit", "plausible_min", "plausible_max"]
    )
    traits = {}
    for row in trait_rows.itertuples(index=False):  # one row per trait, not per value
        low, high = pd.to_numeric(
            pd.Series([row.plausible_min, row.plausible_max]), errors="coerce"
        )
        plausible = None if pd.isna(low) or pd.isna(high) else (float(low), float(high))
        traits[row.trait_id] = TraitInfo(row.trait_id, row.unit, plausible, _celsius(row.unit))
    rejects = _read_resource(
        folder, descriptor, "rejects", ["source_id", "original_name", "raw_unit", "reason"]
    )
    unit_findings = _mixed_unit_findings(observations[numeric], group_by)
    unit_rejects = rejects[rejects["reason"].isin([r.value for r in _UNIT_REASONS])]
    for (source, name, reason), part in unit_rejects.groupby(
        ["source_id", "original_name", "reason"], sort=True, dropna=False
    ):
        kind = _UNIT_REASONS[RejectReason(reason)]
        spellings = ", ".join(sorted(part["raw_unit"].fillna("(none)").astype(str).unique())[:5])
        unit_findings.append(
            Finding(
                kind=kind.value,
                severity=SEVERITY[kind],
                trait=str(name),
                group_by="column",
                group=f"{source}: {name}",
                values=len(part),
                message=f"{len(part)} cells rejected by the build as {reason} (units: {spellings})",
            )
        )
    lines = (
        ("individual values read", len(individual)),
        ("population summaries read", len(population)),
        ("numeric values checked", int(numeric.sum())),
        ("values without a number (categories, text)", int((~numeric).sum())),
        *(
            (f"cells rejected by the build: {r}", int(n))
            for r, n in rejects["reason"].value_counts().sort_index().items()
        ),
    )
    balanced = len(both) == int(numeric.sum()) + int((~numeric).sum())
    return _finish(
        folder,
        group_by,
        observations[numeric],
        traits,
        unit_findings,
        Accounting(lines, balanced),
        settings,
    )


# --------------------------------------------------------------------------- raw table


@dataclass(frozen=True)
class TableSpec:
    """How to read a raw table without a mapping. A long table names `value_column` (and a
    `trait_column` or one `trait`); otherwise every column that is not context is a wide trait
    column, its trait declared in `traits` or matched from its header."""

    path: Path
    taxon: str | None = None
    source: str | None = None  # column whose values act as sources (e.g. a study or an island)
    value_column: str | None = None
    trait_column: str | None = None
    unit_column: str | None = None
    trait: str | None = None
    unit: str | None = None
    traits: MappingABC[str, str] = field(default_factory=dict)
    units: MappingABC[str, str] = field(default_factory=dict)
    ignore: tuple[str, ...] = ()
    read: ReadOptions = ReadOptions()


def _cells(
    spec: TableSpec, frame: pd.DataFrame, vocabulary: Vocabulary
) -> tuple[pd.DataFrame, list[str]]:
    """Long cells (row, column, name, trait, raw, unit) and the columns left unmatched."""
    for column in (spec.taxon, spec.source, spec.value_column, spec.trait_column, spec.unit_column):
        if column and column not in frame.columns:
            raise ConfigError(f"no column {column!r} in the table", file=str(spec.path))
    rows = np.arange(len(frame))
    if spec.trait and spec.trait not in vocabulary:
        raise ConfigError(
            f"no trait {spec.trait!r} in the vocabulary", hint="see `harmonize vocab search`"
        )
    if spec.value_column:
        if not (spec.trait_column or spec.trait):
            raise ConfigError("a long table needs a trait column or one trait id")
        names = (
            frame[spec.trait_column]
            if spec.trait_column
            else pd.Series(spec.trait, index=frame.index)
        )
        unit = (
            frame[spec.unit_column] if spec.unit_column else pd.Series(spec.unit, index=frame.index)
        )
        cells = pd.DataFrame(
            {
                "row": rows,
                "column": names.to_numpy(),
                "raw": frame[spec.value_column].to_numpy(),
                "unit": unit.to_numpy(),
            }
        )
        distinct = [str(n) for n in cells["column"].dropna().unique()]
        trait_of = {n: n for n in distinct if n in vocabulary}
        matches = match_names([n for n in distinct if n not in trait_of], vocabulary)
        trait_of |= {n: m.trait_id for n, m in matches.items() if m.status == "accepted"}
        cells["trait"] = cells["column"].map(trait_of)
        unmatched = sorted(set(distinct) - set(trait_of))
        return cells, unmatched
    context = {spec.taxon, spec.source, *spec.ignore}
    candidates = [c for c in frame.columns if c not in context]
    matches = match_names([c for c in candidates if c not in spec.traits], vocabulary)
    parts, unmatched = [], []
    for column in candidates:  # a loop over columns, not values
        trait = spec.traits.get(column)
        hint = None
        if trait is None:
            match = matches[column]
            trait, hint = (
                (match.trait_id, match.unit_hint) if match.status == "accepted" else (None, None)
            )
        if trait is None or vocabulary.get(trait).kind not in ("quantity", "count"):
            unmatched.append(column)
            continue
        unit = spec.units.get(column, hint)
        parts.append(
            pd.DataFrame(
                {
                    "row": rows,
                    "column": column,
                    "raw": frame[column].to_numpy(),
                    "unit": unit,
                    "trait": trait,
                }
            )
        )
    if not parts:
        raise ConfigError(
            "no column of the table matched a trait with a unit",
            file=str(spec.path),
            hint="name traits with --trait COLUMN=TRAIT_ID",
        )
    return pd.concat(parts, ignore_index=True), unmatched


def check_table(
    spec: TableSpec,
    group_by: str = "source",
    settings: CheckSettings | None = None,
    vocabulary: Vocabulary | None = None,
) -> CheckResult:
    """Check one raw table: units first (missing, unparsable, wrong dimension, mixed), then the
    values once converted to each trait's canonical unit."""
    _check_group_by(group_by)
    vocabulary = vocabulary or load_vocabulary()
    mapping = single_file_project(spec.path, read=spec.read).mappings[0]
    frame = read_text_frame(mapping)
    cells, unmatched = _cells(spec, frame, vocabulary)
    total_cells = len(cells)
    matched = cells["trait"].notna().to_numpy()
    cells = cells[matched].reset_index(drop=True)
    parsed = parse_numbers(
        cells["raw"],
        decimal=spec.read.decimal,
        thousands=spec.read.thousands,
        missing=spec.read.missing,
        declared_in=spec.read.declared_in,
    )
    number = np.isfinite(parsed.value) & pd.isna(parsed.reason)
    unit_text = cells["unit"].astype(object).where(cells["unit"].notna(), None)
    unit_text = unit_text.where(unit_text.notna(), pd.Series(parsed.unit_in_cell, dtype=object))
    pair_key = cells["trait"].astype(str) + "\x1f" + unit_text.fillna("").astype(str)
    codes, pairs = pd.factorize(pair_key)
    scale = np.empty(len(pairs))
    offset = np.empty(len(pairs))
    source_unit = np.empty(len(pairs), dtype=object)
    findings: list[Finding] = []
    usable = np.ones(len(pairs), dtype=bool)
    for i, pair in enumerate(pairs):  # one conversion per distinct (trait, unit)
        trait, raw_unit = pair.split("\x1f")
        converted = conversion(raw_unit or None, vocabulary.get(trait).unit or "dimensionless")
        scale[i], offset[i], source_unit[i] = (
            converted.scale,
            converted.offset,
            converted.source_unit or raw_unit,
        )
        if converted.ok:
            continue
        usable[i] = False
        kind = _UNIT_REASONS.get(converted.reason, FindingKind.UNPARSABLE_UNIT)
        in_pair = (codes == i) & number
        for column in sorted(cells.loc[in_pair, "column"].astype(str).unique()):
            count = int((in_pair & (cells["column"] == column).to_numpy()).sum())
            findings.append(
                Finding(
                    kind=kind.value,
                    severity=SEVERITY[kind],
                    trait=trait,
                    group_by="column",
                    group=column,
                    values=count,
                    message=f"{count} values with unit {raw_unit or '(none)'!r}: {converted.message}",
                )
            )
    good = number & usable[codes]
    taxon = frame[spec.taxon].to_numpy()[cells["row"]] if spec.taxon else np.full(len(cells), "")
    source = (
        frame[spec.source].to_numpy()[cells["row"]]
        if spec.source
        else np.full(len(cells), spec.path.name)
    )
    observations = pd.DataFrame({
        "trait": cells["trait"].astype(str), "value": parsed.value * scale[codes] + offset[codes],
        "source": pd.Series(source, dtype=object).fillna("(none)").astype(str), "taxon": pd.Series(taxon, dtype=object).fillna("").astype(str),
        "column": cells["column"].astype(str), "unit": source_unit[codes],
    })  # fmt: skip
    findings = _mixed_unit_findings(observations[good], group_by) + findings
    empty, not_number = int(parsed.empty.sum()), int((~number & ~parsed.empty).sum())
    lines = (
        ("rows read", len(frame)),
        ("trait cells", total_cells),
        ("cells whose trait name matched no vocabulary term", int((~matched).sum())),
        ("empty cells", empty),
        ("cells that are not one number", not_number),
        ("values with a unit that cannot be used", int((number & ~usable[codes]).sum())),
        ("values checked", int(good.sum())),
        ("columns or trait names not checked", len(unmatched)),
    )
    balanced = total_cells == int((~matched).sum()) + empty + not_number + int(number.sum())
    seen = set(observations["trait"].unique())
    traits = {
        t.id: TraitInfo(t.id, t.unit or "dimensionless", t.plausible, _celsius(t.unit or ""))
        for t in vocabulary
        if t.id in seen
    }
    return _finish(
        spec.path,
        group_by,
        observations[good],
        traits,
        findings,
        Accounting(lines, balanced),
        settings,
    )
