"""Run a whole build: project -> sources -> names -> values -> package, then publish it safely.

This is the one public entry point a CLI or a notebook calls (`build_project`). It owns the
accounting invariant (every cell read is empty by declaration, rejected or written) and the order
of a build: take the output lock, read each source (or reuse its cached output when nothing it
depends on changed), write the package into a staging folder, validate it, compare it with the
previous package, swap it into place and write the change report beside it. A failed or killed
run leaves the previous output untouched. Each stage's work lives in its own module: locking and
swapping in `publish`, the per-source cache in `incremental`, the comparison in `changes`.
"""

from __future__ import annotations

import json
import shutil
from collections import Counter
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from harmonize import __version__, publish, sources, tables
from harmonize.assemble import SourcePlan, assemble_batch
from harmonize.changes import ChangeReport, compare_packages, report_text
from harmonize.errors import BuildError, ConfigError, SourceNotFoundError
from harmonize.incremental import SourceCache, default_cache_folder, source_key
from harmonize.match import MatchSettings, NameMatch, match_names, normalise_name
from harmonize.package import PackageInfo, write_package
from harmonize.package_validate import ValidationResult, validate_package
from harmonize.project import Limits, Mapping, Project
from harmonize.review import read_decisions
from harmonize.summaries import aggregate_individuals, record_ids, summarise_population_cells
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
    reused: bool = False  # taken from the cache of the previous build, not read again

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
    changes: ChangeReport | None = None
    changes_files: tuple[Path, ...] = ()  # the JSON and text change reports beside the output
    lock_taken_over: str | None = None  # who held the stale lock this build replaced
    leftovers_removed: tuple[str, ...] = ()  # staging folders etc. of killed runs

    @property
    def balanced(self) -> bool:
        return all(a.balanced for a in self.accounts)

    @property
    def reused_sources(self) -> tuple[str, ...]:
        return tuple(a.source_id for a in self.accounts if a.reused)


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


@dataclass(frozen=True)
class _BuildSettings:
    """Project-wide inputs every source is read with."""

    vocabulary: Vocabulary
    matching: MatchSettings
    taxon_synonyms: dict[str, str] | None
    correction: TemperatureCorrection | None


def _build_settings(project: Project) -> _BuildSettings:
    correction = None
    if project.temperature_correction is not None:
        spec = project.temperature_correction
        correction = TemperatureCorrection(
            method=spec.method,
            reference_celsius=spec.reference_celsius,
            activation_energy_ev=spec.activation_energy_ev,
            q10=spec.q10,
        )
    return _BuildSettings(
        vocabulary=load_vocabulary(project.vocabulary),
        matching=_settings(project),
        taxon_synonyms=(
            load_taxon_synonyms(project.taxon_synonyms) if project.taxon_synonyms else None
        ),
        correction=correction,
    )


# The frames one source contributes; they are what the cache stores per source.
_SOURCE_FRAMES = ("individual_values", "population_summaries", "rejects", "name_matches")


def _read_one_source(
    project: Project, mapping: Mapping, settings: _BuildSettings, progress: Progress | None
) -> tuple[dict[str, pd.DataFrame], SourceAccount]:
    """Read one source file and turn it into its frames and its cell account."""
    decisions = read_decisions(mapping.decisions_file, settings.vocabulary)
    plan = SourcePlan(
        mapping=mapping,
        vocabulary=settings.vocabulary,
        names={},
        correction=settings.correction,
        max_cell_chars=project.limits.max_cell_chars,
        taxon_synonyms=settings.taxon_synonyms,
    )
    run = _SourceRun(mapping, plan, settings.matching, decisions, project.limits)
    _read_source(run, progress)

    values_frame = _individual_rows(run)
    written = len(values_frame)
    source_rejects = list(run.rejects)
    population = pd.DataFrame()
    if run.statistic_cells:
        summary = summarise_population_cells(
            pd.concat(run.statistic_cells, ignore_index=True), mapping
        )
        population = summary.summaries
        written += summary.cells_written
        if not summary.rejects.empty:
            source_rejects.append(summary.rejects)
    if project.aggregate_individuals is not None and not values_frame.empty:
        # summaries computed from this source's individuals: derived rows, not cells read, so
        # they do not enter the cell account
        computed = aggregate_individuals(
            values_frame, project.aggregate_individuals, mapping.source
        )
        if not computed.empty:
            population = pd.concat(
                [f for f in (population, computed) if not f.empty], ignore_index=True
            )
    rejected_frame = (
        pd.concat(source_rejects, ignore_index=True) if source_rejects else pd.DataFrame()
    )
    if not rejected_frame.empty:
        rejected_frame["source_id"] = mapping.source
    account = SourceAccount(
        source_id=mapping.source,
        rows_read=run.rows,
        cells=run.cells,
        values_written=written,
        cells_rejected=len(rejected_frame),
        cells_empty=run.empty,
    )
    frames = {
        "individual_values": values_frame,
        "population_summaries": population,
        "rejects": rejected_frame,
        "name_matches": _name_match_rows(run),
    }
    return frames, account


