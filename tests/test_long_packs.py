"""Long packs: the print listing of a long holdings appendix, dense charts drawn as images in
print, the rolling-beta results file written in blocks, and the fixed-width text filter."""

from __future__ import annotations

import base64
import dataclasses
import io
import re
import sys
import threading
from types import SimpleNamespace

import altair as alt
import numpy as np
import pandas as pd
import pypdf
import pytest

from reporter.build import build_pack
from reporter.context import LISTING_ROWS
from reporter.render.environment import fit
from reporter.render.html import DENSE_SVG_ELEMENTS, PRINT_DPI, chart_svg, print_charts
from tests.conftest import REPO

sys.path.insert(0, str(REPO / "benchmarks"))
from workloads import write_scheme  # noqa: E402

N_HOLDINGS = 300          # above the 250 from which the print appendix is a listing


@pytest.fixture(scope="module")
def long_build(tmp_path_factory):
    root = tmp_path_factory.mktemp("long")
    folder = write_scheme(root / "pack", N_HOLDINGS, 72, "monthly", seed=5, label="LP")
    hold = pd.read_csv(folder / "holdings.csv")
    hold.loc[0, "name"] = "Harrowgate Estuarine Water & Sewerage Holdings plc"   # long
    hold.to_csv(folder / "holdings.csv", index=False, float_format="%.8f")
    out = root / "out"
    build_pack(folder, out)
    reader = pypdf.PdfReader(io.BytesIO((out / "pack.pdf").read_bytes()))
    pages = [p.extract_text() or "" for p in reader.pages]
    return SimpleNamespace(out=out, hold=hold, pages=pages,
                           html=(out / "pack.html").read_text(encoding="utf-8"))


def test_every_holding_is_listed_once_in_the_print_appendix(long_build):
    listing = [p for p in long_build.pages if "Holdings appendix" in p and " LP0" in p]
    text = "\n".join(listing)
    ids = long_build.hold["security_id"]
    counts = {sid: len(re.findall(rf"(?m)^{sid}\b", text)) for sid in ids}
    assert set(counts.values()) == {1}, {k: v for k, v in counts.items() if v != 1}
    # the first page holds LISTING_ROWS[0] rows, each next page at most LISTING_ROWS[1]
    per_page = [len(re.findall(r"(?m)^LP\d{5}\b", p)) for p in listing]
    assert per_page[0] == LISTING_ROWS[0]
    assert all(n <= LISTING_ROWS[1] for n in per_page[1:]) and sum(per_page) == N_HOLDINGS
    assert "fixed-width listing for print" in text
    # the long name is cut to its 26 characters with an ellipsis; the CSV keeps it whole
    assert "Harrowgate Estuarine Wate\u2026" in text
    sec = pd.read_csv(long_build.out / "results/securities.csv")
    assert "Harrowgate Estuarine Water & Sewerage Holdings plc" in set(sec["name"])


def test_the_screen_pack_keeps_the_full_table(long_build):
    html = long_build.html
    assert '<pre class="listing">' not in html
    body = html[html.index('id="holdings"'):]
    assert body.count("<tr><td>LP") == N_HOLDINGS
    assert "Harrowgate Estuarine Water &amp; Sewerage Holdings plc" in body


def test_rolling_results_file_matches_the_results_in_memory(long_build):
    # written by pyarrow in blocks of series; read back it is the rolling table, rounded to
    # 10 decimal places, in the same order
    from reporter.analytics.pack import analyse
    from reporter.config import load_settings
    from reporter.validate import validate_pack

    folder = long_build.out.parent / "pack"
    settings = load_settings(folder)
    res = analyse(validate_pack(settings), settings)
    expected = res.rolling_table
    got = pd.read_csv(long_build.out / "results/rolling_beta.csv")
    assert list(got.columns) == list(expected.columns)
    assert len(got) == len(expected) and got["series"].iloc[0] == "PORTFOLIO"
    assert (got["series"].to_numpy() == expected["series"].to_numpy()).all()
    assert (got["date"].to_numpy() == expected["date"].dt.strftime("%Y-%m-%d").to_numpy()).all()
    for c in ("beta", "beta_se", "beta_ci_low", "beta_ci_high"):
        np.testing.assert_allclose(got[c], expected[c], rtol=0, atol=5.1e-11)


