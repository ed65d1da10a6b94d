"""Check an archive against its ledger, find which entry a file is, and repair what a
crash left behind.

``verify_archive`` reports each problem as one :class:`Finding`:

- ``ledger-edited``: an entry's columns no longer give its stored hash;
- ``ledger-chain``: an entry's ``prev_hash`` is not the hash of the entry before it, or
  sequence numbers skip (an entry was deleted or reordered);
- ``changed``: an archived file's sha256 differs from its entry;
- ``missing``: a file an entry records is not there;
- ``unrecorded``: a file in the archive that no entry records;
- ``symlink``: a symbolic link anywhere in the archive (an archive holds only plain files
  and folders; a link could lead a reader to a writable copy elsewhere, so a recorded file
  reached through one is not read);
- ``outside``: an entry records a path that is not a plain relative path inside the
  archive (absolute, with ``..`` or ``.`` parts, backslashes, empty parts); it is not read;
- ``pdf``: an entry's ``pdf_path`` is not one of its recorded files with ``pdf_sha256``;
- ``writable``: a recorded file whose mode lets anyone write it (sign-off places every
  file read-only, mode 0444, see :func:`reporter.writer.place_in_archive`).

Anchoring the chain to the heads minuted at sign-off is :mod:`reporter.archive.anchor`.

Left-over staging folders of interrupted sign-offs are not part of the archive; they are
listed as notes, and ``repair`` moves them, like unrecorded files, to ``quarantine/``.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import sqlite3
import stat
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath

from reporter.archive.ledger import (
    GENESIS,
    LEDGER_NAME,
    Entry,
    connect_read_only,
    ledger_transaction,
    read_entries,
)
from reporter.errors import EXIT_BAD_INPUT, ReporterError, shown_name
from reporter.user_files import open_regular
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
        return f"{shown_name(self.where)}: {self.kind}: {self.message}"


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
    with open(path, "rb") as fh:
        return _sha256_of(fh)


def _sha256_of(fh) -> str:
    h = hashlib.sha256()
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


def symlinks(archive: Path) -> list[str]:
    """Every symbolic link in the archive (files and folders, quarantine and staging
    included), relative to the archive; links to folders are not followed."""
    out = []
    for dirpath, dirnames, filenames in os.walk(archive):
        rel_dir = Path(dirpath).relative_to(archive)
        out.extend((rel_dir / n).as_posix() for n in (*dirnames, *filenames)
                   if os.path.islink(os.path.join(dirpath, n)))
    return sorted(out)


def path_problem(rel: object) -> str | None:
    """Why a path recorded in an entry is not a plain relative path inside the archive, or
    None when it is one."""
    if not isinstance(rel, str) or not rel:
        return "which is not a path"
    if "\\" in rel or "\x00" in rel:
        return "which holds a backslash or NUL character"
    p = PurePosixPath(rel)
    if p.is_absolute():
        return "which is absolute (outside the archive)"
    if any(part in ("..", ".") for part in rel.split("/")):
        return "which has '..' or '.' parts (it may lead outside the archive)"
    if str(p) != rel:
        return "which has empty parts"
    return None


def _linked_part(archive: Path, rel: str) -> str | None:
    """The first part of ``rel`` (from the archive down) that is a symbolic link."""
    parts = PurePosixPath(rel).parts
    for i in range(1, len(parts) + 1):
        if (archive.joinpath(*parts[:i])).is_symlink():
            return "/".join(parts[:i])
    return None


def _file_hashes(e: Entry) -> dict[str, str] | None:
    try:
        hashes = e.file_hashes
    except ValueError:
        return None
    if not isinstance(hashes, dict) or not all(isinstance(d, str) for d in hashes.values()):
        return None
    return hashes


def verify_archive(archive: Path | str) -> ArchiveReport:
    """Check every entry's files and the whole chain (see the module docstring)."""
    archive = Path(archive)
    entries = load_entries(archive)
    findings = chain_findings(entries)
    on_disk, staging = archive_files(archive)
    findings += [Finding("symlink", rel, f"is a symbolic link (to {os.readlink(archive / rel)!r})"
                         "; an archive holds only plain files and folders, so it is not "
                         "followed (restore the file itself from a backup)")
                 for rel in symlinks(archive)]
    recorded: set[str] = set()
    for e in entries:
        where = f"{LEDGER_NAME} entry {e.seq}"
        hashes = _file_hashes(e)
        if hashes is None:
            findings.append(Finding("ledger-edited", where, "its file list is not a JSON "
                                    "object of path to sha256"))
            continue
        if hashes.get(e.pdf_path) != e.pdf_sha256:
            findings.append(Finding("pdf", where, f"its PDF {e.pdf_path!r} is not one of its "
                                    "recorded files with its recorded sha256"))
        for rel, digest in sorted(hashes.items()):
            reason = path_problem(rel)
            if reason is not None:
                findings.append(Finding("outside", where, f"records the path {rel!r}, "
                                        f"{reason}; it was not read"))
                continue
            recorded.add(rel)
            path = archive / rel
            if _linked_part(archive, rel) is not None:
                continue                       # named above as a symlink; never followed
            if not path.is_file():
                findings.append(Finding("missing", rel, f"recorded by entry {e.seq} but not "
                                        "in the archive"))
                continue
            if file_sha256(path) != digest:
                findings.append(Finding("changed", rel, f"sha256 differs from entry {e.seq} "
                                        "(the file was altered)"))
            mode = stat.S_IMODE(path.lstat().st_mode)
            if mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH):
                findings.append(Finding("writable", rel, f"mode {mode:04o} lets it be written; "
                                        "archived files are read-only (0444). Check it, then "
                                        "'chmod a-w' it"))
    for rel in sorted(set(on_disk) - recorded):
        findings.append(Finding("unrecorded", rel, "in the archive but no ledger entry "
                                "records it ('reporter repair' moves it to quarantine)"))
    notes = [f"{shown_name(s)}: left by an interrupted sign-off (not archived; 'reporter "
             "repair' moves it to quarantine)" for s in staging if not _staging_alive(s)]
    return ArchiveReport(entries, sorted(findings), notes)


@dataclass(frozen=True)
class FileMatch:
    entry: Entry
    path: str
    superseded_by: Entry | None


def find_file(file: Path | str, archive: Path | str) -> list[FileMatch]:
    """The ledger entries whose recorded files have exactly the bytes of ``file``."""
    with open_regular(file) as fh:        # a FIFO or device is refused, never read
        digest = _sha256_of(fh)
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
    with ledger_transaction(archive, commit=False):     # the write lock alone is wanted
        report = verify_archive(archive)
        stamp = _free_stamp(archive, dt.datetime.now(dt.UTC).strftime("%Y%m%dT%H%M%SZ"))
        orphans = [f.where for f in report.findings if f.kind == "unrecorded"]
        _, staging = archive_files(archive)
        orphans += [s for s in staging if not _staging_alive(s)]
        moved = list(zip(orphans, quarantine(archive, orphans, stamp), strict=True))
        _remove_empty_folders(archive, [m[0] for m in moved])
    unresolved = [f for f in report.findings if f.kind != "unrecorded"]
    return RepairReport(moved, unresolved)


def _free_stamp(archive: Path, stamp: str) -> str:
    """``stamp``, or ``stamp-2``, ``stamp-3``... if a repair in the same second has made
    that quarantine folder already (the write lock keeps two repairs from racing here)."""
    base, n = stamp, 1
    while (archive / QUARANTINE_DIR / stamp).exists():
        n += 1
        stamp = f"{base}-{n}"
    return stamp


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
