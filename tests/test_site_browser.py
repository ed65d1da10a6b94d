"""The trustees' site in a real browser: Debian's chromium, driven by Playwright.

Every page is loaded twice, from file:// and from an HTTP server on 127.0.0.1. On each:
no request leaves the site, nothing is logged to the console, every chart draws its marks,
every link resolves, and axe-core (from npm, injected into the page) finds no serious or
critical WCAG 2.1 A/AA violation. Tooltips and keyboard sorting are exercised on the pack
pages. Screenshots and axe reports are kept under build/test-artefacts/site/.

The results files are read here with the csv module, not through the tool.
"""

from __future__ import annotations

import csv
import functools
import json
import os
import re
import threading
import urllib.request
from http.server import SimpleHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from urllib.parse import unquote, urlsplit

import pytest
from playwright.sync_api import Error as PlaywrightError

from tests.conftest import REPO, ledger_entries

CHROMIUM = "/usr/bin/chromium"
AXE = REPO / "build" / "npm" / "node_modules" / "axe-core" / "axe.min.js"
ARTEFACTS = REPO / "build" / "test-artefacts" / "site"
# the probe's flags for Debian chromium on this closed network, plus a fixed window
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run",
                 "--disable-quic"]
AXE_TAGS = ["wcag2a", "wcag2aa", "wcag21a", "wcag21aa"]


@pytest.fixture(scope="module")
def browser():
    from playwright.sync_api import sync_playwright

    assert Path(CHROMIUM).is_file(), "Debian's chromium is missing: run 'make test'"
    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        yield b
        b.close()


