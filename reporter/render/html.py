"""Render the pack's HTML from the typed context; charts are exported to inline SVG here."""

from __future__ import annotations

import base64
import functools
import re
import threading
from dataclasses import fields

import vl_convert as vlc
from jinja2.bccache import Bucket, BytecodeCache
from markupsafe import Markup

from reporter.charts import PRINT_ONLY, THEME_CONFIG
from reporter.context import PackContext
from reporter.render.environment import make_environment

_XML_DECL = re.compile(r"^<\?xml[^>]*>\s*")


def chart_svg(chart) -> str:
    """Export one Altair chart to an SVG string with vl-convert (no browser, no network).

    The spec is not checked against the Vega-Lite JSON schema here: Altair's check takes
    about 0.05-0.1 s a chart, and every chart the tool draws is checked in the tests
    (``tests/test_render.py``) instead."""
    spec = chart.to_dict(validate=False)
    svg = vlc.vegalite_to_svg(spec, config=THEME_CONFIG, allowed_base_urls=[])
    return _XML_DECL.sub("", svg)


@functools.cache
def start_chart_engine() -> threading.Thread:
    """Start vl-convert's chart engine on a thread of its own (one tiny conversion) and
    return the thread. The engine's start, about 0.4-0.5 s once a process, runs outside
    Python's lock, so a build starts it before it reads its data and the chart stage finds
    it ready. Once a process: later builds in it (a batch worker, the preview) find the
    engine running and get the same thread back. An error here is left for the chart
    stage's own export to report."""
    spec = {"mark": "point", "data": {"values": [{"a": 1}]},
            "encoding": {"x": {"field": "a", "type": "quantitative"}}}

    def start() -> None:
        try:
            vlc.vegalite_to_svg(spec, allowed_base_urls=[])
        except Exception:  # noqa: BLE001, S110 - the real export reports any engine fault
            pass

    thread = threading.Thread(target=start, name="chart-engine", daemon=True)
    thread.start()
    return thread


def export_charts(ctx: PackContext) -> dict[str, Markup]:
    """Every chart of the context as inline SVG markup (vl-convert escapes text in SVG),
    the print-only variants (named ``NAME`` + :data:`reporter.charts.PRINT_ONLY`) with them."""
    return {name: Markup(chart_svg(chart)) for name, chart in sorted(ctx.charts.items())}


# A chart whose SVG has more elements than this is drawn in print as an image: WeasyPrint lays
# out every SVG element (a security market line of 2,000 holdings with error bars: about 6,000
# elements, 4 s and 0.9 MB of PDF), while a PNG of it costs about 0.3 s and 0.4 MB.
# 200 dpi: the figure is set at about three quarters of its SVG size, so about 270 pixels an
# inch on the page; at 100% and 200% zoom it cannot be told from 300 dpi, which took 1.4 times
# as long to rasterise (/work/notes/charts_sml_dpi.png, benchmarks/bench_charts.py).
DENSE_SVG_ELEMENTS = 3000
PRINT_DPI = 200
_SVG_SIZE = re.compile(r'<svg\b[^>]*?\bwidth="([\d.]+)"[^>]*?\bheight="([\d.]+)"')


def print_charts(ctx: PackContext, svgs: dict[str, Markup], dpi: float = PRINT_DPI
                 ) -> dict[str, Markup]:
    """The charts as the PDF shows them (a chart's print variant in its place, where it has
    one), each an image of the chart's own size: its SVG
    (vector), or for a dense one (more than :data:`DENSE_SVG_ELEMENTS` elements) a PNG at
    :data:`PRINT_DPI` dpi.

    An image rather than inline SVG: WeasyPrint reads inline markup with its HTML parser,
    which goes through each attribute a character at a time in Python, while an image's SVG
    is read by an XML parser written in C. For the demo's seven charts that took the PDF's
    chart cost from 2.0 s to 1.2 s of CPU. The pages look the same: pixel-identical at 60
    and 72 dpi (``tests/test_long_packs.py``); at 150 dpi some glyph edges differ in their
    anti-aliasing, as the embedded font subsets differ by a few bytes."""
    out = {}
    for name, svg in svgs.items():
        if name.endswith(PRINT_ONLY):
            continue
        svg = svgs.get(name + PRINT_ONLY, svg)      # the print variant, where there is one
        size = _SVG_SIZE.search(svg)
        if size is None:
            out[name] = svg
        elif svg.count("<") <= DENSE_SVG_ELEMENTS:
            data = base64.b64encode(str(svg).encode("utf-8")).decode("ascii")
            out[name] = Markup('<img class="chart-image" alt="Chart; see its caption"'
                               f' src="data:image/svg+xml;base64,{data}">')
        else:
            # rasterised from the SVG already exported (not a second run of Vega)
            png = vlc.svg_to_png(str(svg), scale=dpi / 72)
            data = base64.b64encode(png).decode("ascii")
            out[name] = Markup(
                '<img class="chart-image" alt="Chart drawn as an image for print; see its'
                f' caption" style="width:{size.group(1)}px;height:{size.group(2)}px"'
                f' src="data:image/png;base64,{data}">')
    return out


