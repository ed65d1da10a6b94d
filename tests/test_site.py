"""The trustees' site, read as files: what it lists, what it copies, what it refuses.

The ledger is read here with plain sqlite3 and the results files with the csv and json
modules, not through the tool's modules; hashes are recomputed with hashlib.
"""

from __future__ import annotations

import hashlib
import html
import json
import re
import shutil
from html.parser import HTMLParser
from pathlib import Path

import pytest

from reporter.context import CAUTIONS
from tests.conftest import DEMO, SITE_LIMITS, SITE_PERIODS, ledger_entries, run_cli


def sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()



def stem(entry: dict) -> str:
    return Path(entry["pdf_path"]).stem


def tree(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


class Links(HTMLParser):
    """Every href and src of a page, and its ids."""

    def __init__(self) -> None:
        super().__init__()
        self.urls: list[str] = []
        self.ids: set[str] = set()

    def handle_starttag(self, tag, attrs):
        for k, v in attrs:
            if k in ("href", "src") and v is not None:
                self.urls.append(v)
            if k == "id":
                self.ids.add(v)


def parse(path: Path) -> Links:
    p = Links()
    p.feed(path.read_text(encoding="utf-8"))
    return p



# --- what the index lists -----------------------------------------------------------------

def test_index_lists_every_sign_off_newest_period_first(site_dir, site_archive):
    entries = ledger_entries(site_archive)
    assert len(entries) == 4
    text = (site_dir / "index.html").read_text(encoding="utf-8")
    # each entry's article, in page order, by its heading id
    order = [int(m) for m in re.findall(r'<article aria-labelledby="pack-(\d+)"', text)]
    expected = sorted(entries, key=lambda e: (e["period_end"], e["seq"]), reverse=True)
    assert order == [e["seq"] for e in expected]
    assert [e["period_end"] for e in expected] == [
        "2026-11-30", "2026-11-30", "2026-10-31", "2026-09-30"]
    articles = re.split(r'<article aria-labelledby="pack-', text)[1:]
    superseded = {e["supersedes"] for e in entries if e["supersedes"]}
    for e, block in zip(expected, articles, strict=True):
        assert html.escape(e["signer"]) in block and e["pdf_sha256"] in block
        assert f'href="packs/{stem(e)}/pack.pdf"' in block
        assert f'href="packs/{stem(e)}/pack.html"' in block
        assert f'datetime="{e["signed_utc"]}"' in block
        # the marker is a word beside a symbol, not a colour alone
        if e["seq"] in superseded:
            assert re.search(r'<svg class="icon" aria-hidden="true"[^>]*>.*?</svg> Superseded',
                             block)
        else:
            assert "</svg> Superseded" not in block
            assert "</svg> Latest revision for this period" in block


def test_copies_are_the_archived_bytes_and_the_sha256_shown_is_theirs(site_dir, site_archive):
    for e in ledger_entries(site_archive):
        name = stem(e)
        pdf = (site_dir / "packs" / name / "pack.pdf").read_bytes()
        assert pdf == (site_archive / e["pdf_path"]).read_bytes()
        assert sha(pdf) == e["pdf_sha256"]
        folder = Path(e["pdf_path"]).parent / name
        assert (site_dir / "packs" / name / "pack.html").read_bytes() == \
            (site_archive / folder / "pack.html").read_bytes()
        page = (site_dir / "packs" / name / "index.html").read_text(encoding="utf-8")
        assert e["pdf_sha256"] in page and html.escape(e["signer"]) in page


def test_same_archive_gives_a_byte_identical_site(site_dir, site_archive, tmp_path, capsys):
    again = tmp_path / "again"
    code, out, _ = run_cli(capsys, "site", "--archive", site_archive, "--out", again, "--quiet")
    assert code == 0 and "4 signed pack(s)" in out
    first, second = tree(site_dir), tree(again)
    assert sorted(first) == sorted(second)
    for rel in first:
        assert first[rel] == second[rel], rel


def test_every_link_is_relative_and_resolves(site_dir):
    pages = sorted(site_dir.rglob("*.html"))
    assert len(pages) == 1 + 4 * 2 + 4 + 2      # index, pack pages and copies, trends, 2
    ids = {p: parse(p).ids for p in pages}
    n_links = 0
    for page in pages:
        for url in parse(page).urls:
            n_links += 1
            assert not re.match(r"^[a-z][a-z0-9+.-]*:", url, re.I), (page, url)  # no scheme
            assert not url.startswith("/"), (page, url)
            path, _, frag = url.partition("#")
            target = (page.parent / path).resolve() if path else page
            assert target.is_file(), (page, url)
            assert target.is_relative_to(site_dir.resolve()), (page, url)
            if frag and target.suffix == ".html":
                assert frag in ids[target], (page, url)
    assert n_links > 100


def test_no_page_names_another_host(site_dir):
    for page in site_dir.rglob("*.html"):
        text = page.read_text(encoding="utf-8")
        # no script, style, font, image or frame from anywhere: the only URLs are relative
        assert not re.search(r'(src|href)\s*=\s*"(https?:)?//', text), page
        assert "@import" not in text and "url(http" not in text, page
    css = (site_dir / "assets" / "site.css").read_text(encoding="utf-8")
    assert "url(" not in css and "@import" not in css and "@font-face" not in css


def test_javascript_is_the_vl_convert_bundle_written_once(site_dir):
    import altair as alt
    import vl_convert as vlc

    version = ".".join(alt.SCHEMA_VERSION.lstrip("v").split(".")[:2])
    bundle = (site_dir / "assets" / "vega.js").read_text(encoding="utf-8")
    assert bundle == vlc.javascript_bundle(vl_version=version)
    assert list(site_dir.rglob("*.js")) and len(list(site_dir.rglob("vega*.js"))) == 1
    for page in site_dir.rglob("index.html"):
        if "packs" in page.parts:
            scripts = parse(page).urls
            assert "../../assets/vega.js" in scripts and "../../assets/site.js" in scripts


def _specs(page: Path) -> dict[str, dict]:
    text = page.read_text(encoding="utf-8")
    return {m.group(1): json.loads(m.group(2)) for m in re.finditer(
        r'<script type="application/json" id="([^"]+)-spec">(.*?)</script>', text, re.S)}


def _values(spec: dict) -> list[dict]:
    return [row for data in spec.get("datasets", {}).values() for row in data]


def test_trends_take_the_latest_sign_off_per_period(site_dir, site_archive):
    entries = ledger_entries(site_archive)
    superseded = {e["supersedes"] for e in entries if e["supersedes"]}
    current = {e["period_end"]: e for e in entries if e["seq"] not in superseded}
    assert sorted(current) == list(SITE_PERIODS)
    expected = {}
    for period, e in current.items():
        folder = Path(e["pdf_path"]).parent / stem(e)
        expected[period] = json.loads((site_archive / folder / "results" /
                                       "portfolio.json").read_text())
    checks = {"beta": ("beta", "beta_regression"),
              "effective-holdings": ("effective_n", "effective_n"),
              "tracking-error": ("tracking_error_ann", "tracking_error_ann")}
    for slug, (field, key) in checks.items():
        spec = _specs(site_dir / "trends" / f"{slug}.html")["chart-trend"]
        rows = [r for r in _values(spec) if field in r]
        got = {r["period_end"]: r[field] for r in rows}
        assert got == {p: expected[p][key] for p in SITE_PERIODS}, slug
        assert {r["page"] for r in rows} == {f"packs/{stem(current[p])}/index.html"
                                             for p in SITE_PERIODS}
    # the replaced 2026-11-30 figures are the same pack signed twice: both pages exist,
    # but the trend links only the current revision
    beta_page = (site_dir / "trends" / "beta.html").read_text(encoding="utf-8")
    for e in entries:
        assert (f"packs/{stem(e)}/index.html" in beta_page) == (e["seq"] not in superseded)


def _current_results(site_archive: Path, name: str) -> dict[str, object]:
    """``results/<name>`` (JSON) of each period's latest sign-off, read from the archive."""
    entries = ledger_entries(site_archive)
    superseded = {e["supersedes"] for e in entries if e["supersedes"]}
    current = {e["period_end"]: e for e in entries if e["seq"] not in superseded}
    return {p: json.loads((site_archive / Path(e["pdf_path"]).parent / stem(e) / "results"
                           / name).read_text(encoding="utf-8")) for p, e in current.items()}


# the pack's formats for a limit's figure (templates/pack.html.j2, limit_value), written
# out again here: beta to 2 decimals, effective number to 1, a count whole, the rest in %
def _pack_format(limit: str, v: float) -> str:
    if limit in ("beta_min", "beta_max"):
        text = f"{v:.2f}"
    elif limit == "min_effective_n":
        text = f"{v:.1f}"
    elif limit == "min_holdings":
        text = f"{round(v)}"
    else:
        text = f"{v * 100:.1f}%"
    return text.replace("-", "\u2212")


class Rows(HTMLParser):
    """The rows of the first table with ``class_``: each row's period and its cells' text."""

    def __init__(self, class_: str) -> None:
        super().__init__()
        self.class_, self.depth, self.rows, self.cell = class_, 0, [], None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "table" and self.class_ in (a.get("class") or "").split():
            self.depth = 1
        elif self.depth and tag == "tr" and "data-period" in a:
            self.rows.append({"period": a["data-period"], "cells": []})
        elif self.depth and self.rows and tag in ("td", "th") and a.get("scope") != "rowgroup":
            self.cell = []

    def handle_endtag(self, tag):
        if tag == "table":
            self.depth = 0
        elif self.cell is not None and tag in ("td", "th"):
            self.rows[-1]["cells"].append(" ".join("".join(self.cell).split()))
            self.cell = None

    def handle_data(self, data):
        if self.cell is not None:
            self.cell.append(data)


def test_limit_trend_has_every_limit_of_each_limits_json_in_the_packs_words(site_dir,
                                                                           site_archive):
    page = site_dir / "trends" / "limits.html"
    periods = {p: v["limits"] for p, v in _current_results(site_archive,
                                                           "limits.json").items()}
    # 2026-09-30 and 2026-10-31 with the fewer limits of SITE_LIMITS; 2026-11-30 with the
    # demo's thirteen, among them two sector maxima (Energy, and the sectors not named) and a
    # minimum and a maximum for each of its two asset-class ranges
    assert {p: len(v) for p, v in periods.items()} == {
        p: SITE_LIMITS[p].count(" = ") for p in SITE_LIMITS} | {"2026-11-30": 13}
    sectors = [i for i in periods["2026-11-30"] if i["limit"] == "max_sector_weight"]
    assert sorted(i["scope"] for i in sectors) == ["*", "Energy"]
    # the tighter holding limit of 2026-10-31 is breached (checked against holdings.csv's
    # largest weight, 0.076349 in the demo data, above 0.07)
    by_limit = {i["limit"]: i for i in periods["2026-10-31"]}
    assert by_limit["max_holding_weight"]["status"] == "breach"

    parser = Rows("limits-trend")
    parser.feed(page.read_text(encoding="utf-8"))
    for period, items in periods.items():
        rows = [r["cells"] for r in parser.rows if r["period"] == period]
        assert len(rows) == len(items), period          # one row per limit, none merged
        want = [[i["label"], _pack_format(i["limit"], i["value"]),
                 ("at least " if i["kind"] == "min" else "at most ")
                 + _pack_format(i["limit"], i["threshold"]),
                 {"within": "● within", "watch": "◆ watch", "breach": "✖ breach"}[i["status"]]]
                for i in items]
        assert rows == want, period
    text = page.read_text(encoding="utf-8")
    assert "Sector weight: Energy" in text and "beta_max" not in text
    # the chart has one point per limit and period, by the pack's label
    chart = _values(_specs(page)["chart-trend"])
    assert sorted((r["period_end"], r["label"], r["status"]) for r in chart) == sorted(
        (p, i["label"], i["status"]) for p, items in periods.items() for i in items)
    assert "not reported" not in text      # every period here has its limits.json


def test_index_shows_headline_figures_and_limit_counts(site_dir, site_archive):
    text = (site_dir / "index.html").read_text(encoding="utf-8")
    articles = dict(re.findall(r'<article aria-labelledby="pack-(\d+)">(.*?)</article>', text,
                               re.S))
    for e in ledger_entries(site_archive):
        folder = site_archive / Path(e["pdf_path"]).parent / stem(e) / "results"
        pf = json.loads((folder / "portfolio.json").read_text(encoding="utf-8"))
        limits = json.loads((folder / "limits.json").read_text(encoding="utf-8"))["limits"]
        block = articles[str(e["seq"])]
        assert (f"<dd>{pf['beta_regression']:.2f} <span class=\"muted\">(interval "
                f"{pf['beta_ci_low']:.2f} to {pf['beta_ci_high']:.2f})") in block
        assert f"<dd>{pf['tracking_error_ann'] * 100:.2f}%</dd>" in block
        n = {s: sum(i["status"] == s for i in limits) for s in ("breach", "watch", "within")}
        assert (f"{n['breach']} in breach, {n['watch']} on watch, {n['within']} within, "
                f"of {len(limits)}") in block


def test_beta_trend_draws_each_periods_policy_band_on_a_sensible_axis(site_dir,
                                                                      site_archive):
    limits = _current_results(site_archive, "limits.json")
    spec = _specs(site_dir / "trends" / "beta.html")["chart-trend"]
    rows = [r for r in _values(spec) if "beta" in r]
    band = {p: {i["limit"]: i["threshold"] for i in v["limits"]} for p, v in limits.items()}
    for r in rows:
        assert r["band_max"] == band[r["period_end"]].get("beta_max")
        assert r["band_min"] == band[r["period_end"]].get("beta_min")
    names = {layer.get("name") for layer in spec["layer"]}
    assert {"trend_band", "trend_band_min", "trend_band_max"} <= names
    y = next(la for la in spec["layer"] if la.get("name") == "trend_points")["encoding"]["y"]
    lo, hi = y["scale"]["domain"]
    shown = [v for r in rows for v in (r["beta_lo"], r["beta_hi"], r["band_min"],
                                       r["band_max"]) if v is not None]
    assert lo < min(shown) and hi > max(shown) and hi - lo >= 0.3
    assert hi - lo < 2 * (max(shown) - min(shown)) + 0.3     # padded, not stretched


def test_pack_page_limits_use_the_packs_labels_and_formats(site_dir, site_archive):
    e = [e for e in ledger_entries(site_archive) if e["period_end"] == "2026-11-30"][-1]
    text = (site_dir / "packs" / stem(e) / "index.html").read_text(encoding="utf-8")
    folder = site_archive / Path(e["pdf_path"]).parent / stem(e) / "results"
    for i in json.loads((folder / "limits.json").read_text(encoding="utf-8"))["limits"]:
        assert f"<td>{html.escape(i['label'])}</td>" in text
        assert f">{_pack_format(i['limit'], i['value'])}</td>" in text
    assert ">beta_max<" not in text


def test_sml_chart_has_every_fitted_holding_with_its_name(site_dir, site_archive):
    import csv

    for e in ledger_entries(site_archive):
        folder = Path(e["pdf_path"]).parent / stem(e)
        with open(site_archive / folder / "results" / "securities.csv", newline="") as fh:
            fitted = [r for r in csv.DictReader(fh) if r["status"] == "fitted"]
        spec = _specs(site_dir / "packs" / stem(e) / "index.html")["chart-sml"]
        points = [r for r in _values(spec) if "holding" in r]
        assert sorted(r["holding"] for r in points) == sorted(r["name"] for r in fitted)
        by_id = {r["id"]: r for r in points}
        for r in fitted:
            assert by_id[r["security_id"]]["beta"] == pytest.approx(float(r["beta"]),
                                                                    rel=1e-9)
        tips = [t["field"] for layer in spec["layer"]
                for t in layer.get("encoding", {}).get("tooltip", [])]
        assert "holding" in tips


def test_methods_page_carries_every_caution(site_dir):
    text = html.unescape((site_dir / "methods.html").read_text(encoding="utf-8"))
    for c in CAUTIONS:
        assert f"<li>{c}</li>" in text


def test_checking_page_names_each_system_tool(site_dir, site_archive):
    text = (site_dir / "checking.html").read_text(encoding="utf-8")
    for cmd in ("certutil -hashfile FILE.pdf SHA256", "Get-FileHash FILE.pdf -Algorithm SHA256",
                "shasum -a 256 FILE.pdf", "sha256sum FILE.pdf"):
        assert cmd in text
    # the example is the newest pack's own fingerprint (recomputed from the copy)
    newest = max(ledger_entries(site_archive), key=lambda e: (e["period_end"], e["seq"]))
    pdf = site_dir / "packs" / stem(newest) / "pack.pdf"
    assert sha(pdf.read_bytes()) in text


class _EntryHashCells(HTMLParser):
    """The text of each ``<code class="... entry-hash">`` with the open table elements (and
    their scope) around it."""

    def __init__(self) -> None:
        super().__init__()
        self.stack: list[tuple[str, dict]] = []
        self.cells: list[tuple[str, list[tuple[str, dict]]]] = []
        self.row_header: list[str | None] = []
        self._in_code = self._in_row_th = False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag in ("table", "tr", "td", "th", "dd"):
            self.stack.append((tag, attrs))
        if tag == "tr":
            self.row_header.append(None)
        if tag == "th" and attrs.get("scope") == "row":
            self._in_row_th = True
        if tag == "code" and "entry-hash" in attrs.get("class", "").split():
            self._in_code = True
            self.cells.append(("", list(self.stack)))

    def handle_endtag(self, tag):
        if tag == "code":
            self._in_code = False
        if tag == "th":
            self._in_row_th = False
        if tag in ("table", "tr", "td", "th", "dd") and self.stack:
            self.stack.pop()

    def handle_data(self, data):
        if self._in_code:
            text, stack = self.cells[-1]
            self.cells[-1] = (text + data, stack)
        if self._in_row_th and self.row_header:
            self.row_header[-1] = (self.row_header[-1] or "") + data


def test_index_and_checking_page_print_every_entry_hash(site_dir, site_archive):
    entries = ledger_entries(site_archive)
    want = sorted(e["entry_hash"] for e in entries)
    index = (site_dir / "index.html").read_text(encoding="utf-8")
    cells = _EntryHashCells()
    cells.feed(index)
    assert sorted(text for text, _ in cells.cells) == want
    assert all(stack[-1][0] == "dd" for _, stack in cells.cells)      # beside the PDF's sha
    for e in entries:
        assert f"Ledger entry {e['seq']} hash</dt>" in index
    assert "compare it with the hash written in the minutes" in index

    checking = (site_dir / "checking.html").read_text(encoding="utf-8")
    cells = _EntryHashCells()
    cells.feed(checking)
    # oldest first, one table row per entry, its number the row's header (scope="row")
    assert [text for text, _ in cells.cells] == [e["entry_hash"] for e in entries]
    # (the header row's cells are scope="col": it has no row header)
    assert cells.row_header == [None, *[str(e["seq"]) for e in entries]]
    for _, stack in cells.cells:
        assert [t for t, _ in stack] == ["table", "tr", "td"]
    assert '<th scope="col">Entry hash</th>' in checking
    assert "--head-file HEADS.txt" in checking
    assert "hash written in the minutes" in checking


def test_pages_have_one_h1_ordered_headings_and_a_skip_link(site_dir):
    for page in site_dir.rglob("*.html"):
        if page.name == "pack.html":
            continue
        text = page.read_text(encoding="utf-8")
        levels = [int(h) for h in re.findall(r"<h([1-6])[ >]", text)]
        assert levels[0] == 1 and levels.count(1) == 1, page
        assert all(b - a <= 1 for a, b in zip(levels, levels[1:], strict=False)), page
        assert '<a class="skip" href="#main">' in text and '<main id="main"' in text
        assert '<html lang="en-GB">' in text


def test_text_colours_meet_wcag_aa_contrast():
    # WCAG 2.1 relative luminance and contrast ratio (W3C definition, section 1.4.3)
    from reporter.charts import BRICK, GREY, INK, TEAL

    def lum(hex_colour: str) -> float:
        c = [int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)]
        c = [x / 12.92 if x <= 0.04045 else ((x + 0.055) / 1.055) ** 2.4 for x in c]
        return 0.2126 * c[0] + 0.7152 * c[1] + 0.0722 * c[2]

    def ratio(a: str, b: str) -> float:
        hi, lo = sorted((lum(a), lum(b)), reverse=True)
        return (hi + 0.05) / (lo + 0.05)

    assert ratio("#000000", "#ffffff") == pytest.approx(21.0)
    for text_colour in (INK, TEAL, BRICK, GREY):          # the site's text colours
        assert ratio(text_colour, "#ffffff") >= 4.5, text_colour


