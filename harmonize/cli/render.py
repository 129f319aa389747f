"""Text rendering of build reports for the terminal (the library returns data, this draws it)."""

from __future__ import annotations

import sys
import time

import click

from harmonize.build import BuildReport
from harmonize.changes import report_text
from harmonize.cli.options import text_table


def _sd_origins(report: BuildReport) -> str:
    """How the SDs of the population summaries were obtained: given, derived exactly, estimated."""
    summaries = (report.tables or {}).get("population_summaries")
    if summaries is None or summaries.empty:
        return ""
    method = summaries["sd_method"].astype("string")
    given = int((method == "given").sum())
    estimated = int(method.str.contains("(estimate)", regex=False).fillna(False).sum())
    derived = int(method.notna().sum()) - given - estimated
    missing = int(method.isna().sum())
    return (
        f"  SDs: {given} given, {derived} derived exactly (from SE, CI, variance, CV, pooling or "
        f"individuals), {estimated} estimated (flagged), {missing} without SD"
    )


REVIEW_HINT = "run `harmonize review propose`"


def summary_lines(report: BuildReport, review_hint: str = REVIEW_HINT) -> list[str]:
    """The build summary; `review_hint` says how to decide names waiting for review."""
    lines = [f"package: {report.output}", ""]
    rows = [
        [
            a.source_id,
            a.rows_read,
            a.cells,
            a.values_written,
            a.cells_rejected,
            a.cells_empty,
            "yes" if a.balanced else "NO",
        ]
        for a in report.accounts
    ]
    lines += text_table(
        ["source", "rows", "cells", "written", "rejected", "empty", "balanced"], rows
    )
    lines += [
        "",
        f"individual values:    {report.individual_values}",
        f"population summaries: {report.population_summaries}",
    ]
    sd_line = _sd_origins(report)
    if sd_line:
        lines.append(sd_line)
    if report.rejects_by_reason:
        lines += [
            "",
            *text_table(
                ["reject reason", "cells"], [[k, v] for k, v in report.rejects_by_reason.items()]
            ),
        ]
    else:
        lines += ["rejects: none"]
    if report.names_needing_review:
        lines += [
            "",
            f"names needing review: {len(report.names_needing_review)} ({review_hint})",
        ]
        lines += [f"  {source}: {name}" for source, name in report.names_needing_review[:10]]
        if len(report.names_needing_review) > 10:
            lines.append(f"  ... and {len(report.names_needing_review) - 10} more")
    state = "valid" if report.validation.valid else "INVALID"
    lines += [
        "",
        f"accounting: rows x trait cells = written + rejected + empty for every source: {'yes' if report.balanced else 'NO'}",
    ]
    if report.frictionless_checked:
        lines += [f"frictionless validation: {state}"]
    else:
        lines += [
            f"validation (column-wise with pyarrow): {state}; frictionless row-by-row "
            "validation not run (default only up to 200,000 rows; --frictionless runs it)"
        ]
    if report.changes_skipped and report.changes is None:
        lines.append(
            "change report: skipped for a large package (--changes makes it)"
            if report.large
            else "change report: not made (--no-changes)"
        )
    if report.changes is not None:
        lines += ["", *report_text(report.changes)]
        if report.changes_files:
            lines.append(f"change report: {report.changes_files[0]}")
    if report.lock_taken_over:
        lines.append(
            f"took over a stale lock of a build that no longer runs ({report.lock_taken_over})"
        )
    if report.leftovers_removed:
        lines.append(
            f"removed leftovers of an interrupted build: {', '.join(report.leftovers_removed)}"
        )
    return lines


# Progress lines of a long build: at most two a second (a terminal redraws one line in place).
PROGRESS_INTERVAL_SECONDS = 0.5


class _BatchProgress:
    """Rows read, rate and time left of the source being read, throttled."""

    def __init__(self, stream=None) -> None:
        self.stream = stream
        self.source: str | None = None
        self.started = 0.0
        self.shown = 0.0
        self.in_place = False

    def start(self, source: str) -> None:
        self.finish()
        # the first line after one interval: a source read sooner only gets its last line
        self.source = source
        self.started = self.shown = time.monotonic()

    def batch(self, detail: dict, *, last: bool = False) -> None:
        now = time.monotonic()
        if now - self.shown < PROGRESS_INTERVAL_SECONDS and not last:
            return
        self.shown = now
        elapsed = max(now - self.started, 1e-9)
        rows = int(detail["rows"])
        text = f"  {detail['source']}: {rows:,} rows, {rows / elapsed:,.0f} rows/s"
        fraction = detail.get("fraction")
        if last:
            text += f", all read in {_duration(elapsed)}"
        elif fraction:
            left = elapsed * (1 - fraction) / fraction
            text += f", {fraction:.0%} read, about {_duration(left)} left"
        stream = self.stream or sys.stderr
        if stream.isatty():
            click.echo("\r" + text.ljust(78), nl=False, err=True)
            self.in_place = True
        else:
            click.echo(text, err=True)

    def finish(self) -> None:
        if self.in_place:
            click.echo("", err=True)
            self.in_place = False


def _duration(seconds: float) -> str:
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def progress_printer(quiet: bool):
    if quiet:
        return None
    batches = _BatchProgress()

    def show(event: str, detail: dict) -> None:
        if event == "source":
            batches.start(detail["source"])
            click.echo(f"reading {detail['source']} ...", err=True)
        elif event == "source-reused":
            batches.finish()
            click.echo(f"reusing {detail['source']} (unchanged since the last build)", err=True)
        elif event == "batch":
            batches.batch(detail)
        elif event == "source-read":
            batches.batch(detail, last=True)
        elif event == "write":
            batches.finish()
            click.echo("writing and validating the package ...", err=True)
        elif event == "changes-skipped" and detail["large"]:
            click.echo(
                f"change report skipped: {detail['rows']:,} rows is a large package "
                "(--changes makes it)",
                err=True,
            )

    return show


def exit_code(report: BuildReport) -> int:
    return 1 if report.names_needing_review else 0