def test_a_dense_chart_is_an_image_in_print_and_a_small_one_stays_vector():
    rng = np.random.default_rng(1)
    n = DENSE_SVG_ELEMENTS + 500
    dense = alt.Chart(pd.DataFrame({"x": rng.normal(size=n), "y": rng.normal(size=n)})
                      ).mark_point().encode(x="x:Q", y="y:Q").properties(width=400, height=300)
    small = alt.Chart(pd.DataFrame({"x": [1, 2], "y": [3, 4]})).mark_point().encode(
        x="x:Q", y="y:Q")
    ctx = SimpleNamespace(charts={"dense": dense, "small": small})
    svgs = {name: chart_svg(chart) for name, chart in ctx.charts.items()}
    assert svgs["dense"].count("<") > DENSE_SVG_ELEMENTS >= svgs["small"].count("<")
    out = print_charts(ctx, svgs)
    # a chart that is not dense is its own SVG, drawn as an image
    small_svg = out["small"].split("data:image/svg+xml;base64,")[1].split('"')[0]
    assert out["small"].startswith('<img class="chart-image"')
    assert base64.b64decode(small_svg).decode() == svgs["small"]
    width, height = re.search(r'<svg\b[^>]*?width="([\d.]+)"[^>]*?height="([\d.]+)"',
                              svgs["dense"]).groups()
    assert out["dense"].startswith('<img class="chart-image"')
    assert f"width:{width}px;height:{height}px" in out["dense"]
    png = base64.b64decode(out["dense"].split("base64,")[1].split('"')[0])
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    # drawn at PRINT_DPI: PRINT_DPI/72 pixels per CSS point of the SVG's size
    w_px = int.from_bytes(png[16:20], "big")
    assert PRINT_DPI == 200 and abs(w_px - float(width) * 200 / 72) <= 2


def test_fit_cuts_with_an_ellipsis_and_pads():
    assert fit("abc", 5) == "abc  " and fit("abc", 5, ">") == "  abc"
    assert fit("abcdefgh", 5) == "abcd\u2026" and len(fit("abcdefgh", 5)) == 5
    assert fit(None, 3) == "   " and fit(42, 4, ">") == "  42"


def test_the_rolling_file_is_the_rolling_table_whatever_the_block_size(monkeypatch):
    """The rolling-beta file is written from numpy arrays in blocks of series (the series
    column dictionary-encoded); any block size gives the same bytes, and they read back as
    the results' rolling table (reference: the csv module's reader), with ids that need
    quoting quoted."""
    import csv

    from reporter.analytics.pack import analyse
    from reporter.build import write_rolling_csv
    from reporter.config import load_settings
    from reporter.validate import validate_pack

    settings = load_settings(REPO / "inputs" / "demo")
    res = analyse(validate_pack(settings), settings)
    ids = list(res.window.security_ids)
    ids[3] = 'Odd, "quoted" id'
    res = dataclasses.replace(res, window=dataclasses.replace(res.window,
                                                              security_ids=tuple(ids)))
    outs = []
    for block in (1, 7, 50, 10_000):
        sink = io.BytesIO()
        write_rolling_csv(res, sink, block=block)
        outs.append(sink.getvalue())
    # as a build writes it: one formatting thread until the PDF is done, then two
    late = threading.Event()
    timer = threading.Timer(0.05, late.set)
    timer.start()
    for widen in (threading.Event(), late):
        sink = io.BytesIO()
        if widen is not late:
            widen.set()
        write_rolling_csv(res, sink, block=3, widen=widen)
        outs.append(sink.getvalue())
    timer.join()
    # betas made a few series at a time (500 in a build), blocks within and across chunks
    import reporter.pipeline.results as results_module

    monkeypatch.setattr(results_module, "MAKE", 4)
    for block, widen in ((1, None), (3, None), (4, threading.Event()), (7, None)):
        sink = io.BytesIO()
        write_rolling_csv(res, sink, block=block, widen=widen)
        outs.append(sink.getvalue())
    assert outs[1:] == outs[:-1]
    text = outs[0].decode()
    assert '"Odd, ""quoted"" id"' in text
    rows = list(csv.reader(io.StringIO(text)))
    table = res.rolling_table
    assert rows[0] == list(table.columns)
    assert len(rows) - 1 == len(table)
    assert [r[1] for r in rows[1:]] == list(table["series"])
    assert [r[0] for r in rows[1:]] == list(table["date"].dt.strftime("%Y-%m-%d"))
    got = np.array([[float(v) for v in r[2:]] for r in rows[1:]])
    np.testing.assert_allclose(got, table.iloc[:, 2:].to_numpy(), rtol=0, atol=5.1e-11)


