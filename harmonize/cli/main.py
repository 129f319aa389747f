"""The `harmonize` command: a group of small commands, each a thin layer over the library.

Only this layer prints and exits. Library errors become one line on stderr naming the file, row
and column, with an exit code from EXIT_CODES; `--debug` shows the full traceback instead.
"""

from __future__ import annotations

import sys

import click

from harmonize import __version__
from harmonize.arrow_memory import choose_memory_pool
from harmonize.cli import build_cmd, check_cmd, export_cmd, quick_cmd, review_cmd, vocab_cmd
from harmonize.errors import HarmonizeError

EXIT_CODES = {
    0: "success: package written and validated, no names waiting for review",
    1: "package written and validated, but some trait names need review (their cells are in rejects)",
    2: "usage error (unknown option, missing argument)",
    3: "bad input: project file, mapping, vocabulary or source file cannot be used",
    4: "build failed: the package could not be written or did not validate (previous output untouched)",
    5: "another build holds the output lock",
}


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="harmonize")
@click.option("--debug", is_flag=True, help="Show full tracebacks instead of one-line errors.")
@click.pass_context
def cli(context: click.Context, debug: bool) -> None:
    """Harmonise organism trait tables into one validated Frictionless Data Package."""
    context.ensure_object(dict)
    context.obj["debug"] = debug


cli.help = (
    (cli.help or "")
    + "\n\n\b\nExit codes:\n"
    + "\n".join(f"  {code}  {text}" for code, text in EXIT_CODES.items())
)
cli.add_command(build_cmd.build)
cli.add_command(quick_cmd.quick)
cli.add_command(vocab_cmd.vocab)
cli.add_command(review_cmd.review)
cli.add_command(export_cmd.export)
cli.add_command(check_cmd.check)


def _one_line(error: object) -> str:
    """Messages quoting a library (pyarrow, pint) may hold line breaks; the CLI promises one line."""
    return " ".join(str(error).split("\n")).replace("\r", " ")


def main(argv: list[str] | None = None) -> None:
    debug = "--debug" in (argv if argv is not None else sys.argv[1:])
    choose_memory_pool()  # jemalloc where available: see harmonize/arrow_memory.py
    try:
        result = cli.main(args=argv, prog_name="harmonize", standalone_mode=False)
        sys.exit(result if isinstance(result, int) else 0)
    except click.exceptions.Abort:
        click.echo("aborted", err=True)
        sys.exit(130)
    except click.ClickException as error:  # usage errors: one line too, with where to look
        context = getattr(error, "ctx", None)
        hint = f" (see '{context.command_path} --help')" if context is not None else ""
        click.echo(f"error: {_one_line(error.format_message())}{hint}", err=True)
        sys.exit(2)
    except HarmonizeError as error:
        if debug:
            raise
        click.echo(f"error: {_one_line(error)}", err=True)
        sys.exit(error.exit_code)
    except KeyboardInterrupt:
        click.echo("interrupted; the previous output is untouched", err=True)
        sys.exit(130)
    except SystemExit:
        raise
    except (MemoryError, RecursionError) as error:
        click.echo(
            f"error: out of resources ({type(error).__name__}); see limits in harmonize.yaml",
            err=True,
        )
        sys.exit(4)
    except OSError as error:  # disk full, permission denied: the file system's own words are clear
        if debug:
            raise
        name = f" {error.filename}" if getattr(error, "filename", None) else ""
        click.echo(f"error:{name}: {_one_line(error.strerror or error)}", err=True)
        sys.exit(4)
    except Exception as error:  # a bug in harmonize, not bad input: say so, keep the cause visible
        if debug:
            raise
        click.echo(
            f"internal error (a bug in harmonize, please report it): {type(error).__name__}: {_one_line(error)}; "
            "rerun with --debug for the traceback",
            err=True,
        )
        sys.exit(4)
