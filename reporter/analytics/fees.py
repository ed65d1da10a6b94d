"""Net and gross performance and the fee drag, from a portfolio returns file that gives
both ``return`` (net of fees) and ``gross_return`` (pure; no I/O)."""

from __future__ import annotations

import numpy as np

from reporter.analytics.window import _align_optional
from reporter.models import DatedSeries


def fee_figures(dates: np.ndarray, net: DatedSeries, gross: DatedSeries, freq: str,
                periods_per_year: int) -> dict:
    """Over the periods ``dates`` (the estimation window): the net and gross cumulative
    returns prod(1 + r) - 1, their annualised geometric forms (1 + R)^(P / T) - 1, and the
    fee drag, gross less net, both cumulative and annualised (decimals), with the mean
    per-period drag. Periods where either is missing are left out of both (``n_periods``
    counts the rest). The geometric annualisation is the GIPS convention for periods over a
    year; the drag as the difference of the two is common practice, no source."""
    n = _align_optional(net, dates, freq)
    g = _align_optional(gross, dates, freq)
    ok = np.isfinite(n) & np.isfinite(g)
    t = int(ok.sum())
    if t == 0:
        return {"n_periods": 0}
    net_cum, gross_cum = float(np.prod(1 + n[ok]) - 1), float(np.prod(1 + g[ok]) - 1)
    scale = periods_per_year / t
    net_ann, gross_ann = (1 + net_cum) ** scale - 1, (1 + gross_cum) ** scale - 1
    return {"n_periods": t, "net_return": net_cum, "gross_return": gross_cum,
            "net_return_ann": net_ann, "gross_return_ann": gross_ann,
            "fee_drag": gross_cum - net_cum, "fee_drag_ann": gross_ann - net_ann,
            "fee_drag_mean": float(np.mean(g[ok] - n[ok]))}
