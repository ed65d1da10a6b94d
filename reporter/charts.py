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
from reporter.chart_style import (  # noqa: F401  (re-exported: the palette's old home)
    BRICK,
    FONT,
    GREY,
    HEIGHT,
    INK,
    MAX_CHART_ROWS,
    MAX_LINE_POINTS,
    OCHRE,
    TEAL,
    THEME_CONFIG,
    WIDTH,
    share_axis,
    thin_holdings,
)
from reporter.sector_chart import sector_chart as _draw_sectors
from reporter.sml_chart import BIN_FROM
from reporter.sml_chart import sml_chart as _draw_sml
from reporter.stress_charts import stress_charts


def time_axis(dates, max_ticks: int = 8, **kw) -> alt.Axis:
    """A date axis whose labels never repeat: one tick every whole number of years (every
    few months when the history is under two years), at most about ``max_ticks``."""
    d = pd.to_datetime(pd.Series(dates)).dropna()
    days = float((d.max() - d.min()).days) if len(d) else 0.0
    if days >= 2 * 365.25:
        step = max(1, int(np.ceil(days / 365.25 / max_ticks)))
        return alt.Axis(format="%Y", tickCount={"interval": "year", "step": step},
                        labelOverlap=True, **kw)
    step = max(1, int(np.ceil(days / 30.44 / max_ticks)))
    return alt.Axis(format="%b %Y", tickCount={"interval": "month", "step": step},
                    labelOverlap=True, **kw)


def share_ticks(top: float, most: int = 4) -> list[float]:
    """Tick values 0, step, 2 step ... up to ``top`` with at most ``most`` ticks, the step
    a round share (1%, 2%, 2.5%, 5%, 10%, 20%, 25% or 50%)."""
    for step in (0.01, 0.02, 0.025, 0.05, 0.1, 0.2, 0.25, 0.5):
        if top / step < most:
            break
    return [round(i * step, 6) for i in range(int(top / step + 1e-9) + 1)]


def beta_band(limits) -> tuple[float | None, float | None]:
    """``(beta_min, beta_max)`` of a :class:`reporter.limits.LimitsReport` (None when not
    set, or without limits)."""
    found = {c.limit: c.threshold for c in (limits.checks if limits is not None else ())
             if c.limit in ("beta_min", "beta_max")}
    return found.get("beta_min"), found.get("beta_max")


def sml_chart(res: PackResults, market_label: str = "Market proxy",
              binned: bool = False) -> alt.LayerChart:
    """The security market line chart (:func:`reporter.sml_chart.sml_chart`)."""
    return _draw_sml(res, market_label, binned)


# A chart named NAME + PRINT_ONLY is drawn in the PDF in the place of NAME, which the HTML
# keeps (see reporter.render.html.print_charts).
PRINT_ONLY = "__print"


def print_variants(res: PackResults, market_label: str) -> dict[str, alt.TopLevelMixin]:
    """The charts the PDF draws differently from the HTML: the security market line of
    :data:`reporter.sml_chart.BIN_FROM` or more fitted holdings with those within estimation
    error counted in cells."""
    if int(res.fits.fitted.sum()) < BIN_FROM:
        return {}
    return {"sml" + PRINT_ONLY: sml_chart(res, market_label, binned=True)}


def sector_chart(res: PackResults, sector_limits: dict[str, dict] | None = None) -> alt.Chart:
    """Weight by sector (:func:`reporter.sector_chart.sector_chart`)."""
    return _draw_sectors(res, sector_limits)


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
    top = float(np.nanmax(np.r_[h["vol_share"].to_numpy(float), h["te_share"].to_numpy(float),
                                h["weight"].to_numpy(float), 0.01])) * 1.05
    for col, title in (("vol_share", "Share of volatility"),
                       ("te_share", "Share of tracking error")):
        df = pd.DataFrame({"name": h["name"], "share": h[col], "weight": h["weight"]})
        bars = alt.Chart(df).mark_bar(color=TEAL if col == "vol_share" else INK,
                                      height=11).encode(
            y=alt.Y("name:N", sort=order, title=None,
                    axis=alt.Axis(labels=col == "vol_share", labelLimit=170)),
            x=alt.X("share:Q", title=title, scale=alt.Scale(domain=[0.0, top], nice=False),
                    axis=share_axis(top, values=share_ticks(top))),
            tooltip=[alt.Tooltip("name:N"), alt.Tooltip("share:Q", format=".1%"),
                     alt.Tooltip("weight:Q", format=".1%")])
        ticks = alt.Chart(df).mark_tick(color=OCHRE, thickness=2, size=14).encode(
            y=alt.Y("name:N", sort=order), x=alt.X("weight:Q"))
        panels.append(alt.layer(bars, ticks).properties(width=150, height=16 * len(h)))
    return alt.hconcat(*panels, spacing=12)


