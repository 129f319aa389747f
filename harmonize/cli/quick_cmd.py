"""`harmonize quick`: harmonise one table without writing a mapping file."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from harmonize.build import build_project
from harmonize.cli.options import column_pairs, make_read_options, read_options
from harmonize.cli.render import exit_code, progress_printer, summary_lines
from harmonize.errors import ConfigError
from harmonize.lookup_tables import command_line_fix
from harmonize.project import (
    LongColumns,
    TemperatureSpec,
    TraitColumn,
    single_file_project,
)


@click.command()
@click.argument("table", type=click.Path(path_type=Path))
@click.option(
    "--level",
    type=click.Choice(["individual", "population"]),
    default="individual",
    show_default=True,
)
@click.option("--taxon", help="Column holding the taxon name.")
@click.option("--individual", help="Column identifying the individual.")
@click.option("--sex", help="Column holding sex.")
@click.option("--life-stage", help="Column holding the life stage.")
@click.option("--site", help="Column holding the site or locality.")
@click.option("--date", help="Column holding the date.")
@click.option("--sample-size", help="Column holding n (population tables).")
@click.option(
    "--temperature",
    help="Column holding the measurement temperature, optionally COLUMN:UNIT (default degC).",
)
@click.option(
    "--unit",
    "units",
    multiple=True,
    metavar="COLUMN=UNIT",
    help="Unit of a trait column (repeatable).",
)
@click.option(
    "--trait",
    "traits",
    multiple=True,
    metavar="COLUMN=TRAIT_ID",
    help="Declare a column's trait (repeatable).",
)
@click.option(
    "--statistic",
    "statistics",
    multiple=True,
    metavar="COLUMN=STAT",
    help="Statistic of a column: mean, sd, se, n, ... (repeatable).",
)
@click.option(
    "--ignore",
    multiple=True,
    metavar="COLUMN",
    help="Column that is neither trait nor context (repeatable).",
)
@click.option(
    "--trait-column", help="Long table: column holding trait names (switches to the long layout)."
)
@click.option("--value-column", help="Long table: column holding values.")
@click.option("--unit-column", help="Long table: column holding units.")
@click.option("--statistic-column", help="Long table: column holding the statistic of each row.")
@click.option(
    "--ci-level",
    type=float,
    default=0.95,
    show_default=True,
    help="Confidence level of the table's CI bounds, as a fraction.",
)
@click.option(
    "--plus-minus",
    type=click.Choice(["sd", "se"]),
    help="Population table: what the half-width after '±' in a mean cell is ('4.1 ± 0.3').",
)
@read_options
@click.option(
    "--output",
    "-o",
    type=click.Path(path_type=Path),
    help="Output folder (default: <table>-harmonized beside it).",
)
@click.option(
    "--format",
    "output_format",
    type=click.Choice(["csv", "parquet"]),
    default="csv",
    show_default=True,
)
@click.option("--quiet", "-q", is_flag=True, help="Print only the summary.")
def quick(table: Path, level: str, taxon, individual, sex, life_stage, site, date, sample_size, temperature,
          units, traits, statistics, ignore, trait_column, value_column, unit_column, statistic_column,
          ci_level, plus_minus, delimiter, decimal, thousands, encoding, missing, output, output_format, quiet) -> None:  # fmt: skip
    """Harmonise TABLE (CSV, TSV or Parquet) in one go: name the columns, get a package."""
    context = {
        key: column
        for key, column in {
            "taxon": taxon, "individual": individual, "sex": sex, "life_stage": life_stage,
            "site": site, "date": date, "sample_size": sample_size,
        }.items()
        if column
    }  # fmt: skip
    unit_of, trait_of, statistic_of = (
        column_pairs(units, "--unit")[0],
        column_pairs(traits, "--trait")[0],
        column_pairs(statistics, "--statistic")[0],
    )
    declared = {}
    for column in sorted(set(unit_of) | set(trait_of) | set(statistic_of)):
        declared[column] = TraitColumn(
            column, trait_of.get(column), unit_of.get(column), statistic_of.get(column)
        )
    columns = None
    if trait_column or value_column:
        if not (trait_column and value_column):
            raise ConfigError("a long table needs both --trait-column and --value-column")
        columns = LongColumns(trait_column, value_column, unit_column, statistic_column, None)
        if declared:
            raise ConfigError(
                "--unit/--trait/--statistic are for wide tables; a long table uses --unit-column"
            )
    spec = None
    if temperature:
        column, _, unit = temperature.partition(":")
        spec = TemperatureSpec(column=column, value=None, unit=unit or "degC")
    project = single_file_project(
        table,
        level=level,
        layout="long" if columns else "wide",
        output=output,
        context=context,
        traits=declared,
        columns=columns,
        ignore=tuple(ignore),
        read=make_read_options(delimiter, decimal, thousands, encoding, missing),
        temperature=spec,
        output_format=output_format,
        ci_level=ci_level,
        plus_minus=plus_minus,
    )
    report = build_project(project, progress=progress_printer(quiet))
    hint = command_line_fix(project.mappings[0])  # quick mode has no review sheet
    for line in summary_lines(report, review_hint=hint):
        click.echo(line)
    sys.exit(exit_code(report))
