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


def _help_texts(
    command: click.Command, name: str, parent: click.Context | None
) -> list[tuple[str, str]]:
    """(full command name, help text) for a command and every subcommand, depth first.

    Contexts are made as a real invocation makes them (a child inherits its parent's settings,
    such as -h as a help option), so the text equals what `--help` prints.
    """
    context = command.make_context(name, [], parent=parent, resilient_parsing=True)
    context.terminal_width = context.max_content_width = 100
    with context:
        found = [(context.command_path, command.get_help(context))]
        if isinstance(command, click.Group):
            for sub in sorted(command.commands):
                found += _help_texts(command.commands[sub], sub, context)
    return found


def render_reference() -> str:
    parts = [HEADER]
    for path, text in _help_texts(cli, "harmonize", None):
        parts.append(f"\n## `{path}`\n\n```text\n{text}\n```\n")
    return "".join(parts)


if __name__ == "__main__":
    print(render_reference(), end="")
