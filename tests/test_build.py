"""The demo project end to end: accounting, the documented bad cells, validation, safe publishing."""

from __future__ import annotations

import hashlib
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from harmonize.build import build_project
from harmonize.errors import HarmonizeError
from harmonize.project import load_project

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo_copy(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("demo")
    for name in ("harmonize.yaml",):
        shutil.copy(REPO / name, root / name)
    for folder in ("mappings", "demo_sources", "vocab"):
        shutil.copytree(REPO / folder, root / folder)
    return root


@pytest.fixture(scope="module")
def demo_report(demo_copy: Path):
    return build_project(load_project(demo_copy))


def digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


def test_every_demo_cell_is_accounted_for(demo_report) -> None:
    assert demo_report.balanced
    sources = pd.read_csv(demo_report.output / "sources.csv").set_index("source_id")
    for account in demo_report.accounts:
        row = sources.loc[account.source_id]
        assert row["values_written"] + row["cells_rejected"] + row["cells_empty"] == row["cells"]
    rejects = pd.read_csv(demo_report.output / "rejects.csv")
    assert len(rejects) == sum(a.cells_rejected for a in demo_report.accounts)


def test_rows_read_match_the_files(demo_report, demo_copy: Path) -> None:
    counts = {a.source_id: a.rows_read for a in demo_report.accounts}
    north = pd.read_csv(demo_copy / "demo_sources/north/lizards.csv", sep=";", encoding="latin-1")
    east = pd.read_csv(demo_copy / "demo_sources/east/respirometry.csv")
    south = pd.read_parquet(demo_copy / "demo_sources/south/species_means.parquet")
    west = pd.read_csv(demo_copy / "demo_sources/west/shrews.tsv", sep="\t")
    by_sex = pd.read_csv(demo_copy / "demo_sources/west/shrews_by_sex.csv")
    assert counts == {
        "west-shrews-by-sex": len(by_sex),
        "north-lizards": len(north),
        "east-respirometry": len(east),
        "south-species-means": len(south),
        "west-shrews": len(west),
    }


def _documented_bad_cells() -> list[tuple[str, int, str]]:
    """(source, row, expected reason) rows of the table in demo_sources/README.md."""
    rows = []
    text = (REPO / "demo_sources" / "README.md").read_text(encoding="utf-8")
    for line in text.splitlines():
        match = re.match(r"\|\s*([a-z-]+)\s*\|\s*(\d+)\s*\|.*\|\s*`([a-z-]+)`\s*\|\s*$", line)
        if match:
            rows.append((match.group(1), int(match.group(2)), match.group(3)))
    return rows


def test_documented_bad_cells_are_rejected_as_documented(demo_report) -> None:
    documented = _documented_bad_cells()
    assert len(documented) >= 10  # the README table was found and read
    rejects = pd.read_csv(demo_report.output / "rejects.csv")
    for source, row, reason in documented:
        hit = rejects[(rejects["source_id"] == source) & (rejects["source_row"] == row)]
        assert reason in set(hit["reason"]), (
            f"{source} row {row}: expected {reason}, got {hit.to_dict('records')}"
        )


def test_individual_and_population_values_are_kept_apart(demo_report) -> None:
    individual = pd.read_csv(demo_report.output / "individual_values.csv")
    population = pd.read_csv(demo_report.output / "population_summaries.csv")
    sources = pd.read_csv(demo_report.output / "sources.csv").set_index("source_id")
    assert set(sources.loc[individual["source_id"].unique(), "level"]) == {"individual"}
    # summaries computed from individuals say so; every other summary comes from a population source
    computed = population["sd_method"] == "computed from individuals"
    assert computed.any()
    assert set(sources.loc[population.loc[computed, "source_id"].unique(), "level"]) == {
        "individual"
    }
    assert set(sources.loc[population.loc[~computed, "source_id"].unique(), "level"]) == {
        "population"
    }
    # estimated dispersion is labelled as such, never passed off as given
    estimated = population[population["sd_method"].fillna("").str.contains("estimate")]
    assert len(estimated) > 0
    assert estimated["flags"].str.contains("sd-estimated").all()


def test_temperature_corrected_rates_are_labelled(demo_report) -> None:
    individual = pd.read_csv(demo_report.output / "individual_values.csv")
    rates = individual[individual["trait_id"] == "oxygen_consumption_rate"]
    assert len(rates) > 0
    assert rates["temperature_correction"].str.startswith("arrhenius").all()
    assert rates["flags"].str.contains("temperature-corrected").all()
    assert rates["measurement_temperature"].notna().all()


def test_frictionless_command_line_validates_the_demo_package(demo_report) -> None:
    frictionless = Path(sys.executable).with_name("frictionless")
    if not frictionless.exists():
        pytest.skip("frictionless command not installed beside this Python")
    result = subprocess.run(
        [str(frictionless), "validate", "datapackage.json"],
        cwd=demo_report.output,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert result.returncode == 0, result.stdout[-2000:]


def test_rebuild_is_byte_identical(demo_copy: Path, demo_report, tmp_path: Path) -> None:
    again = build_project(load_project(demo_copy), output=tmp_path / "again")
    assert digest(again.output) == digest(demo_report.output)


def test_failed_build_leaves_previous_output_untouched(demo_copy: Path, tmp_path: Path) -> None:
    root = tmp_path / "project"
    shutil.copytree(demo_copy, root, ignore=shutil.ignore_patterns("out"))
    first = build_project(load_project(root))
    before = digest(first.output)
    # break one source after the previous build: the next build must fail and change nothing
    (root / "demo_sources" / "east" / "respirometry.csv").write_text(
        "animal,species\nonly,two,columns,too many\n", encoding="utf-8"
    )
    with pytest.raises(HarmonizeError):
        build_project(load_project(root))
    assert digest(first.output) == before
    leftovers = [p.name for p in first.output.parent.iterdir() if p.name.startswith(".")]
    assert leftovers == []  # no staging folders left behind
