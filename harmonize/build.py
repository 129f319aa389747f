"""Run a whole build: project -> sources -> names -> values -> package, then publish it safely.

This is the one public entry point a CLI or a notebook calls (`build_project`). It owns the
accounting invariant (every cell read is empty by declaration, rejected or written), writes the
package into a staging folder beside the output, validates it and only then swaps it into place,
so a failed run leaves the previous output untouched. Each stage's work lives in its own module.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from harmonize import __version__, sources, tables
from harmonize.assemble import SourcePlan, assemble_batch
from harmonize.errors import BuildError, ConfigError
from harmonize.match import MatchSettings, NameMatch, match_names, normalise_name
from harmonize.package import PackageInfo, write_package
from harmonize.package_validate import ValidationResult, validate_package
from harmonize.project import Limits, Mapping, Project
from harmonize.review import read_decisions
from harmonize.summaries import record_ids, summarise_population_cells
from harmonize.taxa import load_taxon_synonyms
from harmonize.temperature import TemperatureCorrection
from harmonize.vocab import Vocabulary, load_vocabulary

Progress = Callable[[str, dict], None]


@dataclass(frozen=True)
class SourceAccount:
    source_id: str
    rows_read: int
    cells: int
    values_written: int
    cells_rejected: int
    cells_empty: int

    @property
    def balanced(self) -> bool:
        return self.cells == self.values_written + self.cells_rejected + self.cells_empty


@dataclass(frozen=True)
class BuildReport:
    output: Path
    individual_values: int
    population_summaries: int
    rejects_by_reason: dict[str, int]
    names_needing_review: tuple[tuple[str, str], ...]  # (source, name)
    accounts: tuple[SourceAccount, ...]
    validation: ValidationResult
    vocabulary_version: str
    tables: dict[str, pd.DataFrame] = field(repr=False, default_factory=dict)

    @property
    def balanced(self) -> bool:
        return all(a.balanced for a in self.accounts)


def _settings(project: Project) -> MatchSettings:
    return MatchSettings(**project.matching) if project.matching else MatchSettings()


def _check_declared_traits(mapping: Mapping, vocabulary: Vocabulary) -> None:
    for trait_column in mapping.traits:
        if trait_column.trait is not None and trait_column.trait not in vocabulary.terms:
            try:
                vocabulary.get(trait_column.trait)
            except KeyError as error:
                hint = str(error).strip("'\"")
            else:  # pragma: no cover - get() found it after all
                hint = None
            raise ConfigError(
                f"trait '{trait_column.trait}' is not in the vocabulary",
                file=str(mapping.mapping_file),
                column=trait_column.column,
                hint=hint,
            )


def _declared_match(
    name: str, trait: str, statistic_hint: str | None, unit_hint: str | None
) -> NameMatch:
    return NameMatch(
        name=name,
        normalised=name,
        trait_id=trait,
        method="declared",
        score=100.0,
        status="accepted",
        runner_up=None,
        runner_up_score=None,
        unit_hint=unit_hint,
        statistic_hint=statistic_hint,
        note="declared in the mapping",
    )


class _SourceRun:
    """Everything gathered while one source is read."""

    def __init__(
        self,
        mapping: Mapping,
        plan: SourcePlan,
        settings: MatchSettings,
        decisions: dict,
        limits: Limits,
    ) -> None:
        self.mapping = mapping
        self.limits = limits
        self.plan = plan
        self.settings = settings
        self.decisions = decisions
        self.rows = 0
        self.cells = 0
        self.empty = 0
        self.individual: list[pd.DataFrame] = []
        self.statistic_cells: list[pd.DataFrame] = []
        self.rejects: list[pd.DataFrame] = []
        self.name_cells: Counter[str] = Counter()

    def learn_names(self, names: list[str]) -> None:
        new = [n for n in names if n not in self.plan.names]
        if not new:
            return
        declared = {tc.column: tc for tc in self.mapping.traits}
        to_match = []
        for name in new:
            spec = declared.get(name) if self.mapping.layout == "wide" else None
            if spec is not None and spec.trait:
                hints = normalise_name(name)
                self.plan.names[name] = _declared_match(
                    name, spec.trait, hints.statistic_hint, hints.unit_hint
                )
            else:
                to_match.append(name)
            if spec is not None and spec.role:
                self.plan.roles[name] = spec.role
        if to_match:
            self.plan.names.update(
                match_names(to_match, self.plan.vocabulary, self.settings, self.decisions)
            )


def _read_source(run: _SourceRun, progress: Progress | None) -> None:
    mapping = run.mapping
    for batch in sources.iter_cells(mapping, run.limits):
        cells = batch.cells
        names = cells["original_name"].astype(object).fillna("")
        run.learn_names(list(pd.unique(names)))
        run.name_cells.update(names.value_counts().to_dict())
        result = assemble_batch(cells, run.plan)
        run.rows += batch.rows
        run.cells += len(cells)
        run.empty += result.empty
        if not result.individual.empty:
            run.individual.append(result.individual)
        if not result.statistic_cells.empty:
            run.statistic_cells.append(result.statistic_cells)
        if not result.rejects.empty:
            run.rejects.append(result.rejects)
        if progress:
            progress("batch", {"source": mapping.source, "rows": run.rows})


def _individual_rows(run: _SourceRun) -> pd.DataFrame:
    if not run.individual:
        return pd.DataFrame()
    frame = pd.concat(run.individual, ignore_index=True)
    frame["source_id"] = run.mapping.source
    frame["record_id"] = record_ids(frame, run.mapping.source)
    return frame.drop(columns=["column"])


def build_tables(
    project: Project, progress: Progress | None = None
) -> tuple[dict[str, pd.DataFrame], list[SourceAccount], Vocabulary]:
    """Read every source and return the package's tables (not yet written) and the accounts."""
    vocabulary = load_vocabulary(project.vocabulary)
    settings = _settings(project)
    synonyms = load_taxon_synonyms(project.taxon_synonyms) if project.taxon_synonyms else None
    correction = None
    if project.temperature_correction is not None:
        spec = project.temperature_correction
        correction = TemperatureCorrection(
            method=spec.method,
            reference_celsius=spec.reference_celsius,
            activation_energy_ev=spec.activation_energy_ev,
            q10=spec.q10,
        )
    individual, population, rejects, matches, source_rows = [], [], [], [], []
    accounts: list[SourceAccount] = []
    for mapping in project.mappings:
        _check_declared_traits(mapping, vocabulary)
        if progress:
            progress("source", {"source": mapping.source, "path": str(mapping.path)})
        decisions = read_decisions(mapping.decisions_file, vocabulary)
        plan = SourcePlan(
            mapping=mapping,
            vocabulary=vocabulary,
            names={},
            correction=correction,
            max_cell_chars=project.limits.max_cell_chars,
            taxon_synonyms=synonyms,
        )
        run = _SourceRun(mapping, plan, settings, decisions, project.limits)
        _read_source(run, progress)

        values_frame = _individual_rows(run)
        written = len(values_frame)
        source_rejects = list(run.rejects)
        if run.statistic_cells:
            summary = summarise_population_cells(
                pd.concat(run.statistic_cells, ignore_index=True), mapping
            )
            population.append(summary.summaries)
            written += summary.cells_written
            if not summary.rejects.empty:
                source_rejects.append(summary.rejects)
        rejected_frame = (
            pd.concat(source_rejects, ignore_index=True) if source_rejects else pd.DataFrame()
        )
        if not rejected_frame.empty:
            rejected_frame["source_id"] = mapping.source
            rejects.append(rejected_frame)
        individual.append(values_frame)
        account = SourceAccount(
            source_id=mapping.source,
            rows_read=run.rows,
            cells=run.cells,
            values_written=written,
            cells_rejected=len(rejected_frame),
            cells_empty=run.empty,
        )
        accounts.append(account)
        matches.append(_name_match_rows(run))
        source_rows.append(
            {
                "source_id": mapping.source,
                "path": mapping.path.relative_to(project.root.resolve()).as_posix(),
                "format": mapping.format,
                "level": mapping.level,
                "layout": mapping.layout,
                "sha256": sources.file_sha256(mapping.path),
                "citation": mapping.citation,
                "licence": mapping.licence,
                "rows_read": account.rows_read,
                "cells": account.cells,
                "values_written": account.values_written,
                "cells_rejected": account.cells_rejected,
                "cells_empty": account.cells_empty,
            }
        )
    individual_frame = _concat(individual, tables.INDIVIDUAL_VALUES)
    population_frame = _concat(population, tables.POPULATION_SUMMARIES)
    used = sorted(
        set(individual_frame["trait_id"].dropna()) | set(population_frame["trait_id"].dropna())
    )
    result = {
        "individual_values": individual_frame,
        "population_summaries": population_frame,
        "traits": _trait_rows(vocabulary, used),
        "sources": pd.DataFrame(source_rows),
        "rejects": _concat(rejects, tables.REJECTS),
        "name_matches": _concat(matches, tables.NAME_MATCHES),
    }
    return result, accounts, vocabulary


