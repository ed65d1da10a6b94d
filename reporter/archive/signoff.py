"""Sign off a reviewed build: a tagged PDF/A-3a that carries its data, archived read-only, and a
ledger entry chained to the one before it.

What is signed is exactly what was reviewed. Sign-off refuses an archive that fails
:func:`reporter.archive.verify.verify_archive` (a sign-off never extends a broken chain), a
build folder whose files no longer match its manifest, inputs that changed since the build,
and a re-render (with the build's own timestamp) that does not reproduce every output of the
build byte for byte: the HTML, every results file and the manifest (see
:mod:`reporter.archive.review`; the draft ``pack.pdf`` is the one file not re-rendered, and
why is stated there). The signed PDF is that pack with its cover status set to signed and
one sign-off page added at the end, so every earlier page keeps its page number.

Order of work, so that a crash leaves nothing half-recorded: the archive is verified;
everything is rendered in memory; the ledger's write lock is taken; the archive is verified
again and the refusal rules are checked again under the lock; the files are placed
(staging folder, then no-replace renames); then the entry is inserted and committed. A kill
after the files are placed and before the commit leaves files with no entry, which
``verify`` names and ``repair`` moves to quarantine.
"""

from __future__ import annotations

import datetime as dt
import sqlite3
from dataclasses import dataclass
from pathlib import Path

from weasyprint import Attachment

from reporter import __version__
from reporter.archive.ledger import (
    LEDGER_NAME,
    Entry,
    append,
    canonical_json,
    connect_read_only,
    entries_for,
    last_entry,
    ledger_transaction,
)
from reporter.archive.review import input_path, read_build, reproduce, sha256
from reporter.archive.signature import page_record, sign_pdf, signature_columns
from reporter.archive.verify import load_entries, verify_archive
from reporter.config import INPUT_ROLES, Settings, load_settings
from reporter.errors import EXIT_FAILED, InputError, Problem, ReporterError
from reporter.invisible import has_control, invisible_message
from reporter.progress import Progress
from reporter.render.pdf import render_pdf
from reporter.writer import OutputSet, place_in_archive

PDF_VARIANT = "pdf/a-3a"          # tagged (ISO 19005-3, level A)
MAX_TEXT = 500


class ArchiveError(ReporterError):
    """A sign-off the archive refuses (already signed, nothing to supersede ...)."""

    exit_code = EXIT_FAILED


@dataclass(frozen=True)
class SignOffRequest:
    """Who approves the pack, and on what authority."""

    signer: str
    role: str | None = None
    minute_ref: str | None = None
    note: str | None = None
    supersedes: bool = False
    reason: str | None = None
    key: object | None = None    # a keys.SigningKey: sign the PDF digitally (PAdES B-B)


@dataclass(frozen=True)
class SignOffReport:
    entry: Entry
    pdf: Path
    superseded: Entry | None


def archive_name(pack_name: str, period_end: str, revision: int) -> str:
    """``<pack>-<period>``, with ``-r<n>`` from the second revision on."""
    base = f"{pack_name}-{period_end}"
    return base if revision == 1 else f"{base}-r{revision}"


