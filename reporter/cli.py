"""Thin command line: load settings, call one function, map errors to exit codes.

Exit codes: 0 success; 1 failure; 2 bad input or usage (one line per problem, no
traceback unless ``--debug``).
"""

from __future__ import annotations

import contextlib
import ipaddress
import signal
import threading
from pathlib import Path

import click

from reporter import __version__
from reporter.cli_archive import countersign, repair, sign_off_cmd, verify
from reporter.cli_common import (
    MAX_LINES,
    Stop,
    debug_option,
    guarded,
    print_warnings,
    quiet_option,
    strict_option,
)
from reporter.errors import EXIT_BAD_INPUT, EXIT_FAILED, EXIT_OK, one_line


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="reporter")
def cli() -> None:
    """Build investment committee packs (HTML, PDF and results files) from a pack folder."""


for _command in (sign_off_cmd, countersign, verify, repair):     # see reporter.cli_archive
    cli.add_command(_command)


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

    report = guarded(lambda: build_pack(pack, out, strict=strict, progress=Progress(quiet=quiet)),
                     debug)
    print_warnings(report.warnings)
    click.echo(one_line(f"wrote {report.out}: " + ", ".join(report.files)))


@cli.command()
@click.argument("pack", type=click.Path(path_type=Path))
@strict_option
@debug_option
def check(pack: Path, strict: bool, debug: bool) -> None:
    """Validate PACK only, and summarise what was found."""
    from reporter.summary import check_pack

    summary = guarded(lambda: check_pack(pack, strict=strict), debug)
    print_warnings(summary.warnings)
    click.echo(summary.text)




@cli.command("build-all")
@click.argument("schemes_dir", type=click.Path(path_type=Path))
@click.option("--out", "-o", required=True, type=click.Path(path_type=Path),
              help="Folder that receives one build folder per scheme.")
@click.option("--workers", "-j", type=click.IntRange(min=1),
              help="Local worker processes (default: the number of cores).")
@click.option("--scheduler", metavar="ADDRESS",
              help="Run on this Dask distributed scheduler (e.g. tcp://10.0.0.5:8786).")
@strict_option
@quiet_option
@debug_option
def build_all_cmd(schemes_dir: Path, out: Path, workers, scheduler, strict: bool, quiet: bool,
                  debug: bool) -> None:
    """Build every pack folder under SCHEMES_DIR into --out/<scheme>/.

    One failing scheme never stops the others; exit 1 if any failed.
    """
    from reporter.batch import FAILED, build_all, summary_table
    from reporter.progress import BatchProgress

    with BatchProgress(quiet=quiet) as progress:
        results = guarded(lambda: build_all(schemes_dir, out, workers=workers,
                                            scheduler=scheduler, strict=strict,
                                            on_result=progress.update), debug)
    click.echo(summary_table(results))
    if any(r.status == FAILED for r in results):
        raise Stop(EXIT_FAILED)


@cli.command()
@click.argument("folder", type=click.Path(path_type=Path))
@debug_option
def init(folder: Path, debug: bool) -> None:
    """Start a pack in FOLDER (new or empty): a commented pack.toml and empty CSV files
    with the right headers."""
    from reporter.starter import init_pack

    names = guarded(lambda: init_pack(folder), debug)
    click.echo(one_line(f"wrote {folder}: " + ", ".join(names)))
    click.echo(f"next: fill in the CSV files and [pack] in pack.toml, then "
               f"'reporter check {folder}'")


@cli.command()
@click.option("--archive", "-a", required=True, type=click.Path(path_type=Path),
              help="Archive folder to publish (it must pass 'reporter verify').")
@click.option("--out", "-o", required=True, type=click.Path(path_type=Path),
              help="Site folder; replaced whole and atomically when the build succeeds.")
@quiet_option
@debug_option
def site(archive: Path, out: Path, quiet: bool, debug: bool) -> None:
    """Build the trustees' static site from the signed packs in --archive into --out.

    Exit 1 (nothing written) when the archive fails verification.
    """
    from reporter.progress import Progress
    from reporter.site import build_site

    report = guarded(lambda: build_site(archive, out, progress=Progress(quiet=quiet)), debug)
    click.echo(one_line(f"wrote {report.out}: {report.n_packs} signed pack(s), "
                        f"{len(report.files)} files, {report.n_bytes:,} bytes; ledger head "
                        f"{report.head_hash or '(empty)'}"))


