"""The only module that writes files: gather every output in memory, then swap it in.

A build's outputs are collected by :class:`OutputSet` (relative path -> bytes), which
refuses paths outside the output folder and a second write to the same path. Then
:func:`commit` writes them into a temporary folder beside the target and swaps it in with
one atomic ``renameat2(RENAME_EXCHANGE)`` (Linux), falling back to two renames elsewhere.
A build that fails, or is killed, before the swap leaves the target exactly as it was.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import os
import shutil
from pathlib import Path, PurePosixPath

from reporter.errors import OutputError

BUILD_MARKER = ".reporter-build"
ARCHIVE_MARKER = "ledger.sqlite"
_TMP_TAG = ".tmp-"


class OutputSet:
    """Files of one build, held in memory until :func:`commit`."""

    def __init__(self) -> None:
        self._files: dict[str, bytes] = {}

    def add(self, rel: str, data: bytes | str) -> None:
        """Add one file at relative POSIX path ``rel``; refuses escapes and repeats."""
        p = PurePosixPath(rel)
        if p.is_absolute() or ".." in p.parts or not p.parts or rel != str(p):
            raise OutputError(f"refusing to write outside the output folder: {rel!r}")
        if rel in self._files:
            raise OutputError(f"refusing to write {rel!r} twice in one build")
        self._files[rel] = data.encode("utf-8") if isinstance(data, str) else bytes(data)

    def __contains__(self, rel: str) -> bool:
        return rel in self._files

    def __getitem__(self, rel: str) -> bytes:
        return self._files[rel]

    @property
    def paths(self) -> list[str]:
        return sorted(self._files)


def check_target(target: Path) -> None:
    """Refuse a target that is (or is inside) an archive, or an existing folder that is not a
    previous build's output (so that nobody's files are replaced by mistake)."""
    target = Path(target).absolute()
    for folder in (target, *target.parents):
        if (folder / ARCHIVE_MARKER).exists():
            raise OutputError(f"{target}: refusing to write into the archive at {folder}; "
                              "signed packs are never overwritten")
    if target.exists():
        if not target.is_dir():
            raise OutputError(f"{target}: exists and is not a folder")
        entries = [e for e in os.listdir(target)]
        if entries and BUILD_MARKER not in entries:
            raise OutputError(f"{target}: folder exists, is not empty and is not a pack build; "
                              "refusing to replace it (choose another --out)")


def commit(files: OutputSet, target: Path) -> None:
    """Write ``files`` into ``target`` atomically: all of them appear at once, or none."""
    target = Path(target).absolute()
    check_target(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    _remove_stale_temps(target)
    tmp = target.parent / f".{target.name}{_TMP_TAG}{os.getpid()}"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        (tmp / BUILD_MARKER).write_bytes(b"committee-pack-reporter build output\n")
        for rel in files.paths:
            dest = tmp / rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            with open(dest, "wb") as fh:
                fh.write(files[rel])
                fh.flush()
                os.fsync(fh.fileno())
        if target.exists():
            if not _exchange(tmp, target):
                old = target.parent / f".{target.name}.old-{os.getpid()}"
                os.rename(target, old)
                os.rename(tmp, target)
                tmp = old
            shutil.rmtree(tmp)
        else:
            os.rename(tmp, target)
        _fsync_dir(target.parent)
    except BaseException:
        if tmp.exists() and tmp != target:
            shutil.rmtree(tmp, ignore_errors=True)
        raise


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
    """Remove temporary folders left by an earlier build of this target that was killed."""
    prefix = f".{target.name}{_TMP_TAG}"
    for entry in target.parent.glob(prefix + "*"):
        pid = entry.name[len(prefix):]
        if pid.isdigit() and not _alive(int(pid)):
            shutil.rmtree(entry, ignore_errors=True)


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
