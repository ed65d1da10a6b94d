"""Which folders the writer may replace: the marker a build leaves in its output folder, and
the checks made on an output folder before anything is written (see :mod:`reporter.writer`).

The marker, ``.reporter-build``, is a JSON body: the tool's name, the kind of output
(``pack`` or ``site``), the tool's version, the sorted list of every file the build wrote
and the sha256 of that list. An existing folder is replaced only when its marker is one of
these (an empty, unreadable or hand-edited marker is not), names the same kind, and lists
every file in the folder, and when no archive's ledger lies anywhere inside it. A folder
written by a version before this marker format carries a one-line text marker: it is
replaced only when each of its files has a name that version wrote for that kind.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
from dataclasses import dataclass
from pathlib import Path

from reporter import __version__
from reporter.errors import OutputError

BUILD_MARKER = ".reporter-build"
ARCHIVE_MARKER = "ledger.sqlite"        # reporter.archive.ledger.LEDGER_NAME
TOOL = "committee-pack-reporter"
KINDS = ("pack", "site")
KIND_NAME = {"pack": "a pack build", "site": "a trustees' site"}
MAX_MARKER_BYTES = 4 << 20
SHOWN = 5                               # files in the way named in a refusal

# The one-line markers of earlier versions, and the files those versions wrote by kind.
LEGACY_TEXT = {"pack": b"committee-pack-reporter build output\n",
               "site": b"committee-pack-reporter site output\n"}
_LEGACY_NAMES = {
    "pack": re.compile(
        r"pack\.(html|pdf)|results/(securities|rolling_beta|period_returns|risk_contributions"
        r"|mandates|overlap|overlap_pairs)\.csv|results/(portfolio|manifest|limits|changes"
        r"|mandate_limits|mandate_portfolio|mandate_changes)\.json"),
    "site": re.compile(
        r"(index|methods|checking)\.html|README\.md|assets/site\.(css|js)|assets/vega\.js"
        r"|trends/[a-z-]+\.html|packs/[^/]+/(index\.html|pack\.html|[^/]+\.pdf)"),
}


@dataclass(frozen=True)
class Marker:
    """What an output folder's marker says: its kind, and the files the build wrote there
    (``None`` for a marker of an earlier version, which listed none)."""

    kind: str
    files: frozenset[str] | None

    def owns(self, rel: str) -> bool:
        """Whether the build that left this marker wrote file ``rel``."""
        if self.files is not None:
            return rel in self.files
        return _LEGACY_NAMES[self.kind].fullmatch(rel) is not None


def list_hash(files: list[str]) -> str:
    """sha256 (hex) of a sorted file list, as the marker records it (compact JSON, UTF-8)."""
    text = json.dumps(sorted(files), ensure_ascii=False, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def marker_bytes(kind: str, files: list[str]) -> bytes:
    """The marker a build of ``kind`` leaves beside ``files`` (relative POSIX paths)."""
    listed = sorted(files)
    body = {"tool": TOOL, "kind": kind, "tool_version": __version__, "files": listed,
            "files_sha256": list_hash(listed)}
    return (json.dumps(body, indent=1, ensure_ascii=False) + "\n").encode("utf-8")


def read_marker(folder: Path) -> Marker | None:
    """The marker of ``folder``; None when there is none, or it is not one this tool writes
    (empty, not JSON, another tool's, a list that is not sorted or whose hash does not
    match, a link or a folder)."""
    path = Path(folder) / BUILD_MARKER
    try:
        if path.is_symlink() or not path.is_file() or path.stat().st_size > MAX_MARKER_BYTES:
            return None
        data = path.read_bytes()
    except OSError:
        return None
    for kind, text in LEGACY_TEXT.items():
        if data == text:
            # sites made before sites had a marker of their own carry the pack text
            if kind == "pack" and (Path(folder) / "index.html").is_file() and not (
                    Path(folder) / "pack.pdf").exists():
                kind = "site"
            return Marker(kind, None)
    try:
        body = json.loads(data.decode("utf-8"))
        files = body["files"]
        good = (body["tool"] == TOOL and body["kind"] in KINDS
                and isinstance(files, list) and all(isinstance(f, str) for f in files)
                and files == sorted(set(files)) and body["files_sha256"] == list_hash(files))
    except (ValueError, KeyError, TypeError):
        return None
    return Marker(body["kind"], frozenset(files)) if good else None


def marker_kind(folder: Path) -> str | None:
    """The kind of output (``pack`` or ``site``) a folder's marker names; None without a
    valid one."""
    marker = read_marker(folder)
    return marker.kind if marker else None


def folder_contents(folder: Path) -> tuple[list[str], list[str]]:
    """Every file below ``folder`` (relative POSIX paths, sorted), and every symbolic link
    and other entry that is neither a plain file nor a folder (never followed)."""
    files, odd = [], []
    pending = [("", str(folder))]
    while pending:
        prefix, path = pending.pop()
        try:
            with os.scandir(path) as entries:
                found = list(entries)
        except OSError as exc:
            raise OutputError(f"{path}: cannot be read ({exc.strerror or exc}); refusing to "
                              "replace a folder that cannot be checked") from None
        for e in found:
            rel = prefix + e.name
            if e.is_symlink():
                odd.append(rel)
            elif e.is_dir(follow_symlinks=False):
                pending.append((rel + "/", e.path))
            elif e.is_file(follow_symlinks=False):
                files.append(rel)
            else:
                odd.append(rel)
    return sorted(files), sorted(odd)


def _listing(names: list[str]) -> str:
    shown = ", ".join(names[:SHOWN])
    more = len(names) - SHOWN
    return shown + (f" and {more} more" if more > 0 else "")


def check_target(target: Path, kind: str = "pack") -> None:
    """Refuse a ``target`` that may not be replaced by an output of ``kind``: a symbolic link;
    a path that is, is inside, or holds an archive (a ledger anywhere below it); something
    that is not a folder; a folder without a valid marker of this tool, or whose marker is of
    the other kind, or that holds files its marker does not list (or, for a marker of an
    earlier version, files that version never wrote). An empty folder may be used."""
    target = Path(target).absolute()
    if target.is_symlink():
        raise OutputError(f"{target}: is a symbolic link (to {os.readlink(target)}); an output "
                          "folder is replaced whole, so a link is never followed or replaced: "
                          "give the folder itself as --out")
    refuse_archive(target)
    if not target.exists():
        return
    if not target.is_dir():
        raise OutputError(f"{target}: exists and is not a folder")
    files, odd = folder_contents(target)
    ledgers = [rel for rel in [*files, *odd] if rel.rsplit("/", 1)[-1] == ARCHIVE_MARKER]
    if ledgers:
        raise OutputError(f"{target}: holds a sign-off archive ({_listing(ledgers)}); signed "
                          "packs are never deleted: choose another --out")
    if not files and not odd:
        return
    marker = read_marker(target)
    if marker is None:
        raise OutputError(f"{target}: folder exists, is not empty and is not "
                          f"{KIND_NAME[kind]}; refusing to replace it (choose another --out); "
                          f"in the way: {_listing([*files, *odd])}")
    if marker.kind != kind:
        raise OutputError(f"{target}: holds {KIND_NAME[marker.kind]}, not {KIND_NAME[kind]}; "
                          "refusing to replace it (choose another --out)")
    foreign = [rel for rel in files if rel != BUILD_MARKER and not marker.owns(rel)]
    foreign = sorted([*foreign, *odd])
    if foreign:
        raise OutputError(f"{target}: holds {len(foreign)} file(s) this tool did not write "
                          f"there ({_listing(foreign)}); refusing to replace it (move them, "
                          "or choose another --out)")


def refuse_archive(target: Path) -> None:
    """Refuse a path that is, or is inside, a sign-off archive (a folder with a ledger)."""
    target = Path(target).absolute()
    for folder in (target, *target.parents):
        if (folder / ARCHIVE_MARKER).exists():
            raise OutputError(f"{target}: refusing to write into the archive at {folder}; "
                              "signed packs are never overwritten")


def refuse_overlap(source: Path, target: Path, what: str) -> None:
    """Refuse an output folder ``target`` that is ``source`` (the input: a pack folder, a
    folder of schemes, an archive, named by ``what``), lies inside it, or holds it; links
    are resolved first. An output folder is replaced whole, so either would lose input."""
    src, out = Path(source).resolve(), Path(target).resolve()
    if src == out or src.is_relative_to(out):
        raise OutputError(f"{target}: holds the {what} {source}; the output folder is "
                          f"replaced whole, so choose an --out outside the {what}")
    if out.is_relative_to(src):
        raise OutputError(f"{target}: is inside the {what} {source}; choose an --out outside "
                          f"the {what}")
