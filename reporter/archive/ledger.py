"""The archive's ledger: one SQLite table of sign-off entries, linked into a hash chain.

Each entry's ``entry_hash`` is the sha256 of its other columns written as canonical JSON
(sorted keys, no spaces, UTF-8), and that includes ``prev_hash``, the previous entry's hash.
Editing any column of any entry, deleting or reordering entries, changes a hash that a later
entry (or the recomputation) no longer matches, so :mod:`reporter.archive.verify` finds it.
Digital signatures (:mod:`reporter.archive.signature`) add three columns,
:data:`SIGNATURE_COLUMNS`: the signer certificate's subject, its sha256 and the signing time
in the PDF's signature. A ledger lacks the columns until its first digitally signed entry (so a
ledger with no such entry is exactly as before); it is read as if they were NULL and is
given them (``ALTER TABLE ... ADD COLUMN``, inside the sign-off's own
transaction) when a digitally signed entry is appended. A NULL signature column is left out
of the entry hash, so every entry written before the columns existed keeps its hash; a set
one is hashed, so blanking it later breaks the entry's hash like any other edit.

The chain cannot protect its own last entry against someone who rewrites it and every hash
after it: the head hash that sign-off prints is meant to be written into the minutes, where
it anchors the chain outside the archive.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import sqlite3
from collections.abc import Iterator
from dataclasses import asdict, dataclass, fields
from pathlib import Path

from reporter.writer import STAGING_DIR

LEDGER_NAME = "ledger.sqlite"
FORMAT = "committee-pack-archive 1"
GENESIS = "0" * 64
BUSY_TIMEOUT_S = 120.0

_SCHEMA = """
CREATE TABLE IF NOT EXISTS archive_info (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS entries (
    seq          INTEGER PRIMARY KEY,
    pack_name    TEXT NOT NULL,
    period_end   TEXT NOT NULL,
    revision     INTEGER NOT NULL,
    title        TEXT NOT NULL,
    organisation TEXT NOT NULL,
    signer       TEXT NOT NULL,
    role         TEXT,
    minute_ref   TEXT,
    note         TEXT,
    signed_utc   TEXT NOT NULL,
    pdf_path     TEXT NOT NULL,
    pdf_sha256   TEXT NOT NULL,
    files        TEXT NOT NULL,
    inputs       TEXT NOT NULL,
    tool_version TEXT NOT NULL,
    supersedes   INTEGER,
    reason       TEXT,
    prev_hash    TEXT NOT NULL,
    entry_hash   TEXT NOT NULL UNIQUE,
    UNIQUE (pack_name, period_end, revision)
);
"""


@dataclass(frozen=True)
class Entry:
    """One sign-off. ``files`` maps each archived file (path relative to the archive) to its
    sha256; ``inputs`` maps pack.toml and each input role to its sha256 (both canonical JSON
    text, exactly as stored and hashed)."""

    seq: int
    pack_name: str
    period_end: str
    revision: int
    title: str
    organisation: str
    signer: str
    role: str | None
    minute_ref: str | None
    note: str | None
    signed_utc: str
    pdf_path: str
    pdf_sha256: str
    files: str
    inputs: str
    tool_version: str
    supersedes: int | None
    reason: str | None
    prev_hash: str
    entry_hash: str
    cert_subject: str | None = None       # the digital signature's certificate, if any
    cert_sha256: str | None = None
    cert_signed_utc: str | None = None

    @property
    def file_hashes(self) -> dict[str, str]:
        return json.loads(self.files)

    @property
    def input_hashes(self) -> dict[str, str]:
        return json.loads(self.inputs)

    def computed_hash(self) -> str:
        """The hash this entry's contents give (equal to ``entry_hash`` unless edited)."""
        return entry_hash(_hashed(asdict(self)))


COLUMNS = tuple(f.name for f in fields(Entry))
SIGNATURE_COLUMNS = ("cert_subject", "cert_sha256", "cert_signed_utc")


def _hashed(row: dict) -> dict:
    """The columns an entry's hash covers: all but ``entry_hash``, and the signature
    columns only when set (so entries from before those columns keep their hashes)."""
    return {k: v for k, v in row.items()
            if k != "entry_hash" and not (k in SIGNATURE_COLUMNS and v is None)}


def _select(con: sqlite3.Connection) -> str:
    """The SELECT list of :data:`COLUMNS`, with NULL for signature columns that an older
    ledger does not have."""
    have = {row[1] for row in con.execute("PRAGMA table_info(entries)")}
    return ", ".join(c if c in have or c not in SIGNATURE_COLUMNS else f"NULL AS {c}"
                     for c in COLUMNS)


def canonical_json(obj) -> str:
    """JSON with sorted keys and no spaces: one text for one value, whatever the order."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False)


def entry_hash(columns: dict) -> str:
    """sha256 of an entry's columns (every one but ``entry_hash``) as canonical JSON."""
    return hashlib.sha256(canonical_json(columns).encode("utf-8")).hexdigest()


def ledger_path(archive: Path) -> Path:
    return Path(archive) / LEDGER_NAME


def connect_for_writing(archive: Path) -> sqlite3.Connection:
    """Open the ledger for a sign-off or repair, creating it first when the archive is new.

    A new ledger is made complete (schema and format row) under a temporary name in the
    staging folder and then hard-linked into place, so a kill never leaves a ledger without
    its tables. Transactions are explicit (``BEGIN IMMEDIATE`` takes the write lock, so two
    sign-offs queue on it); ``synchronous=FULL`` makes a committed entry survive a crash.
    """
    path = ledger_path(archive)
    if not path.exists():
        _create_ledger(Path(archive))
    con = sqlite3.connect(path, timeout=BUSY_TIMEOUT_S, isolation_level=None)
    con.execute("PRAGMA synchronous=FULL")
    return con


@contextlib.contextmanager
def ledger_transaction(archive: Path, *, commit: bool = True) -> Iterator[sqlite3.Connection]:
    """The ledger open for writing (:func:`connect_for_writing`) inside one ``BEGIN
    IMMEDIATE`` transaction, which waits while another sign-off holds the write lock.
    The transaction is committed when the block ends normally (rolled back instead with
    ``commit=False``: the lock alone was wanted) and rolled back on any exception, an
    interrupt included; the connection is closed either way."""
    con = connect_for_writing(archive)
    try:
        con.execute("BEGIN IMMEDIATE")
        yield con
        con.execute("COMMIT" if commit else "ROLLBACK")
    except BaseException:
        if con.in_transaction:
            con.execute("ROLLBACK")
        raise
    finally:
        con.close()


def _create_ledger(archive: Path) -> None:
    staging = archive / STAGING_DIR / f"{os.getpid()}-{os.urandom(4).hex()}-ledger"
    staging.mkdir(parents=True)
    tmp = staging / LEDGER_NAME
    con = sqlite3.connect(tmp, isolation_level=None)
    try:
        con.execute("PRAGMA synchronous=FULL")
        con.execute("BEGIN")
        for statement in filter(str.strip, _SCHEMA.split(";")):
            con.execute(statement)
        con.execute("INSERT INTO archive_info VALUES ('format', ?)", (FORMAT,))
        con.execute("COMMIT")
    finally:
        con.close()
    try:
        os.link(tmp, ledger_path(archive))     # fails if another process made it first
    except FileExistsError:
        pass
    finally:
        tmp.unlink()
        staging.rmdir()
        try:
            staging.parent.rmdir()
        except OSError:
            pass


def connect_read_only(archive: Path) -> sqlite3.Connection:
    """Open an existing ledger read-only; raises ``sqlite3.Error`` if it is not one."""
    path = ledger_path(archive)
    if not path.is_file():
        raise sqlite3.OperationalError(f"no {LEDGER_NAME} in {archive}")
    con = sqlite3.connect(f"{path.absolute().as_uri()}?mode=ro", uri=True,
                          timeout=BUSY_TIMEOUT_S)
    con.execute("SELECT count(*) FROM entries")  # fails here on a file that is not a ledger
    return con


def read_entries(con: sqlite3.Connection) -> list[Entry]:
    """Every entry, in sequence order."""
    rows = con.execute(f"SELECT {_select(con)} FROM entries ORDER BY seq").fetchall()
    return [Entry(*row) for row in rows]


def last_entry(con: sqlite3.Connection) -> Entry | None:
    row = con.execute(f"SELECT {_select(con)} FROM entries "
                      "ORDER BY seq DESC LIMIT 1").fetchone()
    return Entry(*row) if row else None


def entries_for(con: sqlite3.Connection, pack_name: str, period_end: str) -> list[Entry]:
    """The entries of one pack and period, oldest revision first."""
    rows = con.execute(f"SELECT {_select(con)} FROM entries WHERE pack_name = ? "
                       "AND period_end = ? ORDER BY revision", (pack_name, period_end)).fetchall()
    return [Entry(*row) for row in rows]


def append(con: sqlite3.Connection, columns: dict) -> Entry:
    """Insert the next entry (inside the caller's transaction), chained to the last one."""
    last = last_entry(con)
    row = dict(columns, seq=(last.seq + 1) if last else 1,
               prev_hash=last.entry_hash if last else GENESIS)
    missing = set(COLUMNS) - {"entry_hash"} - set(SIGNATURE_COLUMNS) - set(row)
    if missing:
        raise ValueError(f"ledger entry lacks {sorted(missing)}")
    row = {k: row.get(k) for k in COLUMNS if k != "entry_hash"}
    row["entry_hash"] = entry_hash(_hashed(row))
    stored = [k for k in COLUMNS if k not in SIGNATURE_COLUMNS or row[k] is not None]
    if any(row[k] is not None for k in SIGNATURE_COLUMNS):
        have = {r[1] for r in con.execute("PRAGMA table_info(entries)")}
        for column in SIGNATURE_COLUMNS:       # an older ledger gains them, in this transaction
            if column not in have:
                con.execute(f"ALTER TABLE entries ADD COLUMN {column} TEXT")
    con.execute(f"INSERT INTO entries ({', '.join(stored)}) VALUES "
                f"({', '.join('?' * len(stored))})", [row[k] for k in stored])
    return Entry(**row)
