"""Every figure the pack shows, computed from validated inputs (pure; no I/O)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd

from reporter.analytics import summaries
from reporter.analytics.covariance import CovarianceEstimate, _Moments, holdings_and_active
from reporter.analytics.coverage import Coverage, cover_holdings, fit_status, own_fits
from reporter.analytics.diversification import (
    Concentration,
    EqualWeightCurve,
    RandomSubsetBand,
    RiskContributions,
    VarianceSplit,
    concentration,
    equal_weight_curve,
    random_subset_band,
    risk_contributions,
    sector_weights,
    variance_split,
)
from reporter.analytics.gram import pairwise_covariance_and_average_correlation, residual_gram
from reporter.analytics.performance import (
    PerformanceRatios,
    growth_of_one,
    holding_ratios,
    performance,
    period_returns,
)
from reporter.analytics.regression import (
    MarketModelFits,
    PortfolioFit,
    Prepared,
    RollingBetas,
    blume_beta,
    dimson_beta,
    fit_market_model,
    fit_portfolio,
    hac_standard_errors,
    rolling_betas,
    scholes_williams_beta,
    t_critical,
    up_down_betas,
    vasicek_beta,
    vasicek_summary,
)
from reporter.analytics.returns import Window, portfolio_returns, sector_returns
from reporter.analytics.sml import (
    GRSTest,
    LineTest,
    Ratios,
    SecurityMarketLine,
    alpha_p_values,
    cross_sectional_test,
    fama_macbeth,
    fdr_positions,
    grs_test,
    performance_ratios,
    security_market_line,
)
from reporter.analytics.stress import StressResults, stress_analysis
from reporter.analytics.window import _align_optional, _require_varying_market, build_window
from reporter.config import Settings
from reporter.memory import release_free_memory
from reporter.models import DatedSeries, ValidInputs

SECURITY_COLUMNS = [
    "security_id", "name", "sector", "weight", "n_obs", "status",
    "alpha", "alpha_se", "alpha_t", "alpha_p", "beta", "beta_se", "beta_t", "r_squared",
    "residual_vol",
    "mean_excess_return", "sml_expected_excess", "sml_residual", "treynor", "sml_position",
    "alpha_ann", "residual_vol_ann", "mean_excess_return_ann", "sml_expected_excess_ann",
    "sml_residual_ann", "treynor_ann", "sml_position_fdr",
    "alpha_se_ols", "alpha_t_ols", "beta_se_ols", "beta_t_ols",
    "alpha_se_hac", "alpha_t_hac", "beta_se_hac", "beta_t_hac", "beta_ci_low", "beta_ci_high",
    "beta_differs_from_1",
    "alpha_differs_from_0", "beta_blume", "beta_vasicek", "beta_up", "beta_down",
    "beta_dimson", "beta_scholes_williams",
    "mean_excess_return_se", "sharpe", "sharpe_ann", "appraisal_ratio", "appraisal_ratio_ann",
]
RISK_COLUMNS = ["level", "security_id", "name", "sector", "weight", "volatility",
                "vol_contribution", "vol_share", "te_contribution", "te_share",
                "volatility_ann", "vol_contribution_ann", "te_contribution_ann"]
ROLLING_COLUMNS = ["date", "series", "beta", "beta_se", "beta_ci_low", "beta_ci_high"]
PORTFOLIO_SERIES = "PORTFOLIO"
BAND_MAX_SIZE = 120   # largest random equal-weight portfolio drawn for the curve's band


@dataclass(frozen=True)
class PackResults:
    """All results for one pack. ``securities`` has :data:`SECURITY_COLUMNS`."""

    window: Window
    fits: MarketModelFits
    sml: SecurityMarketLine
    portfolio_series: np.ndarray      # r_p per period over the window
    portfolio_fit: PortfolioFit
    beta_weighted: float              # sum w_i beta_i over fitted holdings (weights rescaled)
    fitted_weight: float              # weight of the fitted holdings
    ratios: Ratios
    concentration: Concentration
    sectors: pd.DataFrame             # sector, weight, n_holdings
    variance: VarianceSplit
    curve: EqualWeightCurve
    securities: pd.DataFrame
    periods_per_year: int
    errors: str                       # "hac" | "ols": errors behind intervals and tests
    history_dates: np.ndarray         # every market period up to period_end
    rolling: RollingBetas             # holdings, over history_dates
    rolling_portfolio: RollingBetas   # the portfolio (one column), over history_dates
    portfolio_extra: dict             # up/down and thin-trading betas of the portfolio
    confidence: float
    performance: PerformanceRatios    # the portfolio's ratios over the window
    period_table: pd.DataFrame        # trailing and calendar-year returns (PERIOD_RETURN_COLUMNS)
    history_portfolio: np.ndarray     # r_p per period over history_dates (current weights)
    history_market: np.ndarray        # r_m per period over history_dates
    covariance: CovarianceEstimate    # the holdings' returns over the window
    covariance_active: CovarianceEstimate  # their returns relative to the market proxy
    risk: RiskContributions           # Euler contributions from ``covariance``
    average_correlation: float        # mean pairwise correlation of the fitted holdings
    band: RandomSubsetBand            # random equal-weight portfolios of the fitted holdings
    line_cross_section: LineTest      # mean excess return on beta across fitted holdings
    line_fama_macbeth: LineTest       # period-by-period cross-sections (Fama-MacBeth 1973)
    grs_holdings: GRSTest             # GRS on the holdings with a complete window
    grs_sectors: GRSTest              # GRS on sector portfolios (current weights)
    tracking_reference: str           # "market proxy" | "benchmark": what risk TE is against
    history_benchmark: np.ndarray | None  # r_b per period over history_dates (NaN if absent)
    portfolio_source: str             # "current weights" | "portfolio returns file"
    coverage: Coverage                # cash, proxied and excluded holdings
    stress: StressResults | None = None   # shocks, scenarios, VaR/ES, backtest

    def line_tests_summary(self) -> dict:
        """The tests of the security market line added to ``results/portfolio.json``."""
        out: dict = {}
        for tag, t in (("sml_cs", self.line_cross_section), ("sml_fm", self.line_fama_macbeth)):
            out.update({
                f"{tag}_n_assets": t.n_assets, f"{tag}_n_periods": t.n_periods,
                f"{tag}_intercept": t.intercept, f"{tag}_intercept_se": t.intercept_se,
                f"{tag}_intercept_t": t.intercept_t,
                f"{tag}_slope": t.slope, f"{tag}_slope_se": t.slope_se,
                f"{tag}_premium": t.premium, f"{tag}_slope_gap_t": t.slope_gap_t,
                f"{tag}_intercept_se_shanken": t.intercept_se_shanken,
                f"{tag}_slope_se_shanken": t.slope_se_shanken,
            })
        for tag, g in (("grs_holdings", self.grs_holdings), ("grs_sectors", self.grs_sectors)):
            out.update({
                f"{tag}_applies": g.applies, f"{tag}_reason": g.reason,
                f"{tag}_n_assets": g.n_assets, f"{tag}_n_periods": g.n_periods,
                f"{tag}_f": g.f_stat, f"{tag}_df_num": g.df_num, f"{tag}_df_den": g.df_den,
                f"{tag}_p_value": g.p_value,
            })
        return out

    @cached_property
    def risk_table(self) -> pd.DataFrame:
        """Euler risk contributions (:data:`RISK_COLUMNS`): one row per holding (largest
        contribution to volatility first), one per sector, and the total. Per-period decimals;
        ``*_share`` is the contribution over the total; ``_ann`` columns are x sqrt(P)."""
        rc, sec = self.risk, self.securities
        h = pd.DataFrame({
            "level": "holding", "security_id": sec["security_id"].to_numpy(),
            "name": sec["name"].to_numpy(), "sector": sec["sector"].to_numpy(),
            "weight": sec["weight"].to_numpy(), "volatility": rc.asset_vol,
            "vol_contribution": rc.vol_contribution, "vol_share": rc.vol_share,
            "te_contribution": rc.te_contribution, "te_share": rc.te_share,
        }).sort_values(["vol_contribution", "security_id"], ascending=[False, True],
                       kind="stable")
        cols = ["weight", "vol_contribution", "vol_share", "te_contribution", "te_share"]
        g = h.groupby("sector", sort=True)[cols].sum().reset_index().sort_values(
            ["vol_contribution", "sector"], ascending=[False, True], kind="stable")
        g.insert(0, "level", "sector")
        g["security_id"], g["name"], g["volatility"] = "", g["sector"], np.nan
        total = pd.DataFrame([{
            "level": "total", "security_id": "", "name": "Portfolio", "sector": "",
            "weight": float(sec["weight"].sum()), "volatility": rc.volatility,
            "vol_contribution": rc.volatility, "vol_share": 1.0,
            "te_contribution": rc.tracking_error, "te_share": 1.0}])
        out = pd.concat([h, g, total], ignore_index=True)
        root = np.sqrt(self.periods_per_year)
        for c in ("volatility", "vol_contribution", "te_contribution"):
            out[f"{c}_ann"] = out[c] * root
        return out[RISK_COLUMNS]

    @cached_property
    def growth_table(self) -> pd.DataFrame:
        """Growth of one unit, portfolio and market (and benchmark, when given), from the first
        period with a portfolio return: columns ``date, portfolio, market[, benchmark]``.
        The benchmark's line starts at its own first return."""
        ok = np.flatnonzero(np.isfinite(self.history_portfolio))
        start = int(ok[0]) if len(ok) else len(self.history_dates)
        return pd.DataFrame({
            "date": np.asarray(self.history_dates[start:]).astype(str),
            "portfolio": growth_of_one(self.history_portfolio[start:]),
            "market": growth_of_one(self.history_market[start:]),
        } | ({} if self.history_benchmark is None else {
            "benchmark": np.where(np.isfinite(self.history_benchmark[start:]).cumsum() > 0,
                                  growth_of_one(self.history_benchmark[start:]), np.nan)}))

    @property
    def rolling_table(self) -> pd.DataFrame:
        """Long table of rolling betas (:data:`ROLLING_COLUMNS`), portfolio first, complete
        windows only; dates ascending (``datetime64``; written as ISO dates). Built on each
        call and not kept: for 2,000 daily holdings it has millions of rows."""
        return self.rolling_rows()

    def rolling_rows(self, series: Sequence[str] | None = None) -> pd.DataFrame:
        """:attr:`rolling_table` for the given series ids only (``PORTFOLIO`` or security
        ids; all when None), built from those columns alone: a chart of ten holdings does not
        pay for a table of every holding on every date."""
        ids = self.rolling_ids()
        cols = np.arange(len(ids)) if series is None else np.flatnonzero(np.isin(ids, series))
        t_idx, j_idx, b, e, lo, hi = self.rolling_arrays(cols)
        return pd.DataFrame({
            "date": np.asarray(self.history_dates, dtype="datetime64[D]")[t_idx],
            "series": ids[cols][j_idx],
            "beta": b, "beta_se": e, "beta_ci_low": lo, "beta_ci_high": hi,
        })

    def rolling_ids(self) -> np.ndarray:
        """The rolling table's series ids, in order: ``PORTFOLIO``, then each holding."""
        return np.asarray((PORTFOLIO_SERIES,) + tuple(self.window.security_ids), dtype=object)

    def rolling_arrays(self, cols: np.ndarray) -> tuple[np.ndarray, ...]:
        """The rows of :attr:`rolling_table` for the series at positions ``cols`` of
        :meth:`rolling_ids` (ascending), as flat arrays: date index, position within
        ``cols``, beta, its standard error and the interval's ends. Only those columns are
        read, so that writing the table in blocks of series does not copy every holding's
        history for each block."""
        tcrit = float(t_critical(self.confidence, self.rolling.window - 2))
        with_port = bool(len(cols)) and cols[0] == 0
        held = cols[1:] - 1 if with_port else cols - 1

        def take(port: np.ndarray, holdings: np.ndarray) -> np.ndarray:
            return np.hstack([port, holdings[:, held]]) if with_port else holdings[:, held]

        beta = take(self.rolling_portfolio.beta, self.rolling.beta)
        se = take(self.rolling_portfolio.beta_se, self.rolling.beta_se)
        # series by series, each in date order (the transpose's non-zero order)
        j_idx, t_idx = np.nonzero(np.isfinite(beta.T))
        b, e = beta[t_idx, j_idx], se[t_idx, j_idx]
        return t_idx, j_idx, b, e, b - tcrit * e, b + tcrit * e

    def portfolio_summary(self) -> dict:
        """The flat figures written to ``results/portfolio.json`` (see README for units);
        assembled in :mod:`reporter.analytics.summaries`."""
        return summaries.portfolio_summary(self)


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
    a_se = alpha_se_hac if use_hac else fits.alpha_se
    b_se = beta_se_hac if use_hac else fits.beta_se
    sml = security_market_line(fits, x, win.risk_free, settings.confidence, alpha_se=a_se)
    tcrit = t_critical(settings.confidence, np.maximum(fits.n_obs - 2, 1))

    port = portfolio_returns(win.returns, weights)
    if portfolio is not None:
        port = _align_optional(portfolio, win.dates, settings.frequency)
    pfit = fit_portfolio(port - win.risk_free, x, settings.confidence, settings.errors,
                         settings.hac_lags)
    ok = fits.fitted
    held = ok | coverage.stand_in        # cash (beta 0) and proxies count at their weights
    fitted_weight = float(weights[held].sum())
    beta_weighted = float(weights[held] @ fits.beta[held] / fitted_weight) if held.any() else np.nan
    ratios = performance_ratios(port, win.market, win.risk_free, pfit.beta)
    conc = concentration(weights)
    hold = inputs.holdings.frame
    sectors = sector_weights(hold["sector"], weights)
    var = variance_split(weights, fits.beta, fits.residual_vol, x)
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
    complete = ok & np.isfinite(y).all(axis=0)
    if np.isfinite(x).all() and np.isfinite(win.risk_free).all() and complete.any():
        grs_h = grs_test(y[:, complete], x, "holdings", alpha=fits.alpha[complete],
                         residual_cross=residual_gram(shared, np.flatnonzero(complete),
                                                      win.risk_free, x))
    else:
        grs_h = grs_test(y[:, complete], x, "holdings")
    cov, cov_active = holdings_and_active(
        win.returns, win.market if bench_win is None else bench_win, settings.covariance,
        moments=shared)
    del shared
    risk = risk_contributions(weights, cov.matrix, cov_active.matrix)

    beta_up, beta_down = up_down_betas(y, x, settings.min_obs, prep=prep)
    port_ex = (port - win.risk_free)[:, None]
    p_up, p_down = up_down_betas(port_ex, x, settings.min_obs)

    line_cs = cross_sectional_test(fits.mean_excess[ok], fits.beta[ok],
                                   float(np.mean(x)), win.n_periods)
    line_fm, _ = fama_macbeth(y[:, ok], fits.beta[ok], x)
    sector_names = sorted(set(hold["sector"]))
    sector_of = hold["sector"].to_numpy()
    sector_ex = sector_returns(win.returns, weights, sector_of, sector_names) - \
        win.risk_free[:, None]
    full = np.isfinite(sector_ex).all(axis=0) & (np.ptp(sector_ex, axis=0) > 1e-12)  # not cash
    grs_s = grs_test(sector_ex[:, full], x, "sector portfolios")

    release_free_memory()      # the window's temporaries, before the whole history's
    hist = build_window(inputs, settings, periods=0)
    pre = hist.market_excess[:len(hist.dates) - win.n_periods]   # the market before the window
    dimson = np.concatenate([
        dimson_beta(port_ex, x, settings.dimson_lags, settings.min_obs, before=pre),
        dimson_beta(y, x, settings.dimson_lags, settings.min_obs, prep, before=pre)])
    sw = np.concatenate([scholes_williams_beta(port_ex, x, settings.min_obs, pre),
                         scholes_williams_beta(y, x, settings.min_obs, pre)])
    rolling = rolling_betas(hist.excess_returns, hist.market_excess, settings.rolling_window)
    hist_raw = portfolio_returns(hist.returns, weights)
    if portfolio is not None:
        hist_raw = _align_optional(portfolio, hist.dates, settings.frequency)
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
        "alpha": fits.alpha, "alpha_se": a_se, "alpha_t": fits.alpha / a_se,
        "alpha_p": alpha_p,
        "beta": fits.beta, "beta_se": b_se, "beta_t": fits.beta / b_se,
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
    sec["alpha_se_hac"], sec["alpha_t_hac"] = alpha_se_hac, fits.alpha / alpha_se_hac
    sec["beta_se_hac"], sec["beta_t_hac"] = beta_se_hac, fits.beta / beta_se_hac
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
    per_holding = holding_ratios(y, fits.alpha, fits.residual_vol)
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
