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
        y = np.asarray(y, dtype=float)
        x = np.asarray(x, dtype=float)
        x_ok = np.isfinite(x)
        mask = np.isfinite(y)
        mask &= x_ok[:, None]
        x_mean = float(x[x_ok].mean()) if x_ok.any() else 0.0
        m = mask.astype(float)
        return cls(y0=np.where(mask, y, 0.0), m=m, xc=np.where(x_ok, x - x_mean, 0.0),
                   x_mean=x_mean, x_ok=x_ok, n_obs=np.ones(m.shape[0]) @ m)


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


# --------------------------------------------------------------------------- robust errors

def newey_west_lags(n_obs: np.ndarray | int) -> np.ndarray:
    """Default Newey-West lag L = floor(4 (T/100)^(2/9)) (Newey and West 1994's rule)."""
    n = np.asarray(n_obs, dtype=float)
    return np.floor(4.0 * (n / 100.0) ** (2.0 / 9.0)).astype(int)


def _compact(y: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Move each column's observed periods to the top, in order (zeros below).

    HAC lags then run over a holding's consecutive *observations*, as they do when a series
    with gaps is dropped to its observed rows and fitted on its own.
    """
    mask = np.isfinite(y) & np.isfinite(x)[:, None]
    order = np.argsort(~mask, axis=0, kind="stable")
    m = np.take_along_axis(mask, order, axis=0)
    yc = np.where(m, np.take_along_axis(np.where(mask, y, 0.0), order, axis=0), 0.0)
    xb = np.broadcast_to(np.where(np.isfinite(x), x, 0.0)[:, None], y.shape)
    xc = np.where(m, np.take_along_axis(xb, order, axis=0), 0.0)
    return yc, xc, m


def _hac_scores_sums(e: np.ndarray, xr: np.ndarray, L: np.ndarray) -> tuple[np.ndarray, ...]:
    """Bartlett-weighted long-run sums of the OLS scores (e, e x) for columns that share the
    regressor ``xr`` row by row (no interior gaps): S_aa, S_ab, S_bb. One elementwise product
    and one small matrix product per lag, for all columns at once."""
    ones = np.ones_like(xr)
    buf = np.multiply(e, e)
    s_aa, s_ab, s_bb = np.stack([ones, xr, xr * xr]) @ buf
    T = e.shape[0]
    for lag in range(1, int(L.max(initial=0)) + 1):
        w = np.where(lag <= L, 1.0 - lag / (L + 1.0), 0.0)
        prod = np.multiply(e[lag:], e[:-lag], out=buf[: T - lag])
        xt, xl = xr[lag:], xr[:-lag]
        aa, bb, ab, ba = np.stack([ones[lag:], xt * xl, xl, xt]) @ prod
        s_aa = s_aa + 2 * w * aa
        s_bb = s_bb + 2 * w * bb
        s_ab = s_ab + w * (ab + ba)
    return s_aa, s_ab, s_bb


def _hac_scores_sums_compacted(e: np.ndarray, xc: np.ndarray, L: np.ndarray):
    """As :func:`_hac_scores_sums` for compacted columns whose regressor differs by column."""
    a, b = e, e * xc
    s_aa = np.einsum("ij,ij->j", a, a)
    s_ab = np.einsum("ij,ij->j", a, b)
    s_bb = np.einsum("ij,ij->j", b, b)
    for lag in range(1, int(L.max(initial=0)) + 1):
        w = np.where(lag <= L, 1.0 - lag / (L + 1.0), 0.0)
        s_aa = s_aa + 2 * w * np.einsum("ij,ij->j", a[lag:], a[:-lag])
        s_bb = s_bb + 2 * w * np.einsum("ij,ij->j", b[lag:], b[:-lag])
        s_ab = s_ab + w * (np.einsum("ij,ij->j", a[lag:], b[:-lag])
                           + np.einsum("ij,ij->j", b[lag:], a[:-lag]))
    return s_aa, s_ab, s_bb


def interior_gaps(mask: np.ndarray, n_obs: np.ndarray | None = None) -> np.ndarray:
    """Columns of a T x N mask with a missing value between their first and last observation.

    Only columns with fewer than T observations can have one, so only those are searched.
    """
    T = mask.shape[0]
    n = mask.sum(axis=0) if n_obs is None else np.asarray(n_obs)
    out = np.zeros(mask.shape[1], dtype=bool)
    part = np.flatnonzero((n > 0) & (n < T))
    if len(part):
        sub = mask[:, part]
        first = np.argmax(sub, axis=0)
        last = T - 1 - np.argmax(sub[::-1], axis=0)
        out[part] = n[part] < last - first + 1
    return out


def hac_standard_errors(y: np.ndarray, x: np.ndarray, fits: MarketModelFits,
                        lags: int | None = None,
                        prep: Prepared | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Newey-West (1987) standard errors of (alpha, beta) for every column at once.

    Bartlett kernel, weights 1 - l/(L+1); L from :func:`newey_west_lags` of each holding's own
    n_obs unless ``lags`` is given; small-sample factor n/(n-2). This is statsmodels
    ``OLS(...).fit(cov_type='HAC', cov_kwds={'maxlags': L, 'use_correction': True})`` on the
    holding's observed periods. Lags run over consecutive observations: a holding with a gap
    inside its history is compacted first, exactly as dropping its missing rows would do.
    Returns (alpha_se_hac, beta_se_hac), NaN where the holding is not fitted.
    """
    p = prep or Prepared.of(y, x)
    N = p.m.shape[1]
    xr = np.where(p.x_ok, p.xc + p.x_mean, 0.0)
    n = fits.n_obs.astype(float)        # counted on the same mask as ``p.m``
    L = np.full(N, lags) if lags is not None else newey_west_lags(n)
    alpha = np.nan_to_num(fits.alpha)
    beta = np.nan_to_num(fits.beta)
    e = np.multiply.outer(xr, beta)          # fitted values, built in place
    e += alpha
    e *= p.m
    np.subtract(p.y0, e, out=e)              # residuals, zero where missing
    s_aa, s_ab, s_bb = _hac_scores_sums(e, xr, L)
    sx, sxx = np.stack([xr, xr * xr]) @ p.m
    gapped = np.flatnonzero(interior_gaps(p.m > 0, p.n_obs))
    if len(gapped):
        yg = np.where(p.m[:, gapped] > 0, p.y0[:, gapped], np.nan)
        ycomp, xcomp, mcomp = _compact(yg, np.where(p.x_ok, xr, np.nan))
        eg = np.where(mcomp, ycomp - alpha[gapped] - beta[gapped] * xcomp, 0.0)
        g_aa, g_ab, g_bb = _hac_scores_sums_compacted(eg, xcomp, L[gapped])
        s_aa[gapped], s_ab[gapped], s_bb[gapped] = g_aa, g_ab, g_bb
    with np.errstate(invalid="ignore", divide="ignore"):
        det = n * sxx - sx**2
        # inverse of X'X = [[n, sx], [sx, sxx]]
        i11, i12, i22 = sxx / det, -sx / det, n / det
        # sandwich (X'X)^-1 S (X'X)^-1, element by element
        v11 = i11 * (i11 * s_aa + i12 * s_ab) + i12 * (i11 * s_ab + i12 * s_bb)
        v22 = i12 * (i12 * s_aa + i22 * s_ab) + i22 * (i12 * s_ab + i22 * s_bb)
        corr = n / (n - 2)
        se_a, se_b = np.sqrt(v11 * corr), np.sqrt(v22 * corr)
    keep = np.where(fits.fitted, 1.0, np.nan)
    return se_a * keep, se_b * keep


# --------------------------------------------------------------------------- adjusted betas

def blume_beta(beta: np.ndarray, intercept: float = 0.33, slope: float = 0.67) -> np.ndarray:
    """Blume (1971) adjustment toward 1: intercept + slope x beta (practitioner 0.33 + 0.67 b)."""
    return intercept + slope * np.asarray(beta, float)


VASICEK_FLOOR_SHARE = 0.1   # prior variance >= this share of the betas' spread (our choice)


def vasicek_prior(beta: np.ndarray, beta_se: np.ndarray,
                  prior: str = "holdings") -> tuple[float, float]:
    """The prior (mean m, variance v) of Vasicek (1973) from the holdings' estimates.

    ``prior="holdings"``: m is the cross-sectional mean of the fitted betas and the spread
    d = their sample variance (ddof = 1); ``"market"``: m = 1, the market's beta, and
    d = mean((b - 1)^2). The prior's variance is that of the *true* betas, so the sampling
    noise is taken out: v = d - mean(s^2), with s each holding's standard error. It is
    floored at VASICEK_FLOOR_SHARE x d (a tenth of the observed spread; our choice, no
    source), since noise can exceed the whole spread in a short window. NaN when fewer than
    two holdings are fitted."""
    b = np.asarray(beta, float)
    s2 = np.asarray(beta_se, float) ** 2
    ok = np.isfinite(b) & np.isfinite(s2)
    if ok.sum() < 2:
        return float("nan"), float("nan")
    if prior == "market":
        m, spread = 1.0, float(np.mean((b[ok] - 1.0) ** 2))
    else:
        m, spread = float(b[ok].mean()), float(b[ok].var(ddof=1))
    return m, max(spread - float(s2[ok].mean()), VASICEK_FLOOR_SHARE * spread)


def vasicek_summary(beta: np.ndarray, beta_se: np.ndarray, settings) -> dict:
    """The prior behind ``beta_vasicek`` for ``results/portfolio.json``, from the holdings'
    betas and the errors the pack uses (``settings.vasicek_prior`` names the prior)."""
    m, v = vasicek_prior(beta, beta_se, settings.vasicek_prior)
    return {"vasicek_prior": settings.vasicek_prior, "vasicek_prior_mean": m,
            "vasicek_prior_variance": v}


def vasicek_beta(beta: np.ndarray, beta_se: np.ndarray, prior: str = "holdings") -> np.ndarray:
    """Vasicek (1973) Bayesian shrinkage: (m/v + b/s^2) / (1/v + 1/s^2), with b a holding's
    beta, s its standard error (the errors the pack uses: Newey-West by default) and the
    prior (m, v) from :func:`vasicek_prior`."""
    b = np.asarray(beta, float)
    s2 = np.asarray(beta_se, float) ** 2
    m, v = vasicek_prior(b, beta_se, prior)
    if not np.isfinite(v):
        return np.full_like(b, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (m / v + b / s2) / (1.0 / v + 1.0 / s2)


# --------------------------------------------------------------------------- multi-regressor

def masked_ols(y: np.ndarray | None, X: np.ndarray, min_obs: int,
               prep: Prepared | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """OLS of every column of ``y`` (T x N, NaN = missing) on the common regressors ``X``
    (T x k; a row with any NaN is dropped), each column on its own observed rows.

    Batched: the cross-products X'diag(m_j)X and X'y_j of all columns come from two matrix
    products, then N small k x k systems are solved at once; no loop over columns. ``prep``
    (from :meth:`Prepared.of`) supplies the mask and zero-filled returns when shared.
    Returns (coefficients N x k, standard errors N x k, n_obs N); NaN where
    n_obs < max(min_obs, k + 1) or the design is singular.
    """
    if prep is None:
        prep = Prepared.of(y, np.zeros(np.asarray(y).shape[0]))
    X = np.asarray(X, float)
    row_ok = np.isfinite(X).all(axis=1)
    X0 = np.where(row_ok[:, None], X, 0.0)
    k = X.shape[1]
    pairs = [(i, j) for i in range(k) for j in range(i, k)]
    cross = np.stack([X0[:, i] * X0[:, j] for i, j in pairs]) @ prep.m      # K x N
    xtx = np.empty((prep.m.shape[1], k, k))
    for c, (i, j) in enumerate(pairs):
        xtx[:, i, j] = xtx[:, j, i] = cross[c]
    xty = (X0.T @ prep.y0).T                                                 # N x k
    n = (row_ok.astype(float) @ prep.m)
    bad_rows = np.flatnonzero(~row_ok)
    syy = np.einsum("ij,ij->j", prep.y0, prep.y0)
    if len(bad_rows):
        syy = syy - np.einsum("ij,ij->j", prep.y0[bad_rows], prep.y0[bad_rows])
    ok = n >= max(min_obs, k + 1)
    eye = np.eye(k)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        safe = np.where(ok[:, None, None], xtx, eye)
        ok &= np.linalg.cond(safe) < 1e12
        safe = np.where(ok[:, None, None], xtx, eye)
        inv = np.linalg.inv(safe)
        coef = np.einsum("jkl,jl->jk", inv, np.where(ok[:, None], xty, 0.0))
        ssr = np.maximum(syy - np.einsum("jk,jk->j", coef, xty), 0.0)
        sigma2 = ssr / (n - k)
        se = np.sqrt(sigma2[:, None] * np.diagonal(inv, axis1=1, axis2=2))
    nan = np.where(ok, 1.0, np.nan)[:, None]
    return coef * nan, se * nan, n.astype(int)


def up_down_betas(y: np.ndarray, x: np.ndarray, min_obs: int,
                  prep: Prepared | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Betas in up and down markets from one OLS of y on [1, x 1(x>0), x 1(x<=0)]
    (x: the market's excess return). Returns (beta_up, beta_down)."""
    x = np.asarray(x, float)
    X = np.column_stack([np.ones_like(x), np.where(x > 0, x, 0.0), np.where(x <= 0, x, 0.0)])
    X[~np.isfinite(x)] = np.nan
    coef, _, _ = masked_ols(y, X, min_obs, prep or Prepared.of(y, x))
    return coef[:, 1], coef[:, 2]


def shift(x: np.ndarray, k: int) -> np.ndarray:
    """x shifted so that out[t] = x[t - k] (k > 0: a lag; k < 0: a lead); NaN at the edge."""
    out = np.full(len(x), np.nan)
    if k > 0:
        out[k:] = x[:-k]
    elif k < 0:
        out[:k] = x[-k:]
    else:
        out[:] = x
    return out


def with_before(x: np.ndarray, before: np.ndarray | None, k: int) -> np.ndarray:
    """x lagged k periods (out[t] = x[t - k]) where the first k values come from the last
    values of ``before`` (the series just before the window; NaN where it has none). k < 0 is
    a lead, NaN at the window's end: nothing after the window is used."""
    if k <= 0 or before is None:
        return shift(x, k)
    pre = np.asarray(before, float)[-k:]
    return shift(np.concatenate([np.full(k - len(pre), np.nan), pre, x]), k)[k:]


def dimson_beta(y: np.ndarray, x: np.ndarray, lags: int, min_obs: int,
                prep: Prepared | None = None, before: np.ndarray | None = None) -> np.ndarray:
    """Dimson (1979) beta: the sum of the slopes in one OLS of y on the market's excess
    return at lags -k..+k (with an intercept). The lags of the window's first periods come
    from ``before`` (the market's excess returns just before the window) where given; other
    periods without every lag are dropped."""
    x = np.asarray(x, float)
    cols = [np.ones_like(x)] + [with_before(x, before, k) for k in range(-lags, lags + 1)]
    coef, _, _ = masked_ols(y, np.column_stack(cols), min_obs, prep or Prepared.of(y, x))
    return coef[:, 1:].sum(axis=1)


def scholes_williams_beta(y: np.ndarray, x: np.ndarray, min_obs: int,
                          before: np.ndarray | None = None) -> np.ndarray:
    """Scholes and Williams (1977) beta: (b_-1 + b_0 + b_+1) / (1 + 2 rho_m), where b_j is the
    simple-regression slope of y_t on x_{t+j}, on the periods where y_t, x_{t-1}, x_t and
    x_{t+1} all exist (x_{t-1} of the first period from ``before`` where given), and rho_m
    the market's first-order autocorrelation over every pair of consecutive periods of the
    window."""
    x = np.asarray(x, float)
    lag, lead = with_before(x, before, 1), shift(x, -1)
    common = np.isfinite(lag) & np.isfinite(lead) & np.isfinite(x)
    b = _common_row_slopes(np.asarray(y, float), (lag, x, lead), common, min_obs)
    pair = np.isfinite(x[1:]) & np.isfinite(x[:-1])
    rho = float(np.corrcoef(x[1:][pair], x[:-1][pair])[0, 1]) if pair.sum() > 2 else np.nan
    return (b[0] + b[1] + b[2]) / (1.0 + 2.0 * rho)


def _common_row_slopes(y: np.ndarray, regressors: tuple[np.ndarray, ...], common: np.ndarray,
                       min_obs: int) -> list[np.ndarray]:
    """The slope of each column of ``y`` on each regressor in turn (with an intercept), every
    fit on the rows in ``common`` where the column has a value: :func:`fit_market_model`'s
    beta for each regressor, with the mask, the zero-filled returns and their sums formed
    once and the cross products of all the regressors taken in one matrix product."""
    mask = np.isfinite(y)
    mask &= common[:, None]
    m = mask.astype(float)
    y0 = np.where(mask, y, 0.0)
    del mask
    centred = []
    for z in regressors:
        z_mean = float(z[common].mean()) if common.any() else 0.0
        centred.append(np.where(common, z - z_mean, 0.0))
    ones = np.ones_like(centred[0])
    sums_m = np.stack([ones] + [v for zc in centred for v in (zc, zc * zc)]) @ m
    sums_y = np.stack([ones] + centred) @ y0
    n, sy = sums_m[0], sums_y[0]
    fitted = np.where(n >= max(min_obs, 3), 1.0, np.nan)
    out = []
    for k in range(len(centred)):
        sx, sxx, sxy = sums_m[1 + 2 * k], sums_m[2 + 2 * k], sums_y[1 + k]
        with np.errstate(invalid="ignore", divide="ignore"):
            xbar, ybar = sx / n, sy / n
            out.append((sxy - n * xbar * ybar) / (sxx - n * xbar**2) * fitted)
    return out


# --------------------------------------------------------------------------- rolling

@dataclass(frozen=True)
class RollingBetas:
    """Trailing-window OLS betas: ``beta`` and ``beta_se`` are T x N, NaN where the window
    ending at that period is incomplete for the holding (a gap breaks the window)."""

    window: int
    beta: np.ndarray
    beta_se: np.ndarray


def trailing_sum(a: np.ndarray, window: int) -> np.ndarray:
    """Sum of the last ``window`` rows at every row (rows before the first full window hold
    partial sums). A running sum, row by row: each step is one vectorised add across all
    columns, which is faster than ``cumsum`` along axis 0 of a C-ordered array."""
    out = np.empty_like(a)
    out[0] = a[0]
    for t in range(1, a.shape[0]):
        np.add(out[t - 1], a[t], out=out[t])
        if t >= window:
            np.subtract(out[t], a[t - window], out=out[t])
    return out


def rolling_betas(y: np.ndarray, x: np.ndarray, window: int,
                  prep: Prepared | None = None) -> RollingBetas:
    """OLS beta (and its OLS standard error) of each column of y on x over every trailing
    window of ``window`` periods, from running sums (no refit per window). A window is
    used only if the holding has a return in every one of its periods, so the market's sums
    over a complete window are the same for every holding and come from one 1-D pass."""
    p = prep or Prepared.of(y, x)
    W = window
    # window completeness: only holdings with a missing period anywhere need counting
    holed = np.flatnonzero(p.n_obs < p.m.shape[0])
    incomplete = np.zeros(p.m.shape, dtype=bool)
    if len(holed):
        incomplete[:, holed] = np.abs(trailing_sum(p.m[:, holed], W) - W) > 0.5
    sy = trailing_sum(p.y0, W)
    tmp = np.multiply(p.y0, p.xc[:, None])
    sxy = trailing_sum(tmp, W)
    np.multiply(p.y0, p.y0, out=tmp)
    syy = trailing_sum(tmp, W)
    xw = np.where(p.x_ok, p.xc, 0.0)
    sx = trailing_sum(xw[:, None], W)[:, 0]
    sxx = trailing_sum((xw * xw)[:, None], W)[:, 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        cxx = (sxx - sx * sx / W)[:, None]
        np.multiply(sy, sy, out=tmp)
        tmp /= W
        syy -= tmp                                   # syy now holds the centred cyy
        sy *= (sx / W)[:, None]
        sxy -= sy                                    # sxy now holds the centred cxy
        beta = np.divide(sxy, cxx, out=sy)
        np.multiply(beta, sxy, out=tmp)
        syy -= tmp                                   # residual sum of squares
        np.maximum(syy, 0.0, out=syy)
        syy /= (W - 2)
        syy /= cxx
        se = np.sqrt(syy, out=syy)
    incomplete[: W - 1] = True
    beta[incomplete] = np.nan
    se[incomplete] = np.nan
    return RollingBetas(window=window, beta=beta, beta_se=se)
