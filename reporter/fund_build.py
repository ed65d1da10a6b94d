"""Assemble a fund pack: the total fund and each mandate, analysed, charted and in context.

The same stages as a single portfolio (read -> validate -> analyse -> chart -> context),
run once for the total fund and once per mandate, each mandate against its own benchmark;
then the figures that join them (:mod:`reporter.analytics.fund`). Nothing is written here.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from markupsafe import Markup

from reporter.actions import ActionLog
from reporter.analytics.changes import PackChanges, compare_packs
from reporter.analytics.fees import fee_figures
from reporter.analytics.fund import (
    MandateRisk,
    mandate_risk,
    mandate_weight_matrix,
    mandates_table,
    overlap_holdings,
    overlap_pairs,
)
from reporter.analytics.pack import PackResults, analyse
from reporter.charts import build_charts, mandate_risk_chart, mandate_weights_chart
from reporter.commentary import CommentarySet
from reporter.config import TOTAL_FUND, Settings
from reporter.context import PackContext, build_context
from reporter.csvsafe import csv_text
from reporter.errors import Problem
from reporter.fund_inputs import FundInputs, validate_fund
from reporter.jsonvalues import json_text
from reporter.limits import LimitsReport, evaluate_limits
from reporter.memory import release_free_memory
from reporter.progress import Progress
from reporter.render.environment import make_environment
from reporter.render.html import chart_svg, export_charts, print_charts, render_html

TOTAL_SLUG = "total-fund"
FUND_CAUTION = (
    "Each mandate is measured against its own benchmark, and the total fund against the "
    "fund's: a beta, alpha or tracking error of one mandate is not comparable with another's "
    "measured against a different benchmark, and the mandates' figures do not add up to the "
    "fund's, except the contributions to risk, which are allocated to add up.")


@dataclass(frozen=True)
class FundPart:
    """One part of a fund pack with the single-portfolio layout: the total fund or a
    mandate."""

    name: str
    slug: str                        # anchor prefix in the HTML
    settings: Settings               # the fund's settings, with this part's limits
    results: PackResults
    context: PackContext
    svgs: dict
    print_svgs: dict                 # the same charts as the PDF draws them
    limits: LimitsReport | None
    benchmark: str                   # what it is measured against, in words
    weight: float                    # weight in the fund (1 for the total)


@dataclass(frozen=True)
class FundAssembled:
    """Everything computed for a fund pack, before any rendering to PDF or writing."""

    settings: Settings
    inputs: FundInputs
    total: FundPart
    parts: tuple[FundPart, ...]      # the mandates, in pack.toml order
    risk: MandateRisk
    table: pd.DataFrame              # results/mandates.csv
    overlap: pd.DataFrame            # results/overlap.csv
    pairs: pd.DataFrame              # results/overlap_pairs.csv
    hashes: dict[str, str]
    commentary: CommentarySet = field(default_factory=CommentarySet)
    compare_warnings: list[Problem] = field(default_factory=list)
    analysis: FundAnalysis | None = None
    svgs: dict = field(default_factory=dict)      # the fund pages' charts, inline SVG
    changes: PackChanges | None = None            # the total fund against [compare]

    @property
    def results(self) -> PackResults:
        """The total fund's results (what a single-portfolio build calls its results)."""
        return self.total.results

    @property
    def context(self) -> PackContext:
        return self.total.context

    @property
    def limits(self) -> LimitsReport | None:
        return self.total.limits


    def html(self, for_print: bool = False, signoff: dict | None = None,
             edition: str = "full") -> str:
        """The fund pack as one HTML document: cover, contents, the fund's own pages, then
        the total fund and each mandate in the single-portfolio layout, methodology and
        cautions once. ``edition`` "trustees": the fund's pages and each part's headline
        pages only (``fund-trustees.html.j2``, ``trustees-mandate.html.j2``)."""
        user = self.settings.templates_dir
        trustees = edition == "trustees"
        parts = []
        for part in (self.total, *self.parts):
            body = render_html(part.context, part.print_svgs if for_print else part.svgs,
                               for_print=for_print, user_templates=user,
                               template="trustees-mandate.html.j2" if trustees
                               else "pack.html.j2", extra={
                                   "part": True, "anchor_prefix": part.slug + "-",
                                   "part_title": part.name, "market_word": "benchmark",
                                   "proxy_word": "benchmark", "edition": edition})
            parts.append({"name": part.name, "slug": part.slug, "html": Markup(body),
                          "sections": [s for s in part.context.sections
                                       if s.anchor not in ("methodology", "cautions")],
                          "benchmark": part.benchmark, "weight": part.weight})
        ctx = self.total.context
        values = {f.name: getattr(ctx, f.name) for f in dataclasses.fields(ctx)}
        values.pop("charts")
        values["commentary"] = dict(self.commentary.by_section)   # every note, for the fund
        values["cautions"] = (*values["cautions"], FUND_CAUTION)
        env = make_environment(user)
        return env.get_template("fund-trustees.html.j2" if trustees else "fund.html.j2").render(
            **values, svg=self.total.print_svgs if for_print else self.total.svgs,
            for_print=for_print, signoff=signoff,
            part=False, anchor_prefix="", part_title=None, parts=parts, fund_svg=self.svgs,
            market_word="market proxy", proxy_word="proxy", edition=edition,
            fund=self.fund_context())

    def mandate_portfolio_json(self) -> str:
        """``results/mandate_portfolio.json``: each mandate's ``portfolio.json`` figures (the
        same keys and units), by mandate name; NaN written as null."""
        return json_text({p.name: p.results.portfolio_summary() for p in self.parts})

    def mandate_changes_json(self) -> str:
        """``results/mandate_changes.json`` (with ``[compare]``): each mandate's comparison
        with the earlier pack, as ``changes.json``, or why there is none."""
        return json_text({p.name: (p.context.changes.as_json() if p.context.changes is not None
                                   else {"previous": None, "note": p.context.compare_note})
                          for p in self.parts})

    def fund_context(self) -> dict:
        """The figures of the fund's own pages, as plain records for the template."""
        t = self.table
        return {
            "benchmark_label": self.inputs.benchmark_label,
            "managers": {m.name: m.manager for m in self.settings.mandates},
            "weight_source": self.inputs.weight_source,
            "mandates": _records(t[t["mandate"] != TOTAL_FUND]),
            "total": _records(t[t["mandate"] == TOTAL_FUND])[0],
            "overlap": _records(self.overlap),
            "pairs": _records(self.pairs),
            "n_securities": len(self.inputs.total.holdings.ids),
            "n_positions": len(self.inputs.positions),
            "limit_counts": {p.name: (p.limits.counts if p.limits else None)
                             for p in self.parts},
        }

    def result_tables(self) -> dict[str, pd.DataFrame]:
        """The long results tables with a ``mandate`` column (see :class:`FundAnalysis`)."""
        assert self.analysis is not None
        return self.analysis.result_tables()


