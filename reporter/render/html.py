"""Render the pack's HTML from the typed context; charts are exported to inline SVG here."""

from __future__ import annotations

import re
from dataclasses import fields

import vl_convert as vlc
from markupsafe import Markup

from reporter.charts import THEME_CONFIG
from reporter.context import PackContext
from reporter.render.environment import make_environment

_XML_DECL = re.compile(r"^<\?xml[^>]*>\s*")


def chart_svg(chart) -> str:
    """Export one Altair chart to an SVG string with vl-convert (no browser, no network)."""
    svg = vlc.vegalite_to_svg(chart.to_dict(), config=THEME_CONFIG, allowed_base_urls=[])
    return _XML_DECL.sub("", svg)


def export_charts(ctx: PackContext) -> dict[str, Markup]:
    """Every chart of the context as inline SVG markup (vl-convert escapes text in SVG)."""
    return {name: Markup(chart_svg(chart)) for name, chart in sorted(ctx.charts.items())}


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
