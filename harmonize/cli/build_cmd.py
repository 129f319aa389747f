"""`harmonize build`: build a project's data package."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from harmonize.build import build_project
from harmonize.cli.render import exit_code, progress_printer, summary_lines
from harmonize.project import load_project


@click.command()
@click.argument("project", default=".", type=click.Path(path_type=Path))
@click.option(
    "--output",
    "-o",
    type=click.Path(path_type=Path),
    help="Output folder (default: from harmonize.yaml).",
)
@click.option("--quiet", "-q", is_flag=True, help="No progress lines; print only the summary.")
def build(project: Path, output: Path | None, quiet: bool) -> None:
    """Build the data package of PROJECT (a folder with harmonize.yaml, or the file itself)."""
    loaded = load_project(project)
    report = build_project(loaded, output=output, progress=progress_printer(quiet))
    for line in summary_lines(report):
        click.echo(line)
    sys.exit(exit_code(report))
