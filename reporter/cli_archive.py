"""The archive's commands: sign-off, countersign, verify and repair (registered on the
command group in :mod:`reporter.cli`)."""

from __future__ import annotations

from pathlib import Path

import click

from reporter.cli_common import MAX_LINES, Stop, debug_option, guarded, quiet_option
from reporter.errors import EXIT_BAD_INPUT, EXIT_FAILED, InputError, one_line, shown_name
from reporter.user_files import check_regular


def key_options(fn):
    """--key and --key-pass-env: a digital signature with a PKCS#12 key."""
    fn = click.option("--key-pass-env", metavar="NAME",
                      help="Environment variable holding the key's passphrase (else a "
                      "prompt on the terminal).")(fn)
    return click.option("--key", type=click.Path(path_type=Path),
                        help="Signer's PKCS#12 (.p12) key: sign the PDF digitally.")(fn)


def signer_options(archive_help: str, by_help: str, role_help: str):
    """--archive, --by, --role and --minute-ref: who signs, and into which archive."""
    def add(fn):
        fn = click.option("--minute-ref",
                          help="Reference of the minute that records the approval.")(fn)
        fn = click.option("--role", help=role_help)(fn)
        fn = click.option("--by", "signer", required=True, help=by_help)(fn)
        return click.option("--archive", "-a", required=True,
                            type=click.Path(path_type=Path), help=archive_help)(fn)
    return add


def _print_signatures(file: Path, trust: Path | None, matches, debug: bool) -> bool:
    """Report each digital signature of FILE; False when one fails, or when the ledger
    records one for the file and it has none (a stripped signature)."""
    from reporter.archive.signature import describe

    if file.suffix.lower() != ".pdf":
        return True
    lines, ok = guarded(lambda: describe(file, trust), debug)
    for line in lines:
        click.echo(line)
    expected = [m.entry for m in matches if m.entry.cert_sha256]
    if expected and lines == [f"{shown_name(file)}: carries no digital signature"]:
        click.echo(f"{shown_name(file)}: the ledger records a digital signature that is missing")
        return False
    return ok


@click.command("sign-off")
@click.argument("build_dir", type=click.Path(path_type=Path))
@signer_options("Archive folder (created when new).", "Name of the person signing off.",
                "Their role, e.g. chair of the investment committee.")
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
                click.echo(f"{shown_name(exc.archive)}: {line}", err=True)
            if len(exc.findings) > MAX_LINES:
                click.echo(f"... and {len(exc.findings) - MAX_LINES} more problems", err=True)
            raise

    report = guarded(run, debug)
    e = report.entry
    click.echo(f"signed off {report.pdf}")
    click.echo(f"  ledger entry {e.seq}, revision {e.revision}"
               + (f", supersedes entry {e.supersedes}" if e.supersedes else ""))
    click.echo(f"  pdf sha256   {e.pdf_sha256}")
    click.echo(f"  ledger head  {e.entry_hash}  (note this in the minutes)")
    click.echo(f"  digital signature: {e.cert_subject}, certificate sha256 {e.cert_sha256}"
               if e.cert_sha256 else "  the PDF carries no digital signature (--key adds one)")


@click.command()
@click.argument("pdf", type=click.Path(path_type=Path))
@signer_options("Archive folder holding PDF.", "Name of the person countersigning.",
                "Their role, e.g. secretary to the committee.")
@key_options
@debug_option
def countersign(pdf: Path, archive: Path, signer: str, role, minute_ref, key, key_pass_env,
                debug: bool) -> None:
    """Add the next signer's digital signature to the archived PDF, as a new revision."""
    from reporter.archive.countersign import countersign as run

    if key is None:
        click.echo("reporter countersign: --key is required", err=True)
        raise Stop(EXIT_BAD_INPUT)
    signing_key = _open_key(key, key_pass_env, debug)
    report = guarded(lambda: run(pdf, archive, signing_key, signer=signer, role=role,
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
            raise Stop(EXIT_BAD_INPUT)
        return None
    from reporter.archive.keys import open_key

    return guarded(lambda: open_key(key, pass_env), debug)


@click.command()
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
            raise Stop(EXIT_BAD_INPUT)
        try:
            check_regular(file)
        except InputError as exc:
            click.echo(f"reporter: {one_line(str(exc))}", err=True)
            raise Stop(EXIT_BAD_INPUT) from None
        matches = guarded(lambda: find_file(file, archive), debug)
        signed_ok = _print_signatures(file, trust, matches, debug)
        if not matches:
            click.echo(f"{shown_name(file)}: NOT in the archive (its sha256 matches no "
                       "ledger entry)")
            raise Stop(EXIT_FAILED)
        for m in matches:
            e = m.entry
            click.echo(f"{shown_name(file)}: matches {shown_name(m.path)}, ledger entry "
                       f"{e.seq}: {e.title}, period ending {e.period_end}, signed off by "
                       f"{e.signer} on {e.signed_utc}"
                       + (f"; superseded by entry {m.superseded_by.seq}"
                          if m.superseded_by else ""))
        if not signed_ok:
            raise Stop(EXIT_FAILED)
        return
    if trust is not None:                     # it would be ignored: say so, do not pass
        click.echo("reporter: --trust checks the digital signatures of FILE; give it with "
                   "FILE", err=True)
        raise Stop(EXIT_BAD_INPUT)
    minuted = guarded(lambda: [parse_head(h, "--head") for h in heads]
                      + (read_heads_file(head_file) if head_file is not None else []), debug)
    report = guarded(lambda: verify_archive(archive), debug)
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
        raise Stop(EXIT_FAILED)


@click.command()
@click.option("--archive", "-a", required=True, type=click.Path(path_type=Path),
              help="Archive folder.")
@debug_option
def repair(archive: Path, debug: bool) -> None:
    """Move files that no ledger entry records into quarantine/ (nothing is deleted)."""
    from reporter.archive.verify import repair as repair_archive

    report = guarded(lambda: repair_archive(archive), debug)
    for src, dest in report.moved:
        click.echo(f"moved {shown_name(src)} -> {shown_name(dest)}")
    for f in report.unresolved:
        click.echo(f"cannot repair: {f} (restore it from a backup)")
    if not report.moved and not report.unresolved:
        click.echo("nothing to repair")
    if report.unresolved:
        raise Stop(EXIT_FAILED)