@pytest.fixture(scope="module")
def server(site_dir):
    class Quiet(SimpleHTTPRequestHandler):
        def log_message(self, *args) -> None:
            pass

    srv = ThreadingHTTPServer(("127.0.0.1", 0), functools.partial(Quiet,
                                                                  directory=str(site_dir)))
    thread = threading.Thread(target=srv.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{srv.server_port}"
    srv.shutdown()
    srv.server_close()


def site_pages(site_dir: Path) -> list[str]:
    """Every page of the site (the archived pack.html copies included), relative."""
    return sorted(p.relative_to(site_dir).as_posix() for p in site_dir.rglob("*.html"))


def axe_source() -> str | None:
    if AXE.is_file():
        return AXE.read_text(encoding="utf-8")
    if os.environ.get("CI"):
        pytest.fail(f"{AXE} is missing: 'make test' installs axe-core from npm")
    return None


class Visit:
    """One page load with every request and console message recorded."""

    def __init__(self, browser, base: str, rel: str, width: int = 1280) -> None:
        # a time zone west of UTC: a calendar date shown as local time would slip a day
        self.context = browser.new_context(viewport={"width": width, "height": 900},
                                           timezone_id="America/New_York")
        self.requests: list[str] = []
        self.blocked: list[str] = []
        self.console: list[str] = []
        self.base = base
        allowed = base + "/"

        def route(r):
            url = r.request.url
            if url.startswith(allowed) or url.startswith(("data:", "blob:")):
                r.continue_()
            else:
                self.blocked.append(url)
                r.abort()

        self.context.route("**/*", route)
        self.context.on("request", lambda req: self.requests.append(req.url))
        self.page = self.context.new_page()
        self.page.on("console", lambda m: self.console.append(f"{m.type}: {m.text}")
                     if m.type in ("error", "warning") else None)
        self.page.on("pageerror", lambda e: self.console.append(f"pageerror: {e}"))
        self.url = f"{base}/{rel}"
        response = self.page.goto(self.url, wait_until="load")
        assert response is None or response.ok, self.url
        self.page.wait_for_function(
            "document.querySelectorAll('[data-spec]').length === "
            "document.querySelectorAll('[data-rendered], [data-failed]').length",
            timeout=30_000)

    def close(self) -> None:
        self.context.close()

    def foreign_requests(self) -> list[str]:
        scheme = urlsplit(self.base).scheme
        out = []
        for url in self.requests + self.blocked:
            if url.startswith(("data:", "blob:")):
                continue
            if scheme == "file" and not url.startswith("file:///"):
                out.append(url)
            elif scheme == "http" and not url.startswith(self.base + "/"):
                out.append(url)
        return sorted(set(out))


def _shot_name(base: str, rel: str) -> str:
    kind = "file" if base.startswith("file:") else "http"
    return f"{kind}-{rel.replace('/', '_').removesuffix('.html')}"


def _link_ok(url: str, site_dir: Path) -> bool:
    parts = urlsplit(url)
    if parts.scheme == "file":
        path = Path(unquote(parts.path))
        return path.is_file() and path.resolve().is_relative_to(site_dir.resolve())
    if parts.scheme == "http" and parts.hostname == "127.0.0.1":
        with urllib.request.urlopen(url.split("#")[0], timeout=10) as resp:
            return resp.status == 200
    return False


@pytest.mark.parametrize("kind", ["file", "http"])
def test_every_page_loads_offline_renders_and_passes_axe(browser, site_dir, server, kind):
    base = site_dir.resolve().as_uri() if kind == "file" else server
    axe = axe_source()
    ARTEFACTS.mkdir(parents=True, exist_ok=True)
    failures, n_charts, axe_report = [], 0, {}
    pages = site_pages(site_dir)
    assert len(pages) == 15
    for rel in pages:
        v = Visit(browser, base, rel)
        try:
            page = v.page
            if foreign := v.foreign_requests():
                failures.append(f"{rel}: requests outside the site: {foreign}")
            if v.console:
                failures.append(f"{rel}: console: {v.console}")
            failed = page.locator("[data-failed]").count()
            if failed:
                failures.append(f"{rel}: {failed} chart(s) failed to draw")
            # every chart has drawn marks in its SVG
            marks = page.eval_on_selector_all(
                "[data-spec]", "els => els.map(e => e.querySelectorAll("
                "'svg g.role-mark > path, svg g.role-mark > line').length)")
            n_charts += len(marks)
            if any(m == 0 for m in marks):
                failures.append(f"{rel}: a chart drew no marks ({marks})")
            links = page.eval_on_selector_all("a[href]", "as => as.map(a => a.href)")
            bad = [u for u in links if not _link_ok(u, site_dir)]
            if bad:
                failures.append(f"{rel}: links that do not resolve: {bad}")
            page.screenshot(path=str(ARTEFACTS / f"{_shot_name(base, rel)}.png"),
                            full_page=True)
            if not rel.endswith("/pack.html"):      # the site's own pages
                # their policy forbids inline script: an injected one is refused
                with pytest.raises(PlaywrightError, match="Content Security Policy"):
                    page.add_script_tag(content="window.injected = 1")
                assert page.evaluate("window.injected") is None
            if axe is not None and not rel.endswith("/pack.html"):   # the site's own pages
                # run as the debugging protocol's own script, which the policy does not bind
                page.evaluate(f"{axe}\n;0")
                violations = page.evaluate(
                    "async (tags) => (await axe.run(document, {runOnly: {type: 'tag', "
                    "values: tags}})).violations.map(v => ({id: v.id, impact: v.impact, "
                    "help: v.help, nodes: v.nodes.slice(0, 5).map(n => n.target.join(' '))}))",
                    AXE_TAGS)
                axe_report[rel] = violations
                serious = [x for x in violations if x["impact"] in ("serious", "critical")]
                if serious:
                    failures.append(f"{rel}: axe: {serious}")
                if rel == "index.html":
                    # the check can fail: an image without a text alternative is caught
                    page.evaluate("document.querySelector('main').insertAdjacentHTML("
                                  "'beforeend', '<img src=\"data:image/gif;base64,"
                                  "R0lGODlhAQABAAAAACw=\">')")
                    again = page.evaluate("async (tags) => (await axe.run(document, "
                                          "{runOnly: {type: 'tag', values: tags}}))"
                                          ".violations.map(v => v.id)", AXE_TAGS)
                    assert "image-alt" in again
        finally:
            v.close()
    (ARTEFACTS / f"axe-{kind}.json").write_text(json.dumps(axe_report, indent=2,
                                                           sort_keys=True))
    assert not failures, "\n".join(failures)
    # four pack pages with two charts each, three trend charts and the limit chart
    assert n_charts == 4 * 2 + 4
    if axe is None:
        pytest.skip(f"axe-core not installed at {AXE} ('make test' installs it); "
                    "the other browser checks passed")


def _results(site_archive: Path, entry: dict, name: str) -> list[dict]:
    stem = Path(entry["pdf_path"]).stem
    path = site_archive / Path(entry["pdf_path"]).parent / stem / "results" / name
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _tooltip_text(page) -> str:
    tip = page.locator("#vg-tooltip-element")
    tip.wait_for(state="visible", timeout=5_000)
    return tip.inner_text()


@pytest.mark.parametrize("kind", ["file", "http"])
def test_tooltips_name_holdings_and_rolling_hover_shows_a_window(browser, site_dir,
                                                                 site_archive, server, kind):
    base = site_dir.resolve().as_uri() if kind == "file" else server
    for e in ledger_entries(site_archive):
        stem = Path(e["pdf_path"]).stem
        names = {r["name"] for r in _results(site_archive, e, "securities.csv")
                 if r["status"] == "fitted"}
        dates = {r["date"] for r in _results(site_archive, e, "rolling_beta.csv")
                 if r["series"] == "PORTFOLIO"}
        v = Visit(browser, base, f"packs/{stem}/index.html")
        try:
            page = v.page
            points = page.locator("#chart-sml svg g.sml_points_marks > path")
            assert points.count() == len(names)
            for i in (0, points.count() // 2):
                points.nth(i).hover(force=True)
                text = _tooltip_text(page)
                shown = [n for n in names if n in text]
                assert len(shown) == 1, text
            page.mouse.move(0, 0)
            chart = page.locator("#chart-rolling svg")
            chart.scroll_into_view_if_needed()
            box = chart.bounding_box()
            page.mouse.move(box["x"] + box["width"] * 0.55, box["y"] + box["height"] * 0.45)
            text = _tooltip_text(page)
            assert "Window ending" in text
            shown = re.findall(r"\d{4}-\d{2}-\d{2}", text)
            assert len(shown) == 1 and shown[0] in dates, text
            # the hovered window is marked by a rule (only one is shown)
            visible = page.eval_on_selector_all(
                "#chart-rolling svg g.rolling_rule_marks > line",
                "ls => ls.filter(l => parseFloat(l.getAttribute('opacity') ?? '1') > 0.5"
                ").length")
            assert visible == 1
            page.screenshot(path=str(ARTEFACTS / f"{_shot_name(base, stem)}-hover.png"))
            assert not v.console and not v.foreign_requests()
        finally:
            v.close()


def _column(page, index: int) -> list[float | None]:
    raw = page.eval_on_selector_all(
        "table.holdings tbody tr",
        f"rs => rs.map(r => r.cells[{index}].getAttribute('data-value'))")
    return [float(x) if x not in (None, "") else None for x in raw]


@pytest.mark.parametrize("kind", ["file", "http"])
def test_holdings_table_sorts_from_the_keyboard(browser, site_dir, site_archive, server, kind):
    base = site_dir.resolve().as_uri() if kind == "file" else server
    e = ledger_entries(site_archive)[-1]
    stem = Path(e["pdf_path"]).stem
    betas = [float(r["beta"]) if r["beta"] else None
             for r in _results(site_archive, e, "securities.csv")]
    known = sorted(b for b in betas if b is not None)
    n_missing = betas.count(None)
    v = Visit(browser, base, f"packs/{stem}/index.html")
    try:
        page = v.page
        button = page.get_by_role("button", name="Beta", exact=True)
        button.focus()
        page.keyboard.press("Enter")
        header = page.locator("table.holdings thead th").nth(3)
        assert header.get_attribute("aria-sort") == "ascending"
        assert _column(page, 3) == known + [None] * n_missing
        page.keyboard.press("Space")
        assert header.get_attribute("aria-sort") == "descending"
        assert _column(page, 3) == known[::-1] + [None] * n_missing
        # Tab reaches the next sort button: every control is keyboard operable
        page.keyboard.press("Tab")
        focused = page.evaluate("document.activeElement.textContent.trim()")
        assert focused == "Beta interval from"
        assert "Sorted by Beta, descending." in page.locator(
            "table.holdings + p[aria-live]").inner_text()
        assert not v.console
    finally:
        v.close()


# A tablet held upright: every table shows whole at this width (none needs the sideways
# scroll of its keyboard-reachable region), and the page itself never scrolls sideways.
NARROW = 768


def test_no_table_is_cut_off_at_768_px(browser, site_dir):
    base = site_dir.resolve().as_uri()
    axe = axe_source()
    failures = []
    for rel in [p for p in site_pages(site_dir) if not p.endswith("/pack.html")]:
        v = Visit(browser, base, rel, width=NARROW)
        try:
            page = v.page
            overflow = page.evaluate("document.documentElement.scrollWidth - "
                                     "document.documentElement.clientWidth")
            if overflow > 0:
                failures.append(f"{rel}: the page scrolls sideways by {overflow} px")
            tables = page.eval_on_selector_all("table", """ts => ts.map(t => {
                const wrap = t.closest('.table-wrap');
                const box = (wrap || t).getBoundingClientRect();
                const style = wrap ? getComputedStyle(wrap) : null;
                return {cls: t.className, width: t.scrollWidth,
                        room: wrap ? wrap.clientWidth : t.clientWidth,
                        right: box.right, view: document.documentElement.clientWidth,
                        scrolls: !!style && ['auto', 'scroll'].includes(style.overflowX),
                        focusable: !!wrap && wrap.getAttribute('tabindex') === '0'};
            })""")
            for t in tables:
                if t["right"] > t["view"] + 0.5:
                    failures.append(f"{rel}: table.{t['cls']} runs past the window: {t}")
                elif t["width"] > t["room"] + 1 and not (t["scrolls"] and t["focusable"]):
                    failures.append(f"{rel}: table.{t['cls']} is cut off: {t}")
                elif t["width"] > t["room"] + 1:
                    # even the holdings list fits at this width (site.css), so no sideways
                    # scroll is needed to read any table
                    failures.append(f"{rel}: table.{t['cls']} needs a sideways scroll: {t}")
            page.screenshot(path=str(ARTEFACTS / f"narrow-{rel.replace('/', '_')}.png"),
                            full_page=True)
            if axe is not None:
                page.evaluate(f"{axe}\n;0")      # (the page's policy forbids inline script)
                serious = page.evaluate(
                    "async (tags) => (await axe.run(document, {runOnly: {type: 'tag', "
                    "values: tags}})).violations.filter(v => ['serious', 'critical']"
                    ".includes(v.impact)).map(v => v.id)", AXE_TAGS)
                if serious:
                    failures.append(f"{rel}: axe at {NARROW} px: {serious}")
        finally:
            v.close()
    assert not failures, "\n".join(failures)
