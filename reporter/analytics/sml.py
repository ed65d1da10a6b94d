"""The ex post security market line and the classic performance ratios.

Sources: Sharpe (1964) and Lintner (1965) for the CAPM line; Jensen (1968) for alpha;
Treynor (1965) and Sharpe (1966) for the ratios; the information ratio as in
Grinold and Kahn, *Active Portfolio Management*. All figures are per-period decimals.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from reporter.analytics.market_model import MarketModelFits, Prepared, t_critical
from reporter.analytics.psd import cholesky_in_place

ABOVE, BELOW, WITHIN = "above the line", "below the line", "within estimation error"


@dataclass(frozen=True)
class SecurityMarketLine:
    """The ex post line E[r_i - r_f] = beta_i x mean market premium, and each holding on it."""

    mean_risk_free: float
    mean_market_premium: float         # mean of r_m - r_f over the window
    expected_excess: np.ndarray        # beta_i x mean_market_premium
    residual: np.ndarray               # mean excess return - expected_excess
    treynor: np.ndarray                # mean excess return / beta_i
    position: np.ndarray               # ABOVE / BELOW / WITHIN (object array; "" if unfitted)


def security_market_line(fits: MarketModelFits, market_excess: np.ndarray,
                         risk_free: np.ndarray, confidence: float,
                         alpha_se: np.ndarray | None = None) -> SecurityMarketLine:
    """Place each holding against the ex post SML drawn from the window's mean premium.

    A holding is called above (below) the line only when its alpha's confidence interval
    lies wholly above (below) zero; otherwise it is within estimation error. ``alpha_se``
    (e.g. Newey-West) replaces the OLS errors in that test when given.
    """
    se = fits.alpha_se if alpha_se is None else alpha_se
    mrp = float(np.mean(market_excess))
    expected = fits.beta * mrp
    with np.errstate(invalid="ignore", divide="ignore"):
        residual = fits.mean_excess - expected
        treynor = fits.mean_excess / fits.beta
        tcrit = t_critical(confidence, np.maximum(fits.n_obs - 2, 1))
        lo = fits.alpha - tcrit * se
        hi = fits.alpha + tcrit * se
    position = np.where(~fits.fitted, "", np.where(lo > 0, ABOVE, np.where(hi < 0, BELOW,
                                                                           WITHIN)))
    return SecurityMarketLine(
        mean_risk_free=float(np.mean(risk_free)), mean_market_premium=mrp,
        expected_excess=expected, residual=residual, treynor=treynor,
        position=position.astype(object),
    )


def alpha_p_values(alpha: np.ndarray, alpha_se: np.ndarray, n_obs: np.ndarray) -> np.ndarray:
    """Two-sided p-value of each alpha, 2 P(t_{n-2} > |alpha / se|), under the errors in
    ``alpha_se`` (the ones the positions use); NaN where not fitted."""
    from scipy import stats

    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.abs(np.asarray(alpha, dtype=float) / np.asarray(alpha_se, dtype=float))
        df = np.maximum(np.asarray(n_obs, dtype=float) - 2, 1)
        return np.where(np.isfinite(t), 2.0 * stats.t.sf(t, df), np.nan)


def benjamini_hochberg(p_values: np.ndarray, level: float) -> np.ndarray:
    """Rejections under Benjamini and Hochberg's (1995) step-up control of the false
    discovery rate at ``level``: with the m finite p-values sorted, p_(1) <= ... <= p_(m),
    reject the k smallest for the largest k with p_(k) <= k level / m. NaN is never
    rejected and does not count in m."""
    p = np.asarray(p_values, dtype=float)
    out = np.zeros(len(p), dtype=bool)
    ok = np.flatnonzero(np.isfinite(p))
    m = len(ok)
    if m == 0:
        return out
    order = ok[np.argsort(p[ok], kind="stable")]
    below = np.flatnonzero(p[order] <= level * np.arange(1, m + 1) / m)
    if len(below):
        out[order[: below[-1] + 1]] = True
    return out


def fdr_positions(alpha: np.ndarray, p_values: np.ndarray, fitted: np.ndarray,
                  level: float) -> np.ndarray:
    """Each holding's place against the line after the Benjamini-Hochberg control at
    ``level`` (1 - confidence) across the fitted holdings: above or below only when its
    alpha survives; "" where not fitted (object array)."""
    keep = benjamini_hochberg(np.where(fitted, p_values, np.nan), level)
    pos = np.where(~np.asarray(fitted, dtype=bool), "",
                   np.where(keep & (alpha > 0), ABOVE, np.where(keep, BELOW, WITHIN)))
    return pos.astype(object)


@dataclass(frozen=True)
class Ratios:
    """Portfolio performance ratios against the market proxy (per period)."""

    mean_excess: float           # mean(r_p - r_f)
    volatility: float            # std(r_p), ddof=1
    sharpe: float                # mean(r_p - r_f) / std(r_p - r_f)
    treynor: float               # mean(r_p - r_f) / beta_p
    tracking_error: float        # std(r_p - r_m), ddof=1
    active_return: float         # mean(r_p - r_m)
    information_ratio: float     # active_return / tracking_error
    market_sharpe: float


def performance_ratios(port: np.ndarray, market: np.ndarray, risk_free: np.ndarray,
                       beta: float) -> Ratios:
    """Sharpe, Treynor, tracking error and information ratio from aligned per-period series."""
    ok = np.isfinite(port)
    p, m, f = port[ok], market[ok], risk_free[ok]
    ex = p - f
    active = p - m
    te = float(np.std(active, ddof=1))
    return Ratios(
        mean_excess=float(ex.mean()), volatility=float(np.std(p, ddof=1)),
        sharpe=float(ex.mean() / np.std(ex, ddof=1)), treynor=float(ex.mean() / beta),
        tracking_error=te, active_return=float(active.mean()),
        information_ratio=float(active.mean() / te) if te > 0 else float("nan"),
        market_sharpe=float((m - f).mean() / np.std(m - f, ddof=1)),
    )


# ------------------------------------------------------------------ tests of the line itself

@dataclass(frozen=True)
class LineTest:
    """A test of the security market line: intercept and slope of mean excess return on beta
    (per period), their standard errors, and the slope set against the realised premium."""

    method: str                  # "cross-section" | "Fama-MacBeth"
    n_assets: int
    n_periods: int
    intercept: float
    intercept_se: float
    slope: float
    slope_se: float
    premium: float               # the realised mean market premium over the same periods
    slope_gap_t: float           # t-statistic of slope - premium
    intercept_t: float
    # Shanken (1992) errors-in-variables corrected standard errors (Fama-MacBeth only)
    intercept_se_shanken: float = float("nan")
    slope_se_shanken: float = float("nan")

    @property
    def slope_t(self) -> float:
        return self.slope / self.slope_se


def _no_line_test(method: str, n_assets: int, n_periods: int, premium: float) -> LineTest:
    """A test that could not be run (fewer than three assets, or under two usable periods)."""
    nan = float("nan")
    return LineTest(method, n_assets, n_periods, nan, nan, nan, nan, float(premium), nan, nan)


def cross_sectional_test(mean_excess: np.ndarray, beta: np.ndarray,
                         premium: float, n_periods: int) -> LineTest:
    """OLS across holdings of mean excess return on beta, mean_i = g0 + g1 beta_i + e_i,
    with classical standard errors (Black, Jensen and Scholes 1972; Fama and MacBeth 1973).
    Under the CAPM g0 = 0 and g1 = the market premium. The errors ignore that betas are
    estimated (errors in variables), so they are too small. Fitted holdings only."""
    from statsmodels.regression.linear_model import OLS
    from statsmodels.tools.tools import add_constant

    ok = np.isfinite(mean_excess) & np.isfinite(beta)
    if ok.sum() < 3:
        return _no_line_test("cross-section", int(ok.sum()), int(n_periods), premium)
    X = add_constant(beta[ok], has_constant="add")
    res = OLS(mean_excess[ok], X).fit()
    g0, g1 = (float(v) for v in res.params)
    s0, s1 = (float(v) for v in res.bse)
    return LineTest("cross-section", int(ok.sum()), int(n_periods), g0, s0, g1, s1,
                    float(premium), (g1 - premium) / s1, g0 / s0)


def fama_macbeth(excess: np.ndarray, beta: np.ndarray, market_excess: np.ndarray,
                 min_assets: int = 3, prep: Prepared | None = None
                 ) -> tuple[LineTest, np.ndarray]:
    """Fama and MacBeth (1973): each period, OLS across the holdings that have a return of
    r_i,t - r_f,t on [1, beta_i]; the line's estimates are the means of the period slopes and
    intercepts, with standard errors sd(gamma_t)/sqrt(T) (ddof = 1). The slope is compared
    with the market premium through the mean of gamma1_t - (r_m,t - r_f,t) and its standard
    error. Vectorised over periods with masked sums; periods with fewer than ``min_assets``
    holdings are dropped. Returns the test and the T x 2 period estimates (NaN if dropped).

    The betas are estimated, so the plain errors are too small; beside them the Shanken
    (1992) corrected errors: se(g0)^2 (1 + c) for the intercept and se(g1)^2 (1 + c) + s_m^2/T
    for the slope, with c = g1^2 / s_m^2 and s_m^2 the variance (ddof = 1) of the market's
    excess return over the same periods (Shanken 1992, Theorem 1; Cochrane, *Asset Pricing*,
    ch. 12).

    ``prep`` (``Prepared.of(excess, market_excess)``), when given and the market has every
    period, supplies the mask and the zero-filled returns: the sums over the holdings with a
    beta are then products with weights that are zero for the others, and no T x N matrix is
    made here (with a market gap its mask would also drop that period's holdings)."""
    b = np.asarray(beta, dtype=float)
    use = np.isfinite(b)
    if prep is not None and prep.x_ok.all():
        u, b = use.astype(float), np.where(use, b, 0.0)
        m, y0 = prep.m, prep.y0
        n, sy = m @ u, y0 @ u
    else:
        y = excess[:, use]
        b = b[use]
        mask = np.isfinite(y)
        m = mask.astype(float)
        y0 = np.where(mask, y, 0.0)
        del y, mask
        n, sy = m.sum(axis=1), y0.sum(axis=1)
    sb, sbb = m @ b, m @ (b * b)
    sby = y0 @ b
    del m, y0
    with np.errstate(invalid="ignore", divide="ignore"):
        g1 = (sby - sb * sy / n) / (sbb - sb * sb / n)
        g0 = (sy - g1 * sb) / n
    keep = (n >= min_assets) & np.isfinite(g1) & np.isfinite(market_excess)
    g = np.full((len(n), 2), np.nan)
    g[keep, 0], g[keep, 1] = g0[keep], g1[keep]
    T = int(keep.sum())
    if T < 2:
        return _no_line_test("Fama-MacBeth", int(use.sum()), T,
                             float(np.mean(market_excess))), g
    root = np.sqrt(T)
    gap = g1[keep] - market_excess[keep]
    s0 = float(np.std(g0[keep], ddof=1) / root)
    s1 = float(np.std(g1[keep], ddof=1) / root)
    slope = float(g1[keep].mean())
    var_m = float(np.var(market_excess[keep], ddof=1))
    c = slope * slope / var_m if var_m > 0 else float("nan")
    test = LineTest("Fama-MacBeth", int(use.sum()), T, float(g0[keep].mean()), s0,
                    slope, s1, float(market_excess[keep].mean()),
                    float(gap.mean() / (np.std(gap, ddof=1) / root)),
                    float(g0[keep].mean()) / s0, float(s0 * np.sqrt(1.0 + c)),
                    float(np.sqrt(s1 * s1 * (1.0 + c) + var_m / T)))
    return test, g


@dataclass(frozen=True)
class GRSTest:
    """Gibbons, Ross and Shanken (1989) F-test that every alpha is zero."""

    applies: bool
    reason: str                 # why it does not apply ("" when it does)
    assets: str                 # what was tested: "holdings" or "sector portfolios"
    n_assets: int
    n_periods: int
    f_stat: float
    df_num: int | None          # None (null in JSON) where the test does not apply
    df_den: int | None
    p_value: float


def grs_test(excess: np.ndarray | None, market_excess: np.ndarray, assets: str = "holdings",
             *, alpha: np.ndarray | None = None,
             residual_cross: np.ndarray | Callable[[], np.ndarray] | None = None,
             return_variance: np.ndarray | None = None,
             excess_variance: np.ndarray | None = None) -> GRSTest:
    """GRS statistic F = (T - N - 1)/N x a' S^-1 a / (1 + m^2 / s^2) ~ F(N, T - N - 1) under
    normal errors, with a the N market-model alphas, S the residual covariance and m, s^2 the
    market premium's mean and variance, both maximum-likelihood (divisor T) (Gibbons, Ross
    and Shanken 1989; the form in Cochrane, *Asset Pricing*, ch. 12). Needs complete
    T x N returns and T > N + 1; otherwise the result says why it does not apply.

    ``alpha`` and ``residual_cross`` (E'E, the residuals' cross products), when given, are
    the market-model alphas and residuals of these same returns already computed from the
    pack's shared Gram matrix (:func:`reporter.analytics.gram.residual_gram`): the T N^2
    product of the residuals is then not formed again. That route's residual variances carry
    rounding of the order of eps times the variance of the returns before the risk-free rate
    is taken off (``return_variance``): an asset that is exactly a line in the market (its
    residual variance at most 1e-12 of its variance) is judged against the larger of the two
    variances, which is the same test wherever the risk-free rate is constant.
    ``residual_cross`` is consumed (the residual covariance is formed in it); it may be a
    function making it, called only when the test applies (at 10,000 holdings over 2,520
    periods, an 800 MB product not made for a test that needs T > N + 1).
    ``excess_variance`` (the returns' variances, divisor T), when given with the other two,
    stands for ``excess``, which may then be None (T is the market's length)."""
    from scipy import stats

    x = np.asarray(market_excess, dtype=float)
    from_moments = residual_cross is not None and alpha is not None
    if excess is None and not (from_moments and excess_variance is not None):
        raise ValueError("grs_test needs the returns, or alpha, residual_cross and "
                         "excess_variance")
    y = None if excess is None else np.asarray(excess, dtype=float)
    T, N = (len(x), len(alpha)) if y is None else y.shape
    nan = float("nan")
    if N == 0:
        return GRSTest(False, "no assets with a complete history", assets, 0, T, nan, None,
                       None, nan)
    if not (T > N + 1):
        return GRSTest(False, f"needs more periods than assets plus one (T = {T}, N = {N})",
                       assets, N, T, nan, None, None, nan)
    if not from_moments:
        X = np.column_stack([np.ones(T), x])
        coef, *_ = np.linalg.lstsq(X, y, rcond=None)
        e = y - X @ coef
        alpha = coef[0]
        sigma = e.T @ e / T
        del e
    else:
        sigma = residual_cross() if callable(residual_cross) else residual_cross
        sigma /= T                          # consumed: divided in place
    mu = float(x.mean())
    var_m = float(np.mean((x - mu) ** 2))
    if not var_m > 0:
        return GRSTest(False, "the market premium is constant over the window", assets, N, T,
                       nan, N, T - N - 1, nan)
    # a singular residual covariance (an asset whose excess return is exactly linear in the
    # market's, e.g. a return equal to the risk-free rate) leaves the quadratic form undefined
    # (an R-squared within 1e-12 of one is a line up to rounding)
    resid_var = np.diag(sigma)
    y_var = (excess_variance if from_moments and excess_variance is not None
             else y.var(axis=0))
    if from_moments and return_variance is not None:
        y_var = np.maximum(y_var, return_variance)
    quad = (None if np.any(resid_var <= 1e-12 * y_var)
            else _quadratic_form(sigma, alpha, np.sqrt(resid_var)))
    if quad is None:
        return GRSTest(False, "the residual covariance is singular (an asset's excess return "
                       "is exactly a line in the market's, e.g. a return equal to the risk-free "
                       "rate)", assets, N, T, nan, N, T - N - 1, nan)
    f = (T - N - 1) / N * quad / (1.0 + mu * mu / var_m)
    return GRSTest(True, "", assets, N, T, float(f), N, T - N - 1,
                   float(stats.f.sf(f, N, T - N - 1)))


def _quadratic_form(sigma: np.ndarray, alpha: np.ndarray, scale: np.ndarray) -> float | None:
    """a' S^-1 a, or None where S is singular by numpy's ``matrix_rank`` rule on the
    correlation form R = S / (s s') (rank < N when the least singular value is at most
    N eps times the largest).

    R is factored by Cholesky, R = L L'. Its eigenvalues lie between trace(R)/N times
    trace(R^-1)/N and trace(R) trace(R^-1) for the condition number (each eigenvalue is
    positive, the largest at least their mean, and 1/least at most trace(R^-1) =
    ||L^-1||_F^2), so wherever that upper bound is below numpy's threshold 1/(N eps) the
    matrix has full rank by the same rule without a singular value decomposition (N^3/3 +
    N^3/3 flops against some 20 N^3); then a' S^-1 a = ||L^-1 (a / s)||^2. Otherwise (no
    Cholesky factor, or a condition number near the threshold) the exact test decides as
    before. ``sigma`` is consumed (R is formed in it)."""
    from scipy.linalg.lapack import dtrtri

    N = len(alpha)
    R = sigma                           # S / (s s') in place, a block of rows at a time
    for start in range(0, N, 256):
        blk = slice(start, min(start + 256, N))
        R[blk] /= np.outer(scale[blk], scale)
    a = alpha / scale                   # a' S^-1 a = (a / s)' R^-1 (a / s)
    threshold = 1.0 / (N * np.finfo(float).eps)
    low = cholesky_in_place(R.copy(), clean=True)      # (R is kept for the exact test)
    if low is not None and np.all(np.diagonal(low) > 0):
        # L^-1 by LAPACK's triangular inverse, N^3/3 flops (a solve against the identity
        # costs N^3), in place on L' (the C-ordered L read as Fortran-ordered L')
        inv_up, info = dtrtri(low.T, lower=0, overwrite_c=1)       # (L^-1)'
        if info == 0:
            trace_inv = float(np.einsum("ij,ij->", inv_up, inv_up))
            if float(np.trace(R)) * trace_inv < threshold:
                z = inv_up.T @ a
                return float(z @ z)
    if np.linalg.matrix_rank(R) < N:
        return None
    return float(a @ np.linalg.solve(R, a))
