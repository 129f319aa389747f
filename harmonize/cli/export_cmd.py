"""`harmonize export dwca`: write a built data package as Darwin Core Archives."""

from __future__ import annotations

from pathlib import Path

import click

from harmonize.dwca import export_dwca


@click.group()
def export() -> None:
    """Export a built data package to another standard format."""


@export.command("dwca")
@click.argument("package_folder", type=click.Path(path_type=Path, file_okay=False))
@click.option(
    "--output",
    "-o",
    required=True,
    type=click.Path(path_type=Path, dir_okay=False),
    help="Archive of the individual values (.zip); the population summaries go beside it "
    "as <name>-summaries.zip.",
)
def dwca(package_folder: Path, output: Path) -> None:
    """Write PACKAGE_FOLDER (made by `harmonize build`) as Darwin Core Archives.

    Individual values: Occurrence core + MeasurementOrFact. Population summaries: Taxon core
    (one row per population) + one MeasurementOrFact row per statistic.
    """
    summary = export_dwca(package_folder, output)
    click.echo(
        f"wrote {summary.archive}: {summary.occurrences} occurrences, "
        f"{summary.measurements} measurements"
    )
    click.echo(
        f"wrote {summary.summaries_archive}: {summary.populations} populations, "
        f"{summary.summary_measurements} statistics"
    )
