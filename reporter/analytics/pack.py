"""Every figure the pack shows, computed from validated inputs (pure; no I/O)."""

from __future__ import annotations

from functools import partial

import numpy as np
import pandas as pd

from reporter.analytics.beta_variants import (
    blume_beta,
    dimson_beta,
    scholes_williams_beta,
    up_down_betas,
    vasicek_beta,
    vasicek_summary,
)
from reporter.analytics.covariance import holdings_and_active
from reporter.analytics.coverage import cover_holdings, fit_status, own_fits
from reporter.analytics.diversification import (
    concentration,
    equal_weight_curve,
    random_subset_band,
    risk_contributions,
    sector_weights,
    variance_split,
)
from reporter.analytics.gram import (
    excess_variance,
    pairwise_covariance_and_average_correlation,
    residual_gram,
)
from reporter.analytics.hac import hac_standard_errors
from reporter.analytics.market_model import Prepared, fit_market_model, fit_portfolio, t_critical
from reporter.analytics.moments import _Moments
from reporter.analytics.performance import holding_ratios, performance, period_returns
from reporter.analytics.results import (  # noqa: F401  (re-exported: the build imports them here)
    PORTFOLIO_SERIES,
    RISK_COLUMNS,
    ROLLING_COLUMNS,
    SECURITY_COLUMNS,
    PackResults,
)
from reporter.analytics.returns import portfolio_returns, sector_excess_returns
from reporter.analytics.rolling import HoldingsRolling, rolling_betas
from reporter.analytics.sml import (
    alpha_p_values,
    cross_sectional_test,
    fama_macbeth,
    fdr_positions,
    grs_test,
    performance_ratios,
    security_market_line,
)
from reporter.analytics.stress import stress_analysis
from reporter.analytics.window import _align_optional, _require_varying_market, build_window
from reporter.config import Settings
from reporter.errors import InputError
from reporter.models import DatedSeries, ValidInputs
from reporter.validate.pack import wipe_out_problem

BAND_MAX_SIZE = 120   # largest random equal-weight portfolio drawn for the curve's band


