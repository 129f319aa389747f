"""`harmonize build`: build a project's data package, by hand or from a scheduler.

For schedulers: `--quiet` keeps the terminal to the summary (no progress lines), `--log-json`
appends one JSON object per line (start, each source read or reused, written, validated,
published, finished with the exit code and counts), and the exit code says what happened.
"""

from __future__ import annotations

import json
import sys
from contextlib import ExitStack
from datetime import UTC, datetime
from pathlib import Path
from typing import IO

import click

from harmonize.build import BuildReport, build_project
from harmonize.cli.render import exit_code, progress_printer, summary_lines
from harmonize.errors import HarmonizeError
from harmonize.project import load_project


class _CommandWithExitCodes(click.Command):
    """Lists the exit codes under the help text (read when help is shown: the table lives in
    `cli.main`, which imports this module)."""

    def format_epilog(self, context: click.Context, formatter: click.HelpFormatter) -> None:
        from harmonize.cli.main import EXIT_CODES

        formatter.write_paragraph()
        formatter.write_text("Exit codes:")
        with formatter.indentation():
            formatter.write_dl([(str(code), text) for code, text in EXIT_CODES.items()])


class _JsonLog:
    """One JSON object per line, flushed at once so a killed run keeps what it logged."""

    def __init__(self, stream: IO[str] | None) -> None:
        self.stream = stream

    def __call__(self, event: str, **detail) -> None:
        if self.stream is None:
            return
        record = {"time": datetime.now(UTC).isoformat(timespec="seconds"), "event": event, **detail}
        self.stream.write(json.dumps(record, sort_keys=False, default=str) + "\n")
        self.stream.flush()


_LOGGED_PROGRESS = {
    "source": "source-read",
    "source-reused": "source-reused",
    "write": "writing",
    "validated": "validated",
    "published": "published",
    "changes-skipped": "change-report-skipped",
    "lock-taken-over": "stale-lock-taken-over",
    "leftovers-removed": "leftovers-removed",
}


def _progress(log: _JsonLog, printer):
    def show(event: str, detail: dict) -> None:
        if event in _LOGGED_PROGRESS:
            log(_LOGGED_PROGRESS[event], **detail)
        if printer is not None:
            printer(event, detail)

    return show


def _counts(report: BuildReport) -> dict:
    changes = report.changes
    return {
        "individual_values": report.individual_values,
        "population_summaries": report.population_summaries,
        "rejects_by_reason": report.rejects_by_reason,
        "names_needing_review": len(report.names_needing_review),
        "sources_read": [a.source_id for a in report.accounts if not a.reused],
        "sources_reused": list(report.reused_sources),
        "changes_file": str(report.changes_files[0]) if report.changes_files else None,
        "values_changed": (
            {
                name: {"added": c.added, "removed": c.removed, "changed": c.changed}
                for name, c in changes.values.items()
            }
            if changes
            else None
        ),  # fmt: skip
    }


@click.command(cls=_CommandWithExitCodes)
@click.argument("project", default=".", type=click.Path(path_type=Path))
@click.option(
    "--output",
    "-o",
    type=click.Path(path_type=Path),
    help="Output folder (default: from harmonize.yaml).",
)
@click.option(
    "--full",
    is_flag=True,
    help="Read every source again instead of reusing unchanged ones (same package either way).",
)
@click.option(
    "--quiet", "-q", is_flag=True, help="No progress lines; print only the summary (for cron)."
)
@click.option(
    "--frictionless/--no-frictionless",
    default=None,
    help="Also validate the package row by row with the frictionless library (default: only "
    "packages of at most 200,000 rows: values, summaries and rejects; every build is checked "
    "column-wise).",
)
@click.option(
    "--changes/--no-changes",
    default=None,
    help="Compare the package with the previous one and write OUTPUT.changes.json and .txt "
    "(default: only packages of at most 200,000 rows: values, summaries and rejects; larger "
    "ones are compared column by column from the files).",
)
@click.option(
    "--log-json",
    "log_json",
    type=click.Path(dir_okay=False, allow_dash=True, path_type=Path),
    help="Append a machine-readable log (JSON lines) to FILE; '-' writes it to stdout "
    "and moves the summary to stderr.",
)
def build(
    project: Path,
    output: Path | None,
    full: bool,
    quiet: bool,
    frictionless: bool | None,
    changes: bool | None,
    log_json: Path | None,
) -> None:
    """Build the data package of PROJECT (a folder with harmonize.yaml, or the file itself).

    Unchanged sources are reused from the last build; the package is swapped in only when it
    is complete and valid; what changed is written beside it as OUTPUT.changes.json and
    OUTPUT.changes.txt (packages of at most 200,000 rows, or with --changes). A
    second build of the same output while one runs is refused. Long builds show rows read,
    rate and time left.
    """
    with ExitStack() as stack:
        stream = None
        if log_json is not None:
            if str(log_json) == "-":
                stream = sys.stdout
            else:
                log_json.parent.mkdir(parents=True, exist_ok=True)
                stream = stack.enter_context(open(log_json, "a", encoding="utf-8"))
        log = _JsonLog(stream)
        summary_to_stderr = stream is sys.stdout
        log(
            "start",
            project=str(project.resolve()),
            output=str(output.resolve()) if output else None,
            full=full,
        )
        try:
            loaded = load_project(project)
            report = build_project(
                loaded,
                output=output,
                full=full,
                frictionless=frictionless,
                change_report=changes,
                progress=_progress(log, progress_printer(quiet)),
            )
        except HarmonizeError as error:
            log("finished", exit_code=error.exit_code, error=str(error))
            raise
        except OSError as error:  # main turns these into exit code 4
            log("finished", exit_code=4, error=str(error))
            raise
        except Exception as error:  # a bug: main reports it with exit code 4; log it, re-raise
            log("finished", exit_code=4, error=f"internal error: {type(error).__name__}: {error}")
            raise
        code = exit_code(report)
        if not (quiet and summary_to_stderr):
            for line in summary_lines(report):
                click.echo(line, err=summary_to_stderr)
        log("finished", exit_code=code, **_counts(report))
    sys.exit(code)
