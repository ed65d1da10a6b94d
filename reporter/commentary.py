"""The committee's own commentary: optional Markdown files in ``PACK/commentary/``.

One file per pack section, named after the section's anchor (``summary.md``,
``changes.md``, ``market-risk.md``, ... see :data:`COMMENTARY_FILES`), each opening with YAML
front matter that gives ``author`` and ``date`` (and optionally ``title``). The Markdown is
parsed by markdown-it-py (CommonMark, plus tables) and sanitised before it reaches the pack:

- raw HTML of any kind (a ``<script>``, a ``<b>``, an HTML comment) is refused;
- images must be PNG or JPEG files inside the pack folder, given as a path relative to the
  Markdown file with no ``..`` part; a remote image, a ``file:`` URL, an absolute path or a
  path that leaves the folder is refused. Images are embedded as ``data:`` URLs, so the HTML
  pack stays one self-contained file and the PDF fetches nothing;
- an invisible format character (a right-to-left override, a zero-width space, ...) anywhere,
  in the front matter or the body, is refused, as in every input file;
- links may point only to ``https:``, ``http:`` or ``mailto:`` addresses or to ``#anchors``
  in the pack; ``file:``, ``javascript:``, ``data:``, absolute and relative paths are refused.

Everything refused is an :class:`~reporter.errors.InputError` naming the file and line. The
HTML is rendered with raw HTML disabled, so nothing a file says can become markup but what
Markdown itself produces. Headings are moved down to levels 4-6 so that commentary never
takes the place of the pack's own section headings.
"""

from __future__ import annotations

import base64
import datetime as dt
import hashlib
import re
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from urllib.parse import unquote, urlsplit

import yaml
from markdown_it import MarkdownIt
from markupsafe import Markup
from mdit_py_plugins.front_matter import front_matter_plugin

from reporter.context import SECTIONS
from reporter.errors import InputError, Problem
from reporter.invisible import invisible_message, long_word_message

FOLDER = "commentary"
# section anchor -> file name; the cautions are the tool's own and take no commentary
COMMENTARY_FILES = {s.anchor: f"{s.anchor}.md" for s in SECTIONS if s.anchor != "cautions"}
COMMENTARY_FILES["decisions"] = "decisions.md"   # "Decisions for the committee", first page
FRONT_MATTER_KEYS = {"author", "date", "title"}
LINK_SCHEMES = {"https", "http", "mailto"}
IMAGE_TYPES = {b"\x89PNG\r\n\x1a\n": "image/png", b"\xff\xd8\xff": "image/jpeg"}
MAX_IMAGE_BYTES = 5_000_000
_WINDOWS_DRIVE = re.compile(r"^[A-Za-z]:[\\/]")


@dataclass(frozen=True)
class Commentary:
    """One section's commentary, ready for the template (``html`` is sanitised markup)."""

    section: str
    file: str                 # e.g. "commentary/summary.md"
    author: str
    date: dt.date
    title: str | None
    html: Markup


@dataclass(frozen=True)
class CommentarySet:
    """All commentary of a pack, by section anchor, and the sha256 of every file used."""

    by_section: dict[str, Commentary] = field(default_factory=dict)
    hashes: dict[str, str] = field(default_factory=dict)


def _parser(html: bool) -> MarkdownIt:
    md = MarkdownIt("commonmark", {"html": html}).use(front_matter_plugin).enable("table")
    # every link and image reaches our checks (markdown-it would silently drop some)
    md.validateLink = lambda url: True
    return md


def read_commentary(pack_dir: Path) -> CommentarySet:
    """Read, check and render every file in ``pack_dir/commentary/`` (see the module doc).

    Raises :class:`InputError` with every problem in every file, each with its line."""
    folder = Path(pack_dir) / FOLDER
    if not folder.is_dir():
        return CommentarySet()
    problems: list[Problem] = []
    known = {v: k for k, v in COMMENTARY_FILES.items()}
    found: dict[str, Commentary] = {}
    hashes: dict[str, str] = {}
    for path in sorted(folder.glob("*.md")):
        rel = f"{FOLDER}/{path.name}"
        if path.name not in known:
            problems.append(Problem(rel, "not a section name; commentary files are "
                                    + ", ".join(COMMENTARY_FILES.values())))
            continue
        raw = path.read_bytes()
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError as exc:
            problems.append(Problem(rel, f"not UTF-8 text ({exc.reason})"))
            continue
        hashes[rel] = hashlib.sha256(raw).hexdigest()
        item = _one(known[path.name], rel, text, path.parent, Path(pack_dir).resolve(),
                    problems, hashes)
        if item is not None:
            found[item.section] = item
    if problems:
        raise InputError(problems)
    return CommentarySet(by_section=found, hashes=hashes)


