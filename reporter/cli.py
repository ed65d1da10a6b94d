"""Thin command line: load settings, call one function, map errors to exit codes.

Exit codes: 0 success; 1 failure; 2 bad input or usage (one line per problem, no
traceback unless ``--debug``).
"""

from __future__ import annotations

import traceback
from pathlib import Path

import click

from reporter import __version__
from reporter.errors import EXIT_BAD_INPUT, EXIT_FAILED, EXIT_OK, InputError, ReporterError

MAX_LINES = 50

debug_option = click.option("--debug", is_flag=True, help="Show a traceback on failure.")
strict_option = click.option("--strict", is_flag=True, help="Treat warnings as errors.")
quiet_option = click.option("--quiet", "-q", is_flag=True, help="Print no progress.")


def key_options(fn):
    """--key and --key-pass-env: a digital signature with a PKCS#12 key."""
    fn = click.option("--key-pass-env", metavar="NAME",
                      help="Environment variable holding the key's passphrase (else a "
                      "prompt on the terminal).")(fn)
    return click.option("--key", type=click.Path(path_type=Path),
                        help="Signer's PKCS#12 (.p12) key: sign the PDF digitally.")(fn)


def _print_signatures(file: Path, trust: Path | None, matches, debug: bool) -> bool:
    """Report each digital signature of FILE; False when one fails, or when the ledger
    records one for the file and it has none (a stripped signature)."""
    from reporter.archive.signature import describe

    if file.suffix.lower() != ".pdf":
        return True
    lines, ok = _run(lambda: describe(file, trust), debug)
    for line in lines:
        click.echo(line)
    expected = [m.entry for m in matches if m.entry.cert_sha256]
    if expected and lines == [f"{file}: carries no digital signature"]:
        click.echo(f"{file}: the ledger records a digital signature that is missing")
        return False
    return ok


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


@cli.command("sign-off")
@click.argument("build_dir", type=click.Path(path_type=Path))
@click.option("--archive", "-a", required=True, type=click.Path(path_type=Path),
              help="Archive folder (created when new).")
@click.option("--by", "signer", required=True, help="Name of the person signing off.")
@click.option("--role", help="Their role, e.g. chair of the investment committee.")
@click.option("--minute-ref", help="Reference of the minute that records the approval.")
@click.option("--note", help="A short note kept with the sign-off.")
@click.option("--supersedes", is_flag=True,
              help="Replace this period's signed pack with this one (both are kept).")
@click.option("--reason", help="Why the earlier sign-off is superseded (with --supersedes).")
@key_options
@quiet_option
@debug_option
def sign_off_cmd(build_dir: Path, archive: Path, signer: str, role, minute_ref, note,
                 supersedes: bool, reason, key, key_pass_env, quiet: bool,
                 debug: bool) -> None:
    """Sign off the reviewed build in BUILD_DIR and archive it as a tagged PDF/A-3a."""
    from reporter.archive.signoff import BrokenArchive, SignOffRequest, sign_off
    from reporter.progress import Progress

    signing_key = _open_key(key, key_pass_env, debug)
    request = SignOffRequest(signer=signer, role=role, minute_ref=minute_ref, note=note,
                             supersedes=supersedes, reason=reason, key=signing_key)

    def run():
        try:
            return sign_off(build_dir, archive, request, progress=Progress(quiet=quiet))
        except BrokenArchive as exc:          # each problem on its own line, then the summary
            for line in exc.findings[:MAX_LINES]:
                click.echo(f"{exc.archive}: {line}", err=True)
            if len(exc.findings) > MAX_LINES:
                click.echo(f"... and {len(exc.findings) - MAX_LINES} more problems", err=True)
            raise

    report = _run(run, debug)
    e = report.entry
    click.echo(f"signed off {report.pdf}")
    click.echo(f"  ledger entry {e.seq}, revision {e.revision}"
               + (f", supersedes entry {e.supersedes}" if e.supersedes else ""))
    click.echo(f"  pdf sha256   {e.pdf_sha256}")
    click.echo(f"  ledger head  {e.entry_hash}  (note this in the minutes)")
    click.echo(f"  digital signature: {e.cert_subject}, certificate sha256 {e.cert_sha256}"
               if e.cert_sha256 else "  the PDF carries no digital signature (--key adds one)")