class PortType(click.ParamType):
    """A TCP port, 0 to 65535; anything else is one plain sentence (click's IntRange said
    "'abc' is not a valid integer range")."""

    name = "port"

    def convert(self, value, param, ctx):
        if isinstance(value, int):
            return value
        text = str(value).strip()
        if text.isascii() and text.isdigit() and int(text) <= 65535:
            return int(text)
        self.fail("the port must be a whole number from 0 to 65535 (0 picks a free one)",
                  param, ctx)


@cli.command()
@click.argument("pack", type=click.Path(exists=True, path_type=Path))
@click.option("--port", "-p", type=PortType(), default=8765, show_default=True,
              help="Port to serve on; 0 picks a free one (printed).")
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address to listen on. Another than 127.0.0.1 shows the unsigned pack to "
                   "anyone who can reach this machine.")
@debug_option
def preview(pack: Path, port: int, host: str, debug: bool) -> None:
    """Serve PACK's HTML and rebuild it as its files change; the page reloads itself.

    A commentary or template edit re-renders without re-estimating. Nothing is written.
    Ctrl-C stops.
    """
    from reporter.preview.server import Preview

    def report(page, changed: bool) -> None:
        if not page.ok:
            for line in page.problems[:MAX_LINES]:
                click.echo(line, err=True)
            click.echo(f"reporter: {len(page.problems)} problem(s); the page lists them",
                       err=True)
        elif changed:
            click.echo(f"rebuilt ({'HTML only' if page.stages == 'render' else 'in full'})",
                       err=True)

    click.echo(f"building {pack} ...", err=True)
    server = guarded(lambda: Preview(pack, host, port, on_update=report), debug)
    report(server.state.page, True)
    if not ipaddress.ip_address(server.httpd.server_address[0]).is_loopback:
        click.echo(f"reporter: warning: listening on {host}: anyone who can reach this machine "
                   "there sees the unsigned pack", err=True)
    click.echo(f"previewing {pack} at {server.url} (Ctrl-C stops)")
    guarded(server.serve_forever, debug)
    click.echo("preview stopped")




def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit code (tests call this directly).

    A usage error (unknown option or command, missing argument, bad value) is one line on
    standard error and exit 2; ``reporter`` alone prints the help and exits 0.
    """
    with _stops_as_interrupts():
        return _main(argv)


@contextlib.contextmanager
def _stops_as_interrupts():
    """Within this block, SIGTERM and SIGHUP (``timeout``, ``kill``, a closed terminal) end
    the command as Ctrl-C does: a KeyboardInterrupt, so that a build's cleanup runs (its
    staging folder removed, nothing written). By default Python dies on them at once, and a
    killed build left its ``.OUT.tmp-...`` staging folder behind. Only where the signal is
    still the system's default and this is the main thread; the handlers before are put
    back on exit (tests call :func:`main` many times in one process)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    before = {}
    for sig in (signal.SIGTERM, getattr(signal, "SIGHUP", None)):
        if sig is not None and signal.getsignal(sig) == signal.SIG_DFL:
            before[sig] = signal.signal(sig, _interrupt)
    try:
        yield
    finally:
        for sig, handler in before.items():
            signal.signal(sig, handler)


def _interrupt(signum, frame):
    raise KeyboardInterrupt(signal.Signals(signum).name)


def _main(argv: list[str] | None) -> int:
    try:
        cli.main(args=argv, prog_name="reporter", standalone_mode=False)
    except KeyboardInterrupt:           # outside a command's own handling (while parsing)
        click.echo("reporter: interrupted; nothing was written", err=True)
        return EXIT_FAILED
    except Stop as e:
        return e.code
    except _NO_ARGS_IS_HELP as e:
        click.echo(e.ctx.get_help() if e.ctx is not None else str(e))
        return EXIT_OK
    except click.UsageError as e:
        click.echo(usage_line(e), err=True)
        return EXIT_BAD_INPUT
    except click.exceptions.Exit as e:
        return e.exit_code
    except click.Abort:
        return EXIT_FAILED
    return EXIT_OK


# click up to 8.1 raises NoArgsIsHelp (not a UsageError); 8.2 on raise NoArgsIsHelpError, a
# UsageError: either way `reporter` alone prints the help.
_NO_ARGS_IS_HELP = tuple(getattr(click.exceptions, name) for name in
                         ("NoArgsIsHelp", "NoArgsIsHelpError")
                         if hasattr(click.exceptions, name))


def usage_line(e: click.UsageError) -> str:
    """One line for a usage error: the command, what is wrong, and where the help is."""
    command = e.ctx.command_path if e.ctx is not None else "reporter"
    message = " ".join(e.format_message().split()).rstrip(".")
    return f"{command}: {message} (see '{command} --help')"


if __name__ == "__main__":
    raise SystemExit(main())
