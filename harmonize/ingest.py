"""Read one source through the per-value stages: cells -> names -> values -> output rows.

`read_source` streams a source's trait cells batch by batch (`sources.iter_cells`), learns its
trait names once per distinct name (`match`), assembles each batch (`assemble`) and hands the
batch's individual values, in row order, to a `ValueSink`; population statistic cells, rejects
and name matches are gathered per source (they are small next to the values) and summarised at
the end (`summaries`). The sink decides where values go: into a resource file being written
(a streamed build: memory bounded by the batch size) and/or into memory (small builds, the
cache, aggregation). Taking the output lock, caching, writing the package and validating it are
left to `build`; running this per partition on a cluster is left to `distributed`.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Iterator
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from harmonize import sources, tables
from harmonize.ahead import ahead
from harmonize.assemble import SourcePlan, assemble_batch
from harmonize.cells import CellBatch
from harmonize.errors import ConfigError
from harmonize.match import MatchSettings, NameMatch, match_names, normalise_name
from harmonize.package import (
    ResourceWriter,
    frame_of_table,
    prepare_frame,
    prepare_table,
    sorted_rows,
)
from harmonize.project import Mapping, Project
from harmonize.review import read_decisions
from harmonize.summaries import (
    aggregate_individuals,
    record_ids_of_table,
    summarise_population_cells,
)
from harmonize.taxa import load_taxon_synonyms
from harmonize.temperature import TemperatureCorrection
from harmonize.text_columns import Coded
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
class BuildSettings:
    """Project-wide inputs every source is read with."""

    vocabulary: Vocabulary
    matching: MatchSettings
    taxon_synonyms: dict[str, str] | None
    correction: TemperatureCorrection | None


def build_settings(project: Project) -> BuildSettings:
    correction = None
    if project.temperature_correction is not None:
        spec = project.temperature_correction
        correction = TemperatureCorrection(
            method=spec.method,
            reference_celsius=spec.reference_celsius,
            activation_energy_ev=spec.activation_energy_ev,
            q10=spec.q10,
        )
    return BuildSettings(
        vocabulary=load_vocabulary(project.vocabulary),
        matching=MatchSettings(**project.matching) if project.matching else MatchSettings(),
        taxon_synonyms=(
            load_taxon_synonyms(project.taxon_synonyms) if project.taxon_synonyms else None
        ),
        correction=correction,
    )


def check_declared_traits(mapping: Mapping, vocabulary: Vocabulary) -> None:
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
                file=mapping.declared_at,
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


def new_plan(project: Project, mapping: Mapping, settings: BuildSettings) -> SourcePlan:
    return SourcePlan(
        mapping=mapping,
        vocabulary=settings.vocabulary,
        names={},
        correction=settings.correction,
        max_cell_chars=project.limits.max_cell_chars,
        taxon_synonyms=settings.taxon_synonyms,
    )


def learn_names(
    plan: SourcePlan, names: list[str], settings: BuildSettings, decisions: dict
) -> None:
    """Match the names the plan has not seen yet (each distinct name once per source)."""
    mapping = plan.mapping
    new = [n for n in names if n not in plan.names]
    if not new:
        return
    declared = {tc.column: tc for tc in mapping.traits}
    to_match = []
    for name in new:
        spec = declared.get(name) if mapping.layout == "wide" else None
        if spec is not None and spec.trait:
            hints = normalise_name(name)
            plan.names[name] = _declared_match(
                name, spec.trait, hints.statistic_hint, hints.unit_hint
            )
        else:
            to_match.append(name)
        if spec is not None and spec.role:
            plan.roles[name] = spec.role
    if to_match:
        plan.names.update(match_names(to_match, plan.vocabulary, settings.matching, decisions))


def individual_rows(table: pa.Table, source_id: str) -> pa.Table:
    """A batch's individual values as output rows, prepared for writing: in source-row order
    (cells of one row in the order given), with source id and record id, without the internal
    column name."""
    rows = table["source_row"].to_numpy()
    if len(rows) > 1 and (np.diff(rows) < 0).any():
        table = table.take(pa.array(np.argsort(rows, kind="stable")))
    ids = record_ids_of_table(table, source_id)
    table = table.drop_columns(["column"])
    table = table.append_column(
        "source_id", pa.repeat(pa.scalar(source_id, pa.string()), len(table))
    )
    table = table.append_column("record_id", ids)
    return prepare_table(table, tables.INDIVIDUAL_VALUES)


def name_counts(names: pd.Series) -> dict[str, int]:
    """Cells per trait name (a missing name counts as '')."""
    counts: Counter[str] = Counter()
    for name, count in names.value_counts(dropna=False).items():
        if count:
            counts["" if pd.isna(name) else str(name)] += int(count)
    return dict(counts)


class _KeptFrames:
    """Frames a sink keeps in memory: per source while the source has at most `keep_rows` rows
    (or always, when the source asks to be kept), and for the whole build while it has at most
    `keep_rows` in all; `keep_rows=None` keeps everything (the in-memory build)."""

    def __init__(self, keep_rows: int | None, resource: tables.Resource) -> None:
        self.keep_rows = keep_rows
        self.resource = resource
        self.rows = 0
        self._all: list[pd.DataFrame] | None = []
        self._source: list[pd.DataFrame] | None = []
        self._source_rows = 0
        self._keep_source = False

    def _within(self, rows: int) -> bool:
        return self.keep_rows is None or rows <= self.keep_rows

    def begin_source(self, keep: bool = False) -> None:
        """Start a source; `keep=True` keeps its rows whatever their number."""
        self._source, self._source_rows, self._keep_source = [], 0, keep

    def _count(self, rows: int) -> tuple[bool, bool]:
        """Count rows taken; whether they are kept for the source and for the build."""
        self.rows += rows
        self._source_rows += rows
        keep_source = self._source is not None and (
            self._keep_source or self._within(self._source_rows)
        )
        return keep_source, self._all is not None and self._within(self.rows)

    def _keep(self, frame: pd.DataFrame, keep_source: bool, keep_all: bool) -> None:
        if self._source is not None:
            self._source = self._source if keep_source else None
        if self._all is not None:
            self._all = self._all if keep_all else None
        for kept in (self._source, self._all):
            if kept is not None:
                kept.append(frame)

    @property
    def source_rows(self) -> int:
        """Rows taken from the source being read."""
        return self._source_rows

    def end_source(self) -> pd.DataFrame | None:
        """The rows of the source just read, or None when too many were read to keep."""
        kept, self._source = self._source, []
        if kept is None:
            return None
        return pd.concat(kept, ignore_index=True) if kept else self.resource.empty_frame()

    def kept(self) -> pd.DataFrame | None:
        """Every row taken so far, or None when there were too many to keep."""
        if self._all is None:
            return None
        return pd.concat(self._all, ignore_index=True) if self._all else self.resource.empty_frame()


class ValueSink(_KeptFrames):
    """Takes a build's individual values batch by batch, in the package's row order.

    With a `writer`, every batch is written at once (a streamed build). Values are also kept in
    memory (`_KeptFrames`: per source for the cache and for aggregation, for the build for its
    report).
    """

    def __init__(self, writer: ResourceWriter | None = None, keep_rows: int | None = None):
        super().__init__(keep_rows, tables.INDIVIDUAL_VALUES)
        self.writer = writer
        self.trait_ids: set[str] = set()  # traits met in the values (for the `traits` table)

    def add(self, frame: pd.DataFrame | pa.Table, *, prepared: bool = False) -> None:
        """Take a batch of values: a frame (`prepared`: it went through
        `package.prepare_frame`) or an Arrow table from `individual_rows`."""
        if len(frame) == 0:
            return
        if isinstance(frame, pd.DataFrame) and not prepared:
            frame = prepare_frame(frame, tables.INDIVIDUAL_VALUES)
        if self.writer is not None:
            self.writer.write(frame)
        if isinstance(frame, pa.Table):
            traits = frame["trait_id"].combine_chunks()
            if pa.types.is_dictionary(traits.type):  # the texts its codes use
                traits = traits.dictionary.take(pc.unique(traits.indices))
            traits = pc.unique(traits).drop_null().to_pylist()
        else:
            traits = frame["trait_id"].dropna().unique()
        self.trait_ids.update(str(t) for t in traits)
        keep_source, keep_all = self._count(len(frame))
        if (keep_source or keep_all) and isinstance(frame, pa.Table):
            frame = frame_of_table(frame)  # pandas only for values that are kept
        self._keep(frame, keep_source, keep_all)


class RejectSink(_KeptFrames):
    """Takes a build's rejects source by source, in the package's row order.

    With a `writer`, rejects are written as they come, so a source whose millions of cells are
    all rejected is not held in memory. Each frame is sorted by the rejects' key (source row,
    column) before it is taken: a source's frames must cover increasing, disjoint row ranges
    (the batches of an individual-level source), or be the whole source at once. Rejects are
    also kept in memory (`_KeptFrames`: per source for the cache, for the build for its report).
    """

    def __init__(self, writer: ResourceWriter | None = None, keep_rows: int | None = None):
        super().__init__(keep_rows, tables.REJECTS)
        self.writer = writer
        self.reasons: Counter[str] = Counter()

    def add(self, frame: pd.DataFrame, source_id: str) -> None:
        if frame.empty:
            return
        frame = prepare_frame(frame.assign(source_id=source_id), tables.REJECTS)
        frame = sorted_rows(frame, tables.REJECTS)
        if self.writer is not None:
            self.writer.write(frame)
        self.reasons.update(frame["reason"].value_counts().to_dict())
        self._keep(frame, *self._count(len(frame)))


@dataclass(frozen=True)
class SourceOutput:
    """What one source contributes besides the values handed to the sink."""

    frames: dict[str, pd.DataFrame]  # population_summaries, name_matches
    values: pd.DataFrame | None  # its individual values if the sink kept them
    rejects: pd.DataFrame | None  # its rejects if the reject sink kept them
    account: SourceAccount


@dataclass(frozen=True)
class StagedBatch:
    """One batch of a source after every per-value stage: what the driver of a build gathers.

    Made by `stage_batch`, on this machine or on a worker of a cluster (`distributed`)."""

    individual: pa.Table  # output rows in row order, prepared for writing (`prepare_table`)
    statistic_cells: pd.DataFrame
    rejects: pd.DataFrame
    rows: int
    cells: int
    empty: int
    name_cells: dict[str, int]
    fraction_read: float | None = None


def stage_batch(
    batch: CellBatch, plan: SourcePlan, fraction_read: float | None = None
) -> StagedBatch:
    """Assemble one batch of cells whose names the plan already knows (see `learn_names`)."""
    cells = batch.cells
    result = assemble_batch(cells, plan)
    individual = result.individual
    if individual.num_rows:
        individual = individual_rows(individual, plan.mapping.source)
    return StagedBatch(
        individual=individual,
        statistic_cells=result.statistic_cells,
        rejects=result.rejects,
        rows=batch.rows,
        cells=len(cells),
        empty=result.empty,
        name_cells=name_counts(cells["original_name"]),
        fraction_read=fraction_read if fraction_read is not None else batch.fraction_read,
    )


Stager = Callable[[SourcePlan], Iterator[StagedBatch]]


def _local_stager(project: Project, settings: BuildSettings, decisions: dict) -> Stager:
    """Read the source's file here, batch by batch, learning new names as they appear."""

    def staged(plan: SourcePlan) -> Iterator[StagedBatch]:
        # the next batch is read and reshaped on a thread while this one is assembled
        for batch in ahead(sources.iter_cells(plan.mapping, project.limits), name="reader"):
            names = Coded.of(batch.cells["original_name"])
            distinct = names.texts[pd.unique(names.codes)]  # in order of first appearance
            learn_names(plan, ["" if n is None else n for n in distinct], settings, decisions)
            for part in cell_slices(batch):
                yield stage_batch(part, plan)

    return staged


