"""The pack's results: one frozen object holding every figure, and the tables built from
it on demand (risk contributions, growth of one unit, rolling betas). Computed by
:func:`reporter.analytics.pack.analyse`."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd

from reporter.analytics import summaries
from reporter.analytics.covariance import CovarianceEstimate
from reporter.analytics.coverage import Coverage
from reporter.analytics.diversification import (
    Concentration,
    EqualWeightCurve,
    RandomSubsetBand,
    RiskContributions,
    VarianceSplit,
)
from reporter.analytics.market_model import MarketModelFits, PortfolioFit, t_critical
from reporter.analytics.performance import PerformanceRatios, growth_of_one
from reporter.analytics.returns import Window
from reporter.analytics.rolling import HoldingsRolling, RollingBetas
from reporter.analytics.sml import GRSTest, LineTest, Ratios, SecurityMarketLine
from reporter.analytics.stress import StressResults

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
    rolling: HoldingsRolling          # holdings, over history_dates, made when asked for
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

    def rolling_arrays(self, cols: np.ndarray, made: RollingBetas | None = None
                       ) -> tuple[np.ndarray, ...]:
        """The rows of :attr:`rolling_table` for the series at positions ``cols`` of
        :meth:`rolling_ids` (ascending), as flat arrays: date index, position within
        ``cols``, beta, its standard error and the interval's ends. Only those holdings'
        betas are made (see :class:`~reporter.analytics.rolling.HoldingsRolling`), so that
        writing the table in blocks of series never holds every holding's history; or
        ``made`` gives them (the holdings of ``cols``, in order), made for a larger block."""
        tcrit = float(t_critical(self.confidence, self.rolling.window - 2))
        with_port = bool(len(cols)) and cols[0] == 0
        held = made if made is not None else self.rolling.block(
            cols[1:] - 1 if with_port else cols - 1)

        def take(port: np.ndarray, holdings: np.ndarray) -> np.ndarray:
            return np.hstack([port, holdings]) if with_port else holdings

        beta = take(self.rolling_portfolio.beta, held.beta)
        se = take(self.rolling_portfolio.beta_se, held.beta_se)
        # series by series, each in date order (the transpose's non-zero order)
        j_idx, t_idx = np.nonzero(np.isfinite(beta.T))
        b, e = beta[t_idx, j_idx], se[t_idx, j_idx]
        return t_idx, j_idx, b, e, b - tcrit * e, b + tcrit * e

    def portfolio_summary(self) -> dict:
        """The flat figures written to ``results/portfolio.json`` (see README for units);
        assembled in :mod:`reporter.analytics.summaries`."""
        return summaries.portfolio_summary(self)
