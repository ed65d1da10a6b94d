"""Charts of the "Stress and scenarios" chapter: results -> Altair chart objects (pure).

Same conventions as :mod:`reporter.charts`: channel objects, the house palette, and meaning
never carried by colour alone (the series differ in fill as well as colour).
"""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from reporter.analytics.stress import StressResults
from reporter.chart_style import BRICK, GREY, INK, MAX_LINE_POINTS, TEAL, WIDTH


def scenario_chart(stress: StressResults, market_label: str = "Market proxy") -> alt.Chart:
    """Each historical scenario's compounded return: the portfolio on today's weights beside
    the market proxy (and the benchmark, where it has every period), as paired bars."""
    rows = []
    for s in stress.scenarios:
        rows += [{"scenario": s["name"], "series": "Portfolio (today's weights)",
                  "value": s["portfolio"]},
                 {"scenario": s["name"], "series": market_label, "value": s["market"]}]
        if s["benchmark"] is not None and np.isfinite(s["benchmark"]):
            rows.append({"scenario": s["name"], "series": "Benchmark", "value": s["benchmark"]})
    df = pd.DataFrame(rows, columns=["scenario", "series", "value"])
    domain = ["Portfolio (today's weights)", market_label, "Benchmark"]
    domain = [d for d in domain if (df["series"] == d).any()] or domain[:2]
    order = [s["name"] for s in stress.scenarios]
    return alt.Chart(df).mark_bar(height=7, stroke=INK, strokeWidth=0.6).encode(
        y=alt.Y("scenario:N", sort=order, title=None, axis=alt.Axis(labelLimit=220)),
        yOffset=alt.YOffset("series:N", sort=domain),
        x=alt.X("value:Q", title="Compounded return over the window",
                axis=alt.Axis(format="%")),
        color=alt.Color("series:N", title=None,
                        scale=alt.Scale(domain=domain,
                                        range=[TEAL, "#ffffff", GREY][:len(domain)])),
        tooltip=[alt.Tooltip("scenario:N"), alt.Tooltip("series:N"),
                 alt.Tooltip("value:Q", format=".1%")],
    ).properties(width=WIDTH - 220, height=max(90, 24 * len(order)))


def backtest_chart(stress: StressResults) -> alt.LayerChart:
    """The backtest: each tested period's portfolio return, the negative of the VaR it was
    tested against (a line), and the exceedances marked with a cross."""
    b = stress.backtest
    df = pd.DataFrame({"date": pd.to_datetime(np.asarray(b.dates, dtype="datetime64[D]")),
                       "ret": b.returns, "limit": -np.asarray(b.var),
                       "hit": np.where(b.hits, "beyond the VaR", "within")})
    # a long daily history: every exceedance, and evenly spaced periods of the rest
    step = max(1, int(np.ceil(len(df) / MAX_LINE_POINTS)))
    df = df[b.hits | (np.arange(len(df)) % step == 0) | (np.arange(len(df)) == len(df) - 1)]
    x = alt.X("date:T", title=None, axis=alt.Axis(format="%Y", tickCount="year"))
    y = alt.Y("ret:Q", title="Return per period", axis=alt.Axis(format="%"))
    pts = alt.Chart(df).mark_point(size=18, filled=True).encode(
        x=x, y=y,
        shape=alt.Shape("hit:N", title=None, scale=alt.Scale(
            domain=["within", "beyond the VaR"], range=["circle", "cross"])),
        color=alt.Color("hit:N", title=None, scale=alt.Scale(
            domain=["within", "beyond the VaR"], range=[GREY, BRICK])),
        tooltip=[alt.Tooltip("date:T", format="%Y-%m-%d"),
                 alt.Tooltip("ret:Q", format=".2%"), alt.Tooltip("limit:Q", format=".2%")])
    line = alt.Chart(df).mark_line(color=TEAL, strokeWidth=1.5).encode(
        x=x, y=alt.Y("limit:Q"))
    return alt.layer(line, pts).properties(width=WIDTH, height=200)


def stress_charts(stress: StressResults | None, market_label: str = "Market proxy") -> dict:
    """The chapter's charts keyed by template name; none without stress results, and no
    backtest chart when nothing was tested."""
    if stress is None:
        return {}
    out = {"stress_scenarios": scenario_chart(stress, market_label)}
    if stress.backtest.n:
        out["stress_backtest"] = backtest_chart(stress)
    return out