def render_commentary(section: str, rel: str, text: str, base: Path,
                      pack_dir: Path) -> Commentary:
    """Check and render one Markdown text (for tests and tools); raises InputError."""
    problems: list[Problem] = []
    item = _one(section, rel, text, base, Path(pack_dir).resolve(), problems, {})
    if problems:
        raise InputError(problems)
    return item


def _one(section: str, rel: str, text: str, base: Path, pack_dir: Path,
         problems: list[Problem], hashes: dict[str, str]) -> Commentary | None:
    before = len(problems)
    # 0. invisible format characters, in the front matter (author, title) and the body, each
    # named by its line (a byte-order mark opening the file is no character of the text)
    for n, line in enumerate(text.removeprefix("\ufeff").split("\n"), start=1):
        if found := invisible_message(line):
            problems.append(Problem(f"{rel}:{n}", found))
    if len(problems) > before:
        return None
    # 1. find what is refused, with html on so that raw HTML shows up as tokens
    tokens = _parser(html=True).parse(text)
    meta = _front_matter(tokens, rel, problems)
    html_lines: set[int] = set()     # one raw-HTML problem per line (not one per tag)
    for tok in tokens:
        line = tok.map[0] + 1 if tok.map else None
        if tok.type == "html_block":
            problems.append(Problem(f"{rel}:{line}", "raw HTML is not allowed in commentary "
                                    f"(found {_snippet(tok.content)})"))
        for child, cline in _children_with_lines(tok):
            if child.type == "html_inline" and cline not in html_lines:
                html_lines.add(cline)
                problems.append(Problem(f"{rel}:{cline}", "raw HTML is not allowed in "
                                        f"commentary (found {_snippet(child.content)})"))
            elif child.type == "image":
                _check_image(child.attrGet("src") or "", rel, cline, base, pack_dir, problems)
            elif child.type == "link_open":
                _check_link(child.attrGet("href") or "", rel, cline, problems)
            elif child.type in ("text", "code_inline"):
                _check_words(child.content, rel, cline, problems)
        if tok.type in ("fence", "code_block"):
            _check_words(tok.content, rel, line + 1 if tok.type == "fence" else line,
                         problems)
    if len(problems) > before or meta is None:
        return None
    # 2. render with raw HTML off; images become data: URLs, headings move down
    md = _parser(html=False)
    tokens = md.parse(text)
    for tok in tokens:
        if tok.type in ("heading_open", "heading_close"):
            tok.tag = f"h{min(int(tok.tag[1]) + 3, 6)}"
        for child in tok.children or []:
            if child.type == "image":
                path = (base / unquote(child.attrGet("src"))).resolve()
                data = path.read_bytes()
                hashes[path.relative_to(pack_dir).as_posix()] = hashlib.sha256(
                    data).hexdigest()
                kind = next(v for k, v in IMAGE_TYPES.items() if data.startswith(k))
                child.attrSet("src", f"data:{kind};base64,"
                              + base64.b64encode(data).decode("ascii"))
    html = md.renderer.render([t for t in tokens if t.type != "front_matter"], md.options, {})
    return Commentary(section=section, file=rel, author=meta["author"], date=meta["date"],
                      title=meta.get("title"), html=Markup(html))


def _children_with_lines(tok):
    """Each inline child with its 1-based line (counting the breaks before it)."""
    if not tok.children:
        return
    line = tok.map[0] + 1 if tok.map else 1
    for child in tok.children:
        yield child, line
        if child.type in ("softbreak", "hardbreak"):
            line += 1
        elif child.content and child.type in ("text", "code_inline", "html_inline"):
            line += child.content.count("\n")


