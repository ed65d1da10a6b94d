"""Countersign an archived pack: the next signer (the secretary after the chair) adds a
digital signature to the signed PDF.

The archive never overwrites a file, so a countersigned PDF is a new archived file with its
own ledger entry: the next revision of the same pack and period, superseding the entry it
countersigns, with the reason "countersigned". Its PDF is the earlier PDF byte for byte
followed by one incremental update holding the new signature, so the earlier signature
still verifies and covers everything it signed; the pack's HTML and results files are
archived again beside it (the same bytes, checked against the earlier entry), so every
revision is complete on its own. The sign-off page inside the PDF is not changed (that
would break the first signature): the countersigner's name, certificate and signing time
are in the ledger entry and in the signature itself, which ``reporter verify FILE``
reports.

Countersigning refuses an archive that does not verify, a file that is not the latest
revision's PDF, and a PDF the ledger records as unsigned (an unsigned PDF is signed at
sign-off with ``--key``, which starts the sequence).
"""

from __future__ import annotations

import datetime as dt
import hashlib
from dataclasses import dataclass
from pathlib import Path

from reporter import __version__
from reporter.archive.keys import SigningKey
from reporter.archive.ledger import (
    Entry,
    append,
    canonical_json,
    entries_for,
    ledger_transaction,
)
from reporter.archive.signature import sign_pdf, signature_columns
from reporter.archive.signoff import ArchiveError, archive_name
from reporter.archive.verify import find_file, verify_archive
from reporter.errors import InputError, Problem
from reporter.invisible import has_control, invisible_message
from reporter.user_files import check_regular
from reporter.writer import OutputSet, place_in_archive


@dataclass(frozen=True)
class CountersignReport:
    entry: Entry
    pdf: Path
    countersigned: Entry


def countersign(pdf_file: Path | str, archive: Path | str, key: SigningKey, *,
                signer: str, role: str | None = None,
                minute_ref: str | None = None) -> CountersignReport:
    """Add ``key``'s signature to the archived PDF ``pdf_file`` as a new revision."""
    archive, pdf_file = Path(archive).absolute(), Path(pdf_file)
    for option, text in (("--by", signer), ("--role", role), ("--minute-ref", minute_ref)):
        if text is not None and (not text.strip() or len(text) > 500
                                 or has_control(text)):
            raise InputError([Problem(option, "must be 1 to 500 characters, with no control "
                                      "character")])
        if text is not None and (found := invisible_message(text)):
            raise InputError([Problem(option, f"contains an {found}")])
    check_regular(pdf_file)
    report = verify_archive(archive)
    if not report.intact:
        raise ArchiveError(f"{archive}: does not verify ({len(report.findings)} problem(s)); "
                           "run 'reporter verify --archive' and mend it first")
    matches = [m for m in find_file(pdf_file, archive) if m.path == m.entry.pdf_path]
    if not matches:
        raise InputError([Problem(str(pdf_file), "is not a signed pack PDF of this archive "
                                  "(its sha256 matches no entry's PDF)")])
    earlier = matches[-1].entry
    if matches[-1].superseded_by is not None:
        later = matches[-1].superseded_by
        raise ArchiveError(f"{pdf_file}: entry {earlier.seq} was superseded by entry "
                           f"{later.seq} ({later.pdf_path}); countersign that one")
    if earlier.cert_sha256 is None:
        raise ArchiveError(f"{pdf_file}: carries no digital signature to countersign; sign "
                           "it off with --key first")
    data = (archive / earlier.pdf_path).read_bytes()
    signed = sign_pdf(data, key, reason=f"countersignature by {signer}")
    revision = earlier.revision + 1
    name = archive_name(earlier.pack_name, earlier.period_end, revision)
    old_name = Path(earlier.pdf_path).stem
    files = OutputSet()
    files.add(f"{earlier.period_end}/{name}.pdf", signed)
    prefix = f"{earlier.period_end}/{old_name}/"
    for rel, digest in sorted(earlier.file_hashes.items()):
        if rel.startswith(prefix):
            content = (archive / rel).read_bytes()
            if hashlib.sha256(content).hexdigest() != digest:   # changed since the check
                raise ArchiveError(f"{archive / rel}: changed while countersigning; "
                                   "nothing was archived")
            files.add(f"{earlier.period_end}/{name}/{rel.removeprefix(prefix)}", content)
    with ledger_transaction(archive) as con:
        now = entries_for(con, earlier.pack_name, earlier.period_end)
        if not now or now[-1].seq != earlier.seq:
            raise ArchiveError(f"{earlier.pack_name} for {earlier.period_end}: another "
                               "sign-off was recorded meanwhile; nothing was archived")
        place_in_archive(files, archive)
        entry = append(con, {
            "pack_name": earlier.pack_name, "period_end": earlier.period_end,
            "revision": revision, "title": earlier.title,
            "organisation": earlier.organisation, "signer": signer, "role": role,
            "minute_ref": minute_ref, "note": None,
            "signed_utc": dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "pdf_path": f"{earlier.period_end}/{name}.pdf",
            "pdf_sha256": hashlib.sha256(signed).hexdigest(),
            "files": canonical_json({rel: hashlib.sha256(files[rel]).hexdigest()
                                     for rel in files.paths}),
            "inputs": earlier.inputs, "tool_version": __version__,
            "supersedes": earlier.seq,
            "reason": f"countersigned: adds {signer}'s digital signature to entry "
                      f"{earlier.seq}'s PDF",
            **signature_columns(key, signed),
        })
    return CountersignReport(entry, archive / entry.pdf_path, earlier)


__all__ = ["CountersignReport", "countersign"]