def render_html(ctx: PackContext, svgs: dict[str, Markup], *, for_print: bool,
                user_templates=None, template: str = "pack.html.j2",
                signoff: dict | None = None, extra: dict | None = None,
                bytecode_cache=None) -> str:
    """The pack as one self-contained HTML document (CSS and SVG inline).

    ``signoff`` (the sign-off record) adds the approval to the cover and a last page.
    ``extra`` sets ``part`` (True: only the portfolio's chapters, for a fund pack),
    ``anchor_prefix`` (prefixed to every id), ``part_title``, and ``market_word`` and
    ``proxy_word`` (what the regressions are against: "market proxy" and "proxy" by default)
    and ``edition`` ("full", or "trustees" for the short edition).
    ``bytecode_cache``: compiled templates kept between calls (see :func:`make_environment`).
    """
    env = make_environment(user_templates, bytecode_cache)
    html = env.get_template(template).render(**template_values(ctx, for_print, extra),
                                              svg=svgs, for_print=for_print, signoff=signoff)
    return chart_alt_text(html) if for_print else html


def template_values(ctx: PackContext, for_print: bool, extra: dict | None = None) -> dict:
    """The names a pack template sees from ``ctx`` (its charts aside: the template gets their
    markup as ``svg``), with the defaults of :func:`render_html`'s ``extra`` overridden by
    ``extra``. A fund's own pages use it too, so a template sees the same names either way."""
    values = {f.name: getattr(ctx, f.name) for f in fields(ctx)}
    # the PDF draws the security market line of a long pack with the holdings within
    # estimation error counted in cells (see reporter.charts.print_variants): say so
    values["sml_binned"] = for_print and ("sml" + PRINT_ONLY) in values.pop("charts")
    return values | {"part": False, "anchor_prefix": "", "part_title": None,
                     "market_word": "market proxy", "proxy_word": "proxy",
                     "edition": "full"} | (extra or {})


class MemoryBytecodeCache(BytecodeCache):
    """Jinja's compiled templates, kept in memory (nothing is written): one build's HTML stage
    renders the screen page and each edition's print page from the same templates, and the
    preview re-renders them. Jinja checks each template's source checksum, so an edited
    template is compiled again. For the Large workload's three pages this halved the HTML
    stage's CPU time (0.83 s to 0.40 s, measured in one process); the pages are the same
    text."""

    def __init__(self) -> None:
        self._store: dict[str, bytes] = {}

    def load_bytecode(self, bucket: Bucket) -> None:
        data = self._store.get(bucket.key)
        if data is not None:
            bucket.bytecode_from_string(data)

    def dump_bytecode(self, bucket: Bucket) -> None:
        self._store[bucket.key] = bucket.bytecode_to_string()


_FIGURE_CHART = re.compile(r'(<figure\b[^>]*?\baria-label="([^"]*)"[^>]*>\s*'
                           r'<img class="chart-image" alt=")[^"]*(")')


def chart_alt_text(html: str) -> str:
    """Give each print chart image the description of its figure (``aria-label``) as its
    ``alt`` text, which a tagged PDF carries as the figure's /Alt for screen readers. The
    label is copied as the template escaped it for an attribute."""
    return _FIGURE_CHART.sub(lambda m: m.group(1) + m.group(2) + m.group(3), html)
