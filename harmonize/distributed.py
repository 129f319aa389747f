"""Run a build's per-value stages on a Dask cluster, one partition of a Parquet dataset at a time.

For a source too large for one machine, keep its mapping as it is and store the data as a
partitioned Parquet dataset (a folder of `*.parquet` files with the source's columns, rows in
file-name order). `build_partitioned` then builds the same package the single-machine build
makes from one file with those rows:

1. the distinct trait names of the whole dataset are gathered on the cluster and matched once,
   here (`ingest.learn_names`), so every partition works with the same decisions;
2. each partition goes through the very functions a local build runs per batch
   (`sources.text_frame`, `cells.cells_of_frame`, `ingest.stage_batch`: names, values, units,
   flags, record ids) as a `dask.delayed` task, with its source rows numbered from the row
   counts of the partitions before it;
3. the staged partitions come back in order and go through the local build's driver
   (`build.build_project` with an `ingest.SourceInput`): values are streamed into the package,
   population summaries, rejects, accounts and validation are made as for any build.

Dask (`pip install 'harmonize[dask]'`) is imported only here. Scheduling, workers and data
locality are Dask's; this module adds no engine of its own. Pass a `distributed.Client` to run
on a cluster; without one, Dask's local threaded scheduler is used.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from harmonize import cells, sources
from harmonize.assemble import SourcePlan
from harmonize.build import BuildReport, build_project
from harmonize.errors import ConfigError, SourceNotFoundError
from harmonize.ingest import (
    BuildSettings,
    Progress,
    SourceInput,
    StagedBatch,
    learn_names,
    stage_batch,
)
from harmonize.project import Limits, Project
from harmonize.project import Mapping as SourceMapping

# Partitions staged at once when no cluster client is given (the threaded scheduler)
LOCAL_WINDOW = 4


def _require_dask() -> Any:
    try:
        import dask
        import dask.dataframe  # noqa: F401 - the dataframe extra must be installed too
    except ImportError as error:  # pragma: no cover - depends on the installation
        raise ConfigError(
            "the distributed build needs Dask", hint="pip install 'harmonize[dask]'"
        ) from error
    return dask


def dataset_files(folder: Path) -> list[Path]:
    """The dataset's Parquet files in row order (file-name order)."""
    files = sorted(p for p in Path(folder).glob("*.parquet") if p.is_file())
    if not files:
        raise SourceNotFoundError("no Parquet files in the dataset folder", file=str(folder))
    return files


def dataset_sha256(files: list[Path]) -> str:
    """One checksum for the dataset: its file names and contents, in order."""
    digest = hashlib.sha256()
    for path in files:
        digest.update(path.name.encode() + b"\0" + sources.file_sha256(path).encode() + b"\n")
    return digest.hexdigest()


def _stage_partition(
    frame: pd.DataFrame, plan: SourcePlan, header: list[str], first_row: int, limits: Limits
) -> StagedBatch:
    """What a local build does to one batch, done to one partition (runs on a worker)."""
    table = pa.Table.from_pandas(frame, preserve_index=False)
    text = sources.text_frame(plan.mapping, table, first_row)
    batch = cells.cells_of_frame(plan.mapping, text, header, first_row, limits)
    return stage_batch(batch, plan)


def _distinct_names(frame: pd.DataFrame, mapping: SourceMapping) -> pd.Series:
    """Distinct trait names in one partition of a long table, as its cells will carry them."""
    spec = mapping.columns
    assert spec is not None
    table = pa.Table.from_pandas(frame[[spec.trait]], preserve_index=False)
    names = cells.long_trait_names(mapping, sources.text_frame(mapping, table, 1))
    return pd.Series(pd.unique(pd.Series(names, dtype=object).fillna("")), dtype=object)


def partitioned_input(
    project: Project, mapping: SourceMapping, folder: Path, client: Any = None
) -> SourceInput:
    """A `SourceInput` that stages the dataset in `folder` partition by partition with Dask."""
    dask = _require_dask()
    import dask.dataframe as dd

    files = dataset_files(folder)
    root = project.root.resolve()
    try:
        shown = Path(folder).resolve().relative_to(root).as_posix()
    except ValueError:
        shown = Path(folder).name

    def stager(project: Project, settings: BuildSettings, decisions: dict):
        def staged(plan: SourcePlan) -> Iterator[StagedBatch]:
            header = list(pq.read_schema(files[0]).names)
            sources.check_declared_columns(mapping, header)
            wanted = [n for n in header if n not in mapping.ignore]
            data = dd.read_parquet([str(f) for f in files], columns=wanted)
            if mapping.layout == "long":
                per_part = data.map_partitions(
                    _distinct_names, mapping, meta=pd.Series([], dtype=object)
                )
                names = sorted(set(_compute(dask, client, per_part)))
            else:
                names = cells.trait_columns(mapping, wanted)
            learn_names(plan, names, settings, decisions)
            lengths = list(_compute(dask, client, data.map_partitions(len)))
            starts = [1 + sum(lengths[:i]) for i in range(len(lengths))]
            parts = data.to_delayed()
            tasks = [
                dask.delayed(_stage_partition)(part, plan, wanted, start, project.limits)
                for part, start in zip(parts, starts, strict=True)
            ]
            total = sum(lengths) or 1
            done = 0
            for staged_batch in _in_order(dask, client, tasks):
                done += staged_batch.rows
                yield _with_fraction(staged_batch, done / total)

        return staged

    return SourceInput(path=shown, sha256=dataset_sha256(files), stager=stager)


def _with_fraction(batch: StagedBatch, fraction: float) -> StagedBatch:
    from dataclasses import replace

    return replace(batch, fraction_read=fraction)


def _compute(dask: Any, client: Any, collection: Any) -> Any:
    if client is not None:
        return client.compute(collection).result()
    return collection.compute(scheduler="threads")


def _in_order(dask: Any, client: Any, tasks: list) -> Iterator[StagedBatch]:
    """Staged partitions in partition order; the driver holds a bounded number at a time
    without a client, and takes each as soon as it is done with one."""
    if client is not None:
        futures = client.compute(tasks)
        for future in futures:
            yield future.result()
            future.release()
        return
    for start in range(0, len(tasks), LOCAL_WINDOW):
        yield from dask.compute(*tasks[start : start + LOCAL_WINDOW], scheduler="threads")


def build_partitioned(
    project: Project,
    datasets: Mapping[str, Path],
    *,
    output: Path | None = None,
    client: Any = None,
    progress: Progress | None = None,
    frictionless: bool | None = None,
) -> BuildReport:
    """Build the project with each source named in `datasets` (source id -> dataset folder)
    read from its partitioned Parquet dataset on Dask; other sources are read locally.

    The package equals the single-machine build of the same rows, except `sources.path` and
    `sources.sha256`, which describe the dataset. Every source is read again (no cache)."""
    by_id = {m.source: m for m in project.mappings}
    unknown = sorted(set(datasets) - set(by_id))
    if unknown:
        raise ConfigError(
            f"no source {unknown[0]!r} in the project", hint=f"sources: {', '.join(by_id)}"
        )
    inputs = {
        source: partitioned_input(project, by_id[source], Path(folder), client)
        for source, folder in datasets.items()
    }
    return build_project(
        project,
        output=output,
        progress=progress,
        full=True,
        incremental=False,
        frictionless=frictionless,
        inputs=inputs,
    )
