"""The security market line chart for print (pure): Altair objects from the results.

The scales are fixed here (no "nice" rounding), so every mark's pixel position is known in
Python and the labels can be placed clear of the points (:mod:`reporter.chart_labels`):
the risk-free and market anchors' names first, then up to :data:`MAX_NAMED` holdings
flagged above or below the line, largest weight first (one with no clear space is passed
over for the next). Error bars are light and clipped to
the plot.
"""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from reporter.analytics.pack import PackResults
from reporter.analytics.regression import t_critical
from reporter.analytics.sml import ABOVE, BELOW, WITHIN
from reporter.chart_labels import Linear, place_labels, point_box
from reporter.chart_style import BRICK, GREY, HEIGHT, INK, OCHRE, TEAL, WIDTH, thin_holdings

MAX_NAMED = 8               # holdings named on the chart, at most
MAX_TRIED = 60              # flagged holdings tried, largest weight first, to name those 8
LABEL_SIZE = 10             # px, the holdings' names
ANCHOR_SIZE = 11            # px, "Risk-free" and the market's name
POINT_HALF = 6.0            # px, half the box a holding's marker (size 60) is kept clear in
ANCHOR_HALF = 6.5           # px, the same for the anchors' squares (size 90)
NAME_CHARS = 24             # a longer holding name is cut with an ellipsis
ERROR_BAR = "#d3d8dc"
# From this many fitted holdings the PDF draws those within estimation error as counts in
# cells (the screen pack keeps every point): each point with its two error bars is three SVG
# elements that WeasyPrint lays out one by one, and at 2,000 holdings the 6,000 elements had
# to be drawn as a 300 dpi image, 1.2 s to rasterise (benchmarks/bench_charts.py).
BIN_FROM = 400
BINS_X, BINS_Y = 40, 24     # cells across and up: 13 x 12.5 px on the 520 x 300 plot
# fewest to most holdings in a cell, in four steps: a stepped legend of square swatches
# (a gradient legend's ramp is not drawn by the PDF renderer's SVG support)
CELL_RANGE = ["#e9edef", "#c5ccd1", "#98a2aa", "#6b7780"]


def _short(name: str) -> str:
    return name if len(name) <= NAME_CHARS else name[:NAME_CHARS - 1] + "\u2026"


def _y_domain(values: np.ndarray) -> list[float]:
    v = values[np.isfinite(values)]
    lo, hi = float(v.min()), float(v.max())
    pad = max(0.08 * (hi - lo), 0.005)
    return [lo - pad, hi + pad]


def cell_counts(beta: np.ndarray, excess: np.ndarray, x_dom: list[float],
                y_dom: list[float], bins: tuple[int, int] = (BINS_X, BINS_Y)) -> pd.DataFrame:
    """The holdings per cell of a ``bins`` grid over the plot (``x_dom`` by ``y_dom``), one
    row per occupied cell: ``beta``, ``beta2``, ``excess``, ``excess2`` (its edges) and
    ``count``. Points outside the domain are counted in the edge cell (as the SVG clips them
    to the plot's edge), non-finite ones are left out."""
    ok = np.isfinite(beta) & np.isfinite(excess)
    xe = np.linspace(x_dom[0], x_dom[1], bins[0] + 1)
    ye = np.linspace(y_dom[0], y_dom[1], bins[1] + 1)
    bx = np.clip(np.searchsorted(xe, beta[ok], side="right") - 1, 0, bins[0] - 1)
    by = np.clip(np.searchsorted(ye, excess[ok], side="right") - 1, 0, bins[1] - 1)
    counts = np.bincount(bx * bins[1] + by, minlength=bins[0] * bins[1])
    cell = np.flatnonzero(counts)
    ix, iy = np.divmod(cell, bins[1])
    return pd.DataFrame({"beta": xe[ix], "beta2": xe[ix + 1], "excess": ye[iy],
                         "excess2": ye[iy + 1], "count": counts[cell]})


