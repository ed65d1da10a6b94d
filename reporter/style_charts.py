"""Charts of the style sections (pure): the portfolio's factor loadings with their intervals,
and the attribution effects by sector. Same conventions as :mod:`reporter.charts`."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from reporter.analytics.style import StyleResults
from reporter.chart_style import BRICK, GREY, INK, OCHRE, TEAL, WIDTH

EFFECTS = ("Allocation", "Selection", "Interaction")


def loadings_chart(style: StyleResults) -> alt.LayerChart:
    """The portfolio's loading on the market and on each factor (a point), with its interval
    (a bar) from the errors the pack uses, and a dashed rule at zero."""
    pf = style.portfolio
    confidence = pf.confidence
    lo, hi = pf.intervals()
    names = ["Market"] + list(pf.names)
    df = pd.DataFrame({"factor": names, "loading": pf.coef[0, 1:], "low": lo[0, 1:],
                       "high": hi[0, 1:]})
    y = alt.Y("factor:N", title=None, sort=names)
    x = alt.X("loading:Q", title=f"Loading (bars: {confidence:.0%} interval)")
    bars = alt.Chart(df).mark_rule(color=GREY, strokeWidth=2).encode(
        x=alt.X("low:Q"), x2=alt.X2("high:Q"), y=y)
    pts = alt.Chart(df).mark_point(filled=True, size=80, color=TEAL, shape="diamond").encode(
        x=x, y=y, tooltip=[alt.Tooltip("factor:N"), alt.Tooltip("loading:Q", format=".2f"),
                           alt.Tooltip("low:Q", format=".2f"),
                           alt.Tooltip("high:Q", format=".2f")])
    zero = alt.Chart(pd.DataFrame({"x": [0.0]})).mark_rule(
        color=INK, strokeDash=[4, 3]).encode(x=alt.X("x:Q"))
    return alt.layer(zero, bars, pts).properties(width=WIDTH, height=26 * len(names) + 10)


def attribution_chart(style: StyleResults) -> alt.Chart:
    """Linked allocation, selection and interaction effects by sector (grouped bars; the
    effects are also told apart by their place in each group and in the table)."""
    t = style.attribution.table()
    long = pd.DataFrame({
        "sector": np.repeat(t["sector"].to_numpy(), 3),
        "effect": np.tile(EFFECTS, len(t)),
        "value": t[["allocation", "selection", "interaction"]].to_numpy().ravel(),
    })
    order = list(t["sector"])
    colour = alt.Scale(domain=list(EFFECTS), range=[TEAL, OCHRE, BRICK])
    return alt.Chart(long).mark_bar().encode(
        y=alt.Y("sector:N", title=None, sort=order),
        yOffset=alt.YOffset("effect:N", sort=list(EFFECTS)),
        x=alt.X("value:Q", title="Effect over the window", axis=alt.Axis(format="%")),
        color=alt.Color("effect:N", scale=colour, title="Effect", sort=list(EFFECTS)),
        tooltip=[alt.Tooltip("sector:N"), alt.Tooltip("effect:N"),
                 alt.Tooltip("value:Q", format=".2%")],
    ).properties(width=WIDTH, height=max(100, 18 * len(order)))


def style_charts(style: StyleResults | None) -> dict[str, alt.TopLevelMixin]:
    """The style sections' charts keyed by the names the templates use (none without)."""
    out: dict[str, alt.TopLevelMixin] = {}
    if style is None:
        return out
    if style.portfolio is not None:
        out["factor_loadings"] = loadings_chart(style)
    if style.attribution is not None:
        out["attribution"] = attribution_chart(style)
    return out
