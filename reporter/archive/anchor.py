"""Anchor the ledger to the heads written in the minutes.

The hash chain finds any edit that leaves later hashes alone, but someone who can write the
ledger can also rewrite an entry and recompute every hash after it: the chain is then
consistent, and only a hash kept outside the archive tells. Sign-off prints the ledger head
to be written into the minutes. :func:`check_heads` checks that each minuted head is the
``entry_hash`` of an entry whose chain, from the first entry to it, is intact. A head that
no entry has means the ledger was rewritten after it was minuted (or the head belongs to
another archive).

A heads file holds one head per line; ``#`` starts a comment, and blank lines are skipped.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

from reporter.archive.ledger import Entry
from reporter.archive.verify import ArchiveReport
from reporter.errors import EXIT_BAD_INPUT, InputError, ReporterError, shown_name
from reporter.user_files import read_regular

MAX_HEADS_FILE = 1 << 20          # minuted heads are 65 bytes a line

_HEAD = re.compile(r"[0-9a-f]{64}")
_CHAIN_KINDS = ("ledger-edited", "ledger-chain")


class BadHead(ReporterError):
    """A head that is not a sha256, or a heads file that cannot be read (exit 2)."""

    exit_code = EXIT_BAD_INPUT


@dataclass(frozen=True)
class MinutedHead:
    head: str          # 64 lower-case hexadecimal characters
    where: str         # "--head", or "FILE:LINE"


@dataclass(frozen=True)
class HeadCheck:
    """The outcome for one minuted head: ``entry`` it is (or None), and ``problem`` (None
    when the head anchors an intact chain up to that entry)."""

    minuted: MinutedHead
    entry: Entry | None
    problem: str | None

    @property
    def anchored(self) -> bool:
        return self.problem is None

    def __str__(self) -> str:
        m, e = self.minuted, self.entry
        if self.anchored:
            return (f"head {m.head} ({m.where}): anchored at entry {e.seq} ({e.pack_name}, "
                    f"period ending {e.period_end}, revision {e.revision}, signed by "
                    f"{e.signer} on {e.signed_utc}); entries 1 to {e.seq} are as minuted")
        return f"head {m.head} ({m.where}): NOT anchored: {self.problem}"


def parse_head(text: str, where: str) -> MinutedHead:
    """A head as typed or copied from the minutes (any case, surrounding spaces ignored)."""
    head = text.strip().lower()
    if not _HEAD.fullmatch(head):
        shown = text.strip()
        shown = shown if len(shown) <= 80 else shown[:77] + "..."
        raise BadHead(f"{where}: {shown!r} is not a ledger head (a sha256: 64 hexadecimal "
                      "characters)")
    return MinutedHead(head, where)


def read_heads_file(path: Path) -> list[MinutedHead]:
    """The heads in a minutes file: one per line, ``#`` comments and blank lines allowed.
    Every bad line is named (one line each), and a file with no head is refused."""
    path = Path(path)
    try:
        text = read_regular(path, MAX_HEADS_FILE, missing="cannot be read (no such file)",
                            too_large="too large for a file of ledger heads").decode("utf-8")
    except InputError as exc:             # no such file, not a regular file, too large
        raise BadHead(str(exc)) from None
    except UnicodeDecodeError:
        raise BadHead(f"{shown_name(path)}: cannot be read (not UTF-8 text)") from None
    heads, bad = [], []
    for n, line in enumerate(text.splitlines(), start=1):
        content = line.split("#", 1)[0].strip()
        if not content:
            continue
        try:
            heads.append(parse_head(content, f"{path}:{n}"))
        except BadHead as exc:
            bad.append(str(exc))
    if bad:
        raise BadHead("\nreporter: ".join(bad))
    if not heads:
        raise BadHead(f"{path}: holds no ledger head (one sha256 a line expected)")
    return heads


def check_heads(report: ArchiveReport, heads: list[MinutedHead]) -> list[HeadCheck]:
    """Check each minuted head against the verified archive ``report`` (see the module
    docstring)."""
    by_hash = {e.entry_hash: e for e in report.entries}
    linked_from = {e.prev_hash: e for e in report.entries}
    broken = {}                          # seq -> first chain finding at that entry
    for f in report.findings:
        if f.kind in _CHAIN_KINDS:
            seq = int(f.where.rsplit(" ", 1)[1])
            broken.setdefault(seq, f"{f.kind}: {f.message}")
    out = []
    for m in heads:
        e = by_hash.get(m.head)
        if e is None:
            after = linked_from.get(m.head)
            i = report.entries.index(after) if after is not None else 0
            if i > 0:
                problem = (f"no entry has this hash, though entry {after.seq} links to it as "
                           f"the entry before it: entry {report.entries[i - 1].seq} was "
                           "rewritten after this head was minuted")
            else:
                problem = ("no entry has this hash: the ledger was rewritten after this head "
                           "was minuted (an entry changed and every later hash recomputed), "
                           "or the head belongs to another archive")
            out.append(HeadCheck(m, None, problem))
            continue
        if e.computed_hash() != m.head:
            out.append(HeadCheck(m, e, f"entry {e.seq} carries this hash but its contents no "
                                 "longer give it: it was edited after this head was minuted"))
            continue
        before = sorted(seq for seq in broken if seq <= e.seq)
        if before:
            out.append(HeadCheck(m, e, f"it is entry {e.seq}, but the chain up to it is "
                                 f"broken at entry {before[0]} ({broken[before[0]]})"))
            continue
        out.append(HeadCheck(m, e, None))
    return out
