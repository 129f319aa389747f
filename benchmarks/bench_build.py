"""Time `harmonize build` against the Parquet I/O floor and a naive per-row pint conversion.

Run: `python benchmarks/bench_build.py ROWS [ROWS ...] [--folder DIR] [--sample N]`.
For each size, one generated table (benchmarks/make_long_table.py, INVENTED data) is measured
in separate child processes, so peak memories do not mix (peak RSS from
`os.wait4`, wall time including interpreter start and imports):

(a) the I/O floor: pyarrow reads the same Parquet file and writes it back (best of three),
    with the memory allocator the build uses (harmonize/arrow_memory.py);
(b) `harmonize build PROJECT --full -q`, including its own validation;
(c) a naive conversion, one `pint.Quantity(value, unit).to(canonical)` per row, on a sample of
    N rows, extrapolated to the whole table;
(e) for reference, the package floor: the floor's read with the package's values table (the
    build's output, with its provenance columns) written instead of the input, scaled from
    in-process timings of both. It is what the output's width alone costs, before any work.

It prints the ratios the scale targets are stated in: build / floor (target <= 2), naive /
build (target >= 50), peak memory (target < 1 GiB, and at most 1.5x the peak of the smallest
size given). With `--changes`, (d) the build is run once more with `--changes`, which compares
the new package with the one (b) wrote (the change report of a large package, which a default
build skips). Not run by pytest.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def run_child(arguments: list[str]) -> tuple[float, float, str]:
    """Wall seconds, peak RSS in MiB and stdout of one child process."""
    start = time.perf_counter()
    child = subprocess.Popen(arguments, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(child.pid, 0)
    seconds = time.perf_counter() - start
    out = child.stdout.read().decode() if child.stdout else ""
    err = child.stderr.read().decode() if child.stderr else ""
    code = os.waitstatus_to_exitcode(status)
    if code not in (0, 1):  # 1: names need review, still a complete build
        raise SystemExit(f"{' '.join(arguments)} failed ({code}):\n{err[-2000:]}")
    return seconds, usage.ru_maxrss / 1024, out  # Linux reports ru_maxrss in KiB


def _floor(table: Path, target: Path) -> None:
    import pyarrow.parquet as pq

    from harmonize.arrow_memory import choose_memory_pool

    choose_memory_pool()  # the allocator the build uses: it sways the floor as much
    pq.write_table(pq.read_table(table), target, compression="zstd")


def _package_floor(table: Path, values: Path, target: Path) -> None:
    """The floor's read, then the package's values table written instead of the input: how
    much of the time budget the package's wider rows (provenance columns) take by themselves.
    Timed in this process, against the input floor timed the same way (best of three each)."""
    import pyarrow.parquet as pq

    from harmonize.arrow_memory import choose_memory_pool

    choose_memory_pool()
    package = pq.read_table(values)  # in memory before timing, as a build has its rows
    timings = {}
    for name, written in (("input", None), ("package", package)):
        best = float("inf")
        for _ in range(3):
            start = time.perf_counter()
            read = pq.read_table(table)
            pq.write_table(read if written is None else written, target, compression="zstd")
            best = min(best, time.perf_counter() - start)
        timings[name] = best
    print(json.dumps(timings))


def _naive(table: Path, sample: int) -> None:
    """One pint conversion per row: the approach the vectorised build is compared with."""
    import pint
    import pyarrow.parquet as pq

    from harmonize.match import MatchSettings, match_names
    from harmonize.vocab import load_vocabulary

    rows = pq.ParquetFile(table).iter_batches(batch_size=sample)
    frame = next(rows).to_pandas()
    vocabulary = load_vocabulary(None)
    names = sorted(set(frame["measure"].dropna().str.strip()))
    matches = match_names(names, vocabulary, MatchSettings(), {})
    registry = pint.UnitRegistry()
    start = time.perf_counter()
    converted = 0
    for name, value, unit in zip(frame["measure"], frame["value"], frame["unit"], strict=True):
        match = matches.get(str(name).strip())
        if match is None or match.trait_id is None:
            continue
        try:
            quantity = registry.Quantity(float(value), unit)
            quantity.to(vocabulary.terms[match.trait_id].unit)
            converted += 1
        except Exception:  # noqa: BLE001 - the naive approach: any failure is a skipped row
            continue
    seconds = time.perf_counter() - start
    print(json.dumps({"rows": len(frame), "seconds": seconds, "converted": converted}))


def measure(rows: int, folder: Path, sample: int, changes: bool = False) -> dict:
    project = folder / f"rows-{rows}"
    table = project / "data" / "long.parquet"
    if not table.is_file():
        subprocess.run(
            [sys.executable, str(HERE / "make_long_table.py"), str(rows), str(project)],
            check=True,
            stdout=subprocess.DEVNULL,
        )
    me = [sys.executable, str(Path(__file__).resolve())]
    # the floor is short, so other load on the machine sways it most: best of three
    floors = [
        run_child([*me, "--floor", str(table), str(project / "floor.parquet")]) for _ in range(3)
    ]
    floor_s = min(f[0] for f in floors)
    floor_mib = max(f[1] for f in floors)
    build_s, build_mib, _ = run_child(
        [sys.executable, "-m", "harmonize", "build", str(project), "--full", "-q"]
    )
    changes_s = changes_mib = None
    if changes:  # (d): the same build against the package (b) wrote, with the change report
        changes_s, changes_mib, _ = run_child(
            [sys.executable, "-m", "harmonize", "build", str(project), "--full", "-q", "--changes"]
        )
    values = project / "out" / "package" / "individual_values.parquet"
    _, _, out = run_child(
        [*me, "--package-floor", str(table), str(values), str(project / "floor.parquet")]
    )
    timed = json.loads(out.strip().splitlines()[-1])
    package_floor_s = floor_s * timed["package"] / timed["input"]
    _, naive_mib, out = run_child([*me, "--naive", str(table), str(sample)])
    naive = json.loads(out.strip().splitlines()[-1])
    naive_s = naive["seconds"] / naive["rows"] * rows
    return {
        "rows": rows,
        "floor_s": floor_s,
        "floor_mib": floor_mib,
        "build_s": build_s,
        "build_mib": build_mib,
        "naive_s_extrapolated": naive_s,
        "naive_rows_per_s": naive["rows"] / naive["seconds"],
        "build_over_floor": build_s / floor_s,
        "package_floor_s": package_floor_s,
        "package_floor_over_floor": package_floor_s / floor_s,
        "naive_over_build": naive_s / build_s,
        "build_with_changes_s": changes_s,
        "build_with_changes_mib": changes_mib,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("rows", type=int, nargs="*")
    parser.add_argument("--folder", type=Path, default=Path("bench-data"))
    parser.add_argument("--sample", type=int, default=20_000)
    parser.add_argument("--changes", action="store_true", help="also time (d), see above")
    parser.add_argument("--floor", nargs=2, type=Path, help=argparse.SUPPRESS)
    parser.add_argument("--naive", nargs=2, help=argparse.SUPPRESS)
    parser.add_argument("--package-floor", nargs=3, type=Path, help=argparse.SUPPRESS)
    options = parser.parse_args()
    if options.floor:
        _floor(*options.floor)
        return
    if options.package_floor:
        _package_floor(*options.package_floor)
        return
    if options.naive:
        _naive(Path(options.naive[0]), int(options.naive[1]))
        return
    results = [
        measure(rows, options.folder, options.sample, options.changes) for rows in options.rows
    ]
    print(
        f"{'rows':>10} {'floor s':>8} {'build s':>8} {'build/floor':>11} "
        f"{'naive s (extrap.)':>17} {'naive/build':>11} {'floor MiB':>9} {'build MiB':>9}"
    )
    for r in results:
        print(
            f"{r['rows']:>10} {r['floor_s']:>8.2f} {r['build_s']:>8.2f} "
            f"{r['build_over_floor']:>11.2f} {r['naive_s_extrapolated']:>17.0f} "
            f"{r['naive_over_build']:>11.0f} {r['floor_mib']:>9.0f} {r['build_mib']:>9.0f}"
        )
    for r in results:
        print(
            f"{r['rows']:>10} rows, package floor (the floor writing the package's values table "
            f"instead of the input): {r['package_floor_s']:.2f} s, "
            f"{r['package_floor_over_floor']:.2f}x the floor"
        )
    for r in results:
        if r["build_with_changes_s"] is not None:
            print(
                f"{r['rows']:>10} rows, build with --changes: {r['build_with_changes_s']:.2f} s, "
                f"{r['build_with_changes_mib']:.0f} MiB"
            )
    if len(results) > 1:
        growth = results[-1]["build_mib"] / results[0]["build_mib"]
        print(
            f"build peak memory {results[-1]['rows']} rows / {results[0]['rows']} rows: "
            f"{growth:.2f}x"
        )
    print(json.dumps(results))


if __name__ == "__main__":
    main()
