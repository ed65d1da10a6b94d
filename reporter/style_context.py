"""What the "Alpha before and after style" and "Attribution by sector" sections show: raw
numbers (per-period or ``_ann`` decimals) and the readings worked out from them. Templates
format them with the usual filters."""

from __future__ import annotations

import numpy as np

from reporter.analytics.pack import PackResults
from reporter.analytics.regression import t_critical
from reporter.analytics.style import StyleResults

CHANGED_MAX = 15        # holdings listed whose reading differs between the two models


def _clean(v):
    return None if isinstance(v, float) and not np.isfinite(v) else v


def factor_view(style: StyleResults, res: PackResults) -> dict | None:
    """The portfolio's alpha under both models, its loadings, the reading of how much of
    the market model's alpha the tilts explain, and the holdings whose reading changes."""
    pf = style.portfolio
    if pf is None:
        return None
    P = res.periods_per_year
    f = res.portfolio_fit
    lo, hi = pf.intervals()
    alphas = [
        {"model": "Market model", "alpha_ann": f.alpha * P, "low_ann": f.alpha_ci[0] * P,
         "high_ann": f.alpha_ci[1] * P, "t": f.alpha_t, "r_squared": f.r_squared,
         "beta": f.beta},
        {"model": "Factor model", "alpha_ann": pf.coef[0, 0] * P, "low_ann": lo[0, 0] * P,
         "high_ann": hi[0, 0] * P, "t": pf.t[0, 0], "r_squared": pf.r_squared[0],
         "beta": pf.coef[0, 1]},
    ]
    split = style.alpha_explained(f.alpha, f.beta)
    names = ["Market"] + list(pf.names)
    loadings = [{"factor": n, "loading": pf.coef[0, j + 1], "se": pf.se[0, j + 1],
                 "low": lo[0, j + 1], "high": hi[0, j + 1], "t": pf.t[0, j + 1],
                 "mean_ann": style.factor_means[j] * P,
                 "alpha_part_ann": list(split["parts"].values())[j] * P}
                for j, n in enumerate(names)]
    parts = sorted(((k, v * P) for k, v in split["parts"].items()), key=lambda kv: -abs(kv[1]))
    sec = res.securities
    fitted = sec[(sec["status"] == "fitted") & (sec["sml_position_factor"] != "")]
    changed = fitted[fitted["sml_position"] != fitted["sml_position_factor"]]
    changed = changed.sort_values(["weight", "security_id"], ascending=[False, True],
                                  kind="stable")
    market_alpha_in = f.alpha_ci[0] <= 0 <= f.alpha_ci[1]
    factor_alpha_in = lo[0, 0] <= 0 <= hi[0, 0]
    return {
        "names": list(pf.names), "alphas": alphas, "loadings": loadings,
        "gap_ann": split["gap"] * P, "share": _clean(float(split["share"])),
        "largest_part": parts[0][0] if parts else "", "largest_part_ann": parts[0][1],
        "parts": [{"name": k, "ann": v} for k, v in parts],
        "market_alpha_in_noise": bool(market_alpha_in),
        "factor_alpha_in_noise": bool(factor_alpha_in),
        "changed": [{k: _clean(v) for k, v in r.items()} for r in
                    changed.head(CHANGED_MAX)[["security_id", "name", "weight", "alpha_ann",
                                                "alpha_factor_ann", "sml_position",
                                                "sml_position_factor"]].to_dict("records")],
        "changed_total": int(len(changed)),
        "n_fitted": int(len(fitted)),
        "hac_lags": int(pf.hac_lags[0]), "n_obs": int(pf.n_obs[0]),
        "df": int(pf.df_resid[0]), "tcrit": float(t_critical(res.confidence, pf.df_resid[0])),
        "grs": style.grs,
    }


def attribution_view(style: StyleResults) -> dict | None:
    """The attribution table by sector, its totals and the largest effects in words."""
    a = style.attribution
    if a is None:
        return None
    table = a.table()
    rows = [{k: _clean(v) for k, v in r.items()} for r in table.to_dict("records")]
    effects = [(f"{r['sector']} {kind}", r[kind]) for r in rows
               for kind in ("allocation", "selection", "interaction")]
    effects.sort(key=lambda kv: (-abs(kv[1]), kv[0]))
    return {
        "rows": rows,
        "allocation": float(a.linked_allocation.sum()),
        "selection": float(a.linked_selection.sum()),
        "interaction": float(a.linked_interaction.sum()),
        "active": a.active_return, "portfolio": a.portfolio_compound,
        "benchmark": a.benchmark_compound, "n_periods": len(a.portfolio_total),
        "largest": [{"name": k, "value": v} for k, v in effects[:3]],
        "portfolio_only": [r["sector"] for r in rows if r["side"] == "portfolio only"],
        "benchmark_only": [r["sector"] for r in rows if r["side"] == "benchmark only"],
        "weights_source": a.weights_source,
    }
