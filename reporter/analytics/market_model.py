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
from scipy import stats
from statsmodels.regression.linear_model import OLS
from statsmodels.tools.tools import add_constant


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


@dataclass(frozen=True)
class Prepared:
    """One holding-by-period matrix made ready for every regression: computed once, shared.

    ``m`` is the float mask (1 where both the holding and the market have a value), ``y0`` the
    returns with zeros where missing, ``xc`` the market's excess return centred on its mean
    ``x_mean`` (zeros where missing). Centring leaves slopes unchanged and keeps the sums
    below well conditioned.
    """

    y0: np.ndarray
    m: np.ndarray
    xc: np.ndarray
    x_mean: float
    x_ok: np.ndarray
    n_obs: np.ndarray           # observations per column (float), the column sums of ``m``

    @classmethod
    def of(cls, y: np.ndarray, x: np.ndarray) -> Prepared:
        y0, xc, x_ok, mask, x_mean = centred_inputs(y, x)
        m = mask.astype(float)
        return cls(y0=y0, m=m, xc=xc, x_mean=x_mean, x_ok=x_ok, n_obs=np.ones(m.shape[0]) @ m)


def centred_inputs(y: np.ndarray, x: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, float]:
    """For returns ``y`` (T x N) on one regressor ``x`` (T): ``y`` with 0 where it or ``x`` is
    missing, ``x`` centred on its mean over its own periods (0 where missing), where ``x`` is
    finite, where both are (T x N), and that mean."""
    y = np.asarray(y, dtype=float)
    x = np.asarray(x, dtype=float)
    x_ok = np.isfinite(x)
    mask = np.isfinite(y)
    mask &= x_ok[:, None]
    x_mean = float(x[x_ok].mean()) if x_ok.any() else 0.0
    return np.where(mask, y, 0.0), np.where(x_ok, x - x_mean, 0.0), x_ok, mask, x_mean


def fit_market_model(y: np.ndarray, x: np.ndarray, min_obs: int,
                     prep: Prepared | None = None) -> MarketModelFits:
    """OLS of each column of ``y`` (T x N, NaN = missing) on ``x`` (length T) with an intercept.

    Holdings with fewer than ``min_obs`` observations are not fitted (their statistics NaN),
    but their ``n_obs`` is reported. The sums are matrix products over all holdings at once.
    """
    p = prep or Prepared.of(y, x)
    xc = p.xc
    sm_ = np.stack([np.ones_like(xc), xc, xc * xc]) @ p.m      # n, sum x, sum x^2 per column
    sy_ = np.stack([np.ones_like(xc), xc]) @ p.y0              # sum y, sum xy
    n, sx, sxx = sm_
    sy, sxy = sy_
    syy = np.einsum("ij,ij->j", p.y0, p.y0)
    fitted = n >= max(min_obs, 3)
    with np.errstate(invalid="ignore", divide="ignore"):
        xbar, ybar = sx / n, sy / n
        cxx = sxx - n * xbar**2
        cxy = sxy - n * xbar * ybar
        cyy = syy - n * ybar**2
        beta = cxy / cxx
        ssr = np.maximum(cyy - beta * cxy, 0.0)
        sigma2 = ssr / (n - 2)
        beta_se = np.sqrt(sigma2 / cxx)
        x_bar_raw = xbar + p.x_mean
        alpha = ybar - beta * x_bar_raw
        alpha_se = np.sqrt(sigma2 * (1.0 / n + x_bar_raw**2 / cxx))
        r2 = 1.0 - ssr / cyy
    nan = np.where(fitted, 1.0, np.nan)
    return MarketModelFits(
        n_obs=n.astype(int), fitted=fitted,
        alpha=alpha * nan, alpha_se=alpha_se * nan, beta=beta * nan, beta_se=beta_se * nan,
        r_squared=r2 * nan, residual_vol=np.sqrt(sigma2) * nan,
        mean_excess=np.where(n > 0, ybar, np.nan),
        mean_market_excess=np.where(n > 0, x_bar_raw, np.nan),
    )


@dataclass(frozen=True)
class PortfolioFit:
    """The portfolio's own market-model regression (statsmodels OLS). Per-period decimals.

    ``alpha_se``/``beta_se`` are the classical OLS errors; ``*_se_hac`` the Newey-West ones.
    The intervals and t-statistics use the errors named in ``errors``.
    """

    n_obs: int
    alpha: float
    alpha_se: float
    beta: float
    beta_se: float
    alpha_se_hac: float
    beta_se_hac: float
    hac_lags: int
    errors: str                 # "hac" | "ols": which errors the intervals use
    r_squared: float
    residual_vol: float
    df_resid: float
    beta_ci: tuple[float, float]
    alpha_ci: tuple[float, float]

    @property
    def alpha_se_used(self) -> float:
        return self.alpha_se_hac if self.errors == "hac" else self.alpha_se

    @property
    def beta_se_used(self) -> float:
        return self.beta_se_hac if self.errors == "hac" else self.beta_se

    @property
    def alpha_t(self) -> float:
        return self.alpha / self.alpha_se_used

    @property
    def beta_t(self) -> float:
        return self.beta / self.beta_se_used


def fit_portfolio(y: np.ndarray, x: np.ndarray, confidence: float, errors: str = "ols",
                  hac_lags: int | None = None) -> PortfolioFit:
    """OLS of the portfolio's excess return on the market's, with OLS and Newey-West errors
    (statsmodels ``cov_type='HAC'``, Bartlett kernel, small-sample correction) and
    t-based confidence intervals from the errors chosen in ``errors``."""
    ok = np.isfinite(y) & np.isfinite(x)
    X = add_constant(x[ok], has_constant="add")
    res = OLS(y[ok], X).fit()
    lags = int(newey_west_lags(int(res.nobs))) if hac_lags is None else int(hac_lags)
    hac = OLS(y[ok], X).fit(cov_type="HAC", cov_kwds={"maxlags": lags,
                                                          "use_correction": True})
    tcrit = stats.t.ppf(0.5 + confidence / 2, res.df_resid)
    a, b = res.params
    sa, sb = (hac.bse if errors == "hac" else res.bse)
    return PortfolioFit(
        n_obs=int(res.nobs), alpha=float(a), alpha_se=float(res.bse[0]), beta=float(b),
        beta_se=float(res.bse[1]), alpha_se_hac=float(hac.bse[0]),
        beta_se_hac=float(hac.bse[1]), hac_lags=lags, errors=errors,
        r_squared=float(res.rsquared), residual_vol=float(np.sqrt(res.scale)),
        df_resid=float(res.df_resid),
        beta_ci=(float(b - tcrit * sb), float(b + tcrit * sb)),
        alpha_ci=(float(a - tcrit * sa), float(a + tcrit * sa)),
    )


def t_critical(confidence: float, df: np.ndarray | float) -> np.ndarray | float:
    """Two-sided Student-t critical value for ``confidence`` with ``df`` degrees of freedom."""
    return stats.t.ppf(0.5 + confidence / 2, df)


def newey_west_lags(n_obs: np.ndarray | int) -> np.ndarray:
    """Default Newey-West lag L = floor(4 (T/100)^(2/9)) (Newey and West 1994's rule)."""
    n = np.asarray(n_obs, dtype=float)
    return np.floor(4.0 * (n / 100.0) ** (2.0 / 9.0)).astype(int)
