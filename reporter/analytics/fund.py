"""The whole fund and its mandates: the figures that only a fund has (pure; no I/O).

Each mandate is analysed as a single portfolio against its own benchmark, and the total fund
as a single portfolio of the combined holdings against the fund's benchmark
(:func:`reporter.analytics.pack.analyse` in both cases). This module adds what joins them:
each mandate's weight against its strategic weight and range, the mandates' Euler
contributions to the fund's volatility and tracking error, and the holdings they share.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from reporter.analytics.results import PackResults
from reporter.config import TOTAL_FUND

RANGE_WITHIN, RANGE_OUTSIDE = "within range", "outside range"

MANDATE_COLUMNS = [
    "mandate", "benchmark", "n_holdings", "strategic_weight", "range_low", "range_high",
    "weight", "weight_minus_strategic", "range_status", "value",
    "beta", "beta_ci_low", "beta_ci_high", "alpha_ann", "alpha_t",
    "tracking_error_ann", "information_ratio_ann", "volatility_ann",
    "vol_contribution", "vol_contribution_ann", "vol_share",
    "te_contribution", "te_contribution_ann", "te_share",
]


@dataclass(frozen=True)
class MandateRisk:
    """Euler contributions of the mandates to the fund's risk (per period).

    With U the N x M matrix of each mandate's holdings at fund weight (column m is v_m w_m on
    the fund's securities) and W = U 1 the fund's weights, mandate m contributes
    (U_m' S W) / sqrt(W' S W) to the volatility (S the holdings' covariance) and likewise to
    the tracking error with the covariance of returns relative to the fund's benchmark
    (Euler allocation; Litterman 1996 for its use in risk budgeting). Each set sums exactly to
    its total."""

    volatility: float
    vol_contribution: np.ndarray     # one per mandate
    tracking_error: float
    te_contribution: np.ndarray


def mandate_weight_matrix(fund_ids: tuple[str, ...], positions: pd.DataFrame,
                          mandates: list[str]) -> np.ndarray:
    """U: N x M, each mandate's holdings at their weight in the fund (v_m w_(m,i)), on the
    fund's securities in ``fund_ids`` order. ``positions`` has ``mandate, security_id,
    weight_in_fund``."""
    row = pd.Index(fund_ids).get_indexer(positions["security_id"])
    colm = pd.Index(mandates).get_indexer(positions["mandate"])
    u = np.zeros((len(fund_ids), len(mandates)))
    np.add.at(u, (row, colm), positions["weight_in_fund"].to_numpy(dtype=float))
    return u


def mandate_risk(u: np.ndarray, cov: np.ndarray, cov_active: np.ndarray) -> MandateRisk:
    """Euler contributions of each column of ``u`` to sqrt(W'SW) and sqrt(W'S_aW), W = u 1.
    Units: per-period decimals, like the covariances."""
    w = u.sum(axis=1)
    sw, saw = cov @ w, cov_active @ w
    vol = float(np.sqrt(max(float(w @ sw), 0.0)))
    te = float(np.sqrt(max(float(w @ saw), 0.0)))
    with np.errstate(invalid="ignore", divide="ignore"):
        return MandateRisk(volatility=vol, vol_contribution=u.T @ sw / vol,
                           tracking_error=te, te_contribution=u.T @ saw / te)


def overlap_holdings(positions: pd.DataFrame) -> pd.DataFrame:
    """Securities held by two or more mandates: ``security_id, name, n_mandates, mandates``
    (names joined by '; ') and ``combined_weight`` (their weight in the fund, every mandate's
    position added), largest first."""
    g = positions.groupby("security_id", sort=False)
    n = g["mandate"].nunique()
    shared = positions[positions["security_id"].isin(n.index[n > 1])]
    if shared.empty:
        return pd.DataFrame(columns=["security_id", "name", "n_mandates", "mandates",
                                     "combined_weight"])
    out = shared.groupby("security_id", sort=False).agg(
        name=("name", "first"), n_mandates=("mandate", "nunique"),
        mandates=("mandate", lambda s: "; ".join(s)),
        combined_weight=("weight_in_fund", "sum")).reset_index()
    return out.sort_values(["combined_weight", "security_id"], ascending=[False, True],
                           kind="stable").reset_index(drop=True)


def overlap_pairs(positions: pd.DataFrame, mandates: list[str]) -> pd.DataFrame:
    """For each pair of mandates: the number of securities both hold and those securities'
    combined weight in the fund (both mandates' positions in them)."""
    rows = []
    by = {m: positions[positions["mandate"] == m].set_index("security_id")["weight_in_fund"]
          for m in mandates}
    for i, a in enumerate(mandates):             # a handful of mandates: a loop over pairs
        for b in mandates[i + 1:]:
            common = by[a].index.intersection(by[b].index)
            rows.append({"mandate_a": a, "mandate_b": b, "n_common": len(common),
                         "combined_weight": float(by[a][common].sum() + by[b][common].sum())})
    return pd.DataFrame(rows, columns=["mandate_a", "mandate_b", "n_common", "combined_weight"])


def range_status(weight: float, rng: tuple[float, float] | None) -> str | None:
    """``within range`` or ``outside range`` for a mandate's current weight (None: no range)."""
    if rng is None:
        return None
    return RANGE_WITHIN if rng[0] <= weight <= rng[1] else RANGE_OUTSIDE


def mandates_table(names: list[str], benchmarks: list[str], weights: np.ndarray,
                   strategic: list[float], ranges: list[tuple[float, float] | None],
                   results: list[PackResults], total: PackResults, risk: MandateRisk,
                   total_benchmark: str) -> pd.DataFrame:
    """``results/mandates.csv`` (:data:`MANDATE_COLUMNS`): one row per mandate, each measured
    against its own benchmark, then the total fund against its benchmark. ``*_share`` is a
    mandate's Euler contribution over the fund's total; ``_ann`` columns are x sqrt(P) (risk)
    or x P (alpha)."""
    root = np.sqrt(total.periods_per_year)
    rows = []
    for k, (name, res) in enumerate(zip(names, results, strict=True)):
        s = res.portfolio_summary()
        lo, hi = ranges[k] if ranges[k] is not None else (np.nan, np.nan)
        rows.append({
            "mandate": name, "benchmark": benchmarks[k], "n_holdings": s["n_holdings"],
            "strategic_weight": strategic[k], "range_low": lo, "range_high": hi,
            "weight": float(weights[k]), "weight_minus_strategic": float(weights[k]) - strategic[k],
            "range_status": range_status(float(weights[k]), ranges[k]) or "",
            "value": np.nan if s["total_value"] is None else s["total_value"],
            "beta": s["beta_regression"], "beta_ci_low": s["beta_ci_low"],
            "beta_ci_high": s["beta_ci_high"], "alpha_ann": s["alpha_ann"],
            "alpha_t": s["alpha_t"], "tracking_error_ann": s["tracking_error_ann"],
            "information_ratio_ann": s["information_ratio_ann"],
            "volatility_ann": s["volatility_ann"],
            "vol_contribution": risk.vol_contribution[k],
            "vol_contribution_ann": risk.vol_contribution[k] * root,
            "vol_share": risk.vol_contribution[k] / risk.volatility,
            "te_contribution": risk.te_contribution[k],
            "te_contribution_ann": risk.te_contribution[k] * root,
            "te_share": risk.te_contribution[k] / risk.tracking_error,
        })
    s = total.portfolio_summary()
    rows.append({
        "mandate": TOTAL_FUND, "benchmark": total_benchmark, "n_holdings": s["n_holdings"],
        "strategic_weight": float(np.sum(strategic)), "range_low": np.nan, "range_high": np.nan,
        "weight": float(np.sum(weights)), "weight_minus_strategic": np.nan, "range_status": "",
        "value": sum(r["value"] for r in rows),       # NaN when the holdings give no values
        "beta": s["beta_regression"], "beta_ci_low": s["beta_ci_low"],
        "beta_ci_high": s["beta_ci_high"], "alpha_ann": s["alpha_ann"], "alpha_t": s["alpha_t"],
        "tracking_error_ann": s["tracking_error_ann"],
        "information_ratio_ann": s["information_ratio_ann"],
        "volatility_ann": s["volatility_ann"],
        "vol_contribution": risk.volatility, "vol_contribution_ann": risk.volatility * root,
        "vol_share": 1.0, "te_contribution": risk.tracking_error,
        "te_contribution_ann": risk.tracking_error * root, "te_share": 1.0,
    })
    return pd.DataFrame(rows, columns=MANDATE_COLUMNS)