def _source_row(project: Project, mapping: Mapping, sha256: str, account: SourceAccount) -> dict:
    return {
        "source_id": mapping.source,
        "path": mapping.path.relative_to(project.root.resolve()).as_posix(),
        "format": mapping.format,
        "level": mapping.level,
        "layout": mapping.layout,
        "sha256": sha256,
        "citation": mapping.citation,
        "licence": mapping.licence,
        "rows_read": account.rows_read,
        "cells": account.cells,
        "values_written": account.values_written,
        "cells_rejected": account.cells_rejected,
        "cells_empty": account.cells_empty,
    }


def _account_fields(account: SourceAccount) -> dict:
    fields = asdict(account)
    fields.pop("reused")
    return fields


def _source_checksum(mapping: Mapping) -> str:
    if not mapping.path.is_file():
        raise SourceNotFoundError(
            "source file not found",
            file=str(mapping.path),
            hint=f"path declared in {mapping.mapping_file.name}",
        )
    return sources.file_sha256(mapping.path)


def build_tables(
    project: Project,
    progress: Progress | None = None,
    *,
    cache: SourceCache | None = None,
    full: bool = False,
) -> tuple[dict[str, pd.DataFrame], list[SourceAccount], Vocabulary]:
    """Read every source and return the package's tables (not yet written) and the accounts.

    With a `cache`, a source whose file, mapping, decisions and settings are unchanged is not
    read again: its stored frames are used (`full=True` reads every source and refreshes the
    cache). Either way the tables are the same.
    """
    settings = _build_settings(project)
    vocabulary = settings.vocabulary
    contributed: dict[str, list[pd.DataFrame]] = {name: [] for name in _SOURCE_FRAMES}
    source_rows: list[dict] = []
    accounts: list[SourceAccount] = []
    for mapping in project.mappings:
        _check_declared_traits(mapping, vocabulary)
        sha256 = _source_checksum(mapping)
        key = source_key(project, mapping, sha256, vocabulary.version) if cache else ""
        cached = cache.load(mapping.source, key) if cache and not full else None
        if cached is not None:
            frames = cached.frames
            account = SourceAccount(**cached.meta["account"], reused=True)
            if progress:
                progress("source-reused", {"source": mapping.source, "path": str(mapping.path)})
        else:
            if progress:
                progress("source", {"source": mapping.source, "path": str(mapping.path)})
            frames, account = _read_one_source(project, mapping, settings, progress)
            if cache is not None:
                cache.store(mapping.source, key, frames, {"account": _account_fields(account)})
        accounts.append(account)
        source_rows.append(_source_row(project, mapping, sha256, account))
        for name in _SOURCE_FRAMES:
            contributed[name].append(frames[name])
    if cache is not None:
        cache.prune([m.source for m in project.mappings])

    individual_frame = _concat(contributed["individual_values"], tables.INDIVIDUAL_VALUES)
    population_frame = _concat(contributed["population_summaries"], tables.POPULATION_SUMMARIES)
    used = sorted(
        set(individual_frame["trait_id"].dropna()) | set(population_frame["trait_id"].dropna())
    )
    result = {
        "individual_values": individual_frame,
        "population_summaries": population_frame,
        "traits": _trait_rows(vocabulary, used),
        "sources": pd.DataFrame(source_rows),
        "rejects": _concat(contributed["rejects"], tables.REJECTS),
        "name_matches": _concat(contributed["name_matches"], tables.NAME_MATCHES),
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


def _needing_review(frames: dict[str, pd.DataFrame]) -> tuple[tuple[str, str], ...]:
    review = frames["name_matches"]
    needing = review[review["status"] == "review"]
    return tuple(zip(needing["source_id"], needing["name"], strict=True))


def changes_file_paths(output: Path) -> tuple[Path, Path]:
    """Where the change report of a build of `output` is written: beside it, not inside it,
    so the package itself stays byte-identical between builds of the same inputs."""
    return (
        output.with_name(f"{output.name}.changes.json"),
        output.with_name(f"{output.name}.changes.txt"),
    )


def build_project(
    project: Project,
    *,
    output: Path | None = None,
    progress: Progress | None = None,
    full: bool = False,
    incremental: bool | None = None,
) -> BuildReport:
    """Build the project's package into its output folder (or `output`) and return the report.

    `incremental` (default: on for projects with a project file) reuses the cached output of
    unchanged sources from `.harmonize-cache/` in the project root; `full=True` reads every
    source again and gives the same package. Raises BuildLockedError when another build holds
    the output, BuildError when the package cannot be written or does not validate.
    """
    output = Path(output) if output is not None else project.output_folder
    if incremental is None:
        incremental = project.project_file is not None
    cache = SourceCache(default_cache_folder(project)) if incremental else None
    with publish.output_lock(output) as lock:
        if lock.taken_over and progress:
            progress("lock-taken-over", {"previous_owner": lock.taken_over.describe()})
        leftovers = publish.clean_leftovers(output)
        if leftovers and progress:
            progress("leftovers-removed", {"removed": list(leftovers)})
        frames, accounts, vocabulary = build_tables(project, progress, cache=cache, full=full)
        unbalanced = [a for a in accounts if not a.balanced]
        if unbalanced:
            raise BuildError(
                "cell accounting does not balance for "
                + ", ".join(a.source_id for a in unbalanced),
                hint="this is a bug in harmonize: please report it with the mapping",
            )
        info = PackageInfo(
            name=project.name,
            title=project.title,
            description=project.description,
            version=project.version or "0.0.0",
            created=None,  # the build time goes to the change report, never into the package
            vocabulary_version=vocabulary.version,
            tool_version=__version__,
        )
        staging = publish.new_staging_folder(output)
        try:
            if progress:
                progress("write", {"folder": str(output)})
            write_package(frames, staging, info, fmt=project.output_format)
            validation = validate_package(staging)
            if progress:
                progress("validated", {"valid": validation.valid})
            if not validation.valid:
                first = validation.problems[0] if validation.problems else None
                raise BuildError(
                    f"the written package does not validate ({len(validation.problems)} problems; "
                    f"first: {first.resource if first else '?'}: {first.message if first else '?'})",
                    hint="the previous output was left untouched",
                )
            changes = compare_packages(
                output if (output / "datapackage.json").is_file() else None,
                staging,
                built_at=datetime.now(UTC).isoformat(timespec="seconds"),
                reused_sources=tuple(a.source_id for a in accounts if a.reused),
                full=full,
            )
            publish.swap_into_place(staging, output)
        finally:
            if staging.exists():
                shutil.rmtree(staging, ignore_errors=True)
        json_file, text_file = changes_file_paths(output)
        document = json.dumps(changes.to_json(), indent=2, sort_keys=True) + "\n"
        publish.write_file_atomically(json_file, document.encode("utf-8"))
        publish.write_file_atomically(text_file, ("\n".join(report_text(changes)) + "\n").encode())
        if progress:
            progress("published", {"folder": str(output)})
    rejects = frames["rejects"]
    return BuildReport(
        output=output,
        individual_values=len(frames["individual_values"]),
        population_summaries=len(frames["population_summaries"]),
        rejects_by_reason=dict(sorted(Counter(rejects["reason"].astype(str)).items())),
        names_needing_review=_needing_review(frames),
        accounts=tuple(accounts),
        validation=validation,
        vocabulary_version=vocabulary.version,
        tables=frames,
        changes=changes,
        changes_files=(json_file, text_file),
        lock_taken_over=lock.taken_over.describe() if lock.taken_over else None,
        leftovers_removed=leftovers,
    )
