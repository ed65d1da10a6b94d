"""What every check shares: the cap on places listed per kind of problem, the column
check, where each holding was read, and the word for one period."""

from __future__ import annotations

from dataclasses import dataclass

from reporter.config import Settings
from reporter.errors import Collector, place
from reporter.readers import RawTable

MAX_PER_CHECK = 10


@dataclass(frozen=True)
class HoldingRows:
    """Where each holding was read, by its position in the holdings: the file's name and
    row (None: not known). A fund's total holdings come from several mandates, perhaps from
    several files, so one table cannot say it."""

    files: tuple[str, ...]
    rows: tuple[int | None, ...]

    def place(self, k: int) -> str:
        """Holding ``k``'s id cell, as ``file:row:security_id``."""
        return place(self.files[k], self.rows[k], "security_id")


class _Capped:
    """Adds problems of one kind to a collector, listing at most MAX_PER_CHECK places."""

    def __init__(self, coll: Collector, summary: str, warning: bool = False) -> None:
        self.coll, self.summary, self.warning, self.count = coll, summary, warning, 0
        self._last_file = ""

    def add(self, where: str, message: str) -> None:
        self.count += 1
        self._last_file = where.split(":", 1)[0]
        if self.count <= MAX_PER_CHECK:
            (self.coll.warn if self.warning else self.coll.error)(where, message)

    def close(self) -> None:
        rest = self.count - MAX_PER_CHECK
        if rest > 0:
            msg = f"... and {rest} more {self.summary}"
            (self.coll.warn if self.warning else self.coll.error)(self._last_file, msg, rest)


# the delimiters a CSV header is tried with when the names wanted are not among its columns
OTHER_DELIMITERS = ((";", '";"'), ("\t", '"\\t"'), (",", '","'), ("|", '"|"'))


def delimiter_hint(raw: RawTable, wanted: tuple[str, ...] | list[str]) -> str:
    """``; the header holds them separated by ';': set delimiter = ";"`` when a CSV file's
    header, split at another delimiter, holds every name in ``wanted`` (a semicolon file
    read with the default comma is one column named ``date;return``), else ''."""
    names = raw.table.column_names
    if raw.format != "csv" or not wanted:
        return ""
    for sep, toml in OTHER_DELIMITERS:
        if not any(sep in n for n in names):
            continue
        parts = {p.strip().strip('"') for n in names for p in n.split(sep)}
        if set(wanted) <= parts:
            them = "it" if len(wanted) == 1 else "them"
            return f"; the header holds {them} separated by {sep!r}: set delimiter = {toml}"
    return ""


def _require_columns(raw: RawTable, required: tuple[str, ...], optional: tuple[str, ...],
                     coll: Collector) -> bool:
    names = raw.table.column_names
    missing = [c for c in required if c not in names]
    hint = delimiter_hint(raw, missing)
    for c in missing:
        coll.error(place(raw.name, 1, c), "required column is missing "
                   f"(the file has: {', '.join(names) or 'no columns'}){hint}")
    for c in names:
        if c not in required and c not in optional:
            coll.warn(place(raw.name, 1, c), "unknown column, ignored")
    return not missing



def _period_word(settings: Settings) -> str:
    return {"monthly": "month", "weekly": "week", "daily": "day"}[settings.frequency]

