"""The flat figures of ``results/portfolio.json``, assembled from a pack's results (pure).

Per-period decimals unless ``_ann``; see the README for every key. The headline tracking
error, active return and information ratio are measured against ``tracking_reference``: the
benchmark when one is given, else the market proxy; the ``market_*`` forms are always
against the market proxy.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from scipy import stats

from reporter.analytics.covariance import model_figures
from reporter.analytics.sml import ABOVE, BELOW

if TYPE_CHECKING:
    from reporter.analytics.results import PackResults

DIVERSIFIABLE_SHARES = (0.90, 0.95)


def portfolio_summary(res: PackResults) -> dict:
    """Every flat figure of ``results/portfolio.json``."""
    P = res.periods_per_year
    f, r, c, w = res.portfolio_fit, res.ratios, res.concentration, res.window
    with np.errstate(invalid="ignore", divide="ignore"):
        alpha_t_ols, beta_t_ols = f.alpha / f.alpha_se, f.beta / f.beta_se
        alpha_t_hac, beta_t_hac = f.alpha / f.alpha_se_hac, f.beta / f.beta_se_hac
    return {
        "window_start": str(w.dates[0]),
        "window_end": str(w.dates[-1]),
        "n_periods": int(w.n_periods),
        "n_obs": f.n_obs,
        "periods_per_year": P,
        "mean_risk_free": res.sml.mean_risk_free,
        "mean_risk_free_ann": res.sml.mean_risk_free * P,
        "mean_market_premium": res.sml.mean_market_premium,
        "mean_market_premium_ann": res.sml.mean_market_premium * P,
        "beta_weighted": res.beta_weighted,
        "beta_regression": f.beta,
        # the unqualified se and t are under ``errors``, as the intervals are; both kinds of
        # errors are also named explicitly
        "beta_se": f.beta_se_used,
        "beta_t": f.beta_t,
        "beta_se_ols": f.beta_se,
        "beta_t_ols": float(beta_t_ols),
        "beta_se_hac": f.beta_se_hac,
        "beta_t_hac": float(beta_t_hac),
        "hac_lags": f.hac_lags,
        "errors": f.errors,
        "beta_ci_low": f.beta_ci[0],
        "beta_ci_high": f.beta_ci[1],
        "fitted_weight": res.fitted_weight,
        "alpha": f.alpha,
        "alpha_se": f.alpha_se_used,
        "alpha_t": f.alpha_t,
        "alpha_p": float(2.0 * stats.t.sf(abs(f.alpha_t), f.df_resid)),
        "alpha_se_ols": f.alpha_se,
        "alpha_t_ols": float(alpha_t_ols),
        "alpha_se_hac": f.alpha_se_hac,
        "alpha_t_hac": float(alpha_t_hac),
        "alpha_ci_low": f.alpha_ci[0],
        "alpha_ci_high": f.alpha_ci[1],
        "alpha_ann": f.alpha * P,
        "r_squared": f.r_squared,
        "residual_vol": f.residual_vol,
        "residual_vol_ann": f.residual_vol * np.sqrt(P),
        "mean_excess_return": r.mean_excess,
        "mean_excess_return_ann": r.mean_excess * P,
        "volatility": r.volatility,
        "volatility_ann": r.volatility * np.sqrt(P),
        "sharpe": r.sharpe,
        "sharpe_ann": r.sharpe * np.sqrt(P),
        "market_sharpe_ann": r.market_sharpe * np.sqrt(P),
        "treynor": r.treynor,
        "treynor_ann": r.treynor * P,
        **tracking_figures(res),
        "n_holdings": c.n_holdings,
        "n_fitted": int(res.fits.fitted.sum()),
        "effective_n": c.effective_n,
        "top10_weight": c.top10_weight,
        "largest_weight": c.largest_weight,
        # the portfolio's own regression: its residuals already hold every correlation
        # between the holdings' residuals
        "systematic_share": f.r_squared,
        "idiosyncratic_share": 1.0 - f.r_squared,
        # sum w_i^2 sigma_e,i^2 of the diagonal model: right only if residuals are uncorrelated
        "idiosyncratic_share_if_uncorrelated": 1.0 - res.variance.systematic_share,
        "average_variance": res.curve.average_variance,
        "average_covariance": res.curve.average_covariance,
        "rolling_window": res.rolling.window, "rolling_errors": "ols",
        **res.portfolio_extra,
        **performance_summary(res),
        **diversification_summary(res),
        **sml_counts(res),
        **res.line_tests_summary(),
        **res.coverage.summary(),
        "total_value": total_value(res),
    }


def total_value(res: PackResults) -> float | None:
    """The portfolio's value in the pack's currency: the sum of the holdings' market values,
    or None when the holdings give none."""
    if "market_value" not in res.securities:
        return None
    return float(res.securities["market_value"].sum())


def tracking_figures(res: PackResults) -> dict:
    """Active return, tracking error and information ratio: the headline ones against
    ``tracking_reference`` and the ``market_*`` ones against the market proxy."""
    P, r, q = res.periods_per_year, res.ratios, res.performance
    root = np.sqrt(P)
    market = (r.active_return, r.tracking_error, r.information_ratio)
    bench = (q.benchmark_active_return, q.benchmark_tracking_error,
             q.benchmark_information_ratio)
    act, te, ir = bench if res.tracking_reference == "benchmark" else market
    return {
        "active_return": act, "active_return_ann": act * P,
        "tracking_error": te, "tracking_error_ann": te * root,
        "information_ratio": ir, "information_ratio_ann": ir * root,
        "market_active_return": market[0], "market_active_return_ann": market[0] * P,
        "market_tracking_error": market[1], "market_tracking_error_ann": market[1] * root,
        "market_information_ratio": market[2],
        "market_information_ratio_ann": market[2] * root,
    }


def sml_counts(res: PackResults) -> dict:
    """How many fitted holdings the line's test flags, how many chance alone would flag
    (n x (1 - confidence)), and how many survive the Benjamini-Hochberg control."""
    sec = res.securities
    fitted = sec["status"].to_numpy() == "fitted"
    flagged = np.isin(sec["sml_position"].to_numpy()[fitted], (ABOVE, BELOW))
    kept = np.isin(sec["sml_position_fdr"].to_numpy()[fitted], (ABOVE, BELOW))
    n = int(fitted.sum())
    return {
        "sml_n_tested": n,
        "sml_n_flagged": int(flagged.sum()),
        "sml_n_expected_by_chance": n * (1.0 - res.confidence),
        "sml_n_flagged_fdr": int(kept.sum()),
        "sml_fdr_level": 1.0 - res.confidence,
    }


def performance_summary(res: PackResults) -> dict:
    """The performance figures of ``results/portfolio.json`` (see README)."""
    P, q = res.periods_per_year, res.performance
    return {
        "sharpe_se": q.sharpe_se,
        "sharpe_ann_se": q.sharpe_se * np.sqrt(P),
        "sharpe_se_hac": q.sharpe_se_hac,
        "sharpe_ann_se_hac": q.sharpe_se_hac * np.sqrt(P),
        "sharpe_hac_lags": q.sharpe_hac_lags,
        "sharpe_ann_lo": q.sharpe_ann_lo,
        "sharpe_ann_lo_se": q.sharpe_ann_lo_se,
        "lo_scale": q.lo_scale,
        "first_autocorrelation": q.first_autocorrelation,
        "appraisal_ratio": q.appraisal_ratio,
        "appraisal_ratio_ann": q.appraisal_ratio * np.sqrt(P),
        "m2": q.m2,
        "m2_ann": q.m2 * P,
        "m2_excess": q.m2_excess,
        "m2_excess_ann": q.m2_excess * P,
        "max_drawdown": q.max_drawdown,
        "drawdown_peak": q.drawdown_peak,
        "drawdown_trough": q.drawdown_trough,
        "drawdown_recovery": q.drawdown_recovery,
        "market_max_drawdown": q.market_max_drawdown,
        "downside_deviation": q.downside_deviation,
        "downside_deviation_ann": q.downside_deviation * np.sqrt(P),
        "sortino": q.sortino,
        "sortino_ann": q.sortino * np.sqrt(P),
        "mar": q.mar,
        "mar_ann": q.mar * P if q.mar_source == "risk-free rate" else (1 + q.mar) ** P - 1,
        "mar_source": q.mar_source,
        "return_arithmetic_ann": q.return_arithmetic_ann,
        "return_geometric_ann": q.return_geometric_ann,
        "market_return_arithmetic_ann": q.market_return_arithmetic_ann,
        "market_return_geometric_ann": q.market_return_geometric_ann,
        "tracking_reference": res.tracking_reference,
        "portfolio_source": res.portfolio_source,
        **benchmark_figures(res),
    }


def benchmark_figures(res: PackResults) -> dict:
    """Figures against the optional benchmark; None (null in JSON) without one."""
    P, q = res.periods_per_year, res.performance
    figures = {
        "benchmark_active_return": q.benchmark_active_return,
        "benchmark_active_return_ann": q.benchmark_active_return * P,
        "benchmark_tracking_error": q.benchmark_tracking_error,
        "benchmark_tracking_error_ann": q.benchmark_tracking_error * np.sqrt(P),
        "benchmark_information_ratio": q.benchmark_information_ratio,
        "benchmark_information_ratio_ann": q.benchmark_information_ratio * np.sqrt(P),
        "benchmark_return_arithmetic_ann": q.benchmark_return_arithmetic_ann,
        "benchmark_return_geometric_ann": q.benchmark_return_geometric_ann,
    }
    if res.tracking_reference != "benchmark":
        return dict.fromkeys(figures)
    return figures


def diversification_summary(res: PackResults) -> dict:
    """The covariance and risk figures of ``results/portfolio.json``."""
    root = np.sqrt(res.periods_per_year)
    rc, cv = res.risk, res.covariance
    n_eff = int(round(res.concentration.effective_n))
    return {
        **model_figures(cv, res.covariance_active, rc.volatility, rc.tracking_error,
                        res.ratios.volatility,
                        res.performance.benchmark_tracking_error
                        if res.tracking_reference == "benchmark" else res.ratios.tracking_error,
                        res.periods_per_year),
        "diversification_ratio": rc.diversification_ratio,
        "average_correlation": res.average_correlation,
        "random_subset_draws": res.band.draws,
        "random_subset_seed": res.band.seed,
        "random_share_below_portfolio": res.band.share_below(n_eff, res.ratios.volatility),
        "equal_weight_volatility_at_effective_n_ann": float(
            np.sqrt(res.curve.variance(res.concentration.effective_n)) * root),
        # smallest n whose equal-weight volatility has gone 90% (95%) of the way from one
        # holding's to the floor sqrt(average covariance), from this window's data
        **{f"holdings_for_{round(s * 100)}pct_diversifiable": res.curve.holdings_for_share(s)
           for s in DIVERSIFIABLE_SHARES},
    }
