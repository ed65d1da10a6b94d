"""Files named on the command line that the tool reads (a signing key, a file of trusted
roots, a file of minuted heads, a file to verify or countersign).

Each is checked with ``os.stat`` before it is opened, and opened without blocking: a FIFO
would block ``open`` until a writer came, and a device such as ``/dev/zero`` would be read
without end. Anything but a regular file is one :class:`~reporter.errors.Problem` (exit 2).
"""

from __future__ import annotations

import fcntl
import os
import stat
from pathlib import Path
from typing import BinaryIO

from reporter.errors import InputError, Problem, shown_name


def _kind(mode: int) -> str:
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a FIFO"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    return "not a plain file"


def _refuse(path: Path, message: str) -> InputError:
    return InputError([Problem(shown_name(path), message)])


def _not_regular(path: Path, mode: int) -> InputError:
    return _refuse(path, f"not a regular file ({_kind(mode)}); give a file")


def check_regular(path: Path | str, missing: str = "no such file") -> None:
    """Refuse ``path`` unless it is (or links to) a regular file; ``missing`` is the
    message when nothing is there."""
    path = Path(path)
    try:
        mode = os.stat(path).st_mode
    except (FileNotFoundError, NotADirectoryError):
        raise _refuse(path, missing) from None
    except OSError as exc:
        raise _refuse(path, f"cannot be read ({exc.strerror})") from None
    if not stat.S_ISREG(mode):
        raise _not_regular(path, mode)


def open_regular(path: Path | str, missing: str = "no such file") -> BinaryIO:
    """``path`` opened for binary reading, refused (as :func:`check_regular`) unless it is
    a regular file, both before it is opened and, on the open descriptor, after (so a file
    swapped for a FIFO in between is caught too); the open itself never blocks."""
    path = Path(path)
    check_regular(path, missing)
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | os.O_NOCTTY)
    except FileNotFoundError:
        raise _refuse(path, missing) from None
    except OSError as exc:
        raise _refuse(path, f"cannot be read ({exc.strerror})") from None
    mode = os.fstat(fd).st_mode
    if not stat.S_ISREG(mode):
        os.close(fd)
        raise _not_regular(path, mode)
    fcntl.fcntl(fd, fcntl.F_SETFL, fcntl.fcntl(fd, fcntl.F_GETFL) & ~os.O_NONBLOCK)
    return os.fdopen(fd, "rb")


def read_regular(path: Path | str, limit: int, *, missing: str = "no such file",
                 too_large: str = "too large") -> bytes:
    """The bytes of the regular file ``path`` (see :func:`open_regular`), refused with
    ``too_large`` past ``limit`` bytes (no more than ``limit + 1`` are read)."""
    with open_regular(path, missing) as fh:
        try:
            data = fh.read(limit + 1)
        except OSError as exc:
            raise _refuse(Path(path), f"cannot be read ({exc.strerror})") from None
    if len(data) > limit:
        raise _refuse(Path(path), too_large)
    return data