@dataclass(frozen=True)
class FundAnalysis:
    """Every figure of a fund: the total fund's and each mandate's results (each against its
    own benchmark) and the figures that join them."""

    inputs: FundInputs
    results: PackResults                       # the total fund
    names: tuple[str, ...]                     # the mandates, in pack.toml order
    weights: np.ndarray                        # v_m
    settings: tuple[Settings, ...]             # each mandate's (its own limits)
    mandate_results: tuple[PackResults, ...]
    risk: MandateRisk
    table: pd.DataFrame                        # results/mandates.csv
    overlap: pd.DataFrame                      # results/overlap.csv
    pairs: pd.DataFrame                        # results/overlap_pairs.csv

    def result_tables(self) -> dict[str, pd.DataFrame]:
        """``securities``, ``rolling_table``, ``period_table`` and ``risk_table`` of the total
        fund then each mandate, one long table each, with a first column ``mandate``."""
        out = {}
        named = ((TOTAL_FUND, self.results), *zip(self.names, self.mandate_results,
                                                   strict=True))
        for key in ("securities", "rolling_table", "period_table", "risk_table"):
            frames = [getattr(res, key).assign(mandate=name) for name, res in named]
            out[key] = pd.concat([f[["mandate", *f.columns[:-1]]] for f in frames],
                                 ignore_index=True)
        return out


