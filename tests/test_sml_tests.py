"""Tests of the security market line itself (cross-section, Fama-MacBeth, GRS) against
outside references named beside each check, on the Ken French Data Library portfolios
bundled in linearmodels (tests only)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from reporter.analytics.market_model import Prepared
from reporter.analytics.sml import cross_sectional_test, fama_macbeth, grs_test

ASSETS = ["NoDur", "Durbl", "Manuf", "Enrgy", "Chems", "BusEq", "Telcm", "Utils", "Shops",
          "Hlth", "Money", "Other", "S1V1", "S1V3", "S1V5", "S3V1", "S3V3", "S3V5", "S5V1",
          "S5V3", "S5V5"]


def _excess(french, T=120, start=0):
    d = french.iloc[start: start + T]
    y = d[ASSETS].to_numpy() - d[["RF"]].to_numpy()
    return y, d["MktRF"].to_numpy()


def _betas(y, x):
    return np.array([stats.linregress(x, y[:, j]).slope for j in range(y.shape[1])])


def test_cross_section_matches_linregress(french):
    # reference: scipy.stats.linregress of mean excess return on beta across assets
    y, x = _excess(french)
    b = _betas(y, x)
    t = cross_sectional_test(y.mean(axis=0), b, x.mean(), len(x))
    ref = stats.linregress(b, y.mean(axis=0))
    assert t.slope == pytest.approx(ref.slope, rel=1e-10)
    assert t.slope_se == pytest.approx(ref.stderr, rel=1e-10)
    assert t.intercept == pytest.approx(ref.intercept, rel=1e-10)
    assert t.intercept_se == pytest.approx(ref.intercept_stderr, rel=1e-10)
    assert t.slope_gap_t == pytest.approx((ref.slope - x.mean()) / ref.stderr, rel=1e-10)


def _panel(y, b):
    T, N = y.shape
    idx = pd.MultiIndex.from_arrays([np.tile(np.arange(N), T), np.repeat(np.arange(T), N)],
                                    names=["asset", "period"])
    return pd.DataFrame({"y": y.ravel(), "const": 1.0, "beta": np.tile(b, T)}, index=idx)


def test_fama_macbeth_matches_linearmodels(french):
    # reference: linearmodels.FamaMacBeth (unadjusted covariance: sd of the period
    # estimates / sqrt(T)), the same betas as the one regressor
    from linearmodels import FamaMacBeth

    y, x = _excess(french, T=180, start=300)
    b = _betas(y, x)
    t, g = fama_macbeth(y, b, x)
    panel = _panel(y, b)
    ref = FamaMacBeth(panel["y"], panel[["const", "beta"]]).fit()
    assert t.intercept == pytest.approx(ref.params["const"], rel=1e-10)
    assert t.slope == pytest.approx(ref.params["beta"], rel=1e-10)
    assert t.intercept_se == pytest.approx(ref.std_errors["const"], rel=1e-8)
    assert t.slope_se == pytest.approx(ref.std_errors["beta"], rel=1e-8)
    assert t.n_periods == 180 and g.shape == (180, 2)
    # the slope against the premium: a paired t on gamma1_t - market premium_t
    gap = g[:, 1] - x
    assert t.slope_gap_t == pytest.approx(stats.ttest_1samp(gap, 0.0).statistic, rel=1e-10)
    # Shanken (1992), Theorem 1 (single traded factor), written out from the paper: the
    # corrected variance of the premium is (1 + lambda^2/sigma_f^2) x the Fama-MacBeth
    # variance + sigma_f^2/T; the zero-beta rate's is (1 + lambda^2/sigma_f^2) x its own.
    lam, var_f = ref.params["beta"], np.var(x, ddof=1)
    c = lam**2 / var_f
    se_slope = np.sqrt((1 + c) * ref.std_errors["beta"] ** 2 + var_f / 180)
    se_const = np.sqrt((1 + c) * ref.std_errors["const"] ** 2)
    assert t.slope_se_shanken == pytest.approx(se_slope, rel=1e-8)
    assert t.intercept_se_shanken == pytest.approx(se_const, rel=1e-8)
    assert t.slope_se_shanken > t.slope_se and t.intercept_se_shanken >= t.intercept_se


def _unbalanced(french):
    """Eight years of monthly excess returns with a late start and a suspension, their betas
    and the market's excess return."""
    y, x = _excess(french, T=96, start=200)
    b = _betas(y, x)
    y = y.copy()
    y[:30, 2] = np.nan
    y[50:60, 7] = np.nan
    return y, x, b


def test_fama_macbeth_with_missing_returns_matches_linearmodels(french):
    # an unbalanced panel: each period's cross-section uses the assets that have a return
    # (linearmodels.FamaMacBeth drops the missing rows)
    from linearmodels import FamaMacBeth

    y, x, b = _unbalanced(french)
    t, _ = fama_macbeth(y, b, x)
    panel = _panel(y, b).dropna()
    ref = FamaMacBeth(panel["y"], panel[["const", "beta"]]).fit()
    assert t.slope == pytest.approx(ref.params["beta"], rel=1e-10)
    assert t.slope_se == pytest.approx(ref.std_errors["beta"], rel=1e-8)


