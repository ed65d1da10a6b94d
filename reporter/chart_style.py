"""The house style of every chart: palette, size, the chart engine's theme, and the
helpers the drawing modules share (so that they and :mod:`reporter.charts` import this
module, not each other)."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from reporter.analytics.sml import WITHIN

INK, TEAL, OCHRE, BRICK, GREY = "#1d2b36", "#2a6f6f", "#b8741a", "#9c3b2e", "#6b7780"
FONT = "DejaVu Sans"
WIDTH, HEIGHT = 520, 300

THEME_CONFIG = {
    "font": FONT,
    "background": "white",
    "view": {"stroke": None},
    "axis": {"labelFontSize": 11, "titleFontSize": 11, "titleFontWeight": "normal",
             "labelColor": INK, "titleColor": INK, "gridColor": "#e3e6e8", "domainColor": GREY,
             "tickColor": GREY},
    "legend": {"labelFontSize": 11, "titleFontSize": 11, "titleFontWeight": "normal",
               "labelColor": INK, "titleColor": INK, "orient": "bottom"},
    "title": {"fontSize": 13, "fontWeight": "normal", "color": INK, "anchor": "start"},
}


def share_axis(top: float, **kw) -> alt.Axis:
    """A percentage axis of at most five ticks whose labels do not run together: whole
    percentages unless the range is under 4%."""
    return alt.Axis(format=".0%" if top >= 0.04 else ".1%", tickCount=5, labelOverlap=True,
                    labelFlush=False, **kw)


# Altair refuses a chart with more rows than this (its default limit): beyond it a chart
# of holdings draws every flagged holding and then the largest by weight.
MAX_CHART_ROWS = 5000


def thin_holdings(sec: pd.DataFrame, max_rows: int = MAX_CHART_ROWS) -> pd.DataFrame:
    """At most ``max_rows`` holdings of ``sec`` (a securities table), in their own order:
    every one whose SML position is flagged above or below the line, then the largest by
    weight (ties by position in the table)."""
    if len(sec) <= max_rows:
        return sec
    flagged = (sec["sml_position"] != WITHIN).to_numpy()
    weight = sec["weight"].to_numpy(dtype=float)
    # flagged first, then by weight, largest first; a stable sort keeps table order in ties
    order = np.lexsort((-np.nan_to_num(weight, nan=-np.inf), ~flagged))
    keep = np.sort(order[:max_rows])
    return sec.iloc[keep]


MAX_LINE_POINTS = 300   # a print chart is about 500 px wide: more points add bytes, not detail