# Cells assembled at once: slicing a read batch bounds memory whatever `limits.batch_rows` is.
# Each slice pays a fixed cost of a few thousand array operations, so larger slices are faster
# (5M-row benchmark, main-thread CPU: 262,144-cell slices 11.3 s at a peak of 785 MiB,
# 65,536-cell slices 14.0 s at 669 MiB).
CELLS_PER_STAGE = 262_144


def cell_slices(batch: CellBatch, size: int = CELLS_PER_STAGE) -> Iterator[CellBatch]:
    """A batch's cells in slices of at most `size`, in source-row order (so that each slice's
    output rows follow the previous slice's); the batch's row count goes with the first."""
    cells = batch.cells
    if len(cells) <= size:
        yield batch
        return
    rows = cells["source_row"].to_numpy()
    if (np.diff(rows) < 0).any():  # wide tables give cells column by column
        cells = cells.iloc[np.argsort(rows, kind="stable")].reset_index(drop=True)
    for start in range(0, len(cells), size):
        yield CellBatch(
            cells=cells.iloc[start : start + size].reset_index(drop=True),
            rows=batch.rows if start == 0 else 0,
            fraction_read=batch.fraction_read,
        )


@dataclass(frozen=True)
class SourceInput:
    """A source's data read from somewhere other than its declared file, with the same mapping
    (e.g. a partitioned copy of it, staged on a cluster by `distributed`)."""

    path: str  # recorded in `sources.path`, relative to the project root
    sha256: str  # recorded in `sources.sha256`
    stager: Callable[[Project, BuildSettings, dict], Stager]