def test_print_stylesheet_hides_navigation(site_dir):
    css = (site_dir / "assets" / "site.css").read_text(encoding="utf-8")
    block = css[css.index("@media print"):]
    assert ".site-head nav" in block and "display: none" in block


# --- refusals ----------------------------------------------------------------------------

def test_tampered_archive_is_refused_and_nothing_is_written(site_archive, tmp_path, capsys):
    archive = tmp_path / "archive"
    shutil.copytree(site_archive, archive)
    entry = ledger_entries(archive)[2]
    pdf = archive / entry["pdf_path"]
    pdf.chmod(0o644)
    data = bytearray(pdf.read_bytes())
    data[len(data) // 3] ^= 0x01
    pdf.write_bytes(bytes(data))
    pdf.chmod(0o444)            # read-only again: only the changed bytes give it away
    out = tmp_path / "site"
    code, _, err = run_cli(capsys, "site", "--archive", archive, "--out", out)
    assert code == 1
    assert "fails verification (1 problem(s))" in err
    assert f"{entry['pdf_path']}: changed" in err and "No site was built" in err
    assert not out.exists()


def test_existing_site_is_replaced_whole_and_other_folders_are_refused(site_archive, tmp_path,
                                                                       capsys):
    out = tmp_path / "site"
    assert run_cli(capsys, "site", "--archive", site_archive, "--out", out, "--quiet")[0] == 0
    # a file the site did not write is never deleted: the rebuild is refused, naming it
    (out / "stray.txt").write_text("left from before")
    code, _, err = run_cli(capsys, "site", "--archive", site_archive, "--out", out, "--quiet")
    assert code == 2 and "this tool did not write there (stray.txt)" in err
    assert (out / "stray.txt").read_text() == "left from before"
    (out / "stray.txt").unlink()
    (out / "index.html").write_text("an old index")       # a file the site wrote: replaced
    assert run_cli(capsys, "site", "--archive", site_archive, "--out", out, "--quiet")[0] == 0
    assert (out / "index.html").read_text() != "an old index"
    papers = tmp_path / "papers"
    papers.mkdir()
    (papers / "minutes.docx").write_bytes(b"x")
    code, _, err = run_cli(capsys, "site", "--archive", site_archive, "--out", papers)
    assert code == 2 and "refusing to replace it" in err
    assert sorted(p.name for p in papers.iterdir()) == ["minutes.docx"]


def test_writing_into_or_over_the_archive_is_refused(site_archive, tmp_path, capsys):
    before = tree(site_archive)
    code, _, err = run_cli(capsys, "site", "--archive", site_archive,
                       "--out", site_archive / "site")
    assert code == 2 and "refusing to write into the archive" in err
    code, _, err = run_cli(capsys, "site", "--archive", site_archive, "--out", site_archive.parent)
    assert code == 2 and "the archive" in err and "is inside it" in err
    assert tree(site_archive) == before


def test_unreadable_archive_exits_2(tmp_path, capsys):
    code, _, err = run_cli(capsys, "site", "--archive", tmp_path / "nowhere", "--out",
                       tmp_path / "site")
    assert code == 2 and "no such archive folder" in err


def test_bad_limits_file_names_item_and_key():
    from reporter.errors import InputError
    from reporter.site.gather import read_limits

    good = read_limits(b'[{"limit": "Cash", "value": 0.02, "threshold": null, '
                       b'"status": "within"}, {"limit": "max_sector_weight", "scope": "Energy",'
                       b' "value": 0.11, "threshold": 0.12, "status": "watch"}]', "limits.json")
    assert good == [
        {"limit": "Cash", "scope": None, "kind": None, "value": 0.02, "threshold": None,
         "status": "within", "key": "Cash", "label": "Cash"},
        {"limit": "max_sector_weight", "scope": "Energy", "kind": None, "value": 0.11,
         "threshold": 0.12, "status": "watch", "key": "max_sector_weight:Energy",
         "label": "Sector weight: Energy"}]
    with pytest.raises(InputError) as exc:
        read_limits(b'[{"limit": "Cash", "value": "2%", "threshold": 0.05, "status": "ok"},'
                    b' {"value": 1, "threshold": 2, "status": "breach"}, 7,'
                    b' {"limit": "Cash", "value": 1, "threshold": 2, "status": "breach",'
                    b' "scope": 3, "kind": "most"},'
                    b' {"limit": "Cash", "value": 1, "threshold": 2, "status": "breach"}]',
                    "limits.json")
    lines = [str(p) for p in exc.value.problems]
    assert lines == [
        "limits.json:1:value: must be a number or null",
        "limits.json:1:status: 'ok' is not one of within, watch, breach",
        "limits.json:2:limit: key missing",
        "limits.json:3: item is not an object",
        "limits.json:4:scope: must be a text or null",
        "limits.json:4:kind: must be max or min",
        "limits.json:5: limit 'Cash' is listed twice",
    ]
    with pytest.raises(InputError, match="not valid JSON"):
        read_limits(b"{", "limits.json")


def test_empty_archive_gives_a_site_that_says_so(tmp_path, capsys):
    from reporter.archive.ledger import connect_for_writing

    archive = tmp_path / "archive"
    archive.mkdir()
    connect_for_writing(archive).close()          # a new ledger with no entries
    out = tmp_path / "site"
    code, stdout, _ = run_cli(capsys, "site", "--archive", archive, "--out", out, "--quiet")
    assert code == 0 and "0 signed pack(s)" in stdout
    assert "The archive holds no signed packs yet." in (out / "index.html").read_text()
    assert "no limit status to show yet" in (out / "trends" / "limits.html").read_text()
    assert not (out / "packs").exists()


def test_chart_spec_text_cannot_close_its_script_element():
    import altair as alt
    import pandas as pd

    from reporter.site.charts import spec_json

    name = "</script><script>alert(1)</script> & <!-- Co"
    chart = alt.Chart(pd.DataFrame({"holding": [name], "beta": [1.2]})).mark_point().encode(
        x="beta:Q", tooltip=["holding:N"])
    text = spec_json(chart)
    assert "<" not in text and ">" not in text and "&" not in text
    spec = json.loads(text)                        # still JSON, with the name intact
    assert _values(spec) == [{"holding": name, "beta": 1.2}]
    assert spec_json(chart) == text                # the same chart, the same text


def test_relative_links_between_pages():
    from reporter.site.build import relative

    assert relative("assets/site.css", "index.html") == "assets/site.css"
    assert relative("assets/site.css", "packs/x/index.html") == "../../assets/site.css"
    assert relative("trends/beta.html", "trends/limits.html") == "beta.html"
    assert relative("index.html", "trends/beta.html") == "../index.html"


def test_a_pack_build_and_a_site_never_replace_each_other(site_dir, site_archive, demo_build,
                                                          capsys):
    # each output folder's marker names its kind: a build refuses the site's folder, a site
    # build refuses a pack build's folder, and both folders are left as they were
    before = tree(site_dir)
    code, _, err = run_cli(capsys, "build", DEMO, "--out", site_dir)
    assert code == 2 and "holds a trustees' site, not a pack build" in err
    assert tree(site_dir) == before
    pack_before = tree(demo_build)
    code, _, err = run_cli(capsys, "site", "--archive", site_archive, "--out", demo_build)
    assert code == 2 and "holds a pack build, not a trustees' site" in err
    assert tree(demo_build) == pack_before
