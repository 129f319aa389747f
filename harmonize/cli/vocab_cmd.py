"""`harmonize vocab`: search and check the trait vocabulary."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from harmonize.vocab import check_vocabulary, load_vocabulary

ROLES = ["parameter", "threshold", "structure", "estimation", "forcing", "descriptive"]


@click.group()
def vocab() -> None:
    """Search or check the trait vocabulary."""


@vocab.command()
@click.argument("text", default="")
@click.option("--role", type=click.Choice(ROLES), help="Only terms with this role.")
@click.option(
    "--kind",
    type=click.Choice(["quantity", "count", "category", "text"]),
    help="Only terms of this kind.",
)
@click.option(
    "--vocabulary",
    type=click.Path(path_type=Path),
    help="Vocabulary folder (default: the bundled one).",
)
def search(text: str, role: str | None, kind: str | None, vocabulary: Path | None) -> None:
    """List terms whose id, label or synonyms contain TEXT."""
    loaded = load_vocabulary(vocabulary)
    found = loaded.search(text, role=role, kind=kind)
    for term in found:
        unit = term.unit or "-"
        click.echo(f"{term.id:<36} {unit:<14} {term.role:<12} {term.label}")
    click.echo(f"{len(found)} of {len(loaded.terms)} terms", err=True)


@vocab.command()
@click.option(
    "--vocabulary",
    type=click.Path(path_type=Path),
    help="Vocabulary folder (default: the bundled one).",
)
def check(vocabulary: Path | None) -> None:
    """Check a vocabulary folder: schema, units, synonym clashes."""
    loaded = load_vocabulary(vocabulary)
    problems = check_vocabulary(loaded)
    for problem in problems:
        click.echo(problem)
    click.echo(
        f"{len(loaded.terms)} terms, version {loaded.version}: {len(problems)} problems", err=True
    )
    sys.exit(3 if problems else 0)