def analyse_fund(fin: FundInputs, settings: Settings) -> FundAnalysis:
    """Analyse the total fund against its benchmark and each mandate against its own (the
    single-portfolio :func:`analyse` each time), then the mandates' Euler contributions to the
    fund's risk, the mandates table and the overlap between mandates. Pure; no I/O."""
    total = analyse(fin.total, settings, portfolio=fin.own)
    own = tuple(dataclasses.replace(settings, limits=m.mandate.limits) for m in fin.mandates)
    # a handful of mandates; each analysis is vectorised over its holdings
    results = tuple(analyse(m.inputs, s, portfolio=m.own)
                    for m, s in zip(fin.mandates, own, strict=True))
    names = tuple(m.mandate.name for m in fin.mandates)
    weights = np.array([m.weight for m in fin.mandates])
    u = mandate_weight_matrix(fin.total.holdings.ids, fin.positions, list(names))
    risk = mandate_risk(u, total.covariance.matrix, total.covariance_active.matrix)
    table = mandates_table(
        list(names), [m.benchmark_name for m in fin.mandates], weights,
        [m.mandate.strategic_weight for m in fin.mandates],
        [m.mandate.range for m in fin.mandates], list(results), total, risk,
        fin.benchmark_name)
    return FundAnalysis(inputs=fin, results=total, names=names, weights=weights,
                        settings=own, mandate_results=results, risk=risk, table=table,
                        overlap=overlap_holdings(fin.positions),
                        pairs=overlap_pairs(fin.positions, list(names)))


def _records(df: pd.DataFrame) -> list[dict]:
    return [{k: (None if isinstance(v, float) and np.isnan(v) else v) for k, v in r.items()}
            for r in df.to_dict(orient="records")]


def _part(name: str, slug: str, settings: Settings, inputs, res: PackResults,
          fingerprint: str, at: dt.datetime, benchmark: str, weight: float,
          commentary: dict | None, limits: LimitsReport | None,
          changes: PackChanges | None = None, compare_note: str | None = None,
          actions: ActionLog | None = None, own=None, gross=None) -> FundPart:
    charts = build_charts(res, limits, "Benchmark")
    fees = (fee_figures(res.window.dates, own, gross, settings.frequency,
                        settings.periods_per_year) if own is not None and gross is not None
            else None)
    ctx = build_context(settings, inputs, res, charts, fingerprint, at, limits=limits,
                        commentary=commentary, changes=changes, compare_note=compare_note,
                        actions=actions, fees=fees)
    svgs = export_charts(ctx)
    return FundPart(name=name, slug=slug, settings=settings, results=res, context=ctx,
                    svgs=svgs, print_svgs=print_charts(ctx, svgs), limits=limits,
                    benchmark=benchmark, weight=weight)


