"""Single-index (market model) regressions, fitted for every holding at once.

For holding i over the window, on the periods where it has a return (no filling):

    r_i,t - r_f,t = alpha_i + beta_i (r_m,t - r_f,t) + e_i,t

estimated by ordinary least squares (the CAPM / Jensen 1968 time-series regression).
Standard errors are the classical OLS ones, sigma^2 (X'X)^-1 with sigma^2 = SSR/(n-2).
The fits are vectorised over holdings with masked sums; no Python loop over holdings.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import statsmodels.api as sm
from scipy import stats


@dataclass(frozen=True)
class MarketModelFits:
    """Per-holding OLS results (arrays of length N; NaN where not fitted).

    Units: ``alpha``, ``residual_vol`` and ``mean_excess`` are per-period decimals.
    """

    n_obs: np.ndarray
    fitted: np.ndarray          # bool: n_obs >= min_obs
    alpha: np.ndarray
    alpha_se: np.ndarray
    beta: np.ndarray
    beta_se: np.ndarray
    r_squared: np.ndarray
    residual_vol: np.ndarray    # sqrt(SSR / (n - 2))
    mean_excess: np.ndarray     # mean of the holding's excess return over its own periods
    mean_market_excess: np.ndarray  # mean market excess return over the holding's periods

    @property
    def alpha_t(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.alpha / self.alpha_se

    @property
    def beta_t(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.beta / self.beta_se


def fit_market_model(y: np.ndarray, x: np.ndarray, min_obs: int) -> MarketModelFits:
    """OLS of each column of ``y`` (T x N, NaN = missing) on ``x`` (length T) with an intercept.

    Holdings with fewer than ``min_obs`` observations are not fitted (their statistics NaN),
    but their ``n_obs`` is reported.
    """
    y = np.asarray(y, dtype=float)
    x = np.asarray(x, dtype=float)
    mask = np.isfinite(y) & np.isfinite(x)[:, None]
    m = mask.astype(float)
    n = m.sum(axis=0)
    fitted = n >= max(min_obs, 3)
    xm = np.where(mask, x[:, None], 0.0)
    ym = np.where(mask, y, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        xbar = xm.sum(axis=0) / n
        ybar = ym.sum(axis=0) / n
        xc = np.where(mask, x[:, None] - xbar, 0.0)
        yc = np.where(mask, y - ybar, 0.0)
        sxx = np.einsum("ij,ij->j", xc, xc)
        sxy = np.einsum("ij,ij->j", xc, yc)
        syy = np.einsum("ij,ij->j", yc, yc)
        beta = sxy / sxx
        alpha = ybar - beta * xbar
        resid = yc - beta * xc
        ssr = np.einsum("ij,ij->j", resid, resid)
        sigma2 = ssr / (n - 2)
        beta_se = np.sqrt(sigma2 / sxx)
        alpha_se = np.sqrt(sigma2 * (1.0 / n + xbar**2 / sxx))
        r2 = 1.0 - ssr / syy
    nan = np.where(fitted, 1.0, np.nan)
    return MarketModelFits(
        n_obs=n.astype(int), fitted=fitted,
        alpha=alpha * nan, alpha_se=alpha_se * nan, beta=beta * nan, beta_se=beta_se * nan,
        r_squared=r2 * nan, residual_vol=np.sqrt(sigma2) * nan,
        mean_excess=np.where(n > 0, ybar, np.nan), mean_market_excess=np.where(n > 0, xbar,
                                                                               np.nan),
    )


@dataclass(frozen=True)
class PortfolioFit:
    """The portfolio's own market-model regression (statsmodels OLS). Per-period decimals."""

    n_obs: int
    alpha: float
    alpha_se: float
    beta: float
    beta_se: float
    r_squared: float
    residual_vol: float
    df_resid: float
    beta_ci: tuple[float, float]
    alpha_ci: tuple[float, float]

    @property
    def alpha_t(self) -> float:
        return self.alpha / self.alpha_se

    @property
    def beta_t(self) -> float:
        return self.beta / self.beta_se


def fit_portfolio(y: np.ndarray, x: np.ndarray, confidence: float) -> PortfolioFit:
    """OLS of the portfolio's excess return on the market's, with t-based confidence intervals."""
    ok = np.isfinite(y) & np.isfinite(x)
    res = sm.OLS(y[ok], sm.add_constant(x[ok], has_constant="add")).fit()
    tcrit = stats.t.ppf(0.5 + confidence / 2, res.df_resid)
    a, b = res.params
    sa, sb = res.bse
    return PortfolioFit(
        n_obs=int(res.nobs), alpha=float(a), alpha_se=float(sa), beta=float(b),
        beta_se=float(sb), r_squared=float(res.rsquared), residual_vol=float(np.sqrt(res.scale)),
        df_resid=float(res.df_resid),
        beta_ci=(float(b - tcrit * sb), float(b + tcrit * sb)),
        alpha_ci=(float(a - tcrit * sa), float(a + tcrit * sa)),
    )


def t_critical(confidence: float, df: np.ndarray | float) -> np.ndarray | float:
    """Two-sided Student-t critical value for ``confidence`` with ``df`` degrees of freedom."""
    return stats.t.ppf(0.5 + confidence / 2, df)
