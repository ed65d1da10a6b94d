"""Factor-model (multi-index) regressions, fitted for every holding at once.

For holding i over the window, on the periods where it has a return (no filling):

    r_i,t - r_f,t = alpha_i + beta_i (r_m,t - r_f,t) + sum_k b_ik f_k,t + e_i,t

with f_k the user's long-short factor returns (size, value, momentum ...), as in Fama and
French (1993) and Carhart (1997). Coefficients and classical errors come from the batched
normal equations of :func:`reporter.analytics.beta_variants.masked_ols`; Newey-West (1987) errors
follow the market model's rules (Bartlett kernel, lag floor(4 (n/100)^(2/9)) of each holding's
own n unless fixed, small-sample factor n/(n-k), lags over consecutive observations for a
holding with a gap inside its history). No Python loop over holdings: loops run over lags
and over pairs of regressors only. Units: per-period decimals.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from reporter.analytics.beta_variants import masked_ols
from reporter.analytics.hac import interior_gaps
from reporter.analytics.market_model import Prepared, newey_west_lags, t_critical
from reporter.analytics.sml import ABOVE, BELOW, WITHIN


@dataclass(frozen=True)
class FactorFits:
    """Per-column results of the factor model (N columns; NaN where not fitted).

    ``coef``, ``se_ols``, ``se_hac`` are N x k with k = 2 + K in the order
    ``[alpha, market, factor_1 .. factor_K]``; ``se`` is the one ``errors`` chose.
    """

    names: tuple[str, ...]          # the K factor names
    n_obs: np.ndarray
    fitted: np.ndarray
    coef: np.ndarray
    se_ols: np.ndarray
    se_hac: np.ndarray
    errors: str
    hac_lags: np.ndarray
    r_squared: np.ndarray
    confidence: float

    @property
    def k(self) -> int:
        return self.coef.shape[1]

    @property
    def se(self) -> np.ndarray:
        return self.se_hac if self.errors == "hac" else self.se_ols

    @property
    def df_resid(self) -> np.ndarray:
        return self.n_obs - self.k

    @property
    def t(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.coef / self.se

    @property
    def p_values(self) -> np.ndarray:
        """Two-sided Student-t p-values with n - k degrees of freedom."""
        df = np.maximum(self.df_resid, 1)[:, None]
        return 2.0 * stats.t.sf(np.abs(self.t), df)

    def intervals(self) -> tuple[np.ndarray, np.ndarray]:
        """(low, high), N x k: coef -/+ t(confidence, n - k) x se."""
        tc = t_critical(self.confidence, np.maximum(self.df_resid, 1))[:, None]
        with np.errstate(invalid="ignore"):
            return self.coef - tc * self.se, self.coef + tc * self.se

    def positions(self) -> np.ndarray:
        """Above / below the factor model's line (alpha's interval wholly above / below zero),
        within estimation error, or "" when not fitted."""
        lo, hi = self.intervals()
        pos = np.where(lo[:, 0] > 0, ABOVE, np.where(hi[:, 0] < 0, BELOW, WITHIN))
        return np.where(self.fitted, pos, "").astype(object)


def design(market_excess: np.ndarray, factors: np.ndarray) -> np.ndarray:
    """The T x (2 + K) regressors [1, r_m - r_f, f_1 .. f_K]."""
    x = np.asarray(market_excess, float)
    return np.column_stack([np.ones_like(x), x, np.asarray(factors, float).reshape(len(x), -1)])


def fit_factor_model(y: np.ndarray, market_excess: np.ndarray, factors: np.ndarray,
                     names: tuple[str, ...], min_obs: int, errors: str = "hac",
                     hac_lags: int | None = None, confidence: float = 0.95,
                     prep: Prepared | None = None) -> FactorFits:
    """OLS of each column of ``y`` (T x N excess returns, NaN = missing) on the market's excess
    return and the factors (T x K), each column on its own observed periods, with classical
    and Newey-West standard errors (see the module docstring). ``prep`` is the market model's
    :class:`Prepared` of the same ``y`` and market, shared when given."""
    y = np.asarray(y, float)
    X = design(market_excess, factors)
    p = prep or Prepared.of(y, X[:, 1])
    coef, se_ols, n = masked_ols(None, X, min_obs, p)
    fitted = np.isfinite(coef).all(axis=1)
    row_ok = np.isfinite(X).all(axis=1)
    m = p.m * row_ok[:, None]
    X0 = np.where(row_ok[:, None], X, 0.0)
    b = np.nan_to_num(coef)
    e = (p.y0 - X0 @ b.T) * m                       # residuals, zero where missing
    nf = n.astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        ybar = (p.y0 * m).sum(axis=0) / nf
        tss = np.einsum("ij,ij->j", p.y0 * m, p.y0) - nf * ybar**2
        r2 = 1.0 - np.einsum("ij,ij->j", e, e) / tss
    L = np.full(len(n), hac_lags) if hac_lags is not None else newey_west_lags(nf)
    S = _long_run_scores(e, X0, m, L)
    k = X.shape[1]
    xtx = (np.stack([X0[:, a] * X0[:, b] for a in range(k) for b in range(k)])
           @ m).T.reshape(len(n), k, k)                 # X'diag(m_j)X for every column j
    with np.errstate(invalid="ignore", divide="ignore"):
        inv = np.linalg.inv(np.where(fitted[:, None, None], xtx, np.eye(k)))
        cov = inv @ S @ inv * (nf / (nf - k))[:, None, None]
        se_hac = np.sqrt(np.diagonal(cov, axis1=1, axis2=2))
    keep = np.where(fitted, 1.0, np.nan)
    return FactorFits(names=tuple(names), n_obs=n, fitted=fitted, coef=coef, se_ols=se_ols,
                      se_hac=se_hac * keep[:, None], errors=errors, hac_lags=L,
                      r_squared=r2 * keep, confidence=confidence)


def _long_run_scores(e: np.ndarray, X0: np.ndarray, m: np.ndarray,
                     L: np.ndarray) -> np.ndarray:
    """Bartlett-weighted long-run covariance of the OLS scores e_t x_t, N x k x k.

    Columns without a gap inside their history share the regressors row by row, so each lag
    is one matrix product over all of them: sum_t x_ta x_(t-l)b e_t e_(t-l). Columns with an
    interior gap are compacted first (their observed periods moved together, in order), so
    that their lags run over consecutive observations as statsmodels' do on the dropped
    series."""
    k = X0.shape[1]
    S = np.empty((e.shape[1], k, k))
    gapped = interior_gaps(m > 0)
    plain, holed = np.flatnonzero(~gapped), np.flatnonzero(gapped)
    if len(plain):
        S[plain] = _shared_scores(e[:, plain], X0, L[plain])
    if len(holed):
        S[holed] = _compacted_scores(e[:, holed], X0, m[:, holed] > 0, L[holed])
    return S


def _shared_scores(e: np.ndarray, X0: np.ndarray, L: np.ndarray) -> np.ndarray:
    """:func:`_long_run_scores` for columns on the common rows of ``X0``."""
    k, N = X0.shape[1], e.shape[1]
    pairs = [(a, b) for a in range(k) for b in range(k)]
    S = (np.stack([X0[:, a] * X0[:, b] for a, b in pairs]) @ (e * e)).T.reshape(N, k, k)
    for lag in range(1, int(L.max(initial=0)) + 1):
        w = np.where(lag <= L, 1.0 - lag / (L + 1.0), 0.0)
        g = (np.stack([X0[lag:, a] * X0[:-lag, b] for a, b in pairs])
             @ (e[lag:] * e[:-lag])).T.reshape(N, k, k)
        S += w[:, None, None] * (g + g.transpose(0, 2, 1))
    return S


def _compacted_scores(e: np.ndarray, X0: np.ndarray, mask: np.ndarray,
                      L: np.ndarray) -> np.ndarray:
    """:func:`_long_run_scores` for columns whose observed periods are first moved to the top
    (in order), so each column has its own regressors: scores G x T x k, and the sums are
    batched matrix products (k x T)(T x k) per column and lag."""
    order = np.argsort(~mask, axis=0, kind="stable").T          # G x T
    mc = np.take_along_axis(mask.T, order, axis=1)
    ec = np.where(mc, np.take_along_axis(e.T, order, axis=1), 0.0)
    s = X0[order] * ec[:, :, None]                               # G x T x k
    st = s.transpose(0, 2, 1)
    S = st @ s
    for lag in range(1, int(L.max(initial=0)) + 1):
        w = np.where(lag <= L, 1.0 - lag / (L + 1.0), 0.0)
        g = st[:, :, lag:] @ s[:, :-lag]
        S += w[:, None, None] * (g + g.transpose(0, 2, 1))
    return S


# ------------------------------------------------------------------------------- GRS

@dataclass(frozen=True)
class FactorGRS:
    """Gibbons, Ross and Shanken (1989) F-test that every alpha of the factor model is zero."""

    applies: bool
    reason: str
    n_assets: int
    n_periods: int
    n_factors: int              # L: the market and the user's factors
    f_stat: float
    p_value: float


def grs_factor_test(excess: np.ndarray, factors: np.ndarray) -> FactorGRS:
    """GRS with N assets and L factors (the market's excess return first):
    F = (T - N - L)/N x a' S^-1 a / (1 + mu' O^-1 mu) ~ F(N, T - N - L) under normal errors,
    a the N intercepts of the time-series regressions on all L factors, S the residual
    covariance and mu, O the factors' mean and covariance, both maximum-likelihood (divisor T)
    (Gibbons, Ross and Shanken 1989; the multi-factor form in Cochrane, *Asset Pricing*,
    ch. 12). Needs complete T x N returns and T > N + L; otherwise says why it cannot apply."""
    y = np.asarray(excess, float)
    f = np.asarray(factors, float)
    T, N = y.shape
    L = f.shape[1]
    nan = float("nan")
    if N == 0:
        return FactorGRS(False, "no holdings with a complete history in the window",
                         0, T, L, nan, nan)
    if not T > N + L:
        return FactorGRS(False, f"needs more periods than holdings plus factors (T = {T}, "
                         f"N = {N}, factors = {L})", N, T, L, nan, nan)
    X = np.column_stack([np.ones(T), f])
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    e = y - X @ coef
    a = coef[0]
    sigma = e.T @ e / T
    mu = f.mean(axis=0)
    omega = (f - mu).T @ (f - mu) / T
    try:
        quad = float(a @ np.linalg.solve(sigma, a))
        scale = 1.0 + float(mu @ np.linalg.solve(omega, mu))
    except np.linalg.LinAlgError:
        return FactorGRS(False, "the residual covariance of the holdings is singular",
                         N, T, L, nan, nan)
    stat = (T - N - L) / N * quad / scale
    return FactorGRS(True, "", N, T, L, float(stat), float(stats.f.sf(stat, N, T - N - L)))
