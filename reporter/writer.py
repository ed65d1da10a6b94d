"""The only module that writes files: gather every output in a temporary folder beside the
target, then swap it in.

A build's outputs are collected by :class:`OutputSet` (relative path -> bytes), which
refuses paths outside the output folder and a second write to the same path; a large file
(:meth:`OutputSet.add_written`) goes straight into the staging folder (:func:`open_staging`)
instead of memory. Then :func:`commit` writes the rest there and swaps the folder in with
one atomic ``renameat2(RENAME_EXCHANGE)`` (Linux), falling back to two renames elsewhere.
A build that fails, or is killed, before the swap leaves the target exactly as it was; a
full disk or a read-only folder is :class:`~reporter.errors.WriteFailed` (one line, exit 1).

Which folders may be replaced is decided in :mod:`reporter.output_folder`: only an empty
folder, or one whose ``.reporter-build`` marker (written here with the list of every file
written) lists every file in it, with no archive anywhere inside, and never a link.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import errno
import hashlib
import io
import os
import re
import secrets
import shutil
import socket
import threading
from collections.abc import Callable
from pathlib import Path, PurePosixPath
from typing import BinaryIO

from reporter.errors import OutputError, WriteFailed
from reporter.output_folder import (
    ARCHIVE_MARKER,
    BUILD_MARKER,
    check_target,
    marker_bytes,
    refuse_archive,
)

__all__ = ["ARCHIVE_MARKER", "BUILD_MARKER", "OutputSet", "check_target", "commit",
           "open_staging", "place_in_archive", "quarantine", "refuse_archive"]

_TMP_TAG = ".tmp-"


class OutputSet:
    """Files of one build, held in memory until :func:`commit`; with a ``staging`` folder
    (see :func:`open_staging`), large files added by :meth:`add_written` go straight there
    instead, and :func:`commit` swaps that folder in."""

    def __init__(self, staging: Path | None = None) -> None:
        self._files: dict[str, bytes | memoryview] = {}
        self._written: dict[str, str] = {}       # rel -> sha256 of a file in the staging folder
        self.staging = staging
        self.discarded = False
        self._lock = threading.Lock()      # discard() against a file being opened (threads)

    def _check(self, rel: str) -> None:
        p = PurePosixPath(rel)
        if p.is_absolute() or ".." in p.parts or not p.parts or rel != str(p):
            raise OutputError(f"refusing to write outside the output folder: {rel!r}")
        if rel in self._files or rel in self._written:
            raise OutputError(f"refusing to write {rel!r} twice in one build")

    def add(self, rel: str, data: bytes | str) -> None:
        """Add one file at relative POSIX path ``rel``; refuses escapes and repeats."""
        self._check(rel)
        self._files[rel] = data.encode("utf-8") if isinstance(data, str) else bytes(data)

    def add_written(self, rel: str, write: Callable[[BinaryIO], None]) -> None:
        """Add a large file by calling ``write(sink)``: the bytes go straight into the staging
        folder when there is one (hashed on the way, never held whole in memory), else into
        memory as :meth:`add` would keep them."""
        self._check(rel)
        if self.staging is None:
            buf = io.BytesIO()
            write(buf)
            self._files[rel] = buf.getbuffer()
            return
        dest = self.staging / rel
        try:
            with self._lock:
                if self.discarded:
                    raise OutputError(f"{rel}: the build was abandoned; not written")
                dest.parent.mkdir(parents=True, exist_ok=True)
                fh = open(dest, "wb")              # once open, discard() only unlinks it
            with fh:
                sink = _HashingSink(fh, self)
                write(sink)
                fh.flush()
                os.fsync(fh.fileno())
        except OSError as exc:          # a full disk: the build stops, cleanly
            raise _write_failed(exc, dest) from None
        self._written[rel] = sink.digest.hexdigest()

    def sha256(self, rel: str) -> str:
        """The sha256 (hex) of file ``rel``."""
        if rel in self._written:
            return self._written[rel]
        return hashlib.sha256(self._files[rel]).hexdigest()

    def __contains__(self, rel: str) -> bool:
        return rel in self._files or rel in self._written

    def __getitem__(self, rel: str) -> bytes | memoryview:
        if rel in self._written:
            return (self.staging / rel).read_bytes()
        return self._files[rel]

    @property
    def in_memory(self) -> list[str]:
        return sorted(self._files)

    @property
    def paths(self) -> list[str]:
        return sorted([*self._files, *self._written])

    def discard(self) -> None:
        """Remove the staging folder and what was written there (a build that failed). A
        file being written by another thread stops at its next write, and nothing more is
        written."""
        with self._lock:
            self.discarded = True
            if self.staging is not None:
                shutil.rmtree(self.staging, ignore_errors=True)


class _HashingSink:
    """A binary file that also hashes what is written to it, and stops the writer once its
    output set is discarded."""

    def __init__(self, fh: BinaryIO, owner: OutputSet) -> None:
        self.fh, self.owner, self.digest, self.closed = fh, owner, hashlib.sha256(), False

    def write(self, data) -> int:
        if self.owner.discarded:
            raise OutputError("the build was abandoned; stopped writing")
        self.digest.update(data)
        return self.fh.write(data)

    def writable(self) -> bool:
        return True

    def flush(self) -> None:
        self.fh.flush()


def open_staging(target: Path, kind: str = "pack") -> Path:
    """Check ``target`` (see :func:`check_target`) and make the temporary folder beside it
    into which a build is written before :func:`commit` swaps it in. It is named with this
    machine's name, this process's id and a random token (``.NAME.tmp-HOST-PID-TOKEN``), so
    that a later build on the same machine can clear it away if this one is killed, and a
    build on another machine sharing the folder (a cluster's workers) never takes it for
    its own or judges it by a process id that means nothing there. A folder that cannot be
    made (read-only, forbidden, full) is :class:`WriteFailed`."""
    target = Path(target).absolute()
    check_target(target, kind)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        _remove_stale_temps(target)
        tmp = target.parent / f"{_own_staging_prefix(target)}{secrets.token_hex(4)}"
        tmp.mkdir()
    except OSError as exc:
        raise _write_failed(exc, target) from None
    return tmp


def _write_failed(exc: OSError, target: Path) -> WriteFailed:
    """One line for an error of the machine while writing ``target``: the system's reason
    and its code (ENOSPC, EROFS, EACCES...), and the file or folder it refused."""
    code = errno.errorcode.get(exc.errno, "") if exc.errno else ""
    reason = f"{exc.strerror or exc}{f' ({code})' if code else ''}"
    at = f", at {exc.filename}" if exc.filename and str(exc.filename) != str(target) else ""
    return WriteFailed(f"{target}: cannot write ({reason}{at}); nothing was replaced")


def _host_tag() -> str:
    """This machine's name as it appears in staging folders' names (no dashes, which
    separate the name's parts)."""
    return re.sub(r"[^A-Za-z0-9_.]", "_", socket.gethostname())[:64] or "host"


def _own_staging_prefix(target: Path) -> str:
    return f".{target.name}{_TMP_TAG}{_host_tag()}-{os.getpid()}-"


def commit(files: OutputSet, target: Path, kind: str = "pack") -> None:
    """Write ``files`` into ``target`` atomically: all of them appear at once, or none.
    ``kind`` (``pack`` or ``site``) is written in the folder's marker and checked against an
    earlier output there (see :func:`check_target`). ``files.staging``, when set, must be
    :func:`open_staging` of the same target: it already holds the files written there."""
    target = Path(target).absolute()
    if files.staging is not None:
        check_target(target, kind)
        tmp = files.staging
        if tmp.parent != target.parent or not tmp.name.startswith(
                _own_staging_prefix(target)):
            raise OutputError(f"{tmp}: not the staging folder of {target}")
    else:
        tmp = open_staging(target, kind)
    try:
        _write_new(tmp / BUILD_MARKER, marker_bytes(kind, files.paths))
        for rel in files.in_memory:
            dest = tmp / rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            _write_new(dest, files[rel])
        if target.exists():
            if not _exchange(tmp, target):
                old = target.parent / f".{target.name}.old-{os.getpid()}"
                os.rename(target, old)
                try:
                    os.rename(tmp, target)
                except BaseException:
                    os.rename(old, target)      # put the earlier output back
                    raise
                tmp = old
        else:
            os.rename(tmp, target)
    except BaseException as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        if isinstance(exc, OSError):
            raise _write_failed(exc, target) from None
        raise
    # the new output is in place: what follows cannot undo that
    if tmp.exists():
        shutil.rmtree(tmp, ignore_errors=True)      # the earlier output, now swapped out
    try:
        _fsync_dir(target.parent)
    except OSError:
        pass


def _write_new(dest: Path, data: bytes | memoryview) -> None:
    """Write ``data`` to the new file ``dest`` and flush it to disk."""
    with open(dest, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())


def _exchange(a: Path, b: Path) -> bool:
    """Atomically swap two paths with renameat2(RENAME_EXCHANGE); False if unsupported."""
    libc_name = ctypes.util.find_library("c")
    if not libc_name:
        return False
    libc = ctypes.CDLL(libc_name, use_errno=True)
    fn = getattr(libc, "renameat2", None)
    if fn is None:
        return False
    at_fdcwd, rename_exchange = -100, 2
    rc = fn(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange)
    return rc == 0


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _remove_stale_temps(target: Path) -> None:
    """Remove temporary folders left by an earlier build of this target, on this machine,
    that was killed (its process is gone). A folder made on another machine is left alone:
    its process id says nothing here. (``.NAME.tmp-PID``, the form before machine names,
    is judged by its process id, as it was then.)"""
    prefix, host = f".{target.name}{_TMP_TAG}", _host_tag()
    for entry in target.parent.glob(prefix + "*"):
        parts = entry.name[len(prefix):].split("-")
        if len(parts) == 3 and parts[0] == host and parts[1].isdigit():
            pid = parts[1]
        elif len(parts) == 1 and parts[0].isdigit():
            pid = parts[0]
        else:
            continue
        if not _alive(int(pid)):
            shutil.rmtree(entry, ignore_errors=True)


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


# --- the archive: files are added, never replaced ---------------------------------------

STAGING_DIR = ".staging"
QUARANTINE_DIR = "quarantine"
READ_ONLY = 0o444


def place_in_archive(files: OutputSet, root: Path) -> list[str]:
    """Add ``files`` to the archive at ``root`` without replacing or removing anything.

    The files are written (and fsynced) into a staging folder inside the archive and made
    read-only, then moved into place by their first two path levels (``<period>/<name>``
    folders first, then files such as ``<period>/<name>.pdf``). A move whose destination
    exists fails, so nothing archived is ever overwritten. Returns the moved paths.
    """
    root = Path(root).absolute()
    parts = [PurePosixPath(rel).parts for rel in files.paths]
    folders = sorted({"/".join(p[:2]) for p in parts if len(p) > 2})
    units = folders + sorted({"/".join(p) for p in parts if len(p) <= 2} - set(folders))
    for unit in units:
        if (root / unit).exists() or (root / unit).is_symlink():
            raise OutputError(f"{root / unit}: already in the archive; archived files are "
                              "never overwritten")
    staging = root / STAGING_DIR / f"{os.getpid()}-{os.urandom(4).hex()}"
    staging.mkdir(parents=True)
    for rel in files.paths:
        dest = staging / rel
        dest.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(dest, os.O_WRONLY | os.O_CREAT | os.O_EXCL, READ_ONLY)
        with os.fdopen(fd, "wb") as fh:
            fh.write(files[rel])
            fh.flush()
            os.fsync(fh.fileno())
    placed = []
    for unit in units:
        dest = root / unit
        dest.parent.mkdir(parents=True, exist_ok=True)
        _rename_no_replace(staging / unit, dest)
        _fsync_dir(dest.parent)
        placed.append(unit)
    shutil.rmtree(staging)
    try:
        staging.parent.rmdir()           # only when no other sign-off is staging
    except OSError:
        pass
    return placed


def quarantine(root: Path, rels: list[str], stamp: str) -> list[str]:
    """Move archive files that no ledger entry records to ``quarantine/<stamp>/`` (kept,
    never deleted). Returns their new paths relative to ``root``."""
    root = Path(root).absolute()
    moved = []
    for rel in rels:
        dest_rel = f"{QUARANTINE_DIR}/{stamp}/{rel}"
        dest = root / dest_rel
        dest.parent.mkdir(parents=True, exist_ok=True)
        _rename_no_replace(root / rel, dest)
        moved.append(dest_rel)
    if moved:
        _fsync_dir(root)
    return moved


def _rename_no_replace(src: Path, dest: Path) -> None:
    """Rename ``src`` to ``dest``, failing if ``dest`` exists (renameat2 RENAME_NOREPLACE;
    elsewhere a hard link for files, or a checked rename for folders)."""
    libc_name = ctypes.util.find_library("c")
    fn = getattr(ctypes.CDLL(libc_name, use_errno=True), "renameat2", None) if libc_name else None
    if fn is not None:
        at_fdcwd, rename_noreplace = -100, 1
        if fn(at_fdcwd, os.fsencode(src), at_fdcwd, os.fsencode(dest), rename_noreplace) == 0:
            return
        err = ctypes.get_errno()
        if err == errno.EEXIST:
            raise OutputError(f"{dest}: already exists; archived files are never overwritten")
        if err not in (errno.ENOSYS, errno.EINVAL):
            raise OSError(err, os.strerror(err), str(dest))
    if src.is_dir():
        if dest.exists():
            raise OutputError(f"{dest}: already exists; archived files are never overwritten")
        os.rename(src, dest)
    else:
        try:
            os.link(src, dest)
        except FileExistsError:
            raise OutputError(f"{dest}: already exists; archived files are never "
                              "overwritten") from None
        os.unlink(src)