def assemble_fund(settings: Settings, *, strict: bool = False,
                  progress: Progress | None = None, at: dt.datetime | None = None,
                  ) -> FundAssembled:
    """Read, validate, analyse and chart a fund pack (no output is written)."""
    from reporter.build import actions_stage, build_time, fingerprint, input_hashes, read_stage

    progress = progress or Progress(quiet=True)
    at = at or build_time()
    with progress.stage("read"):
        (raws, read_problems, previous, compare_warnings, commentary,
         compare_note) = read_stage(settings, strict)
    with progress.stage("validate"):
        fin = validate_fund(settings, raws, read_problems, strict=strict)
        del raws                    # the typed inputs hold everything needed from here on
        release_free_memory()
    with progress.stage("analyse"):
        hashes = input_hashes(settings)
        hashes.update(commentary.hashes)
        actions = actions_stage(settings, hashes)       # the fund's action log, if any
        fp = fingerprint(hashes)
        fa = analyse_fund(fin, settings)
        total_limits = evaluate_limits(settings.limits, fa.results) if settings.limits else None
        limits = [evaluate_limits(s.limits, r) if s.limits else None
                  for s, r in zip(fa.settings, fa.mandate_results, strict=True)]
        changes = None
        mandate_changes: list[PackChanges | None] = [None] * len(fa.names)
        mandate_notes: list[str | None] = [compare_note] * len(fa.names)
        if previous is not None:        # the total fund against the earlier pack's ...
            changes = compare_packs(previous, fa.results,
                                    total_limits.as_json()["limits"] if total_limits else None,
                                    settings.confidence)
            for k, name in enumerate(fa.names):      # ... and each mandate against its own
                before = previous.mandates.get(name)
                if before is None:
                    mandate_notes[k] = (f"The earlier pack ({previous.folder}) has no figures "
                                        f"for the mandate {name!r}, so it cannot be compared")
                    continue
                mandate_changes[k] = compare_packs(
                    before, fa.mandate_results[k],
                    limits[k].as_json()["limits"] if limits[k] else None, settings.confidence)
    with progress.stage("chart"):
        total = _part(TOTAL_FUND, TOTAL_SLUG, settings, fin.total, fa.results, fp, at,
                      fin.benchmark_label, 1.0,   # the summary note is on the fund overview
                      {k: c for k, c in commentary.by_section.items() if k != "summary"},
                      total_limits, changes=changes, compare_note=compare_note,
                      actions=actions, own=fin.own, gross=fin.gross)
        parts = tuple(
            _part(m.mandate.name, m.mandate.slug, own, m.inputs, res, fp, at,
                  m.benchmark_phrase, m.weight, None, limits[k],
                  changes=mandate_changes[k], compare_note=mandate_notes[k],
                  own=m.own, gross=m.gross)
            for k, (m, own, res) in enumerate(zip(fin.mandates, fa.settings,
                                                  fa.mandate_results, strict=True)))
        mandates_only = fa.table[fa.table["mandate"] != TOTAL_FUND]
        svgs = {"weights": Markup(chart_svg(mandate_weights_chart(mandates_only))),
                "risk": Markup(chart_svg(mandate_risk_chart(mandates_only)))}
    return FundAssembled(settings=settings, inputs=fin, total=total, parts=parts,
                         risk=fa.risk, table=fa.table, overlap=fa.overlap, pairs=fa.pairs,
                         hashes=hashes, commentary=commentary, analysis=fa, svgs=svgs,
                         compare_warnings=compare_warnings, changes=changes)


def fund_results_files(a: FundAssembled) -> dict[str, str]:
    """The fund's results files (besides portfolio.json and manifest.json), as text."""
    csv = csv_text
    tables = a.result_tables()
    return {
        "results/securities.csv": csv(tables["securities"]),
        "results/rolling_beta.csv": csv(tables["rolling_table"]),
        "results/period_returns.csv": csv(tables["period_table"]),
        "results/risk_contributions.csv": csv(tables["risk_table"]),
        "results/mandates.csv": csv(a.table),
        "results/overlap.csv": csv(a.overlap),
        "results/overlap_pairs.csv": csv(a.pairs),
        "results/mandate_portfolio.json": a.mandate_portfolio_json(),
    } | ({"results/mandate_changes.json": a.mandate_changes_json()}
         if a.settings.compare_build is not None or a.settings.compare_archive is not None
         else {})
