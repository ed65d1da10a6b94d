"""The security market line of many holdings in print: the holdings within estimation error
counted in cells, the flagged ones drawn on top; the HTML keeps every point."""

from __future__ import annotations

import base64
import json
import re
import sys

import numpy as np
import pytest

from reporter.analytics.sml import WITHIN
from tests.conftest import REPO

sys.path.insert(0, str(REPO / "benchmarks"))
from workloads import write_scheme  # noqa: E402


@pytest.fixture(scope="module")
def many(tmp_path_factory):
    """Results and charts of an invented pack of 450 holdings (above BIN_FROM)."""
    from reporter.analytics.pack import analyse
    from reporter.charts import build_charts
    from reporter.config import load_settings
    from reporter.validate import validate_pack

    folder = write_scheme(tmp_path_factory.mktemp("many") / "pack", 450, 72, "monthly",
                          seed=11, label="M")
    settings = load_settings(folder)
    res = analyse(validate_pack(settings), settings)
    return res, build_charts(res)


def _datasets(chart) -> dict:
    return chart.to_dict(validate=False)["datasets"]


def test_cell_counts_are_numpys_2d_histogram():
    from reporter.sml_chart import cell_counts

    rng = np.random.default_rng(4)
    beta, excess = rng.uniform(0.1, 1.9, 700), rng.normal(0.0, 0.05, 700)
    x_dom, y_dom = [0.0, 2.0], [-0.2, 0.2]
    excess[:3] = [0.5, -0.5, np.nan]        # two beyond the plot (counted at its edge), a gap
    cells = cell_counts(beta, excess, x_dom, y_dom, bins=(40, 24))
    # reference: numpy.histogram2d on the same edges, the points clipped to the plot
    ok = np.isfinite(excess)
    ref, xe, ye = np.histogram2d(beta[ok], np.clip(excess[ok], -0.2, 0.2), bins=(
        np.linspace(0, 2, 41), np.linspace(-0.2, 0.2, 25)))
    got = np.zeros_like(ref)
    ix = np.searchsorted(xe, cells["beta"].to_numpy() + 1e-12) - 1
    iy = np.searchsorted(ye, cells["excess"].to_numpy() + 1e-12) - 1
    got[ix, iy] = cells["count"]
    np.testing.assert_array_equal(got, ref)
    assert cells["count"].sum() == 699 and (cells["count"] > 0).all()
    np.testing.assert_allclose(cells["beta2"] - cells["beta"], 2 / 40)
    np.testing.assert_allclose(cells["excess2"] - cells["excess"], 0.4 / 24)


def test_print_variant_counts_every_holding_within_and_draws_the_flagged(many):
    from reporter.charts import PRINT_ONLY

    res, charts = many
    sec = res.securities[res.fits.fitted]
    within = int((sec["sml_position"] == WITHIN).sum())
    flagged = len(sec) - within
    assert 0 < flagged < within
    screen = _datasets(charts["sml"])
    printed = _datasets(charts["sml" + PRINT_ONLY])
    # the HTML's chart: one row a holding; the print one: the flagged holdings, and cells
    # whose counts add up to the holdings within estimation error
    assert max(len(v) for v in screen.values()) == len(sec)
    rows = {k: v for k, v in printed.items() if v and "count" in v[0]}
    (cells,) = rows.values()
    assert sum(c["count"] for c in cells) == within
    points = [v for v in printed.values() if v and "position" in v[0]]
    assert [len(v) for v in points] == [flagged]
    assert WITHIN not in {r["position"] for r in points[0]}
    title = json.dumps(charts["sml" + PRINT_ONLY].to_dict(validate=False)["title"])
    assert f"the {within:,} holdings within estimation error, counted per cell" in title
    # the names on the chart are the screen chart's
    names = [sorted(r["label"] for r in v) for v in screen.values() if v and "kind" in v[0]]
    assert names == [sorted(r["label"] for r in v) for v in printed.values()
                     if v and "kind" in v[0]]


def test_the_pdf_draws_the_print_variant_and_the_html_keeps_the_points(many):
    from types import SimpleNamespace

    from reporter.charts import PRINT_ONLY
    from reporter.render.html import chart_svg, print_charts

    res, charts = many
    wanted = {k: charts[k] for k in ("sml", "sml" + PRINT_ONLY, "sectors")}
    svgs = {k: chart_svg(c) for k, c in wanted.items()}
    out = print_charts(SimpleNamespace(charts=wanted), svgs)
    assert sorted(out) == ["sectors", "sml"]               # the variant is no chart of its own
    drawn = base64.b64decode(re.search(r"base64,([^\"]+)", out["sml"]).group(1)).decode()
    assert drawn == svgs["sml" + PRINT_ONLY] and "counted per cell" in drawn
    assert drawn.count("<") < svgs["sml"].count("<") / 2
    assert "counted per cell" not in svgs["sml"]


def test_a_pack_under_the_threshold_has_no_print_variant():
    from reporter.analytics.pack import analyse
    from reporter.charts import PRINT_ONLY, build_charts
    from reporter.config import load_settings
    from reporter.sml_chart import BIN_FROM
    from reporter.validate import validate_pack
    from tests.conftest import DEMO

    settings = load_settings(DEMO)
    res = analyse(validate_pack(settings), settings)
    assert res.fits.fitted.sum() < BIN_FROM
    assert not any(k.endswith(PRINT_ONLY) for k in build_charts(res))


def test_the_cell_legend_is_stepped_not_a_gradient(many):
    """WeasyPrint's SVG support does not draw a gradient legend's ramp (seen on a rendered
    page: the ticks without their colours), so the cells' counts use a stepped scale with a
    legend of swatches below the plot."""
    from reporter.charts import PRINT_ONLY

    _, charts = many
    layers = charts["sml" + PRINT_ONLY].to_dict(validate=False)["layer"]
    (enc,) = [la["encoding"]["fill"] for la in layers
              if la.get("encoding", {}).get("fill", {}).get("field") == "count"]
    assert enc["scale"]["type"] == "quantize" and len(enc["scale"]["range"]) == 4
    assert enc["legend"]["orient"] == "bottom" and enc["legend"]["symbolType"] == "square"


def test_the_print_caption_says_cells_only_where_the_pdf_draws_them(tmp_path):
    from reporter.build import assemble
    from reporter.config import load_settings

    folder = write_scheme(tmp_path / "pack", 420, 36, "monthly", seed=5, label="C")
    a = assemble(load_settings(folder))
    cells = "grey cells: the holdings within estimation error, counted per cell"
    assert cells in a.html(for_print=True)
    assert cells in a.html(for_print=True, edition="trustees")
    screen = a.html(for_print=False)
    assert cells not in screen and "circles: within estimation error" in screen
