"""Render the pack's HTML from the typed context; charts are exported to inline SVG here."""

from __future__ import annotations

import base64
import re
import threading
from collections.abc import Mapping
from concurrent.futures import Future
from dataclasses import fields

import vl_convert as vlc
from markupsafe import Markup

from reporter.charts import THEME_CONFIG
from reporter.context import PackContext
from reporter.render.environment import make_environment

_XML_DECL = re.compile(r"^<\?xml[^>]*>\s*")
_ENGINE_LOCK = threading.Lock()
_engine_started = False


def start_chart_engine() -> None:
    """Start vl-convert's JavaScript engine in a background thread, once per process.

    Its first conversion takes 0.5-0.9 s to start the engine; vl-convert releases Python's
    lock meanwhile, so a build that calls this before reading its inputs has the engine ready
    by the chart stage. A failure here is ignored: the chart stage's own call reports it."""
    global _engine_started
    with _ENGINE_LOCK:
        if _engine_started:
            return
        _engine_started = True
    spec = {"data": {"values": [{"x": 0}]}, "mark": "point",
            "encoding": {"x": {"field": "x", "type": "quantitative"}}}

    def run() -> None:
        try:
            vlc.vegalite_to_svg(spec, config=THEME_CONFIG, allowed_base_urls=[])
        except Exception:  # noqa: BLE001 - reported by the chart stage's own call
            pass

    threading.Thread(target=run, name="chart-engine", daemon=True).start()


def chart_svg(chart) -> str:
    """Export one Altair chart to an SVG string with vl-convert (no browser, no network).

    The spec is not checked against the Vega-Lite JSON schema here: Altair's check takes
    about 0.05-0.1 s a chart, and every chart the tool draws is checked in the tests
    (``tests/test_render.py``) instead."""
    spec = chart.to_dict(validate=False)
    svg = vlc.vegalite_to_svg(spec, config=THEME_CONFIG, allowed_base_urls=[])
    return _XML_DECL.sub("", svg)


# A chart whose SVG has more elements than this is drawn in print as an image: WeasyPrint lays
# out every SVG element (a security market line of 2,000 holdings with error bars: about 6,000
# elements, 4 s and 0.9 MB of PDF), while a 300 dpi PNG of it costs WeasyPrint about 0.35 s
# and 0.4 MB (the image itself takes vl-convert 1.5-2 s, beside the HTML stage).
DENSE_SVG_ELEMENTS = 3000
PRINT_DPI = 300
_SVG_SIZE = re.compile(r'<svg\b[^>]*?\bwidth="([\d.]+)"[^>]*?\bheight="([\d.]+)"')


def _is_dense(svg: str) -> bool:
    return svg.count("<") > DENSE_SVG_ELEMENTS and _SVG_SIZE.search(svg) is not None


def _print_image(svg: str) -> Markup:
    """A dense chart's print form: a PNG at :data:`PRINT_DPI` dpi, rasterised from the SVG
    already exported (not a second run of Vega), drawn at the SVG's own size."""
    size = _SVG_SIZE.search(svg)
    png = vlc.svg_to_png(str(svg), scale=PRINT_DPI / 72)
    data = base64.b64encode(png).decode("ascii")
    return Markup(
        '<img class="chart-image" alt="Chart drawn as an image for print; see its caption"'
        f' style="width:{size.group(1)}px;height:{size.group(2)}px"'
        f' src="data:image/png;base64,{data}">')


class PrintCharts(Mapping):
    """The charts as the PDF draws them, by name: each chart's SVG (vector), except a dense
    one (more than :data:`DENSE_SVG_ELEMENTS` elements), which becomes a PNG. The PNGs are
    made in background threads (vl-convert releases Python's lock while it rasterises, about
    1.5-2 s for 2,000 holdings), so the screen HTML is rendered meanwhile; reading a chart
    waits for its image, and re-raises any error made making it."""

    def __init__(self, svgs: dict[str, Markup], pending: dict[str, Future] | None = None):
        self._names = sorted(svgs)
        self._ready = {n: svg for n, svg in svgs.items() if n not in (pending or {})}
        self._pending = dict(pending or {})

    def __getitem__(self, name: str) -> Markup:
        if name in self._pending:
            self._ready[name] = self._pending.pop(name).result()
        return self._ready[name]

    def __iter__(self):
        return iter(self._names)

    def __len__(self) -> int:
        return len(self._names)


def _rasterise(svgs: dict[str, Markup], names) -> dict[str, Future]:
    pending = {}
    for name in names:
        future: Future = Future()

        def run(svg=svgs[name], future=future) -> None:
            try:
                future.set_result(_print_image(svg))
            except BaseException as exc:  # noqa: BLE001 - handed to the reader of the chart
                future.set_exception(exc)

        threading.Thread(target=run, name=f"print-{name}", daemon=True).start()
        pending[name] = future
    return pending


def export_all(ctx: PackContext) -> tuple[dict[str, Markup], PrintCharts]:
    """Every chart of the context as inline SVG markup (vl-convert escapes text in SVG), and
    the charts as the PDF draws them. A dense chart's image is started once every SVG is
    exported (vl-convert does one conversion at a time), so that it is made while the HTML
    is rendered."""
    svgs = export_charts(ctx)
    return svgs, print_charts(svgs)


def export_charts(ctx: PackContext) -> dict[str, Markup]:
    """Every chart of the context as inline SVG markup."""
    return {name: Markup(chart_svg(chart)) for name, chart in sorted(ctx.charts.items())}


def print_charts(svgs: dict[str, Markup]) -> PrintCharts:
    """The print form of charts already exported (see :class:`PrintCharts`)."""
    return PrintCharts(svgs, _rasterise(svgs, [n for n, svg in svgs.items() if _is_dense(svg)]))


def render_html(ctx: PackContext, svgs: dict[str, Markup], *, for_print: bool,
                user_templates=None, template: str = "pack.html.j2",
                signoff: dict | None = None, extra: dict | None = None) -> str:
    """The pack as one self-contained HTML document (CSS and SVG inline).

    ``signoff`` (the sign-off record) adds the approval to the cover and a last page.
    ``extra`` sets ``part`` (True: only the portfolio's chapters, for a fund pack),
    ``anchor_prefix`` (prefixed to every id), ``part_title``, and ``market_word`` and
    ``proxy_word`` (what the regressions are against: "market proxy" and "proxy" by default).
    """
    env = make_environment(user_templates)
    values = {f.name: getattr(ctx, f.name) for f in fields(ctx)}
    values.pop("charts")
    values.update({"part": False, "anchor_prefix": "", "part_title": None,
                   "market_word": "market proxy", "proxy_word": "proxy"} | (extra or {}))
    return env.get_template(template).render(**values, svg=svgs, for_print=for_print,
                                                signoff=signoff)