def thin_series(df: pd.DataFrame, by: str = "series",
                max_points: int = MAX_LINE_POINTS) -> pd.DataFrame:
    """At most ``max_points`` evenly spaced rows of each series (first and last kept), for
    plotting long daily histories; the results files keep every row."""
    pos = df.groupby(by, sort=False).cumcount().to_numpy()
    size = df.groupby(by, sort=False)[by].transform("size").to_numpy()
    step = np.maximum(1, np.ceil((size - 1) / max(1, max_points - 1))).astype(int)
    keep = (pos % step == 0) | (pos == size - 1)
    return df[keep]


def rolling_portfolio_chart(res: PackResults, band: tuple[float | None, float | None] = (
        None, None)) -> alt.LayerChart:
    """The portfolio's trailing-window beta with its confidence band (OLS errors), and the
    policy band ``(beta_min, beta_max)`` as dashed ochre lines where set."""
    df = thin_series(res.rolling_rows([PORTFOLIO_SERIES])).copy()
    x = alt.X("date:T", title=None, axis=time_axis(df["date"]))
    policy = pd.DataFrame({"y": [v for v in band if v is not None]}, dtype=float)
    seen = np.r_[df["beta_ci_low"].to_numpy(float), df["beta_ci_high"].to_numpy(float),
                 df["beta"].to_numpy(float), 1.0, policy["y"].to_numpy(float) if len(
                     policy) else []]
    seen = seen[np.isfinite(seen)]
    pad = max(0.05 * float(np.ptp(seen)), 0.02) if len(seen) else 0.1
    scale = alt.Scale(zero=False, nice=False, domain=[float(seen.min()) - pad,
                                                      float(seen.max()) + pad]) if len(
        seen) else alt.Scale(zero=False)
    y_axis = alt.Axis(format=".2f", tickCount=6, labelOverlap=True)
    area = alt.Chart(df).mark_area(color=TEAL, opacity=0.18).encode(
        x=x, y=alt.Y("beta_ci_low:Q", title=f"Beta, trailing {res.rolling.window} periods",
                     scale=scale, axis=y_axis), y2=alt.Y2("beta_ci_high:Q"))
    line = alt.Chart(df).mark_line(color=TEAL, strokeWidth=2).encode(
        x=x, y=alt.Y("beta:Q"), tooltip=[alt.Tooltip("date:T", format="%Y-%m-%d"),
                                  alt.Tooltip("beta:Q", format=".2f")])
    one = alt.Chart(pd.DataFrame({"y": [1.0]})).mark_rule(color=GREY, strokeDash=[4, 3]).encode(
        y=alt.Y("y:Q"))
    layers = [area, one, line]
    if len(policy):
        layers.append(alt.Chart(policy).mark_rule(color=OCHRE, strokeWidth=1.5,
                                                  strokeDash=[6, 3]).encode(y=alt.Y("y:Q")))
    chart = alt.layer(*layers).properties(width=WIDTH, height=220)
    if len(policy):     # named above the chart, not on the data
        lo, hi = band
        words = (f"{lo:.2f} to {hi:.2f}" if lo is not None and hi is not None
                 else f"at most {hi:.2f}" if hi is not None else f"at least {lo:.2f}")
        chart = chart.properties(title=alt.TitleParams(
            f"Dashed ochre: the policy band for beta, {words}", fontSize=10))
    return chart


def rolling_holdings_chart(res: PackResults, top: int = 10) -> alt.Chart:
    """Trailing-window betas of the largest holdings, one small panel each."""
    sec = res.securities.sort_values(["weight", "security_id"], ascending=[False, True])
    ids = list(sec["security_id"].head(top))
    names = dict(zip(sec["security_id"], sec["name"], strict=True))
    df = thin_series(res.rolling_rows(ids)).copy()
    df["holding"] = df["series"].map(names)
    order = [names[i] for i in ids]
    return alt.Chart(df).mark_line(color=INK, strokeWidth=1.2).encode(
        x=alt.X("date:T", title=None, axis=time_axis(df["date"], max_ticks=3)),
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
        x=alt.X("date:T", title=None, axis=time_axis(df["date"])),
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
    return stress_charts(res.stress, market_label) | {
        "rolling_portfolio": rolling_portfolio_chart(res, beta_band(limits)),
        "rolling_holdings": rolling_holdings_chart(res),
        "sml": sml_chart(res, market_label),
        "sectors": sector_chart(res, limits.sector_status() if limits is not None else None),
        "diversification": diversification_chart(res),
        "growth": growth_chart(res, market_label),
        "risk_contributions": risk_contribution_chart(res),
        **allocation_charts(res.securities),
        **print_variants(res, market_label),
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
