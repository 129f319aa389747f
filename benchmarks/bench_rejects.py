"""Time builds whose cells are nearly all rejected, and wide builds, with their peak memory.

Run: `python benchmarks/bench_rejects.py [ROWS] [--wide-rows N] [--wide-columns N] [--folder DIR]`.
Two INVENTED projects, each built once by `harmonize build --full -q` in a child process (wall
time including start-up; peak RSS from `bench_build.run_child`):

- `all-rejected`: the long table of `make_long_table.py` (ROWS rows, Parquet) with its unit
  column mapped to the sex column, so nearly every cell is rejected (unknown or missing unit,
  dimension mismatch). Rejects stream to the package batch by batch: memory should follow the
  batch size, as it does for values.
- `wide-unmatched`: a Parquet table of `--wide-rows` rows and `--wide-columns` value columns
  whose names match no trait, so every cell is rejected as unmatched-name; a wide batch holds
  about `limits.batch_rows` cells, not `batch_rows` rows.

The README's Scale section gives the figures. Not run by pytest.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
from pathlib import Path

from bench_build import HERE, run_child  # wall time and peak memory of a child process

WIDE_MAPPING = """source: wide-unmatched
path: ../data/wide.parquet
level: individual
citation: invented benchmark data
context: {taxon: species}
"""


def all_rejected_project(rows: int, folder: Path) -> Path:
    project = folder / f"all-rejected-{rows}"
    if not (project / "data" / "long.parquet").is_file():
        subprocess.run(
            [sys.executable, str(HERE / "make_long_table.py"), str(rows), str(project)],
            check=True,
            stdout=subprocess.DEVNULL,
        )
    for mapping in (project / "mappings").glob("*.yaml"):
        text = mapping.read_text(encoding="utf-8")
        text = text.replace("sex: sex, ", "").replace("unit: unit}", "unit: sex}")
        mapping.write_text(text, encoding="utf-8")
    return project


def wide_project(rows: int, columns: int, folder: Path) -> Path:
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq

    project = folder / f"wide-unmatched-{rows}x{columns}"
    table = project / "data" / "wide.parquet"
    if not table.is_file():
        table.parent.mkdir(parents=True, exist_ok=True)
        generator = np.random.default_rng(1)
        species = ["Podarcis inventa", "Zootoca inventa", "Sorex inventus"]  # invented names
        data = {"species": pa.array(generator.choice(species, rows))}
        for column in range(columns):  # 'reading 7' matches no trait of the vocabulary
            values = np.round(generator.normal(50, 5, rows), 2).astype(str)
            data[f"reading {column}"] = pa.array(values)
        pq.write_table(pa.table(data), table)
        (project / "mappings").mkdir(exist_ok=True)
        (project / "mappings" / "wide.yaml").write_text(WIDE_MAPPING, encoding="utf-8")
        (project / "harmonize.yaml").write_text(
            "name: wide-unmatched\noutput: {folder: out, format: parquet}\n", encoding="utf-8"
        )
    return project


def build(project: Path) -> tuple[float, float]:
    seconds, peak_mib, _ = run_child(
        [sys.executable, "-m", "harmonize", "build", str(project), "--full", "-q"]
    )
    return seconds, peak_mib


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("rows", type=int, nargs="?", default=5_000_000)
    parser.add_argument("--wide-rows", type=int, default=200_000)
    parser.add_argument("--wide-columns", type=int, default=100)
    parser.add_argument("--folder", type=Path, default=Path("bench-data"))
    options = parser.parse_args()
    results = []
    for name, project in (
        ("all-rejected", all_rejected_project(options.rows, options.folder)),
        ("wide-unmatched", wide_project(options.wide_rows, options.wide_columns, options.folder)),
    ):
        seconds, peak_mib = build(project)
        results.append({"project": name, "build_s": seconds, "peak_mib": peak_mib})
        print(f"{name:16s} build {seconds:7.2f} s   peak {peak_mib:6.0f} MiB")
    print(json.dumps(results))


if __name__ == "__main__":
    main()
