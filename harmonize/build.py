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

import hashlib
import json
import shutil
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from harmonize import __version__, publish, sources, tables
from harmonize.arrow_validate import ResourceCheck, accounting_problems, check_package_arrow
from harmonize.changes import ChangeReport, compare_packages, report_text
from harmonize.errors import BuildError, SourceNotFoundError
from harmonize.incremental import SourceCache, default_cache_folder, source_key
from harmonize.ingest import (
    Progress,
    RejectSink,
    SourceAccount,
    SourceInput,
    ValueSink,
    build_settings,
    check_declared_traits,
    read_source,
)
from harmonize.lookup_tables import unit_texts  # the same unit texts the values carry
from harmonize.package import PackageInfo, ResourceWriter, schema_descriptor, write_package
from harmonize.package_validate import ValidationResult, validate_package
from harmonize.project import Limits, Mapping, Project
from harmonize.vocab import Vocabulary

__all__ = ["BuildReport", "SourceAccount", "build_project", "build_tables", "changes_file_paths"]

# A package of at most this many rows (individual values, summaries, rejects and the small
# tables) is "small": frictionless validates it row by row and the change report compares it
# with the previous build; a source of at most this many individual values (and rejects)
# keeps them in memory for the report and the cache. Larger packages are streamed to disk
# and checked column-wise with pyarrow only (frictionless reads about 35-60k rows/s:
# ECOSYSTEM-NOTES §6).
# Rejects count: a source of millions of rows that are all rejected is a large package.
SMALL_PACKAGE_ROWS = 200_000


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
    # the package's tables; `individual_values` and `rejects` are in memory only while they
    # are small (SMALL_PACKAGE_ROWS), otherwise empty here: read them from the written package
    tables: dict[str, pd.DataFrame] = field(repr=False, default_factory=dict)
    changes: ChangeReport | None = None
    changes_files: tuple[Path, ...] = ()  # the JSON and text change reports beside the output
    lock_taken_over: str | None = None  # who held the stale lock this build replaced
    leftovers_removed: tuple[str, ...] = ()  # staging folders etc. of killed runs
    frictionless_checked: bool = True  # frictionless validated it row by row (small packages)
    # no change report: a large package (see SMALL_PACKAGE_ROWS) not asked for one, or one
    # asked not to make it (`change_report=False`)
    changes_skipped: bool = False
    large: bool = False  # more rows than SMALL_PACKAGE_ROWS (values, summaries and rejects)

    @property
    def balanced(self) -> bool:
        return all(a.balanced for a in self.accounts)

    @property
    def reused_sources(self) -> tuple[str, ...]:
        return tuple(a.source_id for a in self.accounts if a.reused)


