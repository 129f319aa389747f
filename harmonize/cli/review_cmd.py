"""`harmonize review`: propose matches for a human to decide, and read the decisions back."""

from __future__ import annotations

import datetime as dt
import getpass
from pathlib import Path

import click

from harmonize.project import load_project
from harmonize.proposals import names_for_review
from harmonize.review import apply_review, read_review_sheet, write_review_sheet
from harmonize.vocab import load_vocabulary


@click.group()
def review() -> None:
    """Review trait-name matches: propose a sheet, then apply the decisions in it."""


@review.command()
@click.argument("project", default=".", type=click.Path(path_type=Path))
@click.option(
    "--sheet",
    type=click.Path(path_type=Path),
    default=Path("review.csv"),
    show_default=True,
    help="Sheet to write.",
)
@click.option(
    "--fuzzy/--no-fuzzy",
    default=True,
    show_default=True,
    help="Also list names accepted by fuzzy matching.",
)
def propose(project: Path, sheet: Path, fuzzy: bool) -> None:
    """Write a review sheet of names that need a decision (fill in the 'decision' column)."""
    loaded = load_project(project)
    rows = names_for_review(loaded, include_fuzzy=fuzzy)
    write_review_sheet(sheet, rows)
    click.echo(f"{len(rows)} names to review written to {sheet}")
    click.echo(
        "fill 'decision' with a trait id, 'accept' (take the proposal) or 'reject', then run `harmonize review apply`"
    )
    click.echo(
        "to change an earlier decision write 'replace:<trait id>', 'replace:accept' or 'replace:reject'"
    )


@review.command()
@click.argument("sheet", type=click.Path(path_type=Path))
@click.argument("project", default=".", type=click.Path(path_type=Path))
@click.option(
    "--by",
    "decided_by",
    default=None,
    help="Name recorded as the decider (default: your user name).",
)
def apply(sheet: Path, project: Path, decided_by: str | None) -> None:
    """Merge the decisions of SHEET into the project's mappings/<source>.matches.csv files."""
    loaded = load_project(project)
    vocabulary = load_vocabulary(loaded.vocabulary)
    decisions = read_review_sheet(sheet, vocabulary)
    folders = {m.source: m.mapping_file.parent for m in loaded.mappings}
    folder = next(iter(folders.values()))
    counts = apply_review(
        decisions,
        folder,
        decided_by=decided_by or getpass.getuser(),
        decided_at=dt.date.today().isoformat(),
    )
    for outcome, count in sorted(counts.items()):
        click.echo(f"{outcome}: {count}")