def sign_off(build_dir: Path | str, archive: Path | str, request: SignOffRequest, *,
             progress: Progress | None = None) -> SignOffReport:
    """Sign off the build in ``build_dir`` into ``archive`` (see the module docstring)."""
    progress = progress or Progress(quiet=True)
    archive = Path(archive).absolute()
    _check_request(request)
    _check_archive_folder(archive)
    with progress.stage("verify archive"):
        refuse_broken_archive(archive)
    with progress.stage("check build"):
        build = read_build(Path(build_dir))
        settings = load_settings(build.manifest["pack_dir"])
        period = settings.period_end.isoformat()
        existing = _existing(archive, settings.name, period)
        _refuse(existing, request, settings.name, period)
    with progress.stage("re-render"):
        a, outputs = reproduce(build, settings)
    revision = existing[-1].revision + 1 if existing else 1
    superseded = existing[-1] if existing else None
    name = archive_name(settings.name, period, revision)
    signed_utc = dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    with progress.stage("pdf"):
        pdf = _signed_pdf(a, outputs, build.manifest, settings, request, name, revision,
                          superseded, signed_utc)
        trustees_pdf = _signed_pdf(a, outputs, build.manifest, settings, request, name,
                                   revision, superseded, signed_utc, edition="trustees")
        if request.key is not None:                      # digital signature (signature.py)
            pdf = sign_pdf(pdf, request.key, reason=f"sign-off by {request.signer}")
            trustees_pdf = sign_pdf(trustees_pdf, request.key,
                                    reason=f"sign-off by {request.signer}")
    files = OutputSet()                   # the re-rendered bytes (equal to the build's)
    files.add(f"{period}/{name}.pdf", pdf)
    files.add(f"{period}/{name}-trustees.pdf", trustees_pdf)    # in the ledger's files
    files.add(f"{period}/{name}/pack.html", outputs["pack.html"])
    for rel in outputs.paths:
        if rel.startswith("results/"):
            files.add(f"{period}/{name}/{rel}", outputs[rel])

    archive.mkdir(parents=True, exist_ok=True)
    with ledger_transaction(archive) as con:   # waits while another sign-off holds the lock
        refuse_broken_archive(archive, locked=True)   # again: nothing else can change it now
        now_existing = entries_for(con, settings.name, period)
        _refuse(now_existing, request, settings.name, period)
        if [e.seq for e in now_existing] != [e.seq for e in existing]:
            raise ArchiveError(f"{settings.name} for {period}: another sign-off was recorded "
                               "while this one was being prepared; nothing was archived. "
                               "Check the archive, then run again if still needed")
        with progress.stage("archive"):
            place_in_archive(files, archive)
            entry = append(con, {
                "pack_name": settings.name, "period_end": period, "revision": revision,
                "title": settings.title, "organisation": settings.organisation,
                "signer": request.signer, "role": request.role,
                "minute_ref": request.minute_ref, "note": request.note,
                "signed_utc": signed_utc, "pdf_path": f"{period}/{name}.pdf",
                "pdf_sha256": sha256(pdf),
                "files": canonical_json({rel: sha256(files[rel]) for rel in files.paths}),
                "inputs": canonical_json(build.manifest["input_sha256"]),
                "tool_version": __version__,
                "supersedes": superseded.seq if superseded else None,
                "reason": request.reason,
                **signature_columns(request.key, pdf if request.key else None),
            })
    return SignOffReport(entry=entry, pdf=archive / entry.pdf_path, superseded=superseded)


def _signed_pdf(a, outputs: OutputSet, manifest: dict, settings: Settings,
                request: SignOffRequest, name: str, revision: int, superseded: Entry | None,
                signed_utc: str, edition: str = "full") -> bytes:
    """The pack as tagged PDF/A-3a with the sign-off page, carrying pack.toml, the inputs and
    the (re-rendered) results files as embedded attachments; ``edition`` "trustees" for the
    trustees' edition."""
    hashes = manifest["input_sha256"]
    order = [k for k in ("pack.toml", *INPUT_ROLES) if k in hashes]   # a fund may have no
    #                                                                   one holdings file
    keys = order + sorted(set(hashes) - set(order))
    shown = [(_input_name(settings, k).removeprefix("inputs/"), hashes[k]) for k in keys]
    record = {
        "signer": request.signer, "role": request.role, "minute_ref": request.minute_ref,
        "note": request.note, "signed_utc": _readable(signed_utc),
        "archive_name": name, "revision": revision, "reason": request.reason,
        "supersedes": (f"{superseded.pdf_path} (entry {superseded.seq}, signed by "
                       f"{superseded.signer} on {_readable(superseded.signed_utc)})")
                       if superseded else None,
        "inputs": shown, "digital": page_record(request.key, signed_utc),
    }
    attachments, seen = [], set()
    for key in keys:
        name = _input_name(settings, key)
        if name in seen:
            continue
        seen.add(name)
        what = ("the pack's settings" if key == "pack.toml" else f"{key} input"
                if key in settings.inputs else "the action log" if key == "actions.csv"
                else "commentary")
        attachments.append(Attachment(string=input_path(settings, key).read_bytes(),
                                      name=name, description=what, relationship="Source"))
    for rel in outputs.paths:
        if rel.startswith("results/"):
            attachments.append(Attachment(string=bytes(outputs[rel]), name=rel,
                                          description="results file", relationship="Data"))
    return render_pdf(a.html(for_print=True, signoff=record, edition=edition),
                      base_dir=settings.pack_dir,
                      allowed=(settings.pack_dir,), variant=PDF_VARIANT,
                      attachments=attachments)


def _readable(utc: str) -> str:
    """``2026-12-02T06:14:48Z`` as ``2026-12-02 06:14:48 UTC``."""
    return utc.replace("T", " ").replace("Z", " UTC")


