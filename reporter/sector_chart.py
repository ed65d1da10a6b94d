"""Weight by sector for print (pure): bars, each sector's maximum as a tick, and the
status of a sector on watch or in breach in words and a symbol, not by colour alone.

The x scale is fixed here (no "nice" rounding), so the value labels can be placed in
Python: at the bar's end, outside it, or inside it (white) when the limit's tick would
cross the text outside; the status follows past the tick.
"""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from reporter.analytics.pack import PackResults
from reporter.chart_labels import Linear, text_width
from reporter.chart_style import BRICK, GREY, INK, OCHRE, TEAL, WIDTH, share_axis

STATUS_MARK = {"breach": "\u2716 breach", "watch": "\u25c6 watch"}


def sector_chart(res: PackResults, sector_limits: dict[str, dict] | None = None) -> alt.Chart:
    """Horizontal bars of weight by sector, largest first. With ``sector_limits`` (sector ->
    {status, threshold}) each sector's maximum is drawn as a tick and a sector on watch or in
    breach is named so in words and a symbol beside its bar, not by colour alone."""
    df = res.sectors.copy()
    order = list(df["sector"])
    if sector_limits:
        return _sector_chart_with_limits(df, order, sector_limits)
    return alt.Chart(df).mark_bar(color=TEAL, height=14).encode(
        y=alt.Y("sector:N", sort=order, title=None),
        x=alt.X("weight:Q", title="Weight", axis=alt.Axis(format="%")),
        tooltip=[alt.Tooltip("sector:N"), alt.Tooltip("weight:Q", format=".1%"),
                 alt.Tooltip("n_holdings:Q")],
    ).properties(width=WIDTH - 140, height=max(120, 22 * len(df))) + alt.Chart(df).mark_text(
        align="left", dx=4, color=INK, fontSize=10).encode(
        y=alt.Y("sector:N", sort=order), x=alt.X("weight:Q"),
        text=alt.Text("weight:Q", format=".1%"))


SECTOR_PLOT = WIDTH - 200       # px, the bars' width
SECTOR_FONT = 10


def _sector_chart_with_limits(df: pd.DataFrame, order: list[str],
                              sector_limits: dict[str, dict]) -> alt.LayerChart:
    info = df["sector"].map(lambda s: sector_limits.get(s, {}))
    df["status"] = info.map(lambda d: d.get("status", "no limit"))
    df["limit"] = info.map(lambda d: d.get("threshold", np.nan))
    top = float(np.nanmax(np.r_[df["weight"].to_numpy(float), df["limit"].to_numpy(float)]))
    top = max(top * 1.05, 1e-9)
    sx = Linear(0.0, top, 0.0, SECTOR_PLOT)
    # the weight sits at the bar's end: outside it, or inside (white) when the limit's tick
    # would cross the text outside; the status follows past the tick
    df["value"] = [f"{w:.1%}" for w in df["weight"]]
    bar_px, tick_px = sx(df["weight"].to_numpy(float)), sx(df["limit"].to_numpy(float))
    text_px = np.array([text_width(t, SECTOR_FONT) for t in df["value"]])
    crosses = (tick_px >= bar_px - 2) & (tick_px <= bar_px + 4 + text_px + 3)
    inside = crosses & (bar_px >= text_px + 8)
    df["inside"] = inside
    outside_end = np.where(inside, bar_px, bar_px + 4 + text_px)
    df["status_x"] = sx.invert(np.fmax(outside_end, np.nan_to_num(tick_px, nan=0.0)) + 5)
    df["status_text"] = [f"{STATUS_MARK[st]} (max {lim:.0%})" if st in STATUS_MARK else ""
                         for st, lim in zip(df["status"], df["limit"], strict=True)]
    y = alt.Y("sector:N", sort=order, title=None)
    x_scale = alt.Scale(domain=[0.0, top], nice=False)
    colour = alt.Color("status:N", title="Sector limit",
                       scale=alt.Scale(domain=["within", "watch", "breach", "no limit"],
                                       range=[TEAL, OCHRE, BRICK, GREY]))
    bars = alt.Chart(df).mark_bar(height=14).encode(
        y=y, x=alt.X("weight:Q", title="Weight (tick: the sector's maximum)",
                     scale=x_scale, axis=share_axis(top)),
        color=colour,
        tooltip=[alt.Tooltip("sector:N"), alt.Tooltip("weight:Q", format=".1%"),
                 alt.Tooltip("n_holdings:Q"), alt.Tooltip("status:N")])
    ticks = alt.Chart(df[df["limit"].notna()]).mark_tick(
        color=INK, thickness=2, size=20).encode(y=y, x=alt.X("limit:Q"))
    out = alt.Chart(df[~df["inside"]]).mark_text(
        align="left", dx=4, color=INK, fontSize=SECTOR_FONT).encode(
        y=y, x=alt.X("weight:Q"), text=alt.Text("value:N"))
    # ink on the light ochre of "watch", white on the darker fills (contrast)
    df["ink"] = np.where(df["status"] == "watch", INK, "white")
    inn = alt.Chart(df[df["inside"]]).mark_text(
        align="right", dx=-4, fontSize=SECTOR_FONT).encode(
        y=y, x=alt.X("weight:Q"), text=alt.Text("value:N"),
        color=alt.Color("ink:N", scale=None))
    status = alt.Chart(df[df["status_text"] != ""]).mark_text(
        align="left", color=INK, fontSize=SECTOR_FONT).encode(
        y=y, x=alt.X("status_x:Q"), text=alt.Text("status_text:N"))
    return alt.layer(bars, ticks, out, inn, status).properties(
        width=SECTOR_PLOT, height=max(120, 22 * len(df)))
