"""The distributed path: the same stages run per partition of a Parquet dataset on Dask give the
package the single-machine build makes from one file with the same rows.

Runs on a local Dask cluster (`distributed.LocalCluster`, two in-process workers) when the
`distributed` package is installed, else on Dask's threaded scheduler; skipped without Dask
(`pip install 'harmonize[dask]'`). Tables are INVENTED data from benchmarks/make_long_table.py
and the invented demo. Equality is checked on the written files byte for byte, except the
`sources` rows' path and checksum, which describe the dataset instead of the file.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pytest

pytest.importorskip("dask.dataframe")
# dask's own Parquet reader calls a pandas API that pandas 3 deprecates; not ours to fix
pytestmark = pytest.mark.filterwarnings("ignore:The inplace keyword in DataFrame.reset_index")

from harmonize.build import build_project  # noqa: E402
from harmonize.distributed import build_partitioned, dataset_sha256  # noqa: E402
from harmonize.project import load_project  # noqa: E402

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def client():
    distributed = pytest.importorskip("distributed")
    with (
        distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None
        ) as cluster,
        distributed.Client(cluster) as connected,
    ):
        yield connected


def _same_package(single: Path, partitioned: Path) -> None:
    names = sorted(p.name for p in single.iterdir())
    assert names == sorted(p.name for p in partitioned.iterdir())
    for name in names:
        if name.startswith("sources.") or name == "datapackage.json":
            continue  # compared below: they describe the input files
        assert (single / name).read_bytes() == (partitioned / name).read_bytes(), name
    read = pd.read_csv if (single / "sources.csv").exists() else None
    if read is not None:
        one, other = read(single / "sources.csv"), read(partitioned / "sources.csv")
    else:
        one = pq.read_table(single / "sources.parquet").to_pandas()
        other = pq.read_table(partitioned / "sources.parquet").to_pandas()
    described = ["path", "sha256"]
    pd.testing.assert_frame_equal(one.drop(columns=described), other.drop(columns=described))


@pytest.mark.parametrize("scheduler", ["cluster", "threads"])
def test_long_table_on_dask_equals_the_single_machine_build(
    tmp_path, request, scheduler, long_table_generator
):
    root = tmp_path / "project"
    long_table_generator.write_project(root, 30_000, seed=11, partitions=5, fmt="parquet")
    (root / "harmonize.yaml").write_text(
        (root / "harmonize.yaml").read_text(encoding="utf-8") + "limits: {batch_rows: 4000}\n",
        encoding="utf-8",
    )
    project = load_project(root)
    single = build_project(project, output=tmp_path / "single", incremental=False)
    client = request.getfixturevalue("client") if scheduler == "cluster" else None
    parts = root / "data" / "long-parts"
    spread = build_partitioned(
        project, {"long-table": parts}, output=tmp_path / "spread", client=client
    )
    assert spread.balanced and spread.validation.valid
    assert spread.accounts == single.accounts
    _same_package(single.output, spread.output)
    row = pq.read_table(spread.output / "sources.parquet").to_pylist()[0]
    assert row["path"] == "data/long-parts"
    assert row["sha256"] == dataset_sha256(sorted(parts.glob("*.parquet")))


def test_wide_population_source_split_in_three_equals_the_single_machine_build(tmp_path, client):
    root = tmp_path / "demo"
    root.mkdir()
    shutil.copy(REPO / "harmonize.yaml", root / "harmonize.yaml")
    for folder in ("mappings", "demo_sources", "vocab"):
        shutil.copytree(REPO / folder, root / folder)
    table = pq.read_table(root / "demo_sources" / "south" / "species_means.parquet")
    parts = root / "demo_sources" / "south" / "parts"
    parts.mkdir()
    for number, start in enumerate(range(0, len(table), 5)):
        pq.write_table(table.slice(start, 5), parts / f"part-{number}.parquet")
    project = load_project(root)
    single = build_project(project, output=tmp_path / "single", incremental=False)
    spread = build_partitioned(
        project, {"south-species-means": parts}, output=tmp_path / "spread", client=client
    )
    assert spread.population_summaries == single.population_summaries > 0
    _same_package(single.output, spread.output)


def test_unknown_source_is_refused(tmp_path):
    from harmonize.errors import ConfigError

    with pytest.raises(ConfigError, match="no source 'nowhere'"):
        build_partitioned(load_project(REPO), {"nowhere": tmp_path})
