"""Check an archive against its ledger, find which entry a file is, and repair what a
crash left behind.

``verify_archive`` reports each problem as one :class:`Finding`:

- ``ledger-edited``: an entry's columns no longer give its stored hash;
- ``ledger-chain``: an entry's ``prev_hash`` is not the hash of the entry before it, or
  sequence numbers skip (an entry was deleted or reordered);
- ``changed``: an archived file's sha256 differs from its entry;
- ``missing``: a file an entry records is not there;
- ``unrecorded``: a file in the archive that no entry records.

Left-over staging folders of interrupted sign-offs are not part of the archive; they are
listed as notes, and ``repair`` moves them, like unrecorded files, to ``quarantine/``.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path

from reporter.archive.ledger import (
    GENESIS,
    LEDGER_NAME,
    Entry,
    connect_for_writing,
    connect_read_only,
    read_entries,
)
from reporter.errors import EXIT_BAD_INPUT, ReporterError
from reporter.writer import QUARANTINE_DIR, STAGING_DIR, quarantine

# files SQLite keeps beside the ledger while it is in use
_LEDGER_FILES = {LEDGER_NAME, f"{LEDGER_NAME}-journal", f"{LEDGER_NAME}-wal",
                 f"{LEDGER_NAME}-shm"}


class ArchiveUnreadable(ReporterError):
    """The archive folder or its ledger cannot be read at all (exit 2)."""

    exit_code = EXIT_BAD_INPUT


@dataclass(frozen=True, order=True)
class Finding:
    kind: str
    where: str
    message: str

    def __str__(self) -> str:
        return f"{self.where}: {self.kind}: {self.message}"


@dataclass(frozen=True)
class ArchiveReport:
    entries: list[Entry]
    findings: list[Finding]
    notes: list[str] = field(default_factory=list)

    @property
    def intact(self) -> bool:
        return not self.findings

    @property
    def head_hash(self) -> str | None:
        return self.entries[-1].entry_hash if self.entries else None


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def load_entries(archive: Path) -> list[Entry]:
    """Every ledger entry; :class:`ArchiveUnreadable` if there is no readable ledger."""
    archive = Path(archive)
    if not archive.is_dir():
        raise ArchiveUnreadable(f"{archive}: no such archive folder")
    try:
        con = connect_read_only(archive)
        try:
            return read_entries(con)
        finally:
            con.close()
    except (sqlite3.Error, TypeError) as exc:
        raise ArchiveUnreadable(f"{archive / LEDGER_NAME}: cannot be read as a ledger "
                                f"({exc})") from None


def chain_findings(entries: list[Entry]) -> list[Finding]:
    """Edited entries and breaks in the hash chain."""
    out = []
    prev_seq, prev_hash = 0, GENESIS
    for e in entries:
        where = f"{LEDGER_NAME} entry {e.seq}"
        if e.computed_hash() != e.entry_hash:
            out.append(Finding("ledger-edited", where, "its contents do not give its recorded "
                               "hash (a field was edited)"))
        if e.seq != prev_seq + 1:
            out.append(Finding("ledger-chain", where, f"entries {prev_seq + 1} to {e.seq - 1} "
                               "are missing (deleted)" if e.seq > prev_seq + 1 else
                               "out of sequence"))
        elif e.prev_hash != prev_hash:
            out.append(Finding("ledger-chain", where, "does not link to the entry before it "
                               "(an earlier entry was deleted, replaced or reordered)"))
        prev_seq, prev_hash = e.seq, e.entry_hash
    return out


def archive_files(archive: Path) -> tuple[list[str], list[str]]:
    """(archived file paths relative to the archive, left-over staging folders)."""
    files, staging = [], []
    for dirpath, dirnames, filenames in os.walk(archive):
        rel_dir = Path(dirpath).relative_to(archive)
        if rel_dir == Path("."):
            dirnames[:] = [d for d in dirnames if d != QUARANTINE_DIR]
            if STAGING_DIR in dirnames:
                dirnames.remove(STAGING_DIR)
                staging = sorted(f"{STAGING_DIR}/{d}"
                                 for d in os.listdir(Path(archive) / STAGING_DIR))
            filenames = [f for f in filenames if f not in _LEDGER_FILES]
        files.extend((rel_dir / f).as_posix() for f in filenames)
    return sorted(files), staging


def verify_archive(archive: Path | str) -> ArchiveReport:
    """Check every entry's files and the whole chain (see the module docstring)."""
    archive = Path(archive)
    entries = load_entries(archive)
    findings = chain_findings(entries)
    on_disk, staging = archive_files(archive)
    recorded: set[str] = set()
    for e in entries:
        try:
            hashes = e.file_hashes
        except ValueError:
            findings.append(Finding("ledger-edited", f"{LEDGER_NAME} entry {e.seq}",
                                    "its file list is not valid JSON"))
            continue
        recorded.update(hashes)
        for rel, digest in sorted(hashes.items()):
            path = archive / rel
            if not path.is_file():
                findings.append(Finding("missing", rel, f"recorded by entry {e.seq} but not "
                                        "in the archive"))
            elif file_sha256(path) != digest:
                findings.append(Finding("changed", rel, f"sha256 differs from entry {e.seq} "
                                        "(the file was altered)"))
    for rel in sorted(set(on_disk) - recorded):
        findings.append(Finding("unrecorded", rel, "in the archive but no ledger entry "
                                "records it ('reporter repair' moves it to quarantine)"))
    notes = [f"{s}: left by an interrupted sign-off (not archived; 'reporter repair' moves "
             "it to quarantine)" for s in staging if not _staging_alive(s)]
    return ArchiveReport(entries, sorted(findings), notes)


