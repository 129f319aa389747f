"""Text rendering of build reports for the terminal (the library returns data, this draws it)."""

from __future__ import annotations

import click

from harmonize.build import BuildReport
from harmonize.changes import report_text


def _table(header: list[str], rows: list[list[str]]) -> list[str]:
    widths = [max(len(str(c)) for c in column) for column in zip(header, *rows, strict=False)]
    line = "  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True))
    out = [line, "  ".join("-" * w for w in widths)]
    for row in rows:
        out.append(
            "  ".join(
                str(c).rjust(w) if i else str(c).ljust(w)
                for i, (c, w) in enumerate(zip(row, widths, strict=True))
            )
        )
    return out


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


def summary_lines(report: BuildReport) -> list[str]:
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
    lines += _table(["source", "rows", "cells", "written", "rejected", "empty", "balanced"], rows)
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
            *_table(
                ["reject reason", "cells"], [[k, v] for k, v in report.rejects_by_reason.items()]
            ),
        ]
    else:
        lines += ["rejects: none"]
    if report.names_needing_review:
        lines += [
            "",
            f"names needing review: {len(report.names_needing_review)} (run `harmonize review propose`)",
        ]
        lines += [f"  {source}: {name}" for source, name in report.names_needing_review[:10]]
        if len(report.names_needing_review) > 10:
            lines.append(f"  ... and {len(report.names_needing_review) - 10} more")
    state = "valid" if report.validation.valid else "INVALID"
    lines += [
        "",
        f"accounting: rows x trait cells = written + rejected + empty for every source: {'yes' if report.balanced else 'NO'}",
    ]
    lines += [f"frictionless validation: {state}"]
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


def progress_printer(quiet: bool):
    if quiet:
        return None

    def show(event: str, detail: dict) -> None:
        if event == "source":
            click.echo(f"reading {detail['source']} ...", err=True)
        elif event == "source-reused":
            click.echo(f"reusing {detail['source']} (unchanged since the last build)", err=True)
        elif event == "batch":
            click.echo(f"  {detail['source']}: {detail['rows']} rows", err=True)
        elif event == "write":
            click.echo("writing and validating the package ...", err=True)

    return show


def exit_code(report: BuildReport) -> int:
    return 1 if report.names_needing_review else 0
