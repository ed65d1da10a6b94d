"""Print charts read back from their rendered SVG: no two pieces of text overlap, no name on
the security market line sits on a point, and the year ticks never repeat.

Text boxes are measured here with Pillow from the DejaVu Sans font file the charts are
drawn in (not with the tool's own width estimate), at the position and anchor vl-convert
wrote into the SVG; the transforms of the enclosing groups are added up.
"""

from __future__ import annotations

import dataclasses
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from tests.conftest import DEMO, REPO

FONT = Path("/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf")
SVG = "{http://www.w3.org/2000/svg}"
_TRANSLATE = re.compile(r"translate\(([-\d.e]+),\s*([-\d.e]+)\)")

pytestmark = pytest.mark.skipif(not FONT.is_file(), reason="DejaVu Sans is not installed")


@dataclasses.dataclass
class Piece:
    text: str
    box: tuple[float, float, float, float]     # x0, y0, x1, y1 in SVG pixels
    data_label: bool                           # a text mark (not an axis, legend or title)


def _font(size: float):
    from PIL import ImageFont

    return ImageFont.truetype(str(FONT), size=size)


def _walk(el, dx: float, dy: float, out: list, points: list) -> None:
    m = _TRANSLATE.search(el.get("transform", ""))
    x, y = (dx + float(m.group(1)), dy + float(m.group(2))) if m else (dx, dy)
    tag = el.tag.removeprefix(SVG)
    if tag == "text" and (el.text or "").strip() and float(el.get("opacity", "1")) > 0:
        size = float(el.get("font-size", "11px").removesuffix("px"))
        font = _font(size)
        x0, y0, x1, y1 = font.getbbox(el.text, anchor="ls")    # from the baseline's start
        w = x1 - x0
        shift = {"start": 0.0, "middle": -w / 2, "end": -w}[el.get("text-anchor", "start")]
        box = (x + shift + x0, y + y0, x + shift + x1, y + y1)
        if "rotate(" in el.get("transform", ""):        # a vertical axis title
            box = (x + y0, y - w / 2, x + y1, y + w / 2)
        out.append(Piece(el.text, box, el.get("aria-roledescription") == "text mark"))
    if tag == "path" and el.get("aria-roledescription") == "point" and m:
        x0, y0, x1, y1 = _path_box(el.get("d", ""))
        points.append((x + x0, y + y0, x + x1, y + y1))
    for child in el:
        _walk(child, x, y, out, points)


def _path_box(d: str) -> tuple[float, float, float, float]:
    """The bounding box of a symbol's path (the M, L, A, h, v, l and Z commands Vega writes
    for circles, squares and triangles; an arc's end point is its extreme here)."""
    xs, ys, cx, cy = [], [], 0.0, 0.0
    for cmd, args in re.findall(r"([MLAhvlZ])([^MLAhvlZ]*)", d):
        v = [float(a) for a in re.findall(r"-?[\d.]+(?:e-?\d+)?", args)]
        if cmd in "ML":
            cx, cy = v[-2], v[-1]
        elif cmd == "A":
            for i in range(0, len(v), 7):
                cx, cy = v[i + 5], v[i + 6]
                xs.append(cx)
                ys.append(cy)
        elif cmd == "h":
            cx += v[0]
        elif cmd == "v":
            cy += v[0]
        elif cmd == "l":
            cx, cy = cx + v[0], cy + v[1]
        xs.append(cx)
        ys.append(cy)
    return min(xs), min(ys), max(xs), max(ys)


def read_svg(svg: str) -> tuple[list[Piece], list[tuple]]:
    """Every visible text's box, and every point mark's box."""
    texts, points = [], []
    _walk(ET.fromstring(svg), 0.0, 0.0, texts, points)
    return texts, points


def _overlap(a, b, pad: float = 0.0) -> bool:
    return a[0] < b[2] - pad and b[0] < a[2] - pad and a[1] < b[3] - pad and b[1] < a[3] - pad


def collisions(texts: list[Piece]) -> list[tuple[str, str]]:
    return [(a.text, b.text) for i, a in enumerate(texts) for b in texts[i + 1:]
            if _overlap(a.box, b.box)]


@pytest.fixture(scope="module")
def demo():
    from reporter.build import assemble
    from reporter.config import load_settings

    return assemble(load_settings(DEMO))


@pytest.fixture(scope="module")
def fund():
    from reporter.build import assemble
    from reporter.config import load_settings

    return assemble(load_settings(REPO / "inputs" / "demo-fund"))


def _svg(chart) -> str:
    from reporter.render.html import chart_svg

    return chart_svg(chart)


def test_width_estimate_is_never_below_the_fonts_own(demo):
    from reporter.chart_labels import text_width

    names = list(demo.results.securities["name"]) + ["Risk-free", "Market proxy", "Benchmark",
                                                  "11.1%", "\u25c6 watch (max 12%)", "WWWMMM%"]
    font = _font(10)
    for name in names:
        measured = font.getlength(name)
        assert text_width(name, 10) >= measured, name
        assert text_width(name, 10) <= 1.35 * measured + 4, name      # and not far over


