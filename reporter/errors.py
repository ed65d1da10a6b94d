"""The exception family the CLI knows how to print.

Every user-facing problem is a :class:`Problem`: one line naming where it is
(``file:row:column`` or ``pack.toml:key``) and what is wrong. Errors are gathered
into an :class:`InputError` so that the user sees all of them at once.
"""

from __future__ import annotations

import errno
from dataclasses import dataclass, field

EXIT_OK = 0
EXIT_FAILED = 1
EXIT_BAD_INPUT = 2


@dataclass(frozen=True, order=True)
class Problem:
    """One problem in the inputs, with its place.

    ``where`` is already formatted: ``holdings.csv:14:weight`` or ``pack.toml:analysis.window``.
    """

    where: str
    message: str
    severity: str = "error"  # "error" | "warning"
    count: int = 1           # problems this line stands for ("... and 51 more ...": 51)

    def __str__(self) -> str:
        tag = "" if self.severity == "error" else "warning: "
        return f"{self.where}: {tag}{self.message}"


def place(file: str, row: int | None = None, column: str | None = None) -> str:
    """Format a location as ``file:row:column``, leaving out the parts that do not apply."""
    parts = [file]
    if row is not None:
        parts.append(str(row))
    if column is not None:
        parts.append(column)
    return ":".join(parts)


def shown_name(name: object) -> str:
    """A file name or path as printed on one line: as it is when every character is
    printable, else quoted with its control characters escaped, repr-style (``'a\\nb'``), so
    that a name holding a line break cannot split a message in two."""
    text = str(name)
    return text if text.isprintable() else repr(text)


QUOTE_LIMIT = 80


def quoted(value: object, limit: int = QUOTE_LIMIT) -> str:
    """``repr(value)``, cut to its first ``limit`` characters for a long text:
    ``'TTTT...' (5,000 characters)``, so that a problem line quoting a bad value from the
    inputs stays readable (a 5,000-character title had been echoed whole)."""
    if isinstance(value, str) and len(value) > limit:
        return f"{value[:limit]!r}... ({len(value):,} characters)"
    return repr(value)


def one_line(text: str) -> str:
    """``text`` with every character Python does not count printable (a line break, a tab,
    a terminal escape, a bidirectional override) written as its escape (``\\n``,
    ``\\x1b``, ``\\u202e``), so that a message quoting a name from the inputs stays one
    line and cannot steer the terminal. The CLI prints every problem and error through it."""
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii")
                   for c in text)


class ReporterError(Exception):
    """Base class of every error the CLI prints without a traceback."""

    exit_code = EXIT_FAILED


@dataclass
class InputError(ReporterError):
    """Bad input: one or more problems, each printed on its own line; exit code 2."""

    problems: list[Problem] = field(default_factory=list)
    exit_code = EXIT_BAD_INPUT

    def __str__(self) -> str:
        return "\n".join(str(p) for p in self.problems)


class OutputError(ReporterError):
    """The output location is not one we may write to (outside the target, an archive...)."""

    exit_code = EXIT_BAD_INPUT


class WriteFailed(ReporterError):
    """The output could not be written (a full disk, a read-only or forbidden folder): an
    error of the machine, not of the inputs; exit code 1. The earlier output is untouched."""

    exit_code = EXIT_FAILED


class Collector:
    """Gathers problems across a whole stage, so that all are reported together."""

    def __init__(self) -> None:
        self.problems: list[Problem] = []

    def error(self, where: str, message: str, count: int = 1) -> None:
        self.problems.append(Problem(where, message, "error", count))

    def warn(self, where: str, message: str, count: int = 1) -> None:
        self.problems.append(Problem(where, message, "warning", count))

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def warnings(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "warning"]

    def raise_if_errors(self, strict: bool = False) -> None:
        """Raise :class:`InputError` with every problem if any error (or, when strict, warning)."""
        failing = self.problems if strict else self.errors
        if failing:
            raise InputError(list(self.problems) if strict else self.errors + self.warnings)


def symlink_loop(exc: BaseException) -> str | None:
    """The one-line problem of a symbolic link that loops, or None for any other failure.
    ``Path.resolve`` raises RuntimeError("Symlink loop from '...'"), and opening such a path
    OSError ELOOP; either may come from any path the user gives (a pack, ``--out``,
    ``[compare] previous``, an archive), so it is recognised once, where the CLI and a
    batch print a failure."""
    if isinstance(exc, RuntimeError) and str(exc).startswith("Symlink loop from "):
        where = str(exc).removeprefix("Symlink loop from ")
    elif isinstance(exc, OSError) and exc.errno == errno.ELOOP:
        where = repr(exc.filename) if exc.filename is not None else "a path given"
    else:
        return None
    return (f"{where}: a symbolic link that loops (it leads back to itself); give a real "
            "folder or file")
