"""One part of a pack, from checked inputs to exported charts.

A single portfolio is one part; a fund is the total fund and each mandate, each a part
measured against its own benchmark. Every part takes the same stages: analyse -> limits ->
changes since the last pack -> money -> charts -> context -> chart export. Nothing is written.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from reporter.actions import ActionLog
from reporter.analytics.changes import PackChanges, compare_packs
from reporter.analytics.fees import fee_figures
from reporter.analytics.flows import ValueChange, pack_value_change
from reporter.analytics.pack import PackResults, analyse
from reporter.analytics.style import StyleInputs, StyleResults, analyse_style
from reporter.changes import PreviousPack
from reporter.charts import build_charts
from reporter.config import Settings
from reporter.context import PackContext, build_context
from reporter.limits import LimitsReport, evaluate_limits
from reporter.memory import heap_reuse
from reporter.models import DatedSeries, ValidInputs
from reporter.progress import Progress
from reporter.render.html import export_charts, print_charts
from reporter.style_charts import style_charts
from reporter.validate.flows import CashFlows, earlier_end, flow_period_start


@dataclass(frozen=True)
class PartInputs:
    """What one part is assembled from: its checked inputs and how it is shown."""

    name: str
    slug: str                          # anchor prefix in a fund's HTML
    settings: Settings                 # the pack's settings, with this part's limits
    inputs: ValidInputs                # ``inputs.market``: what the regressions are against
    benchmark: str = ""                # what it is measured against, in words (a fund's part)
    weight: float = 1.0                # weight in the fund (1 for the total or a portfolio)
    market_label: str = "Market proxy"  # the regressions' series on the charts
    tracking: DatedSeries | None = None   # the benchmark for tracking error, if not the market
    own: DatedSeries | None = None     # the part's own returns, net of fees (if given) ...
    gross: DatedSeries | None = None   # ... and gross of fees
    style: StyleInputs | None = None   # factor model and attribution inputs (a portfolio)
    previous: PreviousPack | None = None   # the earlier pack's figures for this part
    compare_note: str | None = None    # why there is no comparison, when there is none
    commentary: dict | None = None     # the commentary shown in this part, by section
    actions: ActionLog | None = None   # the action log shown in this part
    money: bool = False                # show the value and its change since the last pack
    pack_previous: PreviousPack | None = None   # the earlier pack itself (for the money)
    flows: CashFlows | None = None     # the period's cash flows (for the money)


@dataclass(frozen=True)
class Part:
    """One assembled part: its figures, context and charts, ready to render."""

    name: str
    slug: str
    settings: Settings
    inputs: ValidInputs
    results: PackResults
    context: PackContext
    svgs: dict                         # the charts as inline SVG
    print_svgs: dict                   # the same charts as the PDF draws them
    limits: LimitsReport | None
    benchmark: str
    weight: float
    changes: PackChanges | None = None
    style: StyleResults | None = None


def value_change_of(settings: Settings, res: PackResults, previous,
                    flows: CashFlows | None) -> ValueChange | None:
    """The pack's value and its change since the last pack (see :mod:`analytics.flows`)."""
    prev_end = earlier_end(settings, previous)
    prev_value = previous.portfolio.get("total_value") if prev_end is not None else None
    prev_value = float(prev_value) if isinstance(prev_value, int | float) else None
    return pack_value_change(
        settings.currency, settings.period_end, res.portfolio_summary()["total_value"],
        prev_end, prev_value, flow_period_start(settings, prev_end),
        flows.dates if flows is not None else None, flows.amounts if flows is not None else None)


def analyse_part(p: PartInputs) -> PackResults:
    """Every figure of one part (:func:`~reporter.analytics.pack.analyse`): against
    ``inputs.market``, tracking error against ``tracking`` when given, and the part's own
    returns in place of today's weights when given."""
    return analyse(p.inputs, p.settings, benchmark=p.tracking, portfolio=p.own)


def assemble_part(p: PartInputs, fingerprint: str, at: dt.datetime,
                  progress: Progress) -> Part:
    """Analyse, check against the limits, compare, chart and put in context one part
    (stages analyse and chart). Pure but for the time it takes; no file is read or written."""
    settings = p.settings
    label = p.name if settings.is_fund else None
    with progress.stage("analyse", label), heap_reuse():
        res = analyse_part(p)
        style = None
        if p.style is not None:
            res, style = analyse_style(res, p.inputs.holdings.frame, settings, p.style)
        limits = evaluate_limits(settings.limits, res) if settings.limits else None
        changes = None
        if p.previous is not None:
            changes = compare_packs(p.previous, res,
                                    limits.as_json()["limits"] if limits else None,
                                    settings.confidence)
        money = value_change_of(settings, res, p.pack_previous, p.flows) if p.money else None
        fees = (fee_figures(res.window.dates, p.own, p.gross, settings.frequency,
                            settings.periods_per_year)
                if p.own is not None and p.gross is not None else None)
    with progress.stage("chart", label):
        charts = build_charts(res, limits, p.market_label) | style_charts(style)
        ctx = build_context(settings, p.inputs, res, charts, fingerprint, at, limits=limits,
                            changes=changes, compare_note=p.compare_note,
                            commentary=p.commentary, style=style, actions=p.actions,
                            value_change=money, fees=fees)
        svgs = export_charts(ctx)
        for_pdf = print_charts(ctx, svgs)
    return Part(name=p.name, slug=p.slug, settings=settings, inputs=p.inputs, results=res,
                context=ctx, svgs=svgs, print_svgs=for_pdf, limits=limits,
                benchmark=p.benchmark, weight=p.weight, changes=changes, style=style)
