"""Interactive charts for the site: Vega-Lite specifications built with Altair from the
archived results files, drawn in the browser by vega-embed (bundled, never fetched).

Every selection and view carries a fixed name, so the same archive gives the same
specification text (Altair would otherwise number them from a process-wide counter).
The palette is the pack's own (reporter.charts); meaning is never carried by colour
alone: position on the line and limit status are shown by marker shape too.
"""

from __future__ import annotations

import json

import altair as alt
import numpy as np
import pandas as pd

from reporter.analytics.sml import ABOVE, BELOW, WITHIN
from reporter.charts import BRICK, GREY, INK, OCHRE, TEAL, THEME_CONFIG
from reporter.site.gather import LIMIT_STATUSES, SignedPack

HEIGHT = 320
SHAPES = ["circle", "square", "triangle-up", "diamond", "cross", "triangle-down"]
LIMIT_SHAPES = {"within": "circle", "watch": "diamond", "breach": "cross"}
LIMIT_COLOURS = {"within": TEAL, "watch": OCHRE, "breach": BRICK}

CONFIG = {**THEME_CONFIG, "mark": {"aria": False},
          "axis": {**THEME_CONFIG["axis"], "aria": False},
          "legend": {**THEME_CONFIG["legend"], "aria": False}}


def _utc_x(field: str, title: str | None = None) -> alt.X:
    # dates are calendar dates: a UTC scale shows the same day in every time zone
    return alt.X(f"{field}:T", title=title, scale=alt.Scale(type="utc"),
                 axis=alt.Axis(format="%b %Y", labelAngle=0))


def _period_x(periods: list[str] | None = None) -> alt.X:
    # signed period ends are a few discrete dates: one evenly spaced label each
    scale = alt.Scale(domain=periods) if periods else alt.Undefined
    return alt.X("period_end:O", title="Period end", axis=alt.Axis(labelAngle=0),
                 scale=scale)


def sml_chart(pack: SignedPack) -> alt.LayerChart:
    """Each fitted holding's beta against its annualised mean excess return, with the
    ex post security market line E[r - r_f] = beta x mean market premium (annualised),
    the beta interval as a bar, and a tooltip naming the holding (Sharpe 1964)."""
    sec = pack.securities
    sec = sec[(sec["status"] == "fitted") & sec["beta"].notna()
              & sec["mean_excess_return_ann"].notna()].sort_values("security_id")
    df = pd.DataFrame({
        "holding": sec["name"], "id": sec["security_id"], "sector": sec["sector"],
        "weight": sec["weight"], "beta": sec["beta"], "beta_lo": sec["beta_ci_low"],
        "beta_hi": sec["beta_ci_high"], "excess": sec["mean_excess_return_ann"],
        "position": sec["sml_position"],
    }).reset_index(drop=True)
    mrp = float(pack.portfolio["mean_market_premium_ann"])
    hi = float(max(2.0, np.nanmax(df["beta_hi"]) if len(df) else 2.0))
    lo = float(min(0.0, np.nanmin(df["beta_lo"]) if len(df) else 0.0))
    line = pd.DataFrame({"beta": [lo, hi], "excess": [lo * mrp, hi * mrp]})
    x = alt.X("beta:Q", title="Beta (bar: confidence interval)",
              scale=alt.Scale(domain=[lo, hi], nice=False))
    y = alt.Y("excess:Q", title="Mean excess return, annualised", axis=alt.Axis(format="%"))
    positions = [ABOVE, WITHIN, BELOW]
    base = alt.Chart(df)
    bars = base.mark_rule(color="#b9c0c5", strokeWidth=1).encode(
        x="beta_lo:Q", x2="beta_hi:Q", y="excess:Q").properties(name="sml_bars")
    sml = alt.Chart(line).mark_line(color=INK, strokeWidth=1.5).encode(
        x="beta:Q", y="excess:Q").properties(name="sml_line")
    pts = base.mark_point(filled=True, opacity=0.9, size=80).encode(
        x=x, y=y,
        shape=alt.Shape("position:N", title="Alpha against zero",
                        scale=alt.Scale(domain=positions,
                                        range=["triangle-up", "circle", "triangle-down"])),
        color=alt.Color("position:N", title="Alpha against zero",
                        scale=alt.Scale(domain=positions, range=[TEAL, GREY, BRICK])),
        tooltip=[alt.Tooltip("holding:N", title="Holding"),
                 alt.Tooltip("sector:N", title="Sector"),
                 alt.Tooltip("weight:Q", title="Weight", format=".2%"),
                 alt.Tooltip("beta:Q", title="Beta", format=".2f"),
                 alt.Tooltip("beta_lo:Q", title="Beta interval from", format=".2f"),
                 alt.Tooltip("beta_hi:Q", title="Beta interval to", format=".2f"),
                 alt.Tooltip("excess:Q", title="Mean excess return a year", format=".1%"),
                 alt.Tooltip("position:N", title="Position")],
    ).properties(name="sml_points")
    return alt.layer(bars, sml, pts).properties(width="container", height=HEIGHT)