@dataclass(frozen=True)
class FileMatch:
    entry: Entry
    path: str
    superseded_by: Entry | None


def find_file(file: Path | str, archive: Path | str) -> list[FileMatch]:
    """The ledger entries whose recorded files have exactly the bytes of ``file``."""
    digest = file_sha256(Path(file))
    entries = load_entries(Path(archive))
    later = {e.supersedes: e for e in entries if e.supersedes is not None}
    out = []
    for e in entries:
        try:
            hashes = e.file_hashes
        except ValueError:
            continue
        for rel, d in sorted(hashes.items()):
            if d == digest:
                out.append(FileMatch(e, rel, later.get(e.seq)))
    return out


@dataclass(frozen=True)
class RepairReport:
    moved: list[tuple[str, str]]     # (from, to) relative to the archive
    unresolved: list[Finding]        # what repair cannot mend (needs a backup)


def repair(archive: Path | str) -> RepairReport:
    """Move unrecorded files and dead sign-offs' staging folders to ``quarantine/<stamp>/``.

    Nothing is deleted and no entry is changed. Findings that only a backup can mend
    (changed or missing files, edited or deleted entries) are returned as unresolved.
    Holds the ledger's write lock, so no sign-off runs meanwhile.
    """
    archive = Path(archive)
    load_entries(archive)                      # unreadable -> ArchiveUnreadable
    con = connect_for_writing(archive)
    try:
        con.execute("BEGIN IMMEDIATE")
        report = verify_archive(archive)
        stamp = dt.datetime.now(dt.UTC).strftime("%Y%m%dT%H%M%SZ")
        orphans = [f.where for f in report.findings if f.kind == "unrecorded"]
        _, staging = archive_files(archive)
        orphans += [s for s in staging if not _staging_alive(s)]
        moved = list(zip(orphans, quarantine(archive, orphans, stamp), strict=True))
        _remove_empty_folders(archive, [m[0] for m in moved])
        con.execute("ROLLBACK")
    finally:
        con.close()
    unresolved = [f for f in report.findings if f.kind != "unrecorded"]
    return RepairReport(moved, unresolved)


def _staging_alive(rel: str) -> bool:
    """Whether the sign-off that owns a staging folder (named ``<pid>-<token>``) still runs."""
    pid = Path(rel).name.split("-", 1)[0]
    if not pid.isdigit():
        return False
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return int(pid) != os.getpid()


def _remove_empty_folders(archive: Path, moved_from: list[str]) -> None:
    """Remove folders that moving files out of left empty (never a folder with a file)."""
    for rel in moved_from:
        parent = (archive / rel).parent
        while parent != archive and parent.is_dir() and not any(parent.iterdir()):
            parent.rmdir()
            parent = parent.parent
