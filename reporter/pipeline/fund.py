"""A fund: the total fund and each mandate, each a part (:mod:`reporter.pipeline.part`)
measured against its own benchmark, and the figures that join them
(:mod:`reporter.analytics.fund`). Nothing is written here.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from markupsafe import Markup

from reporter.analytics.changes import PackChanges
from reporter.analytics.fund import (
    MandateRisk,
    mandate_risk,
    mandate_weight_matrix,
    mandates_table,
    overlap_holdings,
    overlap_pairs,
)
from reporter.analytics.pack import PackResults
from reporter.charts import mandate_risk_chart, mandate_weights_chart
from reporter.commentary import CommentarySet
from reporter.config import TOTAL_FUND, Settings
from reporter.context import FUND_CAUTION, PackContext
from reporter.errors import Problem
from reporter.fund_inputs import FundInputs
from reporter.jsonvalues import json_text
from reporter.limits import LimitsReport
from reporter.pipeline.part import Part, PartInputs, analyse_part
from reporter.render.environment import make_environment
from reporter.render.html import chart_svg, render_html, template_values

TOTAL_SLUG = "total-fund"


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


@dataclass(frozen=True)
class FundAssembled:
    """Everything computed for a fund pack, before any rendering to PDF or writing."""

    settings: Settings
    inputs: FundInputs
    total: Part
    parts: tuple[Part, ...]          # the mandates, in pack.toml order
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
             edition: str = "full", bytecode_cache=None) -> str:
        """The fund pack as one HTML document: cover, contents, the fund's own pages, then
        the total fund and each mandate in the single-portfolio layout, methodology and
        cautions once. ``edition`` "trustees": the fund's pages and each part's headline
        pages only (``fund-trustees.html.j2``, ``trustees-mandate.html.j2``).
        ``bytecode_cache``: compiled templates kept between calls (every part's page and the
        fund's use the same templates)."""
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
                                   "proxy_word": "benchmark", "edition": edition},
                               bytecode_cache=bytecode_cache)
            parts.append({"name": part.name, "slug": part.slug, "html": Markup(body),
                          "sections": [s for s in part.context.sections
                                       if s.anchor not in ("methodology", "cautions")],
                          "benchmark": part.benchmark, "weight": part.weight})
        ctx = self.total.context
        values = template_values(ctx, for_print, {
            "commentary": dict(self.commentary.by_section),      # every note, for the fund
            "cautions": (*ctx.cautions, FUND_CAUTION), "edition": edition, "parts": parts,
            "fund_svg": self.svgs, "fund": self.fund_context()})
        env = make_environment(user, bytecode_cache)
        return env.get_template("fund-trustees.html.j2" if trustees else "fund.html.j2").render(
            **values, svg=self.total.print_svgs if for_print else self.total.svgs,
            for_print=for_print, signoff=signoff)

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


def _records(df: pd.DataFrame) -> list[dict]:
    return [{k: (None if isinstance(v, float) and np.isnan(v) else v) for k, v in r.items()}
            for r in df.to_dict(orient="records")]


def fund_parts(fin: FundInputs, settings: Settings, previous=None,
               commentary: CommentarySet | None = None,
               compare_note: str | None = None) -> list[PartInputs]:
    """The total fund (against the fund's benchmark) then each mandate (against its own, with
    its own limits), as parts. Each mandate is compared with the earlier pack's figures for
    it; the fund's summary note is on the fund overview, not in the total fund's part."""
    notes = {} if commentary is None else commentary.by_section
    parts = [PartInputs(
        name=TOTAL_FUND, slug=TOTAL_SLUG, settings=settings, inputs=fin.total,
        benchmark=fin.benchmark_label, market_label="Benchmark", own=fin.own, gross=fin.gross,
        previous=previous, compare_note=compare_note,
        commentary={k: c for k, c in notes.items() if k != "summary"})]
    for m in fin.mandates:
        name, before, note = m.mandate.name, None, compare_note
        if previous is not None:
            before = previous.mandates.get(name)
            if before is None:
                note = (f"The earlier pack ({previous.folder}) has no figures for the "
                        f"mandate {name!r}, so it cannot be compared")
        parts.append(PartInputs(
            name=name, slug=m.mandate.slug,
            settings=dataclasses.replace(settings, limits=m.mandate.limits), inputs=m.inputs,
            benchmark=m.benchmark_phrase, weight=m.weight, market_label="Benchmark",
            own=m.own, gross=m.gross, previous=before, compare_note=note))
    return parts


def join_fund(fin: FundInputs, total: PackResults, mandate_results: tuple[PackResults, ...],
              mandate_settings: tuple[Settings, ...]) -> FundAnalysis:
    """What joins the parts of a fund: the mandates' Euler contributions to the fund's risk,
    the mandates table and the overlap between mandates. Pure; no I/O."""
    names = tuple(m.mandate.name for m in fin.mandates)
    weights = np.array([m.weight for m in fin.mandates])
    u = mandate_weight_matrix(fin.total.holdings.ids, fin.positions, list(names))
    risk = mandate_risk(u, total.covariance.matrix, total.covariance_active.matrix)
    table = mandates_table(
        list(names), [m.benchmark_name for m in fin.mandates], weights,
        [m.mandate.strategic_weight for m in fin.mandates],
        [m.mandate.range for m in fin.mandates], list(mandate_results), total, risk,
        fin.benchmark_name)
    return FundAnalysis(inputs=fin, results=total, names=names, weights=weights,
                        settings=mandate_settings, mandate_results=mandate_results, risk=risk,
                        table=table, overlap=overlap_holdings(fin.positions),
                        pairs=overlap_pairs(fin.positions, list(names)))


def analyse_fund(fin: FundInputs, settings: Settings) -> FundAnalysis:
    """The figures of a fund without its charts: each part analysed as
    :func:`~reporter.pipeline.part.assemble_part` analyses it, then :func:`join_fund`."""
    parts = fund_parts(fin, settings)
    results = tuple(analyse_part(p) for p in parts)
    return join_fund(fin, results[0], results[1:], tuple(p.settings for p in parts[1:]))


def assembled_fund(fin: FundInputs, parts: list[Part], hashes: dict[str, str],
                   commentary: CommentarySet, compare_warnings: list[Problem]
                   ) -> FundAssembled:
    """A fund pack from its assembled parts (the total fund first): the joining figures and
    the fund pages' charts added."""
    total, mandates = parts[0], tuple(parts[1:])
    fa = join_fund(fin, total.results, tuple(p.results for p in mandates),
                   tuple(p.settings for p in mandates))
    mandates_only = fa.table[fa.table["mandate"] != TOTAL_FUND]
    svgs = {"weights": Markup(chart_svg(mandate_weights_chart(mandates_only))),
            "risk": Markup(chart_svg(mandate_risk_chart(mandates_only)))}
    return FundAssembled(settings=total.settings, inputs=fin, total=total, parts=mandates,
                         risk=fa.risk, table=fa.table, overlap=fa.overlap, pairs=fa.pairs,
                         hashes=hashes, commentary=commentary, analysis=fa, svgs=svgs,
                         compare_warnings=compare_warnings, changes=total.changes)