def read_source(
    project: Project,
    mapping: Mapping,
    settings: BuildSettings,
    sink: ValueSink,
    progress: Progress | None = None,
    stager: Callable[[Project, BuildSettings, dict], Stager] | None = None,
    reject_sink: RejectSink | None = None,
) -> SourceOutput:
    """Read one source; its values go to `sink` and its rejects to `reject_sink` (default:
    kept in memory), the rest comes back with its account.

    `stager` makes the staged batches (default: read the file here); the distributed path
    passes one that stages partitions of a dataset on a cluster."""
    decisions = read_decisions(mapping.decisions_file, settings.vocabulary)
    plan = new_plan(project, mapping, settings)
    staged = (stager or _local_stager)(project, settings, decisions)
    sink.begin_source(keep=project.aggregate_individuals is not None)
    reject_sink = reject_sink if reject_sink is not None else RejectSink()
    reject_sink.begin_source()
    # An individual-level source's rejects go out batch by batch (batches are increasing row
    # ranges); a population source's are held, as its statistic cells are: summarising them
    # rejects more cells, anywhere in the source, at its end.
    streamed = mapping.level == "individual"
    rows = cells_total = empty = 0
    statistic_cells: list[pd.DataFrame] = []
    rejects: list[pd.DataFrame] = []
    name_cells: Counter[str] = Counter()
    for batch in staged(plan):
        name_cells.update(batch.name_cells)
        rows += batch.rows
        cells_total += batch.cells
        empty += batch.empty
        sink.add(batch.individual, prepared=True)
        if not batch.statistic_cells.empty:
            statistic_cells.append(batch.statistic_cells)
        if streamed:
            reject_sink.add(batch.rejects, mapping.source)
        elif not batch.rejects.empty:
            rejects.append(batch.rejects)
        if progress:
            progress(
                "batch",
                {"source": mapping.source, "rows": rows, "fraction": batch.fraction_read},
            )
    if progress:  # the last word on the source: all of it read
        progress("source-read", {"source": mapping.source, "rows": rows, "fraction": 1.0})
    values = sink.end_source()
    written = sink.source_rows
    population, summary_rejects, summary_written = _population(
        project, mapping, statistic_cells, values
    )
    written += summary_written
    if rejects or summary_rejects:
        reject_sink.add(pd.concat(rejects + summary_rejects, ignore_index=True), mapping.source)
    account = SourceAccount(
        source_id=mapping.source,
        rows_read=rows,
        cells=cells_total,
        values_written=written,
        cells_rejected=reject_sink.source_rows,
        cells_empty=empty,
    )
    frames = {
        "population_summaries": population,
        "name_matches": name_match_rows(mapping.source, plan, name_cells),
    }
    return SourceOutput(
        frames=frames, values=values, rejects=reject_sink.end_source(), account=account
    )