def _check_request(request: SignOffRequest) -> None:
    problems = []
    texts = {"--by": request.signer, "--role": request.role,
             "--minute-ref": request.minute_ref, "--note": request.note,
             "--reason": request.reason}
    for option, text in texts.items():
        if text is None:
            continue
        if not text.strip():
            problems.append(Problem(option, "must not be empty"))
        elif len(text) > MAX_TEXT:
            problems.append(Problem(option, f"longer than {MAX_TEXT} characters"))
        elif has_control(text):
            problems.append(Problem(option, "contains a control character or line break"))
        elif found := invisible_message(text):
            problems.append(Problem(option, f"contains an {found}"))
    if request.supersedes and request.reason is None:
        problems.append(Problem("--supersedes", "needs --reason TEXT saying why"))
    if request.reason is not None and not request.supersedes:
        problems.append(Problem("--reason", "only applies with --supersedes"))
    if problems:
        raise InputError(problems)


def _check_archive_folder(archive: Path) -> None:
    if archive.exists() and not archive.is_dir():
        raise InputError([Problem(str(archive), "exists and is not a folder")])
    if archive.is_dir() and not (archive / LEDGER_NAME).exists() and any(archive.iterdir()):
        raise InputError([Problem(str(archive), f"is not empty and has no {LEDGER_NAME}; "
                                  "not an archive (choose an empty or new folder)")])


def _input_name(settings: Settings, key: str) -> str:
    """How an input is named on the sign-off page and in the PDF's attachments."""
    if key == "pack.toml":
        return key
    if key in settings.inputs:
        return f"inputs/{settings.inputs[key].display}"
    return key                                # commentary files and images, by path


def refuse_broken_archive(archive: Path, *, locked: bool = False) -> None:
    """Run the full :func:`verify_archive` of an existing archive and refuse it, with every
    finding on its own line, unless it is intact (a new archive has nothing to check).
    Unless the caller holds the ledger's write lock (``locked``), it is taken for the
    check, so that another sign-off's files placed a moment before its entry is committed
    are not taken for unrecorded files."""
    if not (archive / LEDGER_NAME).exists():
        return
    if locked:
        report = verify_archive(archive)
    else:
        load_entries(archive)             # a file that is no ledger: ArchiveUnreadable
        with ledger_transaction(archive, commit=False):   # the lock, for the check only
            report = verify_archive(archive)
    if not report.intact:
        raise BrokenArchive(archive, [str(f) for f in report.findings])


class BrokenArchive(ArchiveError):
    """The archive fails verification: nothing is signed into it (exit 1). ``findings``
    holds one line per problem (the command line prints each before the summary)."""

    def __init__(self, archive: Path, findings: list[str]) -> None:
        self.archive, self.findings = archive, findings
        super().__init__(
            f"{archive}: the archive fails verification ({len(findings)} problem(s)); "
            "nothing was signed. A sign-off never extends a broken archive: restore it "
            "from a backup (or run 'reporter repair' for unrecorded files) first")


def _existing(archive: Path, pack_name: str, period: str) -> list[Entry]:
    if not (archive / LEDGER_NAME).exists():
        return []
    try:
        con = connect_read_only(archive)
    except sqlite3.Error as exc:
        raise ArchiveError(f"{archive / LEDGER_NAME}: cannot be read ({exc})") from None
    try:
        return entries_for(con, pack_name, period)
    finally:
        con.close()


def _refuse(existing: list[Entry], request: SignOffRequest, pack_name: str,
            period: str) -> None:
    if existing and not request.supersedes:
        last = existing[-1]
        raise ArchiveError(
            f"{pack_name} for {period} is already signed off: entry {last.seq}, "
            f"{last.pdf_path}, by {last.signer} on {last.signed_utc}. A second sign-off "
            "needs --supersedes --reason TEXT (both documents are then kept)")
    if request.supersedes and not existing:
        raise ArchiveError(f"nothing to supersede: {pack_name} for {period} has no sign-off "
                           "in this archive")


def head_hash(archive: Path) -> str | None:
    """The hash of the ledger's last entry (to note in the minutes)."""
    con = connect_read_only(archive)
    try:
        last = last_entry(con)
        return last.entry_hash if last else None
    finally:
        con.close()


__all__ = ["ArchiveError", "BrokenArchive", "SignOffReport", "SignOffRequest", "archive_name",
           "head_hash", "read_build", "sign_off"]