def rolling_chart(pack: SignedPack) -> alt.LayerChart:
    """The portfolio's trailing-window OLS beta with its confidence band; hovering picks
    the nearest window end, marks it with a rule and shows its figures."""
    df = pack.rolling.rename(columns={"beta_ci_low": "lo", "beta_ci_high": "hi"}).copy()
    window = int(pack.portfolio["rolling_window"])
    x = _utc_x("date")
    hover = alt.selection_point(name="rolling_hover", nearest=True, on="pointerover",
                                clear="pointerout", fields=["date"], empty=False)
    band = alt.Chart(df).mark_area(color=TEAL, opacity=0.18).encode(
        x=x, y=alt.Y("lo:Q", title=f"Beta, trailing {window} periods",
                     scale=alt.Scale(zero=False)), y2="hi:Q").properties(name="rolling_band")
    one = alt.Chart(pd.DataFrame({"y": [1.0]})).mark_rule(
        color=GREY, strokeDash=[4, 3]).encode(y="y:Q").properties(name="rolling_one")
    line = alt.Chart(df).mark_line(color=TEAL, strokeWidth=2).encode(
        x=x, y="beta:Q").properties(name="rolling_line")
    # a temporal field (Vega-Lite 6.4's nearest-point tooltips read text fields from the
    # wrong datum); the UTC time unit shows the calendar date in every time zone
    tips = [alt.Tooltip("utcyearmonthdate(date):T", title="Window ending", format="%Y-%m-%d"),
            alt.Tooltip("beta:Q", title="Beta", format=".3f"),
            alt.Tooltip("lo:Q", title="Interval from", format=".3f"),
            alt.Tooltip("hi:Q", title="Interval to", format=".3f")]
    catch = alt.Chart(df).mark_point(size=120, filled=True, color=INK).encode(
        x=x, y="beta:Q", tooltip=tips,
        opacity=alt.condition(hover, alt.value(1.0), alt.value(0.0)),
    ).add_params(hover).properties(name="rolling_points")
    # every window has a rule, shown only while hovered (a filtered, empty layer would
    # give Vega an empty extent to warn about)
    rule = alt.Chart(df).mark_rule(color=INK, strokeWidth=1).encode(
        x=x, opacity=alt.condition(hover, alt.value(0.8), alt.value(0.0)),
    ).properties(name="rolling_rule")
    return alt.layer(band, one, line, rule, catch).properties(width="container",
                                                              height=260)


