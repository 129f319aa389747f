"""Pieces shared by several commands: read options for a raw table, COLUMN=VALUE pairs, tables.

Only parsing and drawing live here; every command still calls exactly one library function.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import click

from harmonize.errors import ConfigError
from harmonize.mapping_file import COMMAND_LINE
from harmonize.project import ReadOptions


def read_options(command: Callable[..., Any]) -> Callable[..., Any]:
    """Add --delimiter, --decimal, --thousands, --encoding and --missing to a command."""
    options = [
        click.option("--delimiter", help="Field delimiter (default: ',' for .csv, tab for .tsv)."),
        click.option("--decimal", type=click.Choice([".", ","]), default=".", show_default=True),
        click.option("--thousands", help="Thousands separator, if the table uses one."),
        click.option("--encoding", default="utf-8", show_default=True),
        click.option(
            "--missing",
            multiple=True,
            metavar="TOKEN",
            help="Missing-value token (repeatable; default '' and NA).",
        ),
    ]
    for option in reversed(options):
        command = option(command)
    return command


def make_read_options(
    delimiter: str | None,
    decimal: str,
    thousands: str | None,
    encoding: str,
    missing: tuple[str, ...],
) -> ReadOptions:
    return ReadOptions(
        delimiter=delimiter,
        decimal=decimal,
        thousands=thousands,
        encoding=encoding,
        missing=tuple(missing) if missing else ("", "NA"),
        declared_in=COMMAND_LINE,
    )


def column_pairs(
    items: tuple[str, ...], option: str, *, allow_bare: bool = False
) -> tuple[dict[str, str], str | None]:
    """COLUMN=VALUE pairs, and (when allowed) at most one bare VALUE for a whole long table."""
    pairs: dict[str, str] = {}
    bare = None
    for item in items:
        column, sep, value = item.rpartition("=")
        if sep and column and value:
            pairs[column] = value
        elif allow_bare and not sep and bare is None:
            bare = item
        elif allow_bare:
            raise ConfigError(
                f"{option} expects COLUMN=VALUE (or one VALUE for a long table), got '{item}'"
            )
        else:
            raise ConfigError(f"{option} expects COLUMN=VALUE, got '{item}'")
    return pairs, bare


def text_table(
    header: list[str], rows: list[list[Any]], *, numbers_right: bool = True
) -> list[str]:
    """A plain-text table; with `numbers_right`, every column but the first is right-aligned."""
    widths = [max(len(str(c)) for c in column) for column in zip(header, *rows, strict=False)]
    out = ["  ".join(str(h).ljust(w) for h, w in zip(header, widths, strict=True))]
    out.append("  ".join("-" * w for w in widths))
    for row in rows:
        out.append(
            "  ".join(
                str(c).rjust(w) if (i and numbers_right) else str(c).ljust(w)
                for i, (c, w) in enumerate(zip(row, widths, strict=True))
            )
        )
    return out