@cli.command()
@click.argument("pdf", type=click.Path(path_type=Path))
@click.option("--archive", "-a", required=True, type=click.Path(path_type=Path),
              help="Archive folder holding PDF.")
@click.option("--by", "signer", required=True, help="Name of the person countersigning.")
@click.option("--role", help="Their role, e.g. secretary to the committee.")
@click.option("--minute-ref", help="Reference of the minute that records the approval.")
@key_options
@debug_option
def countersign(pdf: Path, archive: Path, signer: str, role, minute_ref, key, key_pass_env,
                debug: bool) -> None:
    """Add the next signer's digital signature to the archived PDF, as a new revision."""
    from reporter.archive.countersign import countersign as run

    if key is None:
        click.echo("reporter countersign: --key is required", err=True)
        raise _Exit(EXIT_BAD_INPUT)
    signing_key = _open_key(key, key_pass_env, debug)
    report = _run(lambda: run(pdf, archive, signing_key, signer=signer, role=role,
                              minute_ref=minute_ref), debug)
    e = report.entry
    click.echo(f"countersigned {report.pdf}")
    click.echo(f"  ledger entry {e.seq}, revision {e.revision}, supersedes entry "
               f"{e.supersedes}")
    click.echo(f"  digital signature: {e.cert_subject}, certificate sha256 {e.cert_sha256}")
    click.echo(f"  ledger head  {e.entry_hash}  (note this in the minutes)")


def _open_key(key: Path | None, pass_env: str | None, debug: bool):
    """The checked signing key of --key (None without it)."""
    if key is None:
        if pass_env is not None:
            click.echo("reporter: --key-pass-env needs --key", err=True)
            raise _Exit(EXIT_BAD_INPUT)
        return None
    from reporter.archive.keys import open_key

    return _run(lambda: open_key(key, pass_env), debug)


@cli.command()
@click.argument("file", required=False, type=click.Path(path_type=Path))
@click.option("--archive", "-a", required=True, type=click.Path(path_type=Path),
              help="Archive folder.")
@click.option("--head", "heads", multiple=True, metavar="HASH",
              help="A ledger head from the minutes: check that it is an entry of an intact "
                   "chain (repeatable).")
@click.option("--head-file", type=click.Path(path_type=Path),
              help="A file of minuted heads, one a line ('#' comments, blank lines allowed).")
@click.option("--trust", type=click.Path(path_type=Path),
              help="PEM file of trusted root certificates: check each signature's chain.")
