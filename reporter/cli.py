"""Thin command line: load settings, call one function, map errors to exit codes.

Exit codes: 0 success; 1 failure; 2 bad input or usage (one line per problem, no
traceback unless ``--debug``).
"""

from __future__ import annotations

import sys
import traceback
from pathlib import Path

import click

from reporter import __version__
from reporter.errors import EXIT_BAD_INPUT, EXIT_FAILED, EXIT_OK, InputError, ReporterError

MAX_LINES = 50

debug_option = click.option("--debug", is_flag=True, help="Show a traceback on failure.")
strict_option = click.option("--strict", is_flag=True, help="Treat warnings as errors.")
quiet_option = click.option("--quiet", "-q", is_flag=True, help="Print no progress.")


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="reporter")
def cli() -> None:
    """Build investment committee packs (HTML, PDF and results files) from a pack folder."""


@cli.command()
@click.argument("pack", type=click.Path(path_type=Path))
@click.option("--out", "-o", required=True, type=click.Path(path_type=Path),
              help="Output folder; replaced atomically when the build succeeds.")
@strict_option
@quiet_option
@debug_option
def build(pack: Path, out: Path, strict: bool, quiet: bool, debug: bool) -> None:
    """Build the pack in PACK (a folder or its pack.toml) into --out."""
    from reporter.build import build_pack
    from reporter.progress import Progress

    report = _run(lambda: build_pack(pack, out, strict=strict, progress=Progress(quiet=quiet)),
                  debug)
    _print_warnings(report.warnings)
    click.echo(f"wrote {report.out}: " + ", ".join(report.files))


@cli.command()
@click.argument("pack", type=click.Path(path_type=Path))
@strict_option
@debug_option
def check(pack: Path, strict: bool, debug: bool) -> None:
    """Validate PACK only, and summarise what was found."""
    from reporter.summary import check_pack

    summary = _run(lambda: check_pack(pack, strict=strict), debug)
    _print_warnings(summary.warnings)
    click.echo(summary.text)


def _print_warnings(warnings) -> None:
    for w in warnings[:MAX_LINES]:
        click.echo(str(w), err=True)
    if len(warnings) > MAX_LINES:
        click.echo(f"... and {len(warnings) - MAX_LINES} more warnings", err=True)


class _Exit(Exception):
    def __init__(self, code: int) -> None:
        self.code = code


def _run(fn, debug: bool):
    try:
        return fn()
    except InputError as exc:
        if debug:
            traceback.print_exc()
        problems = exc.problems
        errors = [p for p in problems if p.severity == "error"]
        for p in problems[:MAX_LINES]:
            click.echo(str(p), err=True)
        if len(problems) > MAX_LINES:
            click.echo(f"... and {len(problems) - MAX_LINES} more problems", err=True)
        n_warn = len(problems) - len(errors)
        if errors:
            summary = f"{len(errors)} error(s) in the inputs"
        else:
            summary = f"{n_warn} warning(s) treated as errors (--strict)"
        click.echo(f"reporter: {summary}; nothing was written", err=True)
        raise _Exit(exc.exit_code) from None
    except ReporterError as exc:
        if debug:
            traceback.print_exc()
        click.echo(f"reporter: {exc}", err=True)
        raise _Exit(exc.exit_code) from None
    except KeyboardInterrupt:
        click.echo("reporter: interrupted; nothing was written", err=True)
        raise _Exit(EXIT_FAILED) from None
    except Exception as exc:  # an internal fault: say so plainly
        if debug:
            traceback.print_exc()
        click.echo(f"reporter: internal error: {type(exc).__name__}: {exc} "
                   "(run with --debug for a traceback)", err=True)
        raise _Exit(EXIT_FAILED) from None


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit code (tests call this directly)."""
    try:
        cli.main(args=argv, prog_name="reporter", standalone_mode=False)
    except _Exit as e:
        return e.code
    except click.exceptions.NoArgsIsHelp:
        return EXIT_OK
    except click.UsageError as e:
        e.show(file=sys.stderr)
        return EXIT_BAD_INPUT
    except click.exceptions.Exit as e:
        return e.exit_code
    except click.Abort:
        return EXIT_FAILED
    return EXIT_OK


if __name__ == "__main__":
    raise SystemExit(main())