def _source_row(
    project: Project, mapping: Mapping, sha256: str, account: SourceAccount, path: str | None
) -> dict:
    return {
        "source_id": mapping.source,
        "path": path or mapping.path.relative_to(project.root.resolve()).as_posix(),
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


def _source_checksum(mapping: Mapping, limits: Limits) -> str:
    if not mapping.path.is_file():
        raise SourceNotFoundError.at(
            mapping.path, "source file", hint=f"path declared in {mapping.mapping_file.name}"
        )
    files = sources.source_files(mapping, limits)
    if len(files) == 1:
        return sources.file_sha256(files[0])
    # a descriptor and the files it names: one digest over each file's name and digest
    digest = hashlib.sha256()
    for path in files:
        digest.update(f"{path.name}\0{sources.file_sha256(path)}\n".encode())
    return digest.hexdigest()


# The frames one source contributes besides its individual values and rejects (which go to
# their sinks); the cache stores them with the values and rejects.
_GATHERED_FRAMES = ("population_summaries", "name_matches")


@dataclass
class _Gathered:
    frames: dict[str, pd.DataFrame]  # every resource but individual_values
    accounts: list[SourceAccount]
    vocabulary: Vocabulary


def _gather(
    project: Project,
    sink: ValueSink,
    reject_sink: RejectSink,
    progress: Progress | None,
    cache: SourceCache | None,
    full: bool,
    inputs: dict[str, SourceInput] | None = None,
) -> _Gathered:
    """Read (or reuse) every source, in source-id order: values go to `sink`, rejects to
    `reject_sink`, the rest is gathered into the package's other tables."""
    settings = build_settings(project)
    vocabulary = settings.vocabulary
    contributed: dict[str, list[pd.DataFrame]] = {name: [] for name in _GATHERED_FRAMES}
    source_rows: list[dict] = []
    accounts: list[SourceAccount] = []
    used: set[str] = set()
    # source-id order is the row order of individual_values (package.row_order)
    for mapping in sorted(project.mappings, key=lambda m: m.source):
        check_declared_traits(mapping, vocabulary)
        replaced = (inputs or {}).get(mapping.source)
        sha256 = replaced.sha256 if replaced else _source_checksum(mapping, project.limits)
        key = source_key(project, mapping, sha256, vocabulary.version) if cache else ""
        cached = cache.load(mapping.source, key) if cache and not full else None
        if replaced is not None:
            if progress:
                progress("source", {"source": mapping.source, "path": replaced.path})
            output = read_source(
                project,
                mapping,
                settings,
                sink,
                progress,
                stager=replaced.stager,
                reject_sink=reject_sink,
            )
            frames, account = output.frames, output.account
        elif cached is not None:
            frames = cached.frames
            account = SourceAccount(**cached.meta["account"], reused=True)
            sink.begin_source()
            sink.add(frames["individual_values"])
            sink.end_source()
            reject_sink.begin_source()
            reject_sink.add(frames["rejects"], mapping.source)
            reject_sink.end_source()
            if progress:
                progress("source-reused", {"source": mapping.source, "path": str(mapping.path)})
        else:
            if progress:
                progress("source", {"source": mapping.source, "path": str(mapping.path)})
            output = read_source(
                project, mapping, settings, sink, progress, reject_sink=reject_sink
            )
            frames, account = output.frames, output.account
            # a source too large to keep in memory is not cached: reading it again costs about
            # what copying its stored output would
            if cache is not None and output.values is not None and output.rejects is not None:
                stored = {**frames, "individual_values": output.values, "rejects": output.rejects}
                cache.store(mapping.source, key, stored, {"account": _account_fields(account)})
        accounts.append(account)
        source_rows.append(
            _source_row(project, mapping, sha256, account, replaced.path if replaced else None)
        )
        for name in _GATHERED_FRAMES:
            contributed[name].append(frames[name])
        summaries = frames["population_summaries"]
        if not summaries.empty:
            used |= set(summaries["trait_id"].dropna())
    if cache is not None:
        cache.prune([m.source for m in project.mappings])
    used |= sink.trait_ids
    # reports list sources in the project's order, whatever order they were read in
    position = {m.source: i for i, m in enumerate(project.mappings)}
    accounts.sort(key=lambda a: position[a.source_id])
    result = {
        "population_summaries": _concat(
            contributed["population_summaries"], tables.POPULATION_SUMMARIES
        ),
        "traits": _trait_rows(vocabulary, sorted(used)),
        "sources": pd.DataFrame(source_rows),
        "name_matches": _concat(contributed["name_matches"], tables.NAME_MATCHES),
    }
    return _Gathered(result, accounts, vocabulary)


def build_tables(
    project: Project,
    progress: Progress | None = None,
    *,
    cache: SourceCache | None = None,
    full: bool = False,
) -> tuple[dict[str, pd.DataFrame], list[SourceAccount], Vocabulary]:
    """Read every source and return the package's tables (in memory, not written) and the
    accounts. For notebooks, reviews and tests; `build_project` streams values to disk instead.

    With a `cache`, a source whose file, mapping, decisions and settings are unchanged is not
    read again: its stored frames are used (`full=True` reads every source and refreshes the
    cache). Either way the tables are the same.
    """
    sink = ValueSink()
    reject_sink = RejectSink()
    gathered = _gather(project, sink, reject_sink, progress, cache, full)
    values = sink.kept()
    frames = {
        "individual_values": _concat(
            [values] if values is not None else [], tables.INDIVIDUAL_VALUES
        ),
        **gathered.frames,
        "rejects": reject_sink.kept(),
    }
    return frames, gathered.accounts, gathered.vocabulary


def _concat(frames: list[pd.DataFrame], resource: tables.Resource) -> pd.DataFrame:
    frames = [f for f in frames if not f.empty]
    if not frames:
        return resource.empty_frame()
    frame = pd.concat(frames, ignore_index=True)
    keep = [c for c in resource.column_names if c in frame.columns]
    return tables.conform(frame[keep], resource)


def _trait_rows(vocabulary: Vocabulary, used: list[str]) -> pd.DataFrame:

    rows = []
    for trait_id in used:
        term = vocabulary.terms[trait_id]
        unit_text, ucum = unit_texts(term.unit)
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
    frictionless: bool | None = None,
    inputs: dict[str, SourceInput] | None = None,
    change_report: bool | None = None,
) -> BuildReport:
    """Build the project's package into its output folder (or `output`) and return the report.

    Individual values are streamed into the staging folder batch by batch, so memory stays
    bounded by the batch size (`limits.batch_rows`), not by the input. The written package is
    always checked column-wise with pyarrow (types, required, enums, keys, foreign keys, cell
    accounting); `frictionless` (default: only for small packages, SMALL_PACKAGE_ROWS) also
    validates it row by row with the frictionless library. `change_report` (default: only for small
    packages) compares the package with the previous one; a large package is compared column by
    column from the files (`changes.compare_value_files`).

    `incremental` (default: on for projects with a project file) reuses the cached output of
    unchanged sources from `.harmonize-cache/` in the project root; `full=True` reads every
    source again and gives the same package. `inputs` reads named sources from elsewhere
    (`distributed.build_partitioned`); those are never cached. Raises BuildLockedError when another build holds
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
        staging = publish.new_staging_folder(output)
        writer = reject_writer = None
        try:
            # a Parquet package's values are checked as they are written, not read back
            streamed = (
                ResourceCheck(_descriptor_of(tables.INDIVIDUAL_VALUES))
                if project.output_format == "parquet"
                else None
            )
            writer = ResourceWriter(
                tables.INDIVIDUAL_VALUES,
                staging,
                project.output_format,
                observe=streamed.add if streamed is not None else None,
            )
            reject_writer = ResourceWriter(tables.REJECTS, staging, project.output_format)
            sink = ValueSink(writer, keep_rows=SMALL_PACKAGE_ROWS)
            reject_sink = RejectSink(reject_writer, keep_rows=SMALL_PACKAGE_ROWS)
            gathered = _gather(project, sink, reject_sink, progress, cache, full, inputs)
            values_file, writer = writer.close(), None
            rejects_file, reject_writer = reject_writer.close(), None
            accounts = gathered.accounts
            unbalanced = [a for a in accounts if not a.balanced]
            if unbalanced:
                raise BuildError(
                    "cell accounting does not balance for "
                    + ", ".join(a.source_id for a in unbalanced),
                    hint="this is a bug in harmonize: please report it with the mapping",
                )
            if progress:
                progress("write", {"folder": str(output)})
            write_package(
                gathered.frames,
                staging,
                _package_info(project, gathered.vocabulary),
                fmt=project.output_format,
                written={
                    tables.INDIVIDUAL_VALUES.name: values_file,
                    tables.REJECTS.name: rejects_file,
                },
            )
            flushing = publish.flush_in_background(staging)
            package_rows = (
                values_file.rows + rejects_file.rows + sum(map(len, gathered.frames.values()))
            )
            small = package_rows <= SMALL_PACKAGE_ROWS
            run_frictionless = small if frictionless is None else frictionless
            validation = _validate(staging, run_frictionless, streamed)
            if progress:
                progress("validated", {"valid": validation.valid, "frictionless": run_frictionless})
            if not validation.valid:
                first = validation.problems[0] if validation.problems else None
                raise BuildError(
                    f"the written package does not validate ({len(validation.problems)} problems; "
                    f"first: {first.resource if first else '?'}: {first.message if first else '?'})",
                    hint="the previous output was left untouched",
                )
            changes = None
            report_changes = small if change_report is None else change_report
            if report_changes:
                changes = compare_packages(
                    output if (output / "datapackage.json").is_file() else None,
                    staging,
                    built_at=datetime.now(UTC).isoformat(timespec="seconds"),
                    reused_sources=tuple(a.source_id for a in accounts if a.reused),
                    full=full,
                    large=not small,
                )
            elif progress:
                progress("changes-skipped", {"rows": package_rows, "large": not small})
            publish.swap_into_place(staging, output, flushing)
        finally:
            for open_writer in (writer, reject_writer):
                if open_writer is not None:
                    open_writer.abort()
            if staging.exists():
                shutil.rmtree(staging, ignore_errors=True)
        changes_files: tuple[Path, ...] = ()
        if changes is not None:
            json_file, text_file = changes_file_paths(output)
            document = json.dumps(changes.to_json(), indent=2, sort_keys=True) + "\n"
            publish.write_file_atomically(json_file, document.encode("utf-8"))
            text = "\n".join(report_text(changes)) + "\n"
            publish.write_file_atomically(text_file, text.encode("utf-8"))
            changes_files = (json_file, text_file)
        if progress:
            progress("published", {"folder": str(output)})
    frames = gathered.frames
    kept = sink.kept()
    frames = {
        "individual_values": kept if kept is not None else tables.INDIVIDUAL_VALUES.empty_frame(),
        **frames,
    }
    kept_rejects = reject_sink.kept()
    frames["rejects"] = kept_rejects if kept_rejects is not None else tables.REJECTS.empty_frame()
    return BuildReport(
        output=output,
        individual_values=values_file.rows,
        population_summaries=len(frames["population_summaries"]),
        rejects_by_reason=dict(sorted(reject_sink.reasons.items())),
        names_needing_review=_needing_review(frames),
        accounts=tuple(accounts),
        validation=validation,
        vocabulary_version=gathered.vocabulary.version,
        tables=frames,
        changes=changes,
        changes_files=changes_files,
        lock_taken_over=lock.taken_over.describe() if lock.taken_over else None,
        leftovers_removed=leftovers,
        frictionless_checked=run_frictionless,
        changes_skipped=changes is None,
        large=not small,
    )


def _package_info(project: Project, vocabulary: Vocabulary) -> PackageInfo:
    return PackageInfo(
        name=project.name,
        title=project.title,
        description=project.description,
        version=project.version or "0.0.0",
        created=None,  # the build time goes to the change report, never into the package
        vocabulary_version=vocabulary.version,
        tool_version=__version__,
    )


def _descriptor_of(resource: tables.Resource) -> dict:
    return {"name": resource.name, "schema": schema_descriptor(resource)}


def _validate(
    folder: Path, frictionless: bool, streamed: ResourceCheck | None = None
) -> ValidationResult:
    """Column-wise checks and the cell accounting always; frictionless row by row on request.

    `streamed` is the check run on the individual values as they were written."""
    checked = {tables.INDIVIDUAL_VALUES.name: streamed} if streamed is not None else None
    problems = list(check_package_arrow(folder, streamed=checked).problems)
    value_rows = streamed.source_rows if streamed is not None and not streamed.done else None
    problems += accounting_problems(folder, value_rows)
    if frictionless:
        seen = set(problems)
        problems += [p for p in validate_package(folder).problems if p not in seen]
    return ValidationResult(valid=not problems, problems=tuple(problems))
