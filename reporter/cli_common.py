"""What every command shares: its options, and how a failure becomes one line and an exit
code (see :mod:`reporter.cli`)."""

from __future__ import annotations

import traceback

import click

from reporter.errors import (
    EXIT_BAD_INPUT,
    EXIT_FAILED,
    InputError,
    ReporterError,
    one_line,
    symlink_loop,
)

MAX_LINES = 50

debug_option = click.option("--debug", is_flag=True, help="Show a traceback on failure.")
strict_option = click.option("--strict", is_flag=True, help="Treat warnings as errors.")
quiet_option = click.option("--quiet", "-q", is_flag=True, help="Print no progress.")


def print_warnings(warnings) -> None:
    """Each warning on its own line on standard error, at most :data:`MAX_LINES`."""
    for w in warnings[:MAX_LINES]:
        click.echo(one_line(str(w)), err=True)
    if len(warnings) > MAX_LINES:
        click.echo(f"... and {len(warnings) - MAX_LINES} more warnings", err=True)


class Stop(Exception):
    """End the command with exit code ``code`` (its message is printed already)."""

    def __init__(self, code: int) -> None:
        self.code = code


def guarded(fn, debug: bool):
    """``fn()``; a failure is printed as one line per problem (a traceback only with
    ``debug``) and ends the command with its exit code (:class:`Stop`)."""
    try:
        return fn()
    except InputError as exc:
        if debug:
            traceback.print_exc()
        problems = exc.problems
        errors = [p for p in problems if p.severity == "error"]
        for p in problems[:MAX_LINES]:
            click.echo(one_line(str(p)), err=True)
        if len(problems) > MAX_LINES:
            click.echo(f"... and {len(problems) - MAX_LINES} more problems", err=True)
        # a capped line ("... and 51 more empty values") counts the problems it stands for
        n_errors = sum(p.count for p in errors)
        n_warn = sum(p.count for p in problems) - n_errors
        if errors:
            summary = f"{n_errors} error(s) in the inputs"
        else:
            summary = f"{n_warn} warning(s) treated as errors (--strict)"
        click.echo(f"reporter: {summary}; nothing was written", err=True)
        raise Stop(exc.exit_code) from None
    except ReporterError as exc:
        if debug:
            traceback.print_exc()
        click.echo(f"reporter: {one_line(str(exc))}", err=True)
        raise Stop(exc.exit_code) from None
    except KeyboardInterrupt:
        click.echo("reporter: interrupted; nothing was written", err=True)
        raise Stop(EXIT_FAILED) from None
    except Exception as exc:  # an internal fault: say so plainly
        if debug:
            traceback.print_exc()
        if (loop := symlink_loop(exc)) is not None:     # bad input, wherever it is met
            click.echo(f"reporter: {one_line(str(loop))}", err=True)
            raise Stop(EXIT_BAD_INPUT) from None
        click.echo(f"reporter: internal error: {type(exc).__name__}: {one_line(str(exc))} "
                   "(run with --debug for a traceback)", err=True)
        raise Stop(EXIT_FAILED) from None