@debug_option
def verify(file: Path | None, archive: Path, heads: tuple[str, ...], head_file: Path | None,
           trust: Path | None, debug: bool) -> None:
    """Check the whole archive, or (with FILE) whether FILE is a signed pack in it.

    With --head or --head-file, also check that each minuted head is an entry of the
    chain, so that a ledger rewritten after it was minuted is caught.

    Exit 0 when intact (or FILE is archived), 1 when not, 2 when the archive cannot be read
    or a head is not a sha256.
    """
    from reporter.archive.anchor import check_heads, parse_head, read_heads_file
    from reporter.archive.verify import find_file, verify_archive

    if file is not None:
        if heads or head_file is not None:
            click.echo("reporter: --head and --head-file check the whole archive; give them "
                       "without FILE", err=True)
            raise _Exit(EXIT_BAD_INPUT)
        if not file.is_file():
            click.echo(f"reporter: {file}: no such file", err=True)
            raise _Exit(EXIT_BAD_INPUT)
        matches = _run(lambda: find_file(file, archive), debug)
        signed_ok = _print_signatures(file, trust, matches, debug)
        if not matches:
            click.echo(f"{file}: NOT in the archive (its sha256 matches no ledger entry)")
            raise _Exit(EXIT_FAILED)
        for m in matches:
            e = m.entry
            click.echo(f"{file}: matches {m.path}, ledger entry {e.seq}: {e.title}, period "
                       f"ending {e.period_end}, signed off by {e.signer} on {e.signed_utc}"
                       + (f"; superseded by entry {m.superseded_by.seq}"
                          if m.superseded_by else ""))
        if not signed_ok:
            raise _Exit(EXIT_FAILED)
        return
    minuted = _run(lambda: [parse_head(h, "--head") for h in heads]
                   + (read_heads_file(head_file) if head_file is not None else []), debug)
    report = _run(lambda: verify_archive(archive), debug)
    for f in report.findings:
        click.echo(str(f))
    for n in report.notes:
        click.echo(f"note: {n}")
    checks = check_heads(report, minuted)
    for c in checks:
        click.echo(str(c))
    unanchored = sum(not c.anchored for c in checks)
    if report.intact:
        n_files = sum(len(e.file_hashes) for e in report.entries)
        click.echo(f"archive intact: {len(report.entries)} entries, {n_files} files, "
                   f"ledger head {report.head_hash or '(empty)'}")
    else:
        click.echo(f"archive NOT intact: {len(report.findings)} problem(s)")
    if unanchored:
        click.echo(f"{unanchored} of {len(checks)} minuted head(s) NOT anchored: the ledger "
                   "does not hold the chain the minutes recorded")
    elif checks:
        click.echo(f"all {len(checks)} minuted head(s) anchored")
    if unanchored or not report.intact:
        raise _Exit(EXIT_FAILED)


@cli.command()
@click.option("--archive", "-a", required=True, type=click.Path(path_type=Path),
              help="Archive folder.")
@debug_option
def repair(archive: Path, debug: bool) -> None:
    """Move files that no ledger entry records into quarantine/ (nothing is deleted)."""
    from reporter.archive.verify import repair as repair_archive

    report = _run(lambda: repair_archive(archive), debug)
    for src, dest in report.moved:
        click.echo(f"moved {src} -> {dest}")
    for f in report.unresolved:
        click.echo(f"cannot repair: {f} (restore it from a backup)")
    if not report.moved and not report.unresolved:
        click.echo("nothing to repair")
    if report.unresolved:
        raise _Exit(EXIT_FAILED)


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
        results = _run(lambda: build_all(schemes_dir, out, workers=workers,
                                         scheduler=scheduler, strict=strict,
                                         on_result=progress.update), debug)
    click.echo(summary_table(results))
    if any(r.status == FAILED for r in results):
        raise _Exit(EXIT_FAILED)


@cli.command()
@click.argument("folder", type=click.Path(path_type=Path))
@debug_option
def init(folder: Path, debug: bool) -> None:
    """Start a pack in FOLDER (new or empty): a commented pack.toml and empty CSV files
    with the right headers."""
    from reporter.starter import init_pack

    names = _run(lambda: init_pack(folder), debug)
    click.echo(f"wrote {folder}: " + ", ".join(names))
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

    report = _run(lambda: build_site(archive, out, progress=Progress(quiet=quiet)), debug)
    click.echo(f"wrote {report.out}: {report.n_packs} signed pack(s), {len(report.files)} "
               f"files, {report.n_bytes:,} bytes; ledger head {report.head_hash or '(empty)'}")


@cli.command()
@click.argument("pack", type=click.Path(exists=True, path_type=Path))
@click.option("--port", "-p", type=click.IntRange(0, 65535), default=8765, show_default=True,
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
    server = _run(lambda: Preview(pack, host, port, on_update=report), debug)
    report(server.state.page, True)
    click.echo(f"previewing {pack} at {server.url} (Ctrl-C stops)")
    _run(server.serve_forever, debug)
    click.echo("preview stopped")


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
    """Entry point; returns the exit code (tests call this directly).

    A usage error (unknown option or command, missing argument, bad value) is one line on
    standard error and exit 2; ``reporter`` alone prints the help and exits 0.
    """
    try:
        cli.main(args=argv, prog_name="reporter", standalone_mode=False)
    except _Exit as e:
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
