"""The committee's pages: the decisions page, the action log, the glossary, the statistical
tests appendix, the trustees' edition and the page layout of both PDFs.

Built once: the session's ``demo_build`` (both editions of the demo) and, in this module, the
trustees' edition of the demo fund (one PDF). Text is taken from the PDFs with poppler's
``pdftotext -layout``, one page at a time.
"""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from reporter.actions import parse_actions, read_actions
from reporter.build import fingerprint
from reporter.cli import main
from reporter.errors import InputError
from reporter.render.environment import num, pct, plural
from tests.conftest import DEMO, REPO, assert_check_refuses

DATA = Path(__file__).resolve().parent / "data" / "actions"
PERIOD_END = dt.date(2026, 11, 30)
# A page in the middle of a chapter (the next page carries the same chapter in its running
# footer) is "near-empty" when it has fewer than this many lines of body text in
# ``pdftotext -layout`` (running header and footer left out). A full page of text holds
# about 45-50 such lines, so 15 is under a third of a page.
NEAR_EMPTY_LINES = 15
TRUSTEES_MAX_PAGES = 12
_FOOTER_PAGE = re.compile(r"\s*Page (\d+) of (\d+)\s*$")
_NUMBER = re.compile(r"[\u2212+]?\d[\d,]*(?:\.\d+)?%?")

needs_poppler = pytest.mark.skipif(shutil.which("pdftotext") is None,
                                   reason="poppler-utils (pdftotext) is not installed")


def pdf_pages(pdf: Path) -> list[list[str]]:
    """The non-blank ``pdftotext -layout`` lines of each page of ``pdf``."""
    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True)
    n = int(re.search(r"Pages:\s+(\d+)", info.stdout).group(1))
    out = []
    for i in range(1, n + 1):
        text = subprocess.run(["pdftotext", "-layout", "-f", str(i), "-l", str(i), str(pdf),
                               "-"], capture_output=True, text=True, check=True).stdout
        out.append([ln for ln in text.splitlines() if ln.strip()])
    return out


def chapter_of(lines: list[str]) -> str | None:
    """The chapter named in a page's running footer (None on the cover, which has none)."""
    if not lines or not _FOOTER_PAGE.search(lines[-1]):
        return None
    return re.sub(r"\s+", " ", _FOOTER_PAGE.sub("", lines[-1])).strip()


def body(lines: list[str]) -> list[str]:
    """A page's lines without its running header (first line) and footer (last line)."""
    return lines[1:-1] if chapter_of(lines) is not None else lines


def near_empty_middle_pages(pages: list[list[str]]) -> list[tuple[int, str, int]]:
    """(page number, chapter, body lines) of each page in the middle of a chapter with
    fewer than NEAR_EMPTY_LINES body lines."""
    bad = []
    for i, (page, after) in enumerate(zip(pages, pages[1:], strict=False), start=1):
        here = chapter_of(page)
        if here is not None and here == chapter_of(after) and len(body(page)) < NEAR_EMPTY_LINES:
            bad.append((i, here, len(body(page))))
    return bad


def numbers(pages: list[list[str]]) -> set[str]:
    """Every number printed in the body of the pages (contents pages left out: their page
    numbers are each edition's own)."""
    out = set()
    for page in pages:
        if chapter_of(page) == "Contents":
            continue
        for line in body(page):
            if _CONTENTS_ENTRY.search(line):   # a contents line on a cover page: a page number
                continue
            out.update(_NUMBER.findall(line))
    return out


_CONTENTS_ENTRY = re.compile(r"\.{4,}\s*\d+\s*$")


# --- the action log -----------------------------------------------------------------------

def test_good_action_log_orders_overdue_first_and_marks_it(tmp_path):
    log = read_actions(tmp_path, PERIOD_END)                        # no actions.csv: no log
    assert log.items == () and log.sha256 is None
    items = parse_actions((DATA / "good.csv").read_text(), PERIOD_END)
    # overdue (open, due before the period end) first; then open by due date; done; dropped
    assert [a.id for a in items] == ["B3", "B5", "B2", "B1", "B4"]
    assert [a.overdue for a in items] == [True, False, False, False, False]
    # due on the period end itself is not overdue
    assert items[1].due == PERIOD_END and items[1].status == "open"
    assert items[0].note == "chase" and items[0].row == 4


@pytest.mark.parametrize(("case", "where", "words"), [
    ("unknown_status", "actions.csv:2:status", "unknown status 'pending'"),
    ("due_before_raised", "actions.csv:2:due", "before the date raised"),
    ("duplicate_id", "actions.csv:3:id", "duplicate id 'B1' (first on row 2)"),
    ("bad_date", "actions.csv:2:raised", "'2026-09-31' is not a date"),
    ("missing_column", "actions.csv:1:owner", "required column is missing"),
])
def test_bad_action_log_one_line_per_problem(case, where, words):
    with pytest.raises(InputError) as exc:
        parse_actions((DATA / f"{case}.csv").read_text(), PERIOD_END)
    problems = exc.value.problems
    assert len(problems) == 1
    assert problems[0].where == where and words in problems[0].message