def _concat(frames: list[pd.DataFrame], resource: tables.Resource) -> pd.DataFrame:
    frames = [f for f in frames if not f.empty]
    if not frames:
        return resource.empty_frame()
    frame = pd.concat(frames, ignore_index=True)
    keep = [c for c in resource.column_names if c in frame.columns]
    return tables.conform(frame[keep], resource)


def _name_match_rows(run: _SourceRun) -> pd.DataFrame:
    rows = []
    for name, count in run.name_cells.items():
        match = run.plan.names.get(name)
        if match is None:
            continue
        rows.append(
            {
                "source_id": run.mapping.source,
                "name": name,
                "trait_id": match.trait_id,
                "method": match.method,
                "score": match.score,
                "status": match.status,
                "runner_up": match.runner_up,
                "runner_up_score": match.runner_up_score,
                "unit_hint": match.unit_hint,
                "statistic_hint": match.statistic_hint,
                "note": match.note or None,
                "cells": count,
            }
        )
    return pd.DataFrame(rows)


def _trait_rows(vocabulary: Vocabulary, used: list[str]) -> pd.DataFrame:
    from harmonize.assemble import _unit_texts

    rows = []
    for trait_id in used:
        term = vocabulary.terms[trait_id]
        unit_text, ucum = _unit_texts(term.unit)
        rows.append(
            {
                "trait_id": term.id,
                "label": term.label,
                "definition": term.definition,
                "kind": term.kind,
                "unit": unit_text,
                "ucum": ucum,
                "role": term.role,
                "levels": ";".join(term.levels),
                "plausible_min": term.plausible[0] if term.plausible else None,
                "plausible_max": term.plausible[1] if term.plausible else None,
                "rate": bool(term.rate),
                "vocabulary_version": vocabulary.version,
            }
        )
    return pd.DataFrame(rows, columns=tables.TRAITS.column_names)


