"""The command-line reference (docs/cli.md), generated from the commands' own --help texts.

`python -m harmonize.cli.reference > docs/cli.md` rewrites it; a test fails when the file is stale,
so the reference and the program cannot drift apart.
"""

from __future__ import annotations

import click

from harmonize.cli.main import cli

HEADER = (
    "# Command-line reference\n\n"
    "Generated from `--help` by `python -m harmonize.cli.reference > docs/cli.md`; "
    "a test checks it is current.\n"
)


def _commands(group: click.Group, prefix: list[str]) -> list[tuple[list[str], click.Command]]:
    found: list[tuple[list[str], click.Command]] = [(prefix, group)]
    for name in sorted(group.commands):
        command = group.commands[name]
        if isinstance(command, click.Group):
            found += _commands(command, [*prefix, name])
        else:
            found.append(([*prefix, name], command))
    return found


def render_reference() -> str:
    parts = [HEADER]
    for path, command in _commands(cli, ["harmonize"]):
        with click.Context(
            command, info_name=" ".join(path), terminal_width=100, max_content_width=100
        ) as context:
            text = command.get_help(context)
        parts.append(f"\n## `{' '.join(path)}`\n\n```text\n{text}\n```\n")
    return "".join(parts)


if __name__ == "__main__":
    print(render_reference(), end="")