def _check_words(text: str, rel: str, line: int | None, problems: list[Problem]) -> None:
    """A word of printed text (inline text, code, a code block: not a link's target) longer
    than :data:`~reporter.invisible.LONGEST_WORD` characters, named by its line."""
    for n, part in enumerate(text.split("\n")):
        if found := long_word_message(part):
            problems.append(Problem(f"{rel}:{line + n}" if line is not None else rel, found))
            return


def _snippet(s: str) -> str:
    s = s.strip().splitlines()[0] if s.strip() else s
    return repr(s[:40] + ("..." if len(s) > 40 else ""))


def _front_matter(tokens, rel: str, problems: list[Problem]) -> dict | None:
    fm = next((t for t in tokens if t.type == "front_matter"), None)
    if fm is None:
        problems.append(Problem(f"{rel}:1", "front matter is missing: start the file with "
                                "lines '---', 'author: ...', 'date: YYYY-MM-DD', '---'"))
        return None
    lines = fm.content.splitlines()

    def line_of(key: str) -> int:
        for i, ln in enumerate(lines):
            if ln.split(":", 1)[0].strip() == key:
                return i + 2          # the opening '---' is line 1
        return 1

    loader = _FrontMatterLoader(fm.content)
    try:
        meta = loader.get_single_data() or {}
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = mark.line + 2 if mark is not None else 1
        problems.append(Problem(f"{rel}:{line}", f"front matter is not valid YAML: "
                                f"{getattr(exc, 'problem', exc)}"))
        return None
    except RecursionError:
        problems.append(Problem(f"{rel}:2", "front matter is nested too deeply; write "
                                "'key: value' lines"))
        return None
    finally:
        loader.dispose()
    for key, line, first in loader.duplicates:
        problems.append(Problem(f"{rel}:{line + 2}", f"front matter key {key!r} is given "
                                f"twice (first on line {first + 2}); keep one"))
    if loader.duplicates:
        return None
    if not isinstance(meta, dict):
        problems.append(Problem(f"{rel}:2", "front matter must be 'key: value' lines"))
        return None
    bad = False
    for key in sorted(set(meta) - FRONT_MATTER_KEYS, key=str):
        problems.append(Problem(f"{rel}:{line_of(str(key))}", f"unknown front matter key "
                                f"{key!r} (use author, date, title)"))
        bad = True
    author = meta.get("author")
    if not isinstance(author, str) or not author.strip():
        problems.append(Problem(f"{rel}:{line_of('author')}",
                                "front matter needs 'author: <name>'"))
        bad = True
    date = meta.get("date")
    why = ""
    if isinstance(date, str):
        try:
            date = dt.date.fromisoformat(date.strip())
        except ValueError:
            # a timestamp YAML could not build (2026-02-30) says what is wrong with it
            if isinstance(date, _BadTimestamp):
                why = f"; {date.strip()!r} is no real date or time ({date.reason})"
            date = None
    if isinstance(date, dt.datetime):
        date = date.date()
    if not isinstance(date, dt.date):
        problems.append(Problem(f"{rel}:{line_of('date')}",
                                f"front matter needs 'date: YYYY-MM-DD'{why}"))
        bad = True
    title = meta.get("title")
    if title is not None and not isinstance(title, str):
        problems.append(Problem(f"{rel}:{line_of('title')}", "title must be text"))
        bad = True
    if bad:
        return None
    return {"author": author.strip(), "date": date, "title": title}