def sml_chart(res: PackResults, market_label: str = "Market proxy",
              binned: bool = False) -> alt.LayerChart:
    """Each holding's beta against its annualised mean excess return, with the ex post line
    E[r - r_f] = beta x mean market premium (Sharpe 1964), beta and return error bars at
    the pack's confidence, the market and cash, and the flagged holdings named.

    ``binned`` (for print): the holdings within estimation error are counted in the cells of
    a grid (:func:`cell_counts`) instead of drawn one by one; the flagged holdings, the
    names, the line and the anchors are drawn as on screen, on top."""
    P = res.periods_per_year
    sec = res.securities[res.fits.fitted]
    n_all = len(sec)
    sec = thin_holdings(sec)
    df = pd.DataFrame({
        "name": sec["name"], "beta": sec["beta"],
        # the same intervals as the holdings tables (errors and level from the settings)
        "beta_lo": sec["beta_ci_low"], "beta_hi": sec["beta_ci_high"],
        "excess": sec["mean_excess_return_ann"], "weight": sec["weight"],
        "position": sec["sml_position"],
    })
    # the mean excess return's interval: t (n - 1 df) x sd / sqrt(n), annualised x P
    half = t_critical(res.confidence, sec["n_obs"].to_numpy() - 1) * sec[
        "mean_excess_return_se"].to_numpy() * P
    df["excess_lo"], df["excess_hi"] = df["excess"] - half, df["excess"] + half
    mrp = res.sml.mean_market_premium * P
    hi = float(max(2.0, np.nanmax(df["beta_hi"]) if len(df) else 2.0))
    lo = float(min(0.0, np.nanmin(df["beta_lo"]) if len(df) else 0.0))
    line = pd.DataFrame({"beta": [lo, hi], "excess": [lo * mrp, hi * mrp]})
    anchors = pd.DataFrame({"beta": [0.0, 1.0], "excess": [0.0, mrp],
                            "label": ["Risk-free", market_label]})
    y_dom = _y_domain(np.concatenate([df["excess"].to_numpy(dtype=float),
                                      line["excess"].to_numpy(), anchors["excess"]]))
    sx, sy = Linear(lo, hi, 0.0, WIDTH), Linear(y_dom[0], y_dom[1], HEIGHT, 0.0)
    # error bars end at the plot's edges (clipped in the data: Vega's clip paths carry
    # a process-wide counter in their ids, which would make the SVG differ between builds)
    df["excess_lo"] = df["excess_lo"].clip(*y_dom)
    df["excess_hi"] = df["excess_hi"].clip(*y_dom)
    labels, leaders, dropped, unnamed = _labels(df, anchors, sx, sy)

    x = alt.X("beta:Q", title=f"Beta (bars: {res.confidence:.0%} interval)",
              scale=alt.Scale(domain=[lo, hi], nice=False))
    y = alt.Y("excess:Q", title="Mean excess return, annualised",
              scale=alt.Scale(domain=y_dom, nice=False, zero=False),
              axis=alt.Axis(format=".0%" if y_dom[1] - y_dom[0] > 0.06 else ".1%",
                            tickCount=6, labelOverlap=True))
    shape_scale = alt.Scale(domain=[ABOVE, WITHIN, BELOW],
                            range=["triangle-up", "circle", "triangle-down"])
    colour_scale = alt.Scale(domain=[ABOVE, WITHIN, BELOW], range=[TEAL, GREY, BRICK])
    if binned:
        within = df[df["position"] == WITHIN]
        cells = cell_counts(within["beta"].to_numpy(dtype=float),
                            within["excess"].to_numpy(dtype=float), [lo, hi], y_dom)
        df = df[df["position"] != WITHIN]
        shape_scale = alt.Scale(domain=[ABOVE, BELOW], range=["triangle-up", "triangle-down"])
        colour_scale = alt.Scale(domain=[ABOVE, BELOW], range=[TEAL, BRICK])
    base = alt.Chart(df)
    bars = base.mark_rule(color=ERROR_BAR, strokeWidth=0.8).encode(
        x=alt.X("beta_lo:Q"), x2=alt.X2("beta_hi:Q"), y=alt.Y("excess:Q"))
    vbars = base.mark_rule(color=ERROR_BAR, strokeWidth=0.8).encode(
        x=alt.X("beta:Q"), y=alt.Y("excess_lo:Q"), y2=alt.Y2("excess_hi:Q"))
    pts = base.mark_point(filled=True, opacity=0.9, size=60).encode(
        x=x, y=y,
        shape=alt.Shape("position:N", scale=shape_scale, title="Alpha vs zero"),
        color=alt.Color("position:N", scale=colour_scale, title="Alpha vs zero"),
        tooltip=[alt.Tooltip("name:N"), alt.Tooltip("beta:Q", format=".2f"),
                 alt.Tooltip("excess:Q", format=".1%"), alt.Tooltip("position:N")],
    )
    sml = alt.Chart(line).mark_line(color=INK, strokeWidth=1.5).encode(
        x=alt.X("beta:Q"), y=alt.Y("excess:Q"))
    anc = alt.Chart(anchors).mark_point(shape="square", size=90, filled=True,
                                        color=OCHRE).encode(x=alt.X("beta:Q"), y=alt.Y("excess:Q"))
    layers = [bars, vbars, sml, pts, anc]
    if binned:
        grid = alt.Chart(cells).mark_rect(stroke=None).encode(
            x=alt.X("beta:Q"), x2=alt.X2("beta2:Q"), y=alt.Y("excess:Q"),
            y2=alt.Y2("excess2:Q"),
            # fill, not color: a scale of its own, apart from the holdings' position
            fill=alt.Fill("count:Q", title="Holdings within error, per cell",
                            scale=alt.Scale(type="quantize", range=CELL_RANGE, zero=False,
                                            nice=True),
                            legend=alt.Legend(orient="bottom", symbolType="square",
                                              symbolSize=120, format="d")))
        layers = [grid, bars, vbars, sml, pts, anc]
    if len(leaders):
        layers.append(alt.Chart(leaders).mark_rule(color=GREY, strokeWidth=0.8).encode(
            x=alt.X("beta:Q"), y=alt.Y("excess:Q"), x2=alt.X2("beta2:Q"),
            y2=alt.Y2("excess2:Q")))
    for kind, size, colour in (("anchor", ANCHOR_SIZE, INK), ("holding", LABEL_SIZE, INK)):
        part = labels[labels["kind"] == kind]
        if len(part):
            layers.append(alt.Chart(part).mark_text(
                align="left", baseline="middle", color=colour, fontSize=size).encode(
                x=alt.X("beta:Q"), y=alt.Y("excess:Q"), text=alt.Text("label:N")))
    chart = alt.layer(*layers).properties(width=WIDTH, height=HEIGHT)
    notes = []
    if len(sec) < n_all:
        notes.append(f"{len(sec):,} of {n_all:,} holdings drawn: every one above or below "
                     "the line, then the largest by weight")
    if binned:
        notes.append(f"Grey cells: the {len(within):,} holdings within estimation error, "
                     "counted per cell (each is drawn in the HTML pack and listed in the "
                     "holdings table)")
    if dropped:
        notes.append(f"{dropped} flagged holding{'s' if dropped != 1 else ''} not named "
                     f"(at most {MAX_NAMED} are, where there is clear space); the holdings "
                     "table lists every one")
    if unnamed:
        notes.append("Ochre squares: " + " and ".join(
            f"{a} (beta {0 if a == 'Risk-free' else 1})" for a in anchors["label"]))
    if notes:
        chart = chart.properties(title=alt.TitleParams(notes, fontSize=10))
    return chart