def _publish(staging: Path, output: Path) -> None:
    """Swap the validated staging folder into place; the old output survives until the swap."""
    output.parent.mkdir(parents=True, exist_ok=True)
    previous = None
    if output.exists():
        previous = output.with_name(f".{output.name}.previous-{os.getpid()}")
        os.replace(output, previous)
    try:
        os.replace(staging, output)
    except OSError:
        if previous is not None:
            os.replace(previous, output)
        raise
    if previous is not None:
        shutil.rmtree(previous, ignore_errors=True)


def build_project(
    project: Project, *, output: Path | None = None, progress: Progress | None = None
) -> BuildReport:
    """Build the project's package into its output folder (or `output`) and return the report."""
    output = Path(output) if output is not None else project.output_folder
    frames, accounts, vocabulary = build_tables(project, progress)
    unbalanced = [a for a in accounts if not a.balanced]
    if unbalanced:
        raise BuildError(
            "cell accounting does not balance for " + ", ".join(a.source_id for a in unbalanced),
            hint="this is a bug in harmonize: please report it with the mapping",
        )
    info = PackageInfo(
        name=project.name,
        title=project.title,
        description=project.description,
        version=project.version or "0.0.0",
        created=None,
        vocabulary_version=vocabulary.version,
        tool_version=__version__,
    )
    output.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{output.name}.staging-", dir=output.parent))
    try:
        if progress:
            progress("write", {"folder": str(output)})
        write_package(frames, staging, info, fmt=project.output_format)
        validation = validate_package(staging)
        if not validation.valid:
            first = validation.problems[0] if validation.problems else None
            raise BuildError(
                f"the written package does not validate ({len(validation.problems)} problems; first: "
                f"{first.resource if first else '?'}: {first.message if first else '?'})",
                hint="the previous output was left untouched",
            )
        _publish(staging, output)
    finally:
        if staging.exists():
            shutil.rmtree(staging, ignore_errors=True)
    rejects = frames["rejects"]
    review = frames["name_matches"]
    needing = review[review["status"] == "review"]
    return BuildReport(
        output=output,
        individual_values=len(frames["individual_values"]),
        population_summaries=len(frames["population_summaries"]),
        rejects_by_reason=dict(sorted(Counter(rejects["reason"].astype(str)).items())),
        names_needing_review=tuple(zip(needing["source_id"], needing["name"], strict=True)),
        accounts=tuple(accounts),
        validation=validation,
        vocabulary_version=vocabulary.version,
        tables=frames,
    )