def _population(
    project: Project,
    mapping: Mapping,
    statistic_cells: list[pd.DataFrame],
    values: pd.DataFrame | None,
) -> tuple[pd.DataFrame, list[pd.DataFrame], int]:
    """Population summaries of one source, the cells they reject and the cells they use."""
    population = pd.DataFrame()
    rejects: list[pd.DataFrame] = []
    written = 0
    if statistic_cells:
        summary = summarise_population_cells(pd.concat(statistic_cells, ignore_index=True), mapping)
        population = summary.summaries
        written = summary.cells_written
        if not summary.rejects.empty:
            rejects.append(summary.rejects)
    if project.aggregate_individuals is not None and values is not None and not values.empty:
        # summaries computed from this source's individuals: derived rows, not cells read, so
        # they do not enter the cell account
        computed = aggregate_individuals(values, project.aggregate_individuals, mapping.source)
        if not computed.empty:
            population = pd.concat(
                [f for f in (population, computed) if not f.empty], ignore_index=True
            )
    return population, rejects, written


def name_match_rows(source_id: str, plan: SourcePlan, name_cells: Counter[str]) -> pd.DataFrame:
    rows = []
    for name, count in name_cells.items():
        match = plan.names.get(name)
        if match is None:
            continue
        rows.append(
            {
                "source_id": source_id,
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
