"""The committee's action log: an optional ``actions.csv`` in the pack folder.

Columns ``id, raised, action, owner, due, status, note`` (``note`` may be empty; every other
cell is required). ``raised`` and ``due`` are ISO dates (YYYY-MM-DD); ``status`` is ``open``,
``done`` or ``dropped``. The log carries from month to month: the committee's secretary edits
the same file, and the pack shows it as "Actions from earlier meetings", overdue items first.
An item is overdue when it is open and its due date is before the pack's period end.

Every problem is one :class:`~reporter.errors.Problem` naming ``actions.csv:row:column`` (the
header is row 1); all are gathered and raised together as an
:class:`~reporter.errors.InputError`. An invisible format character (a right-to-left override,
a zero-width space, ...) in a column name or cell is an error, as in every input file. The
file is read with the standard ``csv`` module: it is a handful of rows, and text cells are
kept exactly as written (escaped in HTML by the templates).
"""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
import io
from dataclasses import dataclass
from pathlib import Path

from reporter.errors import InputError, Problem, place
from reporter.invisible import invisible_message, long_word_message
from reporter.validate.text import visible

FILE = "actions.csv"
COLUMNS = ("id", "raised", "action", "owner", "due", "status", "note")
REQUIRED = ("id", "raised", "action", "owner", "due", "status")
STATUSES = ("open", "done", "dropped")
MAX_BYTES = 1_000_000


@dataclass(frozen=True)
class Action:
    """One item of the log; ``overdue`` is worked out against the pack's period end."""

    id: str
    raised: dt.date
    action: str
    owner: str
    due: dt.date
    status: str
    note: str
    overdue: bool
    row: int                      # its row in actions.csv (header = 1)


@dataclass(frozen=True)
class ActionLog:
    """The log ready for the template: overdue items first, then open, done and dropped,
    each by due date; ``sha256`` is the file's, for the input fingerprint (None: no file)."""

    items: tuple[Action, ...] = ()
    sha256: str | None = None

    @property
    def counts(self) -> dict[str, int]:
        """How many items are overdue, open (overdue included), done and dropped."""
        out = {s: sum(a.status == s for a in self.items) for s in STATUSES}
        return {"overdue": sum(a.overdue for a in self.items)} | out


def read_actions(pack_dir: Path, period_end: dt.date) -> ActionLog:
    """Read and check ``pack_dir/actions.csv`` (see the module doc); an empty log when the
    file is absent. Raises :class:`InputError` with every problem found."""
    path = Path(pack_dir) / FILE
    if not path.exists():
        return ActionLog()
    if not path.is_file() or path.stat().st_size > MAX_BYTES:
        raise InputError([Problem(FILE, "not a regular file of at most 1 MB")])
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError([Problem(FILE, f"not UTF-8 text ({exc.reason})")]) from None
    items = parse_actions(text, period_end)
    return ActionLog(items=items, sha256=hashlib.sha256(raw).hexdigest())


def parse_actions(text: str, period_end: dt.date) -> tuple[Action, ...]:
    """The checked, ordered items of an ``actions.csv`` text; raises :class:`InputError`."""
    problems: list[Problem] = []
    try:
        rows = list(csv.reader(io.StringIO(text, newline="")))
    except csv.Error as exc:
        raise InputError([Problem(FILE, f"not a readable CSV file ({exc})")]) from None
    if not rows:
        raise InputError([Problem(place(FILE, 1), "the file is empty; it needs the header "
                                  + ", ".join(COLUMNS))])
    header = [h.strip().lower() for h in rows[0]]
    for col in REQUIRED:
        if col not in header:
            problems.append(Problem(place(FILE, 1, col), "required column is missing "
                                    "(columns: " + ", ".join(COLUMNS) + ")"))
    for col in sorted(set(header) - set(COLUMNS)):
        problems.append(Problem(place(FILE, 1, col or "?"), "unknown column (columns: "
                                + ", ".join(COLUMNS) + ")"))
    if len(set(header)) != len(header):
        problems.append(Problem(place(FILE, 1), "a column name appears twice"))
    for name in rows[0]:
        if found := invisible_message(name):
            problems.append(Problem(place(FILE, 1, visible(name.strip())),
                                    f"column name: {found}"))
    if problems:
        raise InputError(problems)
    index = {h: i for i, h in enumerate(header)}
    items: list[Action] = []
    first_row: dict[str, int] = {}
    for n, cells in enumerate(rows[1:], start=2):
        if not any(c.strip() for c in cells):
            continue                                      # blank line
        if len(cells) != len(header):
            problems.append(Problem(place(FILE, n), f"{len(cells)} cells where the header "
                                    f"has {len(header)}"))
            continue
        cell = {h: cells[i].strip() for h, i in index.items()}
        before = len(problems)
        for col in header:
            if found := invisible_message(cell[col]) or long_word_message(cell[col]):
                problems.append(Problem(place(FILE, n, col), found))
        for col in REQUIRED:
            if not cell[col]:
                problems.append(Problem(place(FILE, n, col), "empty; a value is required"))
        dates = {}
        for col in ("raised", "due"):
            if cell[col]:
                try:
                    dates[col] = dt.date.fromisoformat(cell[col])
                except ValueError:
                    problems.append(Problem(place(FILE, n, col), f"{cell[col]!r} is not a "
                                            "date as YYYY-MM-DD"))
                    continue
                if len(cell[col]) != 10:
                    problems.append(Problem(place(FILE, n, col), f"{cell[col]!r} is not a "
                                            "date as YYYY-MM-DD"))
        if len(dates) == 2 and dates["due"] < dates["raised"]:
            problems.append(Problem(place(FILE, n, "due"), f"due {dates['due']} is before the "
                                    f"date raised, {dates['raised']}"))
        status = cell["status"].lower()
        if cell["status"] and status not in STATUSES:
            problems.append(Problem(place(FILE, n, "status"), f"unknown status "
                                    f"{cell['status']!r}; use open, done or dropped"))
        if cell["id"]:
            if cell["id"] in first_row:
                problems.append(Problem(place(FILE, n, "id"), f"duplicate id {cell['id']!r} "
                                        f"(first on row {first_row[cell['id']]})"))
            else:
                first_row[cell["id"]] = n
        if len(problems) > before:
            continue
        items.append(Action(id=cell["id"], raised=dates["raised"], action=cell["action"],
                            owner=cell["owner"], due=dates["due"], status=status,
                            note=cell.get("note", ""),
                            overdue=status == "open" and dates["due"] < period_end, row=n))
    if problems:
        raise InputError(problems)
    order = {"open": 1, "done": 2, "dropped": 3}
    return tuple(sorted(items, key=lambda a: (0 if a.overdue else order[a.status], a.due,
                                              a.id)))