def test_demo_charts_have_no_colliding_text(demo):
    bad = {}
    for name, chart in demo.context.charts.items():
        texts, _ = read_svg(_svg(chart))
        assert texts, name
        if hit := collisions(texts):
            bad[name] = hit
    assert not bad


def test_fund_charts_have_no_colliding_text_and_no_repeated_year(fund):
    bad, repeats = {}, {}
    for part in (fund.total, *fund.parts):
        for name, chart in part.context.charts.items():
            texts, _ = read_svg(_svg(chart))
            if hit := collisions(texts):
                bad[f"{part.slug}/{name}"] = hit
            if name in ("rolling_portfolio", "growth", "stress_backtest"):
                years = [t.text for t in texts if re.fullmatch(r"\d{4}", t.text)]
                assert years, name
                if len(years) != len(set(years)):
                    repeats[f"{part.slug}/{name}"] = years
    assert not bad
    assert not repeats


def _sml_labels(svg: str, res) -> tuple[list[Piece], list[Piece], list[tuple]]:
    texts, points = read_svg(svg)
    names = set(res.securities["name"].map(lambda n: n if len(n) <= 24 else n[:23] + "\u2026"))
    marks = [t for t in texts if t.data_label]
    return ([t for t in marks if t.text in names], [t for t in marks if t.text not in names],
            points)


def test_demo_sml_names_each_flagged_holding_clear_of_every_point(demo):
    from reporter.analytics.sml import WITHIN

    res = demo.results
    svg = _svg(demo.context.charts["sml"])
    holdings, anchors, points = _sml_labels(svg, res)
    flagged = res.securities[res.fits.fitted & (res.securities["sml_position"] != WITHIN)]
    # the demo flags four holdings: each is named, and so are both anchors
    assert sorted(t.text for t in holdings) == sorted(flagged["name"])
    assert sorted(t.text for t in anchors) == ["Market proxy", "Risk-free"]
    assert len(points) == int(res.fits.fitted.sum()) + 2
    for t in holdings + anchors:
        assert not any(_overlap(t.box, p) for p in points), t.text


def test_dense_sml_names_at_most_eight_none_overlapping(demo):
    """Six jittered copies of the demo's holdings (about 360 points), every one flagged:
    eight names at most, none on another or on a point; the rest are said to be unnamed."""
    from reporter.analytics.sml import ABOVE, BELOW
    from reporter.charts import sml_chart

    res = demo.results
    rng = np.random.default_rng(7)
    copies = []
    for k in range(6):
        c = res.securities.copy()
        c["name"] = c["name"] + f" {k}"
        c["beta"] = c["beta"] + rng.normal(0, 0.05, len(c))
        c["mean_excess_return_ann"] = c["mean_excess_return_ann"] + rng.normal(0, 0.01, len(c))
        c["sml_position"] = np.where(c["sml_residual_ann"] >= 0, ABOVE, BELOW)
        copies.append(c)
    big = pd.concat(copies, ignore_index=True)
    fitted = np.tile(res.fits.fitted, 6)
    dense = dataclasses.replace(res, securities=big,
                                fits=dataclasses.replace(res.fits, fitted=fitted))
    chart = sml_chart(dense)
    texts, points = read_svg(_svg(chart))
    names = set(big["name"].map(lambda n: n if len(n) <= 24 else n[:23] + "\u2026"))
    holdings = [t for t in texts if t.data_label and t.text in names]
    assert 1 <= len(holdings) <= 8
    assert len(points) == int(fitted.sum()) + 2
    labels = [t for t in texts if t.data_label]
    assert not collisions(labels)
    for t in labels:
        assert not any(_overlap(t.box, p) for p in points), t.text
    assert not collisions(texts)
    title = chart.to_dict(validate=False)["title"]["text"]
    n_flagged = int(fitted.sum())
    assert f"{n_flagged - len(holdings)} flagged holdings not named" in " ".join(title)


def test_rolling_beta_draws_the_policy_band(demo):
    spec = demo.context.charts["rolling_portfolio"].to_dict(validate=False)
    rules = [layer for layer in spec["layer"] if layer.get("mark", {}).get("color") == "#b8741a"]
    assert len(rules) == 1
    data = spec["datasets"][rules[0]["data"]["name"]]
    # the demo's pack.toml sets beta_min = 0.85 and beta_max = 1.05
    assert sorted(r["y"] for r in data) == [0.85, 1.05]
    lo, hi = rules[0]["encoding"]["y"].get("scale", {}).get("domain") or \
        spec["layer"][0]["encoding"]["y"]["scale"]["domain"]
    assert lo < 0.85 and hi > 1.05
