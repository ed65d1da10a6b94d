"""The allocation chart: weight by asset class, currency and country (pure; Altair objects)."""

from __future__ import annotations

import altair as alt
import pandas as pd

from reporter.analytics.allocation import ALLOCATION_DIMENSIONS, allocation

INK, TEAL, WIDTH = "#1d2b36", "#2a6f6f", 520


def allocation_charts(securities: pd.DataFrame) -> dict[str, alt.TopLevelMixin]:
    """``{"allocation": chart}``, one bar panel per dimension the holdings give, stacked;
    ``{}`` when they give none. Bars are labelled with their weight, not coloured by it."""
    table = allocation(securities)
    if table.empty:
        return {}
    panels = []
    for dim, title in ALLOCATION_DIMENSIONS.items():
        df = table[table["dimension"] == dim]
        if df.empty:
            continue
        order = list(df["group"])
        y = alt.Y("group:N", sort=order, title=title)
        bars = alt.Chart(df).mark_bar(color=TEAL, height=12).encode(
            y=y, x=alt.X("weight:Q", title="Weight", axis=alt.Axis(format="%")),
            tooltip=[alt.Tooltip("group:N", title=title),
                     alt.Tooltip("weight:Q", format=".1%"), alt.Tooltip("n_holdings:Q")])
        text = alt.Chart(df).mark_text(align="left", dx=4, color=INK, fontSize=10).encode(
            y=y, x=alt.X("weight:Q"), text=alt.Text("weight:Q", format=".1%"))
        panels.append(alt.layer(bars, text).properties(width=WIDTH - 160,
                                                       height=max(40, 20 * len(df))))
    return {"allocation": alt.vconcat(*panels, spacing=14)}
