"""Results -> Altair chart objects (pure). Exported to SVG once, at render time.

The look is the house's own: a restrained ink-and-teal palette, and meaning never carried
by colour alone (position on the security market line is shown by marker shape too).

Encodings are channel objects (``alt.X("beta:Q")``), never bare shorthand strings
(``x="beta:Q"``): Altair resolves a bare string through its JSON schema, about 6 ms a channel,
which was most of the 0.4 s it took to build a pack's charts. The specs are the same.
"""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd

from reporter.allocation_chart import allocation_charts
from reporter.analytics.pack import PORTFOLIO_SERIES, PackResults
from reporter.analytics.regression import t_critical
from reporter.analytics.sml import ABOVE, BELOW, WITHIN

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


def sml_chart(res: PackResults, market_label: str = "Market proxy") -> alt.LayerChart:
    """Each holding's beta against its annualised mean excess return, with the ex post line
    E[r - r_f] = beta x mean market premium, beta error bars (95%), the market and cash."""
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
    x = alt.X("beta:Q", title=f"Beta (bars: {res.confidence:.0%} interval)",
              scale=alt.Scale(domain=[lo, hi], nice=False))
    y = alt.Y("excess:Q", title="Mean excess return, annualised", axis=alt.Axis(format="%"))
    shape_scale = alt.Scale(domain=[ABOVE, WITHIN, BELOW],
                            range=["triangle-up", "circle", "triangle-down"])
    colour_scale = alt.Scale(domain=[ABOVE, WITHIN, BELOW], range=[TEAL, GREY, BRICK])
    base = alt.Chart(df)
    bars = base.mark_rule(color="#b9c0c5", strokeWidth=1).encode(
        x=alt.X("beta_lo:Q"), x2=alt.X2("beta_hi:Q"), y=alt.Y("excess:Q"))
    vbars = base.mark_rule(color="#b9c0c5", strokeWidth=1).encode(
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
    lab = alt.Chart(anchors).mark_text(align="left", dx=8, dy=-8, color=INK,
                                       fontSize=11).encode(x=alt.X("beta:Q"), y=alt.Y("excess:Q"),
                                                           text=alt.Text("label:N"))
    chart = alt.layer(bars, vbars, sml, pts, anc, lab).properties(width=WIDTH, height=HEIGHT)
    if len(sec) < n_all:
        chart = chart.properties(title=alt.TitleParams(
            f"{len(sec):,} of {n_all:,} holdings drawn: every one above or below the line, "
            "then the largest by weight", fontSize=11))
    return chart


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


def _sector_chart_with_limits(df: pd.DataFrame, order: list[str],
                              sector_limits: dict[str, dict]) -> alt.LayerChart:
    info = df["sector"].map(lambda s: sector_limits.get(s, {}))
    df["status"] = info.map(lambda d: d.get("status", "no limit"))
    df["limit"] = info.map(lambda d: d.get("threshold", np.nan))
    df["label"] = [f"{w:.1%}" + (f"  {STATUS_MARK[st]} (max {lim:.0%})" if st in STATUS_MARK
                                 else "")
                   for w, st, lim in zip(df["weight"], df["status"], df["limit"], strict=True)]
    y = alt.Y("sector:N", sort=order, title=None)
    colour = alt.Color("status:N", title="Sector limit",
                       scale=alt.Scale(domain=["within", "watch", "breach", "no limit"],
                                       range=[TEAL, OCHRE, BRICK, GREY]))
    bars = alt.Chart(df).mark_bar(height=14).encode(
        y=y, x=alt.X("weight:Q", title="Weight (tick: the sector's maximum)",
                     axis=alt.Axis(format="%")),
        color=colour,
        tooltip=[alt.Tooltip("sector:N"), alt.Tooltip("weight:Q", format=".1%"),
                 alt.Tooltip("n_holdings:Q"), alt.Tooltip("status:N")])
    ticks = alt.Chart(df[df["limit"].notna()]).mark_tick(
        color=INK, thickness=2, size=20).encode(y=y, x=alt.X("limit:Q"))
    text = alt.Chart(df).mark_text(align="left", dx=4, color=INK, fontSize=10).encode(
        y=y, x=alt.X("xpos:Q"), text=alt.Text("label:N")).transform_calculate(
        xpos="max(datum.weight, isValid(datum.limit) ? datum.limit : 0)")
    return alt.layer(bars, ticks, text).properties(width=WIDTH - 200,
                                                   height=max(120, 22 * len(df)))


def diversification_chart(res: PackResults) -> alt.LayerChart:
    """Annualised volatility of an equal-weight portfolio of n of the holdings,
    sqrt(P (avg_var/n + (1 - 1/n) avg_cov)), with its floor and the portfolio marked."""
    P = res.periods_per_year
    n_max = int(max(60, 2 * res.concentration.n_holdings))
    n = np.unique(np.round(np.geomspace(1, n_max, 80)).astype(int))
    vol = np.sqrt(P * res.curve.variance(n))
    curve = pd.DataFrame({"n": n, "vol": vol})
    floor = float(np.sqrt(max(P * res.curve.average_covariance, 0.0)))
    port = pd.DataFrame({"n": [res.concentration.effective_n],
                         "vol": [res.ratios.volatility * np.sqrt(P)],
                         "label": ["This portfolio (effective N)"]})
    x = alt.X("n:Q", title="Number of equally weighted holdings (log scale)",
              scale=alt.Scale(type="log", domain=[1, n_max], nice=False))
    y = alt.Y("vol:Q", title="Volatility, annualised", axis=alt.Axis(format="%"),
              scale=alt.Scale(zero=True))
    line = alt.Chart(curve).mark_line(color=TEAL, strokeWidth=2).encode(x=x, y=y)
    rule = alt.Chart(pd.DataFrame({"vol": [floor], "label": ["Market-wide floor"]})).mark_rule(
        color=GREY, strokeDash=[4, 3]).encode(y=alt.Y("vol:Q"))
    rule_lab = alt.Chart(pd.DataFrame({"vol": [floor], "n": [n_max],
                                       "label": ["Floor: average covariance"]})).mark_text(
        align="right", dy=11, color=GREY, fontSize=10).encode(
        x=alt.X("n:Q"), y=alt.Y("vol:Q"), text=alt.Text("label:N"))
    pt = alt.Chart(port).mark_point(shape="diamond", size=120, filled=True,
                                    color=OCHRE).encode(x=alt.X("n:Q"), y=alt.Y("vol:Q"))
    pt_lab = alt.Chart(port).mark_text(align="left", dx=9, dy=-12, color=INK,
                                       fontSize=11).encode(
        x=alt.X("n:Q"), y=alt.Y("vol:Q"), text=alt.Text("label:N"))
    b = res.band
    root = np.sqrt(P)
    band_df = pd.DataFrame({"n": b.n, "lo": b.low * root, "hi": b.high * root,
                            "med": b.median * root})
    band = alt.Chart(band_df).mark_area(color=TEAL, opacity=0.15).encode(
        x=x, y=alt.Y("lo:Q", title="Volatility, annualised", axis=alt.Axis(format="%"),
                     scale=alt.Scale(zero=True)), y2=alt.Y2("hi:Q"))
    med = alt.Chart(band_df).mark_point(shape="cross", size=30, color=GREY).encode(
        x=x, y=alt.Y("med:Q"))
    return alt.layer(band, med, line, rule, rule_lab, pt, pt_lab).properties(width=WIDTH,
                                                                             height=260)


def risk_contribution_chart(res: PackResults, top: int = 12) -> alt.HConcatChart:
    """The largest contributors to volatility, with their shares of volatility and of
    tracking error side by side (Euler contributions; shares of each total)."""
    t = res.risk_table
    h = t[t["level"] == "holding"].head(top)
    order = list(h["name"])
    panels = []
    for col, title in (("vol_share", "Share of volatility"),
                       ("te_share", "Share of tracking error")):
        df = pd.DataFrame({"name": h["name"], "share": h[col], "weight": h["weight"]})
        bars = alt.Chart(df).mark_bar(color=TEAL if col == "vol_share" else INK,
                                      height=11).encode(
            y=alt.Y("name:N", sort=order, title=None,
                    axis=alt.Axis(labels=col == "vol_share", labelLimit=170)),
            x=alt.X("share:Q", title=title, axis=alt.Axis(format="%", tickCount=4)),
            tooltip=[alt.Tooltip("name:N"), alt.Tooltip("share:Q", format=".1%"),
                     alt.Tooltip("weight:Q", format=".1%")])
        ticks = alt.Chart(df).mark_tick(color=OCHRE, thickness=2, size=14).encode(
            y=alt.Y("name:N", sort=order), x=alt.X("weight:Q"))
        panels.append(alt.layer(bars, ticks).properties(width=150, height=16 * len(h)))
    return alt.hconcat(*panels, spacing=12)


MAX_LINE_POINTS = 300   # a print chart is about 500 px wide: more points add bytes, not detail


def thin_series(df: pd.DataFrame, by: str = "series",
                max_points: int = MAX_LINE_POINTS) -> pd.DataFrame:
    """At most ``max_points`` evenly spaced rows of each series (first and last kept), for
    plotting long daily histories; the results files keep every row."""
    pos = df.groupby(by, sort=False).cumcount().to_numpy()
    size = df.groupby(by, sort=False)[by].transform("size").to_numpy()
    step = np.maximum(1, np.ceil((size - 1) / max(1, max_points - 1))).astype(int)
    keep = (pos % step == 0) | (pos == size - 1)
    return df[keep]


def rolling_portfolio_chart(res: PackResults) -> alt.LayerChart:
    """The portfolio's trailing-window beta with its confidence band (OLS errors)."""
    df = thin_series(res.rolling_rows([PORTFOLIO_SERIES])).copy()
    x = alt.X("date:T", title=None, axis=alt.Axis(format="%Y"))
    band = alt.Chart(df).mark_area(color=TEAL, opacity=0.18).encode(
        x=x, y=alt.Y("beta_ci_low:Q", title=f"Beta, trailing {res.rolling.window} periods",
                     scale=alt.Scale(zero=False)), y2=alt.Y2("beta_ci_high:Q"))
    line = alt.Chart(df).mark_line(color=TEAL, strokeWidth=2).encode(
        x=x, y=alt.Y("beta:Q"), tooltip=[alt.Tooltip("date:T", format="%Y-%m-%d"),
                                  alt.Tooltip("beta:Q", format=".2f")])
    one = alt.Chart(pd.DataFrame({"y": [1.0]})).mark_rule(color=GREY, strokeDash=[4, 3]).encode(
        y=alt.Y("y:Q"))
    return alt.layer(band, one, line).properties(width=WIDTH, height=220)


def rolling_holdings_chart(res: PackResults, top: int = 10) -> alt.Chart:
    """Trailing-window betas of the largest holdings, one small panel each."""
    sec = res.securities.sort_values(["weight", "security_id"], ascending=[False, True])
    ids = list(sec["security_id"].head(top))
    names = dict(zip(sec["security_id"], sec["name"], strict=True))
    df = thin_series(res.rolling_rows(ids)).copy()
    df["holding"] = df["series"].map(names)
    order = [names[i] for i in ids]
    return alt.Chart(df).mark_line(color=INK, strokeWidth=1.2).encode(
        x=alt.X("date:T", title=None, axis=alt.Axis(format="%Y", tickCount=4)),
        y=alt.Y("beta:Q", title="Beta", scale=alt.Scale(zero=False)),
        tooltip=[alt.Tooltip("holding:N"), alt.Tooltip("date:T", format="%Y-%m-%d"),
                 alt.Tooltip("beta:Q", format=".2f")],
    ).properties(width=150, height=80).facet(
        facet=alt.Facet("holding:N", sort=order, title=None,
                        header=alt.Header(labelFontSize=9, labelLimit=150)), columns=3)


def growth_chart(res: PackResults, market_label: str = "Market proxy") -> alt.LayerChart:
    """Growth of one unit invested in the portfolio (current weights) and in the market proxy
    over the whole history, on a log scale; the lines differ in dash as well as colour."""
    g = res.growth_table
    df = pd.concat([
        pd.DataFrame({"date": g["date"], "value": g["portfolio"], "series": "Portfolio"}),
        pd.DataFrame({"date": g["date"], "value": g["market"], "series": market_label}),
    ] + ([pd.DataFrame({"date": g["date"], "value": g["benchmark"], "series": "Benchmark"})]
         if "benchmark" in g else []), ignore_index=True).dropna(subset=["value"])
    df = thin_series(df).copy()
    df["date"] = pd.to_datetime(df["date"])
    domain = ["Portfolio", market_label] + (["Benchmark"] if "benchmark" in g else [])
    lo, hi = float(min(df["value"].min(), 1.0)), float(max(df["value"].max(), 1.0))
    line = alt.Chart(df).mark_line(strokeWidth=2).encode(
        x=alt.X("date:T", title=None, axis=alt.Axis(format="%Y")),
        y=alt.Y("value:Q", title="Value of 1 invested (log scale)",
                scale=alt.Scale(type="log", domain=[lo * 0.95, hi * 1.05], nice=False)),
        color=alt.Color("series:N", scale=alt.Scale(domain=domain,
                                                    range=[TEAL, INK, OCHRE][: len(domain)]),
                        title=None),
        strokeDash=alt.StrokeDash("series:N", scale=alt.Scale(
            domain=domain, range=[[1, 0], [5, 3], [1, 2]][: len(domain)]), title=None),
        tooltip=[alt.Tooltip("series:N"), alt.Tooltip("date:T", format="%Y-%m-%d"),
                 alt.Tooltip("value:Q", format=".3f")],
    )
    one = alt.Chart(pd.DataFrame({"y": [1.0]})).mark_rule(color=GREY, strokeDash=[2, 2]).encode(
        y=alt.Y("y:Q"))
    return alt.layer(one, line).properties(width=WIDTH, height=240)


def build_charts(res: PackResults, limits=None,
                 market_label: str = "Market proxy") -> dict[str, alt.TopLevelMixin]:
    """Every chart of the pack, keyed by the name the templates use. ``limits`` (a
    :class:`reporter.limits.LimitsReport`, optional) marks sector limits on the sector chart;
    ``market_label`` names the series the regressions are against (a mandate's benchmark)."""
    return {
        "rolling_portfolio": rolling_portfolio_chart(res),
        "rolling_holdings": rolling_holdings_chart(res),
        "sml": sml_chart(res, market_label),
        "sectors": sector_chart(res, limits.sector_status() if limits is not None else None),
        "diversification": diversification_chart(res),
        "growth": growth_chart(res, market_label),
        "risk_contributions": risk_contribution_chart(res),
        **allocation_charts(res.securities),
    }


def mandate_weights_chart(table: pd.DataFrame) -> alt.LayerChart:
    """Each mandate's current weight in the fund (a marker) against its rebalancing range (a
    grey bar) and strategic weight (a tick). ``table`` has the columns of
    ``results/mandates.csv`` for the mandates only. Outside its range a mandate's marker is a
    cross and it is labelled in words, not marked by colour alone."""
    df = table[["mandate", "weight", "strategic_weight", "range_low", "range_high",
                "range_status"]].copy()
    df["status"] = df["range_status"].replace("", "no range set")
    df["label"] = np.where(df["status"] == "outside range", "outside range", "")
    order = list(df["mandate"])
    y = alt.Y("mandate:N", sort=order, title=None, axis=alt.Axis(labelLimit=200))
    x = alt.X("weight:Q", title="Weight in the fund", axis=alt.Axis(format="%"),
              scale=alt.Scale(zero=True))
    ranges = alt.Chart(df.dropna(subset=["range_low"])).mark_bar(
        color="#d5dadd", height=14).encode(y=y, x=alt.X("range_low:Q"), x2=alt.X2("range_high:Q"))
    strategic = alt.Chart(df).mark_tick(color=INK, thickness=2, size=20).encode(
        y=y, x=alt.X("strategic_weight:Q"))
    status_scale = alt.Scale(domain=["within range", "outside range", "no range set"],
                             range=[TEAL, BRICK, GREY])
    now = alt.Chart(df).mark_point(filled=True, size=90, opacity=1).encode(
        y=y, x=x,
        shape=alt.Shape("status:N", title="Weight now", scale=alt.Scale(
            domain=["within range", "outside range", "no range set"],
            range=["circle", "cross", "diamond"])),
        color=alt.Color("status:N", title="Weight now", scale=status_scale),
        tooltip=[alt.Tooltip("mandate:N"), alt.Tooltip("weight:Q", format=".1%"),
                 alt.Tooltip("strategic_weight:Q", format=".1%"), alt.Tooltip("status:N")])
    # the label sits right of both the marker and the range bar, clear of either
    df["label_x"] = np.fmax(df["weight"], df["range_high"].fillna(df["weight"]))
    text = alt.Chart(df).mark_text(align="left", dx=10, color=BRICK, fontSize=10).encode(
        y=y, x=alt.X("label_x:Q"), text=alt.Text("label:N"))
    return alt.layer(ranges, strategic, now, text).properties(width=WIDTH - 180,
                                                             height=max(90, 34 * len(df)))


def mandate_risk_chart(table: pd.DataFrame) -> alt.Chart:
    """Each mandate's weight in the fund beside its share of the fund's volatility (Euler
    contributions), as paired bars that differ in fill as well as colour."""
    order = list(table["mandate"])
    df = pd.concat([
        pd.DataFrame({"mandate": table["mandate"], "value": table["weight"],
                      "measure": "Weight in the fund"}),
        pd.DataFrame({"mandate": table["mandate"], "value": table["vol_share"],
                      "measure": "Share of the fund's volatility"}),
    ], ignore_index=True)
    domain = ["Weight in the fund", "Share of the fund's volatility"]
    return alt.Chart(df).mark_bar(height=10, stroke=INK, strokeWidth=0.6).encode(
        y=alt.Y("mandate:N", sort=order, title=None, axis=alt.Axis(labelLimit=200)),
        yOffset=alt.YOffset("measure:N", sort=domain),
        x=alt.X("value:Q", title=None, axis=alt.Axis(format="%")),
        color=alt.Color("measure:N", title=None, scale=alt.Scale(domain=domain,
                                                                range=["#ffffff", TEAL])),
        tooltip=[alt.Tooltip("mandate:N"), alt.Tooltip("measure:N"),
                 alt.Tooltip("value:Q", format=".1%")],
    ).properties(width=WIDTH - 180, height=max(90, 34 * len(table)))