def test_fama_macbeth_from_shared_matrices(french):
    # with the analysis' prepared matrices the sums over the holdings with a beta are
    # products weighted by 1 (0 for a holding without one): the same test to rounding,
    # and still linearmodels' figures on an unbalanced panel with one holding unfitted
    from linearmodels import FamaMacBeth

    y, x, b = _unbalanced(french)
    b[5] = np.nan                                   # not fitted: out of every period's fit
    own, g_own = fama_macbeth(y, b, x)
    shared, g = fama_macbeth(y, b, x, prep=Prepared.of(y, x))
    for field in ("intercept", "intercept_se", "slope", "slope_se", "slope_gap_t",
                  "slope_se_shanken"):
        assert getattr(shared, field) == pytest.approx(getattr(own, field), rel=1e-12)
    np.testing.assert_allclose(g, g_own, rtol=1e-12)
    assert shared.n_assets == own.n_assets == y.shape[1] - 1
    keep = np.isfinite(b)
    panel = _panel(y[:, keep], b[keep]).dropna()
    ref = FamaMacBeth(panel["y"], panel[["const", "beta"]]).fit()
    assert shared.slope == pytest.approx(ref.params["beta"], rel=1e-10)
    assert shared.intercept_se == pytest.approx(ref.std_errors["const"], rel=1e-8)
    # a market gap: the prepared mask would drop that period's holdings, so the function
    # forms its own (the same figures as without prep, exactly)
    x_gap = x.copy()
    x_gap[40] = np.nan
    own_gap, _ = fama_macbeth(y, b, x_gap)
    shared_gap, _ = fama_macbeth(y, b, x_gap, prep=Prepared.of(y, x_gap))
    assert shared_gap == own_gap


def _grs_direct(y, x):
    """Gibbons, Ross and Shanken (1989, eq. 8 as usually printed; recalled from memory):
    W = (T/N) (T - N - 1)/(T - 2) a' S^-1 a / (1 + m^2/s^2), S the unbiased residual
    covariance (divisor T - 2) and s^2 the maximum-likelihood market variance, one asset at
    a time through statsmodels OLS."""
    T, N = y.shape
    X = sm.add_constant(x)
    alphas, resid = [], []
    for j in range(N):
        fit = sm.OLS(y[:, j], X).fit()
        alphas.append(fit.params[0])
        resid.append(fit.resid)
    a = np.array(alphas)
    e = np.column_stack(resid)
    S = e.T @ e / (T - 2)
    s2 = np.var(x)          # ddof = 0
    W = (T / N) * (T - N - 1) / (T - 2) * (a @ np.linalg.inv(S) @ a) / (1 + x.mean()**2 / s2)
    return W, stats.f.sf(W, N, T - N - 1)


def test_grs_matches_the_published_formula(french):
    for T, start in ((60, 0), (120, 400), (360, 100)):
        y, x = _excess(french, T=T, start=start)
        g = grs_test(y, x)
        W, p = _grs_direct(y, x)
        assert g.applies and g.df_num == y.shape[1] and g.df_den == T - y.shape[1] - 1
        assert g.f_stat == pytest.approx(W, rel=1e-9)
        assert g.p_value == pytest.approx(p, rel=1e-8)


def test_grs_says_why_it_does_not_apply(french):
    y, x = _excess(french, T=22)        # 21 assets, 22 periods: T = N + 1
    g = grs_test(y, x)
    assert not g.applies and "T = 22, N = 21" in g.reason and np.isnan(g.f_stat)
    # no degrees of freedom where the test does not apply (null in portfolio.json, not -1)
    assert g.df_num is None and g.df_den is None
    empty = grs_test(y[:, :0], x)
    assert not empty.applies and empty.df_num is None and empty.df_den is None
    ok = grs_test(y[:, :10], x)
    assert ok.applies and ok.df_den == 11


def test_grs_from_the_shared_gram_matches_grs_from_the_returns(french):
    # the pack's route (alphas, residual cross products and variances from the one centred
    # Gram matrix of the raw returns; no T x N excess returns) against the direct route on
    # the same Ken French portfolios, whose risk-free rate varies month to month
    from reporter.analytics.gram import excess_variance, residual_gram
    from reporter.analytics.moments import _Moments

    d = french.iloc[:240]
    raw = d[ASSETS].to_numpy()
    rf = d["RF"].to_numpy()
    y, x = raw - rf[:, None], d["MktRF"].to_numpy()
    direct = grs_test(y, x)
    mo = _Moments.of(raw)
    cols = np.arange(len(ASSETS))
    alpha = np.array([stats.linregress(x, y[:, j]).intercept for j in cols])   # scipy
    ev = excess_variance(mo, cols, rf)
    np.testing.assert_allclose(ev, y.var(axis=0), rtol=1e-12)                   # numpy
    shared = grs_test(None, x, alpha=alpha, residual_cross=residual_gram(mo, cols, rf, x),
                      return_variance=np.diagonal(mo.gram) / len(x), excess_variance=ev)
    assert shared.applies and direct.applies
    assert shared.f_stat == pytest.approx(direct.f_stat, rel=1e-10)
    assert shared.p_value == pytest.approx(direct.p_value, rel=1e-8)
    with pytest.raises(ValueError):
        grs_test(None, x)
    # E'E given as a function: made when the test applies (the same statistic, exactly) and
    # never when it cannot (T <= N + 1: 10 periods for the 21 portfolios)
    calls = []

    def made():
        calls.append(1)
        return residual_gram(mo, cols, rf, x)
    lazy = grs_test(None, x, alpha=alpha, residual_cross=made,
                    return_variance=np.diagonal(mo.gram) / len(x), excess_variance=ev)
    assert lazy.f_stat == shared.f_stat and calls == [1]
    short = grs_test(None, x[:10], alpha=alpha, residual_cross=made,
                     return_variance=np.diagonal(mo.gram) / len(x), excess_variance=ev)
    assert not short.applies and "more periods than assets" in short.reason
    assert calls == [1]