class _FrontMatterLoader(yaml.SafeLoader):
    """YAML's safe loader, but a value YAML cannot build is a problem at its line, not an
    exception: a timestamp that is no real date or time (``2026-02-30``, hour 25, year 0)
    stays the text written, for the field's own check to name; any other (``!!int abc``)
    is a YAMLError at its mark. A key given twice is kept in ``duplicates`` as
    ``(key, line, first line)`` (0-based lines of the front matter), where YAML would let
    the last one win."""

    def __init__(self, stream):
        super().__init__(stream)
        self.duplicates: list[tuple[str, int, int]] = []

    def construct_object(self, node, deep=False):
        try:
            return super().construct_object(node, deep=deep)
        except yaml.YAMLError:
            raise
        except (ValueError, TypeError, KeyError, AttributeError, OverflowError) as exc:
            kind = node.tag.rsplit(":", 1)[-1]
            why = f" ({exc})" if isinstance(exc, ValueError) else ""
            raise yaml.constructor.ConstructorError(
                None, None, f"{node.value!r} is not a valid {kind}{why}",
                node.start_mark) from None

    def construct_yaml_timestamp(self, node):
        try:
            return super().construct_yaml_timestamp(node)
        except (ValueError, OverflowError) as exc:
            return _BadTimestamp(self.construct_scalar(node), str(exc))

    def construct_mapping(self, node, deep=False):
        seen: dict[str, int] = {}
        for key_node, _ in node.value if isinstance(node, yaml.MappingNode) else ():
            if isinstance(key_node, yaml.ScalarNode) and key_node.tag != "tag:yaml.org,2002:merge":
                line = key_node.start_mark.line
                if key_node.value in seen:
                    self.duplicates.append((key_node.value, line, seen[key_node.value]))
                else:
                    seen[key_node.value] = line
        return super().construct_mapping(node, deep=deep)


_FrontMatterLoader.add_constructor("tag:yaml.org,2002:timestamp",
                                   _FrontMatterLoader.construct_yaml_timestamp)


class _BadTimestamp(str):
    """The text of a timestamp that is no real date or time, with Python's reason."""

    def __new__(cls, text: str, reason: str):
        obj = super().__new__(cls, text)
        obj.reason = reason
        return obj


def _check_link(href: str, rel: str, line: int, problems: list[Problem]) -> None:
    parts = urlsplit(href)
    scheme = parts.scheme.lower()
    if href.startswith("#") or (scheme in LINK_SCHEMES and (parts.netloc or
                                                            scheme == "mailto")):
        return
    if scheme == "file":
        why = "a file: URL"
    elif scheme in LINK_SCHEMES:       # https:javascript:..., https:/path: no host
        why = f"a {scheme}: link with no host (write {scheme}://host/...)"
    elif scheme:
        why = f"a {scheme}: link"
    elif href.startswith(("/", "\\")) or _WINDOWS_DRIVE.match(href):
        why = "an absolute path"
    else:
        why = "a path (the pack has no other files to link to)"
    problems.append(Problem(f"{rel}:{line}", f"link to {href!r} is not allowed: {why}; links "
                            "may go to https:, http: or mailto: addresses or #sections"))


def _check_image(src: str, rel: str, line: int, base: Path, pack_dir: Path,
                 problems: list[Problem]) -> None:
    parts = urlsplit(src)
    where = f"{rel}:{line}"
    if parts.scheme.lower() == "file":
        problems.append(Problem(where, f"image {src!r} is not allowed: a file: URL; give a "
                                "path relative to this file"))
        return
    if parts.scheme or src.startswith("//"):
        problems.append(Problem(where, f"image {src!r} is not allowed: a remote image; "
                                "images must be files inside the pack folder"))
        return
    path_text = unquote(src)
    if path_text.startswith(("/", "\\")) or _WINDOWS_DRIVE.match(path_text):
        problems.append(Problem(where, f"image {src!r} is not allowed: an absolute path; "
                                "give a path relative to this file"))
        return
    if ".." in PurePosixPath(path_text.replace("\\", "/")).parts:
        problems.append(Problem(where, f"image {src!r} is not allowed: a path with '..'; "
                                "images must be inside the pack folder, below this file"))
        return
    path = (base / path_text).resolve()
    if not path.is_relative_to(pack_dir):
        problems.append(Problem(where, f"image {src!r} is not allowed: it leaves the pack "
                                "folder"))
        return
    if not path.is_file():
        problems.append(Problem(where, f"image {src!r} does not exist"))
        return
    with open(path, "rb") as fh:
        head = fh.read(8)
    if not any(head.startswith(k) for k in IMAGE_TYPES):
        problems.append(Problem(where, f"image {src!r} is not a PNG or JPEG file"))
    elif path.stat().st_size > MAX_IMAGE_BYTES:
        problems.append(Problem(where, f"image {src!r} is larger than "
                                f"{MAX_IMAGE_BYTES // 1_000_000} MB"))