def _labels(df: pd.DataFrame, anchors: pd.DataFrame, sx: Linear,
            sy: Linear) -> tuple[pd.DataFrame, pd.DataFrame, int, list[str]]:
    """The names to draw (``beta``, ``excess`` at the text's left middle, ``label``,
    ``kind``), the leaders to names placed further out (``beta``, ``excess`` to ``beta2``,
    ``excess2``), how many flagged holdings go unnamed, and the anchors left unnamed."""
    px, py = sx(df["beta"].to_numpy(dtype=float)), sy(df["excess"].to_numpy(dtype=float))
    ok = np.isfinite(px) & np.isfinite(py)
    obstacles = [point_box(a, b, POINT_HALF) for a, b in zip(px[ok], py[ok], strict=True)]
    ax, ay = sx(anchors["beta"].to_numpy(dtype=float)), sy(
        anchors["excess"].to_numpy(dtype=float))
    obstacles += [point_box(a, b, ANCHOR_HALF) for a, b in zip(ax, ay, strict=True)]
    anchor_spots = list(zip(anchors["label"], ax, ay, strict=True))
    placed_anchors = place_labels(anchor_spots, obstacles, width=sx.r1, height=sy.r0,
                                  font_size=ANCHOR_SIZE, gap=ANCHOR_HALF + 2.5)
    obstacles += [p.box for p in placed_anchors if p is not None]
    flagged = df[ok & df["position"].isin([ABOVE, BELOW]).to_numpy()]
    flagged = flagged.assign(_w=flagged["weight"].fillna(0.0)).sort_values(
        ["_w", "name"], ascending=[False, True], kind="stable")
    chosen = flagged.head(MAX_TRIED)
    holding_spots = [(_short(str(n)), sx(b), sy(e)) for n, b, e in zip(
        chosen["name"], chosen["beta"], chosen["excess"], strict=True)]
    placed = place_labels(holding_spots, obstacles, width=sx.r1, height=sy.r0,
                          font_size=LABEL_SIZE, gap=POINT_HALF + 2.5, limit=MAX_NAMED)
    rows, leaders = [], []
    for kind, spots, done in (("anchor", anchor_spots, placed_anchors),
                              ("holding", holding_spots, placed)):
        for (_, x0, y0), p in zip(spots, done, strict=True):
            if p is None:
                continue
            rows.append({"beta": sx.invert(p.x), "excess": sy.invert(p.y), "label": p.text,
                         "kind": kind})
            if p.far:                 # a leader from the marker to the name's near edge
                end_x = min(max(x0, p.box.x0), p.box.x1)
                end_y = min(max(y0, p.box.y0), p.box.y1)
                leaders.append({"beta": sx.invert(x0), "excess": sy.invert(y0),
                                "beta2": sx.invert(end_x), "excess2": sy.invert(end_y)})
    dropped = len(flagged) - sum(p is not None for p in placed)
    unnamed = [str(a) for a, p in zip(anchors["label"], placed_anchors, strict=True)
               if p is None]
    return (pd.DataFrame(rows, columns=["beta", "excess", "label", "kind"]),
            pd.DataFrame(leaders, columns=["beta", "excess", "beta2", "excess2"]),
            dropped, unnamed)
