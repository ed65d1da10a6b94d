"""The typed template context: everything a template may show, and nothing it must compute.

Numbers stay numbers here (per-period or ``_ann`` decimals); templates format them through
the filters in :mod:`reporter.render.environment`.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field

import altair as alt
import numpy as np

from reporter import __version__
from reporter.actions import ActionLog
from reporter.analytics.allocation import allocation
from reporter.analytics.changes import PackChanges
from reporter.analytics.flows import ValueChange
from reporter.analytics.pack import PackResults
from reporter.analytics.sml import ABOVE, BELOW
from reporter.config import Settings
from reporter.limits import LimitsReport
from reporter.models import ValidInputs
from reporter.style_context import attribution_view, factor_view

CAUTIONS = (
    "Every figure in this pack is a statistical estimate from a finite sample of past returns "
    "and carries sampling error; confidence intervals are shown where they matter.",
    "Beta and alpha depend on the estimation window, the return frequency and the choice of "
    "market proxy; a different choice can give materially different figures.",
    "Past performance is not a reliable guide to future results. The value of investments "
    "and the income from them can fall as well as rise.",
    "This pack is prepared to inform the committee's discussion. It is not investment advice "
    "and is not a recommendation to buy, sell or hold any investment.",
    "Trustees should take decisions with their appointed investment adviser and in line with "
    "the scheme's governing documents and the regulation that applies to them locally.",
)


# Holdings listed in the body's "beta differs from 1" table (the appendix marks all of them),
# and the number of holdings above which the appendix is set densely: a long pack stays
# readable and WeasyPrint lays out fewer pages (see BENCHMARKS.md).
BETA_LIST_MAX = 25
COMPACT_APPENDIX_FROM = 250
LISTING_ROWS = (66, 82)  # rows of the print listing on its first A4 page, and on each next


@dataclass(frozen=True)
class Section:
    anchor: str
    title: str


SECTIONS = (
    Section("summary", "Summary"),
    Section("changes", "Since last pack"),
    Section("allocation", "Allocation"),
    Section("returns", "Returns and ratios"),
    Section("market-risk", "Market risk"),
    Section("beta", "Beta estimates"),
    Section("sml", "Security market line"),
    Section("style", "Alpha before and after style"),
    Section("attribution", "Attribution by sector"),
    Section("diversification", "Diversification"),
    Section("stress", "Stress and scenarios"),
    Section("holdings", "Holdings appendix"),
    Section("methodology", "Methodology"),
    Section("cautions", "Cautions"),
)


@dataclass(frozen=True)
class PackContext:
    """What the pack templates receive."""

    title: str
    organisation: str
    period_end: dt.date
    frequency: str
    periods_per_year: int
    currency: str
    build_time: dt.datetime
    fingerprint: str                 # sha256 of pack.toml and the input files
    tool_version: str
    window: int
    min_obs: int
    confidence: float
    returns_shape: str
    weight_source: str
    weights_normalised: bool
    input_names: dict[str, str | None]   # each input's name from pack.toml (None: unnamed)
    portfolio: dict
    holdings: list[dict]             # every holding, largest weight first
    sml_above: list[dict]            # furthest above the line (by residual)
    sml_below: list[dict]            # furthest below the line
    sml_counts: dict[str, int]
    sectors: list[dict]
    unfitted: list[dict]
    data_notes: list[str]
    errors: str                      # "hac" | "ols"
    hac_lags: int | None
    rolling_window: int
    blume: tuple[float, float]       # intercept, slope
    dimson_lags: int
    show_thin_trading: bool          # daily or weekly data
    beta_not_one: list[dict]         # the largest BETA_LIST_MAX whose beta interval excludes 1
    charts: dict[str, alt.TopLevelMixin] = field(repr=False)
    sections: tuple[Section, ...] = SECTIONS
    cautions: tuple[str, ...] = CAUTIONS
    limits: LimitsReport | None = None             # None: no [limits] in pack.toml
    holding_limit_status: dict[str, str] = field(default_factory=dict)  # id -> watch/breach
    sector_limit_status: dict[str, dict] = field(default_factory=dict)  # sector -> status...
    changes: PackChanges | None = None             # None: no [compare], or nothing found
    compare_note: str | None = None                # why there is nothing to compare
    # section anchor -> reporter.commentary.Commentary (author, date, title, sanitised html)
    commentary: dict = field(default_factory=dict)
    trailing_returns: list[dict] = field(default_factory=list)   # period_returns.csv, trailing
    calendar_returns: list[dict] = field(default_factory=list)   # and calendar-year rows
    mar_fixed: float | None = None   # fixed annual MAR, or None for the risk-free rate
    risk_holdings: list[dict] = field(default_factory=list)   # largest risk contributors
    beta_not_one_total: int = 0      # how many holdings' beta intervals exclude 1
    compact_appendix: bool = False   # a long holdings appendix set in a denser layout
    listing_rows: tuple[int, int] = LISTING_ROWS  # rows per page of its print listing
    risk_sectors: list[dict] = field(default_factory=list)    # contributions by sector
    covariance_auto: bool = True     # the method was chosen by the "auto" rule
    has_benchmark: bool = False      # an optional benchmark series was given
    stress: dict = field(default_factory=dict)   # results/risk_scenarios.json's content
    style: dict | None = None        # reporter.style_context.factor_view (factors file given)
    attribution: dict | None = None  # reporter.style_context.attribution_view
    input_kinds: dict[str, str] = field(default_factory=dict)  # "returns" | "prices"
    actions: ActionLog = field(default_factory=ActionLog)    # actions.csv, overdue first
    value_change: ValueChange | None = None   # value, change and flows; None: no values
    allocation: list[dict] = field(default_factory=list)   # analytics.allocation rows
    stand_ins: list[dict] = field(default_factory=list)    # cash, proxied, excluded holdings
    has_values: bool = False         # the holdings give market values
    asset_class_ranges: dict[str, dict] = field(default_factory=dict)  # class -> range status
    fees: dict | None = None         # analytics.fees.fee_figures: net, gross and fee drag


def _records(df) -> list[dict]:
    return [{k: (None if isinstance(v, float) and np.isnan(v) else v) for k, v in r.items()}
            for r in df.to_dict(orient="records")]


def build_context(settings: Settings, inputs: ValidInputs, res: PackResults,
                  charts: dict[str, alt.TopLevelMixin], fingerprint: str,
                  build_time: dt.datetime, *, limits: LimitsReport | None = None,
                  changes: PackChanges | None = None, compare_note: str | None = None,
                  commentary: dict | None = None, style=None,
                  actions: ActionLog | None = None,
                  value_change: ValueChange | None = None,
                  fees: dict | None = None) -> PackContext:
    """Assemble the context for the pack templates. The "Since last pack" section is
    listed only when there is a comparison (or a note saying why there is none)."""
    views = {"style": style and factor_view(style, res),
             "attribution": style and attribution_view(style)}
    alloc = allocation(res.securities)
    shown = tuple(s for s in SECTIONS
                  if (s.anchor != "changes" or changes is not None or compare_note)
                  and (s.anchor != "allocation" or not alloc.empty)
                  and views.get(s.anchor, True))
    sec = res.securities.copy()
    # the alpha t-statistic from the errors behind the pack's intervals and SML positions
    sec["alpha_t_used"] = sec["alpha_t"]
    by_weight = sec.sort_values(["weight", "security_id"], ascending=[False, True],
                                kind="stable")
    fitted = sec[sec["status"] == "fitted"]
    ranked = fitted.sort_values(["sml_residual", "security_id"], ascending=[False, True],
                                kind="stable")
    k = min(5, len(ranked) // 2)
    counts = {p: int((fitted["sml_position"] == p).sum()) for p in (ABOVE, BELOW)}
    counts["within"] = int(len(fitted) - counts[ABOVE] - counts[BELOW])
    notes = [str(w) for w in inputs.warnings]
    unfitted = sec[sec["status"].str.startswith("not fitted")]
    stand_ins = sec[(sec["status"] != "fitted") & ~sec["status"].str.startswith("not fitted")]
    return PackContext(
        title=settings.title, organisation=settings.organisation,
        period_end=settings.period_end, frequency=settings.frequency,
        periods_per_year=settings.periods_per_year, currency=settings.currency,
        build_time=build_time, fingerprint=fingerprint, tool_version=__version__,
        window=settings.window, min_obs=settings.min_obs, confidence=settings.confidence,
        returns_shape=inputs.returns.shape, weight_source=inputs.holdings.weight_source,
        weights_normalised=inputs.holdings.normalised,
        input_names={r: s.label for r, s in settings.inputs.items()},
        input_kinds={r: s.values for r, s in settings.inputs.items()},
        portfolio=res.portfolio_summary(),
        holdings=_records(by_weight),
        sml_above=_records(ranked.head(k)),
        sml_below=_records(ranked.tail(k).iloc[::-1]),
        sml_counts=counts,
        sectors=_records(res.sectors),
        unfitted=_records(unfitted),
        data_notes=notes,
        errors=settings.errors, hac_lags=settings.hac_lags,
        rolling_window=settings.rolling_window,
        blume=(settings.blume_intercept, settings.blume_slope),
        dimson_lags=settings.dimson_lags,
        show_thin_trading=settings.frequency in ("daily", "weekly"),
        beta_not_one=_records(by_weight[by_weight["beta_differs_from_1"].astype(bool)]
                              .head(BETA_LIST_MAX)),
        beta_not_one_total=int(by_weight["beta_differs_from_1"].astype(bool).sum()),
        compact_appendix=len(by_weight) > COMPACT_APPENDIX_FROM,
        charts=charts,
        limits=limits,
        holding_limit_status=limits.holding_status() if limits else {},
        sector_limit_status=limits.sector_status() if limits else {},
        changes=changes, compare_note=compare_note, sections=shown,
        commentary=dict(commentary or {}),
        trailing_returns=_records(res.period_table[res.period_table["kind"] == "trailing"]),
        calendar_returns=_records(res.period_table[res.period_table["kind"] == "calendar"]),
        mar_fixed=settings.mar,
        risk_holdings=_records(res.risk_table[res.risk_table["level"] == "holding"].head(12)),
        risk_sectors=_records(res.risk_table[res.risk_table["level"] == "sector"]),
        covariance_auto=settings.covariance == "auto",
        has_benchmark="benchmark" in settings.inputs,
        stress=res.stress.as_json() if res.stress is not None else {},
        style=views["style"], attribution=views["attribution"],
        actions=actions or ActionLog(),
        value_change=value_change, allocation=_records(alloc),
        stand_ins=_records(stand_ins), has_values="market_value" in sec,
        asset_class_ranges=limits.asset_class_status() if limits else {}, fees=fees,
    )


# the fund's caution, added to the pack's in a fund pack (HTML and workbook)
FUND_CAUTION = (
    "Each mandate is measured against its own benchmark, and the total fund against the "
    "fund's: a beta, alpha or tracking error of one mandate is not comparable with another's "
    "measured against a different benchmark, and the mandates' figures do not add up to the "
    "fund's, except the contributions to risk, which are allocated to add up.")
