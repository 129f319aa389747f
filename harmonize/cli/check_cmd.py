"""`harmonize check`: look for unit mistakes in a built package or one raw table; flag only."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import click

from harmonize.check import GROUP_BY, CheckResult, findings_document
from harmonize.check_sources import TableSpec, check_package, check_table
from harmonize.cli.options import column_pairs, make_read_options, read_options, text_table
from harmonize.vocab import load_vocabulary

CHECK_EXIT_CODES = {
    0: "no findings (notes such as mixed units do not count)",
    1: "findings to review: errors or warnings",
    2: "usage error",
    3: "bad input: the package or table cannot be read, or an option names a missing column",
}
MAX_ROWS_PRINTED = 40


def summary_lines(result: CheckResult) -> list[str]:
    """The terminal summary: what was checked, findings by severity, the findings, the rows."""
    severities = [f.severity for f in result.findings]
    lines = [
        f"checked: {result.subject} (grouped by {result.group_by})",
        "findings: "
        + ", ".join(f"{severities.count(s)} {s}" for s in ("error", "warning", "note")),
    ]
    if result.findings:
        rows = [
            [f.severity, f.kind, f.trait, f.group[:40], f.values, f.factor or "", "" if f.confidence is None else f"{f.confidence:.2f}"]
            for f in result.findings[:MAX_ROWS_PRINTED]
        ]  # fmt: skip
        lines += [
            "",
            *text_table(
                ["severity", "finding", "trait", "group", "values", "factor", "confidence"],
                rows,
                numbers_right=False,
            ),
        ]
        if len(result.findings) > MAX_ROWS_PRINTED:
            lines.append(
                f"... and {len(result.findings) - MAX_ROWS_PRINTED} more (see --json or --html)"
            )
        suspects = [f for f in result.findings if f.factor]
        lines += ["", *[f"{f.trait} / {f.group}: {f.message}" for f in suspects[:10]]]
    lines += [
        "",
        *text_table(
            ["rows and cells", "count"],
            [[w, c] for w, c in result.accounting.lines],
            numbers_right=False,
        ),
    ]
    lines.append(f"adds up: {'yes' if result.accounting.balanced else 'NO'}")
    return lines


def _exit_codes_epilog() -> str:
    return "\b\nExit codes:\n" + "\n".join(f"  {c}  {t}" for c, t in CHECK_EXIT_CODES.items())


@click.command(epilog=_exit_codes_epilog())
@click.argument("target", type=click.Path(path_type=Path))
@click.option(
    "--group-by",
    type=click.Choice(GROUP_BY),
    default="source",
    show_default=True,
    help="Compare sources, taxa or columns with each other.",
)
@click.option(
    "--html",
    "html_path",
    type=click.Path(path_type=Path),
    help="Write a self-contained HTML report here.",
)
@click.option(
    "--json", "json_path", type=click.Path(path_type=Path), help="Write the findings as JSON here."
)
@click.option("--taxon", help="Raw table: column holding the taxon.")
@click.option(
    "--source", help="Raw table: column whose values are the sources (e.g. study, lab, island)."
)
@click.option("--value-column", help="Long raw table: column holding the values.")
@click.option("--trait-column", help="Long raw table: column holding trait names.")
@click.option("--unit-column", help="Long raw table: column holding units.")
@click.option(
    "--trait",
    "traits",
    multiple=True,
    metavar="COLUMN=TRAIT_ID",
    help="Trait of a wide column (repeatable); a bare TRAIT_ID names the one trait of a long table.",
)
@click.option(
    "--unit",
    "units",
    multiple=True,
    metavar="COLUMN=UNIT",
    help="Unit of a wide column (repeatable); a bare UNIT is the one unit of a long table.",
)
@click.option(
    "--ignore", multiple=True, metavar="COLUMN", help="Raw table: column to leave out (repeatable)."
)
@read_options
@click.option(
    "--vocabulary",
    type=click.Path(path_type=Path),
    help="Vocabulary folder (default: the bundled one).",
)
def check(target: Path, group_by: str, html_path: Path | None, json_path: Path | None, taxon, source,
          value_column, trait_column, unit_column, traits, units, ignore, delimiter, decimal, thousands,
          encoding, missing, vocabulary) -> None:  # fmt: skip
    """Look for unit mistakes in TARGET: a built package folder (or its datapackage.json) or
    one raw table (CSV, TSV, Parquet). Nothing is changed; findings are printed, and written
    as JSON and HTML on request."""
    folder = target.parent if target.name == "datapackage.json" else target
    if (folder / "datapackage.json").is_file():
        result = check_package(folder, group_by)
    else:
        trait_of, one_trait = column_pairs(traits, "--trait", allow_bare=True)
        unit_of, one_unit = column_pairs(units, "--unit", allow_bare=True)
        spec = TableSpec(
            target, taxon=taxon, source=source, value_column=value_column,
            trait_column=trait_column, unit_column=unit_column, trait=one_trait, unit=one_unit,
            traits=trait_of, units=unit_of, ignore=tuple(ignore),
            read=make_read_options(delimiter, decimal, thousands, encoding, missing),
        )  # fmt: skip
        result = check_table(spec, group_by, vocabulary=load_vocabulary(vocabulary))
    for line in summary_lines(result):
        click.echo(line)
    if json_path is not None:
        json_path.write_text(
            json.dumps(findings_document(result), indent=2, ensure_ascii=False), encoding="utf-8"
        )
        click.echo(f"findings written to {json_path}")
    if html_path is not None:
        from harmonize.report_html import render_report  # matplotlib: imported on use

        html_path.write_text(render_report(result), encoding="utf-8")
        click.echo(f"report written to {html_path}")
    sys.exit(1 if result.alarming else 0)