def test_bad_action_log_stops_the_build_with_exit_2(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    shutil.copy(DATA / "duplicate_id.csv", pack / "actions.csv")
    out = tmp_path / "out"
    assert main(["build", str(pack), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "actions.csv:3:id: duplicate id 'B1'" in err and "Traceback" not in err
    assert not out.exists()                  # nothing half-written


def test_plural_filter():
    assert plural(1, "holding") == "1 holding"
    assert plural(3, "holding") == "3 holdings"
    assert plural(0, "new holding") == "0 new holdings"


# --- the demo build: both editions ----------------------------------------------------------

@pytest.fixture(scope="module")
def demo_pages(demo_build):
    return {"full": pdf_pages(demo_build / "pack.pdf"),
            "trustees": pdf_pages(demo_build / "pack-trustees.pdf")}


def test_manifest_lists_both_editions_and_hashes_the_action_log(demo_build):
    manifest = json.loads((demo_build / "results" / "manifest.json").read_text())
    for name in ("pack.pdf", "pack-trustees.pdf"):
        data = (demo_build / name).read_bytes()
        assert manifest["output_sha256"][name] == hashlib.sha256(data).hexdigest()
    actions = (DEMO / "actions.csv").read_bytes()
    assert manifest["input_sha256"]["actions.csv"] == hashlib.sha256(actions).hexdigest()
    assert manifest["input_files"]["actions.csv"] == "actions.csv"
    # the fingerprint shown in the pack covers the action log, so sign-off notices an edit
    assert manifest["input_fingerprint"] == fingerprint(manifest["input_sha256"])
    decisions = (DEMO / "commentary" / "decisions.md").read_bytes()
    assert manifest["input_sha256"]["commentary/decisions.md"] == \
        hashlib.sha256(decisions).hexdigest()


def test_pack_html_links_both_pdfs_and_fixes_the_methodology_join(demo_build):
    html = (demo_build / "pack.html").read_text()
    assert 'href="pack.pdf"' in html and 'href="pack-trustees.pdf"' in html
    assert "errors.Adjusted" not in html and "HAC errors. Adjusted betas" in html
    assert "holding(s)" not in html


@needs_poppler
def test_trustees_edition_page_count(demo_pages):
    assert len(demo_pages["trustees"]) <= TRUSTEES_MAX_PAGES
    assert len(demo_pages["trustees"]) < len(demo_pages["full"])


@needs_poppler
def test_every_figure_in_the_trustees_edition_is_in_the_full_pack(demo_pages):
    trustees, full = numbers(demo_pages["trustees"]), numbers(demo_pages["full"])
    assert len(trustees) > 100                 # the check has something to check
    assert trustees - full == set()


@needs_poppler
def test_headline_figures_match_the_results_files_in_both_editions(demo_build, demo_pages):
    """The headline figures as printed, from the results files (not from the templates)."""
    p = json.loads((demo_build / "results" / "portfolio.json").read_text())
    with open(demo_build / "results" / "period_returns.csv", newline="") as fh:
        rows = {r["period"]: r for r in csv.DictReader(fh) if r["kind"] == "trailing"}
    wanted = [num(p["beta_regression"]), f"{num(p['beta_ci_low'])} to {num(p['beta_ci_high'])}",
              pct(p["alpha_ann"], 1, True), pct(p["tracking_error_ann"]), num(p["sharpe_ann"])]
    for key in ("1m", "1y", "3y"):
        r = rows[key]
        wanted += [pct(float(r["portfolio"]), 1, True), pct(float(r["market"]), 1, True),
                   pct(float(r["difference"]), 1, True)]
    for edition, pages in demo_pages.items():
        text = re.sub(r"\s+", " ", " ".join(" ".join(body(pg)) for pg in pages))
        missing = [w for w in wanted if w not in text]
        assert missing == [], edition
    # the decisions page opens both editions (after the cover and contents) and carries the
    # month, one- and three-year returns
    for edition in ("full", "trustees"):
        first = next(i for i, pg in enumerate(demo_pages[edition])
                     if chapter_of(pg) == "For decision")
        page = " ".join(demo_pages[edition][first])
        assert first <= 2 and "Decisions for the committee" in page
        for key in ("1m", "1y", "3y"):
            assert rows[key]["label"] in page
            assert pct(float(rows[key]["difference"]), 1, True) in page


@needs_poppler
def test_action_log_page_puts_overdue_first_in_words(demo_pages):
    items = parse_actions((DEMO / "actions.csv").read_text(), PERIOD_END)
    page = next(pg for pg in demo_pages["full"] if chapter_of(pg) ==
                "Actions from earlier meetings")
    rows = [ln for ln in body(page) if re.search(r"A-\d{4}-\d\d", ln)]
    assert [re.search(r"A-\d{4}-\d\d", ln).group(0) for ln in rows] == [a.id for a in items]
    assert "overdue" in rows[0] and "\u26a0" in rows[0]        # in words and a symbol
    assert sum("overdue" in ln for ln in rows) == sum(a.overdue for a in items) == 1


@needs_poppler
def test_statistical_tests_and_glossary_placement(demo_pages):
    chapters = [chapter_of(pg) for pg in demo_pages["full"]]
    order = list(dict.fromkeys(c for c in chapters if c))
    assert order.index("Holdings appendix") < order.index("Statistical tests") < \
        order.index("Glossary") < order.index("Methodology")
    full_text = " ".join(" ".join(pg) for pg in demo_pages["full"])
    tests_pages = [pg for pg in demo_pages["full"] if chapter_of(pg) == "Statistical tests"]
    assert any("Fama–MacBeth" in ln for pg in tests_pages for ln in pg)
    sml_pages = [pg for pg in demo_pages["full"] if chapter_of(pg) == "Security market line"]
    assert not any("Gibbons–Ross–Shanken (1989) F-test" in ln for pg in sml_pages for ln in pg)
    trustees = [chapter_of(pg) for pg in demo_pages["trustees"]]
    assert "Glossary" in trustees and "Statistical tests" not in trustees
    assert "Holdings appendix" not in trustees and "Methodology" not in trustees
    for term in ("Beta", "Tracking error", "Sharpe ratio", "Effective number of holdings",
                 "Gibbons–Ross–Shanken (GRS) test"):
        assert term in full_text


@needs_poppler
def test_no_near_empty_page_in_the_middle_of_a_chapter(demo_pages):
    for edition, pages in demo_pages.items():
        assert near_empty_middle_pages(pages) == [], edition


def test_near_empty_rule_catches_a_short_middle_page():
    head = "Title                       Period ending 30 November 2026"
    page = [head, *["text"] * 40, "Market risk      Page 4 of 9"]
    short = [head, *["text"] * 5, "Market risk      Page 5 of 9"]
    end = [head, *["text"] * 3, "Market risk      Page 6 of 9"]
    nxt = [head, *["text"] * 3, "Beta estimates      Page 7 of 9"]
    # the short page 2 is followed by the same chapter; page 3 ends it and may be short
    assert near_empty_middle_pages([page, short, end, nxt]) == [(2, "Market risk", 5)]


# --- the demo fund: the trustees' edition only --------------------------------------------

@pytest.fixture(scope="module")
def fund_trustees(tmp_path_factory):
    from reporter.build import assemble
    from reporter.config import load_settings
    from reporter.render.pdf import render_pdf

    settings = load_settings(REPO / "inputs" / "demo-fund")
    a = assemble(settings, at=dt.datetime(2026, 11, 30, tzinfo=dt.UTC))
    pdf = render_pdf(a.html(for_print=True, edition="trustees"), base_dir=settings.pack_dir,
                     allowed=(settings.pack_dir,))
    path = tmp_path_factory.mktemp("fund") / "pack-trustees.pdf"
    path.write_bytes(pdf)
    return a, pdf_pages(path)


@needs_poppler
def test_fund_trustees_edition_is_overview_plus_two_pages_a_part(fund_trustees):
    a, pages = fund_trustees
    names = [p.name for p in (a.total, *a.parts)]
    per_part = dict.fromkeys(names, 0)
    for pg in pages:
        # the running heading names the part (total fund or mandate) on each of its pages
        for name in names:
            if re.search(rf"\u00b7\s+{re.escape(name)}\b", pg[0]):
                per_part[name] += 1
    assert all(1 <= n <= 2 for n in per_part.values()), sorted(per_part.items())
    first_part = next(i for i, pg in enumerate(pages) if "\u00b7" in pg[0])
    tail = len(pages) - first_part - sum(per_part.values())   # glossary and cautions
    assert first_part <= 6 and tail <= 3
    assert near_empty_middle_pages(pages) == []


def test_invisible_characters_in_the_action_log_are_refused():
    text = ("id,raised,action,owner,due,status,note\n"
            "B1,2026-10-01,Review \u202efees,Ann Tregarth,2027-01-15,open,\n"
            "B2,2026-10-01,Chase,Bryn\u200b Holloway,2027-01-15,open,ok\u200d\n")
    with pytest.raises(InputError) as exc:
        parse_actions(text, PERIOD_END)
    assert [str(p) for p in exc.value.problems] == [
        "actions.csv:2:action: invisible control character U+202E",
        "actions.csv:3:owner: invisible control character U+200B",
        "actions.csv:3:note: invisible control character U+200D"]


def test_invisible_character_in_the_action_log_fails_check(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    lines = (pack / "actions.csv").read_text().splitlines(keepends=True)
    cells = lines[1].split(",")
    cells[3] = "\u202e" + cells[3]                  # the owner of the first item
    lines[1] = ",".join(cells)
    (pack / "actions.csv").write_text("".join(lines))
    assert_check_refuses(capsys, pack, "actions.csv:2:owner: invisible control character U+202E")