def value_domain(values: np.ndarray, min_span: float) -> list[float] | None:
    """An axis range holding every finite value, padded by a tenth of their spread and at
    least ``min_span`` wide (so one period, or a flat series, is not stretched over a
    range of rounding noise)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if not len(v):
        return None
    lo, hi = float(v.min()), float(v.max())
    pad = max(0.1 * (hi - lo), (min_span - (hi - lo)) / 2, 0.0)
    return [lo - pad, hi + pad]


# the beta axis is never narrower than this (a band of a few hundredths would otherwise
# fill the chart and make sampling noise look like a trend)
BETA_MIN_SPAN = 0.3


def trend_chart(rows: pd.DataFrame, value: str, title: str, fmt: str, *,
                lo: str | None = None, hi: str | None = None,
                band: bool = False) -> alt.LayerChart:
    """One figure over the signed period ends: a line and points per pack, with an
    interval bar when ``lo``/``hi`` are given; the tooltip names pack, period and value.
    With ``band`` (the beta trend), each period's policy band from its limits
    (``band_min``/``band_max``, either may be missing) is drawn as a shaded bar and dashed
    ticks, and the axis keeps the band, the intervals and a span of at least
    :data:`BETA_MIN_SPAN` in view."""
    df = rows.copy()
    packs = sorted(df["pack"].unique())
    x = _period_x()
    cols = [c for c in (value, lo, hi) if c] + (["band_min", "band_max"] if band else [])
    domain = value_domain(df[cols].to_numpy(dtype=float).ravel(),
                          BETA_MIN_SPAN if band else 0.0)
    scale = alt.Scale(zero=False, domain=domain, nice=False) if band and domain else \
        alt.Scale(zero=False)
    y = alt.Y(f"{value}:Q", title=title, scale=scale,
              axis=alt.Axis(format=fmt, tickCount=6, labelOverlap=True))
    colour = alt.Color("pack:N", title="Pack", scale=alt.Scale(
        domain=packs, range=[TEAL, INK, BRICK, OCHRE, GREY][:max(1, len(packs))]),
        legend=None if len(packs) == 1 else alt.Legend())
    shape = alt.Shape("pack:N", title="Pack", scale=alt.Scale(domain=packs,
                      range=SHAPES[:max(1, len(packs))]),
                      legend=None if len(packs) == 1 else alt.Legend())
    tips = [alt.Tooltip("pack:N", title="Pack"), alt.Tooltip("period_end:N", title="Period"),
            alt.Tooltip(f"{value}:Q", title=title, format=fmt)]
    layers = []
    if band:
        layers.extend(_band_layers(df, x, scale))
    if lo and hi:
        tips += [alt.Tooltip(f"{lo}:Q", title="Interval from", format=fmt),
                 alt.Tooltip(f"{hi}:Q", title="Interval to", format=fmt)]
        layers.append(alt.Chart(df).mark_rule(strokeWidth=2, opacity=0.5).encode(
            x=x, y=f"{lo}:Q", y2=f"{hi}:Q", color=colour).properties(name="trend_bars"))
    layers.append(alt.Chart(df).mark_line(strokeWidth=2).encode(
        x=x, y=y, color=colour, detail="pack:N").properties(name="trend_line"))
    layers.append(alt.Chart(df).mark_point(filled=True, size=110, opacity=1).encode(
        x=x, y=y, color=colour, shape=shape, tooltip=tips).properties(name="trend_points"))
    return alt.layer(*layers).properties(width="container", height=HEIGHT)


def _band_layers(df: pd.DataFrame, x: alt.X, scale: alt.Scale) -> list[alt.Chart]:
    """The policy band of each period: shaded between beta_min and beta_max where both are
    set, and a dashed tick at each limit that is set."""
    both = df.dropna(subset=["band_min", "band_max"])
    layers = []
    if len(both):
        layers.append(alt.Chart(both).mark_bar(color=TEAL, opacity=0.12, size=44).encode(
            x=x, y=alt.Y("band_min:Q", scale=scale), y2="band_max:Q").properties(
            name="trend_band"))
    for col, title in (("band_min", "Policy minimum"), ("band_max", "Policy maximum")):
        part = df.dropna(subset=[col])
        if len(part):
            layers.append(alt.Chart(part).mark_tick(
                color=GREY, thickness=2, size=44, strokeDash=[4, 3]).encode(
                x=x, y=alt.Y(f"{col}:Q", scale=scale),
                tooltip=[alt.Tooltip("period_end:N", title="Period"),
                         alt.Tooltip(f"{col}:Q", title=title, format=".2f")]).properties(
                name=f"trend_{col}"))
    return layers


def limits_chart(rows: pd.DataFrame, periods: list[str]) -> alt.Chart:
    """Each limit's status at each signed period end (every one in ``periods`` has a place,
    reported or not): one row per limit label (each sector's maximum its own), marker shape
    and colour by status; the tooltip gives value and limit in the pack's formats."""
    tips = [alt.Tooltip("label:N", title="Limit"), alt.Tooltip("period_end:N", title="Period"),
            alt.Tooltip("status:N", title="Status"),
            alt.Tooltip("value_text:N", title="Value"),
            alt.Tooltip("bound_text:N", title="Allowed")]
    rows = rows[["label", "period_end", "status", "value_text", "bound_text"]]
    n_limits = max(1, rows["label"].nunique())
    return alt.Chart(rows).mark_point(filled=True, size=220, opacity=1).encode(
        x=_period_x(periods),
        y=alt.Y("label:N", title=None, sort=sorted(rows["label"].unique()),
                axis=alt.Axis(labelLimit=260)),
        shape=alt.Shape("status:N", title="Status", scale=alt.Scale(
            domain=list(LIMIT_STATUSES), range=[LIMIT_SHAPES[s] for s in LIMIT_STATUSES])),
        color=alt.Color("status:N", title="Status", scale=alt.Scale(
            domain=list(LIMIT_STATUSES), range=[LIMIT_COLOURS[s] for s in LIMIT_STATUSES])),
        tooltip=tips,
    ).properties(name="limits_points", width="container", height=40 * n_limits + 40)


def spec_json(chart: alt.TopLevelMixin) -> str:
    """The chart's Vega-Lite specification (with the house config) as JSON text that is
    safe inside an HTML ``<script type="application/json">`` element: sorted keys, and
    ``<``, ``>`` and ``&`` written as JSON escapes so no input text can close the element."""
    spec = chart.to_dict()
    spec["config"] = CONFIG
    text = json.dumps(spec, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False)
    return (text.replace("&", "\\u0026").replace("<", "\\u003c").replace(">", "\\u003e")
            .replace("\u2028", "\\u2028").replace("\u2029", "\\u2029"))
