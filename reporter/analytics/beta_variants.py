"""Adjusted and thin-trading betas: Blume (1971), Vasicek (1973), up and down markets,
Dimson (1979) and Scholes-Williams (1977), each vectorised over holdings, and the batched
multi-regressor OLS behind them."""

from __future__ import annotations

import numpy as np

from reporter.analytics.market_model import Prepared


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

# a design whose cross-product matrix X'X has a condition number at least this is singular:
# its coefficients are not estimated (cond(X'X) = cond(X)^2, so X's columns are then
# independent to about six digits at most; common practice for double precision)
SINGULAR_COND = 1e12


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
        ok &= np.linalg.cond(safe) < SINGULAR_COND
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
                          before: np.ndarray | None = None,
                          prep: Prepared | None = None) -> np.ndarray:
    """Scholes and Williams (1977) beta: (b_-1 + b_0 + b_+1) / (1 + 2 rho_m), where b_j is the
    simple-regression slope of y_t on x_{t+j}, on the periods where y_t, x_{t-1}, x_t and
    x_{t+1} all exist (x_{t-1} of the first period from ``before`` where given), and rho_m
    the market's first-order autocorrelation over every pair of consecutive periods of the
    window. ``prep`` (``Prepared.of(y, x)``), when given, supplies the mask and the
    zero-filled returns, so that no T x N matrix is made here."""
    x = np.asarray(x, float)
    lag, lead = with_before(x, before, 1), shift(x, -1)
    common = np.isfinite(lag) & np.isfinite(lead) & np.isfinite(x)
    b = _common_row_slopes(y, (lag, x, lead), common, min_obs, prep)
    pair = np.isfinite(x[1:]) & np.isfinite(x[:-1])
    rho = float(np.corrcoef(x[1:][pair], x[:-1][pair])[0, 1]) if pair.sum() > 2 else np.nan
    return (b[0] + b[1] + b[2]) / (1.0 + 2.0 * rho)


def _common_row_slopes(y: np.ndarray, regressors: tuple[np.ndarray, ...], common: np.ndarray,
                       min_obs: int, prep: Prepared | None = None) -> list[np.ndarray]:
    """The slope of each column of ``y`` on each regressor in turn (with an intercept), every
    fit on the rows in ``common`` where the column has a value: :func:`fit_market_model`'s
    beta for each regressor, with the mask, the zero-filled returns and their sums formed
    once and the cross products of all the regressors taken in one matrix product.

    Every sum is weighted by a row vector that is zero off ``common`` (the count's weight is
    ``common`` itself, each centred regressor is zero there), so the mask need not exclude
    those rows: ``prep``'s mask (where y and the market both have a value, the market being
    finite on every common row) gives the same products, and its matrices are used as they
    are instead of two new T x N ones."""
    if prep is None:
        mask = np.isfinite(np.asarray(y, float))
        mask &= common[:, None]
        m = mask.astype(float)
        y0 = np.where(mask, y, 0.0)
        del mask
    else:
        m, y0 = prep.m, prep.y0
    centred = []
    for z in regressors:
        z_mean = float(z[common].mean()) if common.any() else 0.0
        centred.append(np.where(common, z - z_mean, 0.0))
    ones = common.astype(float)
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