def test_the_rolling_file_makes_each_chunk_of_betas_once_and_holds_one_beside_the_pdf(
        monkeypatch):
    """The rolling file's betas are made a chunk of series at a time and shared by the
    chunk's blocks: each chunk is made once (in whatever order two formatting threads take
    its blocks), and beside the PDF (one block at a time) a chunk is dropped before the next
    is made, so one is held at a time."""
    import gc
    import weakref

    import reporter.pipeline.results as results_module
    from reporter.analytics.pack import analyse
    from reporter.analytics.rolling import HoldingsRolling
    from reporter.build import write_rolling_csv
    from reporter.config import load_settings
    from reporter.validate import validate_pack

    settings = load_settings(REPO / "inputs" / "demo")
    res = analyse(validate_pack(settings), settings)
    n_holdings = res.rolling.n_series
    monkeypatch.setattr(results_module, "MAKE", 4)
    made = []                       # (first column, weak reference to its betas)
    plain = HoldingsRolling.block

    def block(self, cols):
        out = plain(self, cols)
        gc.collect()
        alive = sum(ref() is not None for _, ref, _ in made)
        made.append((int(cols[0]), weakref.ref(out.beta), alive))
        return out

    monkeypatch.setattr(HoldingsRolling, "block", block)
    for widen in (None, threading.Event()):       # two threads; one, as beside the PDF
        made.clear()
        write_rolling_csv(res, io.BytesIO(), block=2, widen=widen)
        firsts = [c for c, _, _ in made]
        # ids' position 0 is the portfolio: chunk k is positions 4k to 4k + 3
        assert sorted(firsts) == [0, *range(3, n_holdings, 4)]
        assert len(set(firsts)) == len(firsts)          # no chunk made twice
        if widen is not None:
            assert max(alive for _, _, alive in made) == 0   # the one before already dropped


def test_a_failing_sink_stops_the_rolling_file_with_its_error():
    """A write that fails (a full disk, or the build discarded) ends the file's writing with
    that error; the formatting threads stop, and nothing hangs."""
    from reporter.analytics.pack import analyse
    from reporter.build import write_rolling_csv
    from reporter.config import load_settings
    from reporter.validate import validate_pack

    settings = load_settings(REPO / "inputs" / "demo")
    res = analyse(validate_pack(settings), settings)

    class Full(io.BytesIO):
        def write(self, data):
            if self.tell() > 2000:
                raise OSError(28, "No space left on device")
            return super().write(data)

    before = threading.active_count()
    with pytest.raises(OSError, match="No space left"):
        write_rolling_csv(res, Full(), block=2)
    assert threading.active_count() == before


def test_a_chart_drawn_as_an_svg_image_prints_as_the_inline_svg_did(tmp_path):
    """The PDF draws each chart from an ``<img>`` of its SVG (read by an XML parser in C)
    rather than from inline SVG (read by WeasyPrint's HTML parser in Python); the page must
    look the same. Reference: the pages as poppler's pdftoppm draws them."""
    import shutil
    import subprocess

    from PIL import Image, ImageChops

    from reporter.render.pdf import render_pdf

    if shutil.which("pdftoppm") is None:
        pytest.skip("pdftoppm (poppler-utils) is not installed; make test installs it")
    chart = alt.Chart(pd.DataFrame({"x": [1, 2, 3, 4], "y": [3, 1, 4, 2], "k": list("abab")})
                      ).mark_line(point=True).encode(x="x:Q", y="y:Q", color="k:N").properties(
        title="Trailing beta", width=400, height=200)
    svg = chart_svg(chart)
    img = print_charts(SimpleNamespace(charts={"c": chart}), {"c": svg})["c"]
    assert img.startswith('<img class="chart-image"')
    pngs = []
    for name, markup in (("inline", svg), ("image", img)):
        pdf = tmp_path / f"{name}.pdf"
        pdf.write_bytes(render_pdf(f"<html><body><figure>{markup}</figure></body></html>"))
        subprocess.run(["pdftoppm", "-r", "72", "-png", "-singlefile", pdf, tmp_path / name],
                       check=True)
        pngs.append(Image.open(tmp_path / f"{name}.png").convert("RGB"))
    assert pngs[0].size == pngs[1].size
    assert pngs[0].getbbox() is not None and ImageChops.invert(pngs[0]).getbbox() is not None
    assert ImageChops.difference(*pngs).getbbox() is None