def _t_stat(estimate: np.ndarray, se: np.ndarray) -> np.ndarray:
    """estimate / se elementwise: NaN where both are zero (a holding that earns exactly the
    risk-free rate has no t-statistic), without numpy's warning for it."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return estimate / se


def analyse(inputs: ValidInputs, settings: Settings,
            benchmark: DatedSeries | None = None,
            portfolio: DatedSeries | None = None) -> PackResults:
    """Compute every figure of the pack. ``benchmark`` (optional) is the series tracking error,
    the information ratio and the risk contributions to tracking error are measured against,
    in place of the market proxy. ``portfolio`` (optional) is the portfolio's own return
    series, used in place of today's weights for every figure of the portfolio's returns
    (regression, ratios, period returns, rolling beta); risk contributions still use the
    weights."""
    P = settings.periods_per_year
    inputs, coverage = cover_holdings(inputs, settings, benchmark)   # cash, proxies
    win = build_window(inputs, settings)
    weights = inputs.holdings.weights
    x = win.market_excess
    _require_varying_market(x, settings)
    y = win.excess_returns
    prep = Prepared.of(y, x)
    fits = own_fits(fit_market_model(y, x, settings.min_obs, prep=prep), coverage)
    alpha_se_hac, beta_se_hac = hac_standard_errors(y, x, fits, settings.hac_lags, prep=prep)
    use_hac = settings.errors == "hac"
    per_holding = holding_ratios(y, fits.alpha, fits.residual_vol)
    a_se = alpha_se_hac if use_hac else fits.alpha_se
    b_se = beta_se_hac if use_hac else fits.beta_se
    sml = security_market_line(fits, x, win.risk_free, settings.confidence, alpha_se=a_se)
    tcrit = t_critical(settings.confidence, np.maximum(fits.n_obs - 2, 1))

    port = portfolio_returns(win.returns, weights)
    if portfolio is not None:
        port = _align_optional(portfolio, win.dates, settings.frequency)
    pfit = fit_portfolio(port - win.risk_free, x, settings.confidence, settings.errors,
                         settings.hac_lags)
    # every figure from the prepared matrices (two T x N) first, so that they are freed
    # before the shared Gram matrix and the risk model are formed
    beta_up, beta_down = up_down_betas(y, x, settings.min_obs, prep=prep)
    port_ex = (port - win.risk_free)[:, None]
    p_up, p_down = up_down_betas(port_ex, x, settings.min_obs)
    mkt = build_window(inputs, settings, periods=0, holdings=False)    # the whole history's
    pre = mkt.market_excess[:len(mkt.dates) - win.n_periods]   # the market before the window
    dimson = np.concatenate([
        dimson_beta(port_ex, x, settings.dimson_lags, settings.min_obs, before=pre),
        dimson_beta(y, x, settings.dimson_lags, settings.min_obs, prep, before=pre)])
    sw = np.concatenate([scholes_williams_beta(port_ex, x, settings.min_obs, pre),
                         scholes_williams_beta(y, x, settings.min_obs, pre, prep)])
    ok = fits.fitted
    line_fm, _ = fama_macbeth(y, np.where(ok, fits.beta, np.nan), x, prep=prep)  # fitted
    hold = inputs.holdings.frame
    sector_names = sorted(set(hold["sector"]))
    sector_ex = sector_excess_returns(win.returns, win.risk_free, weights,
                                      hold["sector"].to_numpy(), sector_names, prep)
    mkt_dates = mkt.dates
    del prep, mkt
    held = ok | coverage.stand_in        # cash (beta 0) and proxies count at their weights
    fitted_weight = float(weights[held].sum())
    beta_weighted = float(weights[held] @ fits.beta[held] / fitted_weight) if held.any() else np.nan
    ratios = performance_ratios(port, win.market, win.risk_free, pfit.beta)
    conc = concentration(weights)
    sectors = sector_weights(hold["sector"], weights)
    var = variance_split(weights, fits.beta, fits.residual_vol, x)
    complete = ok & np.isfinite(y).all(axis=0)
    del y       # the window's excess returns (T x N): no use below; freed before the Gram matrix
    shared = _Moments.of(win.returns)      # the one centred Gram matrix of the window
    pair_cov, avg_corr = pairwise_covariance_and_average_correlation(shared, np.flatnonzero(ok))
    curve = equal_weight_curve(pair_cov)
    n_fit = int(ok.sum())
    top = max(min(n_fit, BAND_MAX_SIZE), 1)     # beyond a few hundred the band is a line
    sizes = np.unique(np.concatenate([
        np.round(np.geomspace(1, top, 16)),
        [np.clip(round(conc.effective_n), 1, max(n_fit, 1))]]).astype(int))
    band = random_subset_band(pair_cov, sizes, settings.random_subsets, settings.seed)
    del pair_cov                # N x N: freed before the risk model's two N x N estimates
    bench_win = _align_optional(benchmark, win.dates, settings.frequency)
    if np.isfinite(x).all() and np.isfinite(win.risk_free).all() and complete.any():
        cols = np.flatnonzero(complete)
        grs_h = grs_test(None, x, "holdings", alpha=fits.alpha[complete],     # (no copy)
                         residual_cross=partial(residual_gram, shared, cols, win.risk_free, x),
                         return_variance=np.diagonal(shared.gram)[cols] / win.n_periods,
                         excess_variance=excess_variance(shared, cols, win.risk_free))
    else:
        grs_h = grs_test(win.excess_returns[:, complete], x, "holdings")
    cov, cov_active = holdings_and_active(
        win.returns, win.market if bench_win is None else bench_win, settings.covariance,
        moments=shared)
    del shared
    risk = risk_contributions(weights, cov.matrix, cov_active.matrix)

    line_cs = cross_sectional_test(fits.mean_excess[ok], fits.beta[ok],
                                   float(np.mean(x)), win.n_periods)
    full = np.isfinite(sector_ex).all(axis=0) & (np.ptp(sector_ex, axis=0) > 1e-12)  # not cash
    grs_s = grs_test(sector_ex[:, full], x, "sector portfolios")

    # the whole history; the window itself (no second copy of the returns) when it is that
    hist = (win if len(mkt_dates) == win.n_periods
            else build_window(inputs, settings, periods=0))
    # the holdings' rolling betas are made when asked for, a block at a time (charts, the
    # results file), from the returns held anyway; see HoldingsRolling
    rolling = HoldingsRolling(settings.rolling_window, hist.returns, hist.risk_free,
                              hist.market_excess)
    hist_raw = portfolio_returns(hist.returns, weights)
    if portfolio is not None:
        hist_raw = _align_optional(portfolio, hist.dates, settings.frequency)
    elif wiped := wipe_out_problem(settings, inputs.holdings, hist_raw, hist.dates):
        # validation refuses this from the holdings' own returns; cash and proxies stand in
        # here too, so say it the same way rather than fail in a fractional power below
        raise InputError([wiped])
    hist_port = hist_raw - hist.risk_free
    perf = performance(win.dates, port, win.market, win.risk_free, pfit.alpha,
                       pfit.residual_vol, P, settings.mar, benchmark=bench_win,
                       hac_lags=settings.hac_lags)
    bench_hist = _align_optional(benchmark, hist.dates, settings.frequency)
    periods = period_returns(hist.dates, hist_raw, hist.market, settings.period_end,
                             settings.frequency, P, benchmark=bench_hist)
    rolling_port = rolling_betas(hist_port[:, None], hist.market_excess, settings.rolling_window)

    alpha_p = alpha_p_values(fits.alpha, a_se, fits.n_obs)
    with np.errstate(invalid="ignore", divide="ignore"):
        beta_lo, beta_hi = fits.beta - tcrit * b_se, fits.beta + tcrit * b_se
        alpha_lo, alpha_hi = fits.alpha - tcrit * a_se, fits.alpha + tcrit * a_se
    sec = pd.DataFrame({
        "security_id": hold["security_id"].to_numpy(),
        "name": hold["name"].to_numpy(),
        "sector": hold["sector"].to_numpy(),
        "weight": weights,
        "n_obs": fits.n_obs,
        "status": fit_status(ok, coverage, settings.min_obs),
        # se and t under ``errors`` (as the intervals and positions); both kinds named below
        "alpha": fits.alpha, "alpha_se": a_se, "alpha_t": _t_stat(fits.alpha, a_se),
        "alpha_p": alpha_p,
        "beta": fits.beta, "beta_se": b_se, "beta_t": _t_stat(fits.beta, b_se),
        "r_squared": fits.r_squared, "residual_vol": fits.residual_vol,
        "mean_excess_return": np.where(ok, fits.mean_excess, np.nan),
        "sml_expected_excess": sml.expected_excess, "sml_residual": sml.residual,
        "treynor": sml.treynor, "sml_position": sml.position,
    })
    sec["alpha_ann"] = sec["alpha"] * P
    sec["residual_vol_ann"] = sec["residual_vol"] * np.sqrt(P)
    for col in ("mean_excess_return", "sml_expected_excess", "sml_residual", "treynor"):
        sec[f"{col}_ann"] = sec[col] * P
    sec["sml_position_fdr"] = fdr_positions(fits.alpha, alpha_p, ok, 1 - settings.confidence)
    sec["alpha_se_ols"], sec["alpha_t_ols"] = fits.alpha_se, fits.alpha_t
    sec["beta_se_ols"], sec["beta_t_ols"] = fits.beta_se, fits.beta_t
    sec["alpha_se_hac"], sec["alpha_t_hac"] = alpha_se_hac, _t_stat(fits.alpha, alpha_se_hac)
    sec["beta_se_hac"], sec["beta_t_hac"] = beta_se_hac, _t_stat(fits.beta, beta_se_hac)
    sec["beta_ci_low"] = beta_lo
    sec["beta_ci_high"] = beta_hi
    sec["beta_differs_from_1"] = np.where(ok, (beta_lo > 1) | (beta_hi < 1), False)
    sec["alpha_differs_from_0"] = np.where(ok, (alpha_lo > 0) | (alpha_hi < 0), False)
    sec["beta_blume"] = blume_beta(fits.beta, settings.blume_intercept, settings.blume_slope)
    sec["beta_vasicek"] = vasicek_beta(fits.beta, b_se, settings.vasicek_prior)
    sec["beta_up"] = np.where(ok, beta_up, np.nan)
    sec["beta_down"] = np.where(ok, beta_down, np.nan)
    sec["beta_dimson"] = np.where(ok, dimson[1:], np.nan)
    sec["beta_scholes_williams"] = np.where(ok, sw[1:], np.nan)
    sec["mean_excess_return_se"] = np.where(ok, per_holding["mean_excess_se"], np.nan)
    sec["sharpe"] = np.where(ok, per_holding["sharpe"], np.nan)
    sec["sharpe_ann"] = sec["sharpe"] * np.sqrt(P)
    sec["appraisal_ratio"] = per_holding["appraisal_ratio"]
    sec["appraisal_ratio_ann"] = sec["appraisal_ratio"] * np.sqrt(P)
    extra = [c for c in ("asset_class", "currency", "country", "market_value") if c in hold]
    for c in extra:
        sec[c] = hold[c].to_numpy()
    sec = sec[SECURITY_COLUMNS + extra]
    stress = stress_analysis(
        settings.stress, frequency=settings.frequency, periods_per_year=P,
        confidence=settings.confidence, seed=settings.seed, win=win, hist=hist, weights=weights,
        securities=sec, beta=pfit.beta, beta_ci=pfit.beta_ci, resid_vol=pfit.residual_vol,
        model_sd=risk.volatility, benchmark=bench_hist)
    portfolio_extra = {
        "beta_up": float(p_up[0]), "beta_down": float(p_down[0]),
        "beta_dimson": float(dimson[0]), "beta_scholes_williams": float(sw[0]),
        "beta_blume": float(blume_beta(pfit.beta, settings.blume_intercept,
                                       settings.blume_slope)),
        "dimson_lags": settings.dimson_lags, **vasicek_summary(fits.beta, b_se, settings),
    }
    return PackResults(
        window=win, fits=fits, sml=sml, portfolio_series=port, portfolio_fit=pfit,
        beta_weighted=beta_weighted, fitted_weight=fitted_weight, ratios=ratios,
        concentration=conc, sectors=sectors, variance=var, curve=curve, securities=sec,
        periods_per_year=P, errors=settings.errors, history_dates=hist.dates,
        rolling=rolling, rolling_portfolio=rolling_port, portfolio_extra=portfolio_extra,
        confidence=settings.confidence, performance=perf, period_table=periods,
        history_portfolio=hist_raw, history_market=hist.market,
        covariance=cov, covariance_active=cov_active, risk=risk, average_correlation=avg_corr,
        band=band, line_cross_section=line_cs, line_fama_macbeth=line_fm,
        grs_holdings=grs_h, grs_sectors=grs_s,
        tracking_reference="market proxy" if benchmark is None else "benchmark",
        history_benchmark=bench_hist,
        portfolio_source="current weights" if portfolio is None else "portfolio returns file",
        stress=stress,
        coverage=coverage)
