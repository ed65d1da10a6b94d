"""Factor-model regressions and their GRS test, checked against outside references.

Reference data: the real Fama-French factors (market, SMB, HML, momentum) and the 5 x 5
size/value and industry portfolios of the Ken French Data Library, as bundled in
``linearmodels.datasets.french``. Reference libraries: statsmodels ``OLS`` (plain, and
``cov_type='HAC'`` with the lag and the small-sample correction pinned) and linearmodels
``TradedFactorModel``; the GRS statistic recomputed from the published formula.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from reporter.analytics.factors import fit_factor_model, grs_factor_test
from reporter.analytics.regression import newey_west_lags
from reporter.analytics.sml import ABOVE, BELOW, WITHIN, grs_test

PORTFOLIOS = ["S1V1", "S1V3", "S1V5", "S3V1", "S3V3", "S3V5", "S5V1", "S5V3", "S5V5",
              "NoDur", "Enrgy", "Hlth"]
FACTORS = ["SMB", "HML", "Mom"]


def _data(french, window: int, gaps: bool):
    df = french.tail(window)
    y = (df[PORTFOLIOS].to_numpy() - df[["RF"]].to_numpy()).copy()
    if gaps:
        rng = np.random.default_rng(11)
        for j in (1, 5, 9):                      # holes inside the history
            y[rng.choice(window, size=window // 7, replace=False), j] = np.nan
        y[: window // 3, 4] = np.nan             # a late start
        y[-window // 5:, 7] = np.nan             # an early end
    return y, df["MktRF"].to_numpy(), df[FACTORS].to_numpy()


@pytest.mark.parametrize("window", [60, 240])
@pytest.mark.parametrize("gaps", [False, True], ids=["complete", "gaps"])
@pytest.mark.parametrize("lags", [None, 3], ids=["lag-rule", "lag-3"])
def test_every_coefficient_and_error_matches_statsmodels(french, window, gaps, lags):
    y, x, F = _data(french, window, gaps)
    fits = fit_factor_model(y, x, F, tuple(FACTORS), min_obs=24, errors="hac", hac_lags=lags)
    lo, hi = fits.intervals()
    for j, name in enumerate(PORTFOLIOS):
        ok = np.isfinite(y[:, j])
        X = sm.add_constant(np.column_stack([x, F])[ok])
        # reference: statsmodels OLS on the portfolio's own periods, plain ...
        ref = sm.OLS(y[ok, j], X).fit()
        L = int(newey_west_lags(int(ok.sum()))) if lags is None else lags
        # ... and Newey-West with the lag and the small-sample correction pinned
        hac = sm.OLS(y[ok, j], X).fit(cov_type="HAC",
                                       cov_kwds={"maxlags": L, "use_correction": True})
        np.testing.assert_allclose(fits.coef[j], ref.params, rtol=1e-8, err_msg=name)
        np.testing.assert_allclose(fits.se_ols[j], ref.bse, rtol=1e-8, err_msg=name)
        np.testing.assert_allclose(fits.se_hac[j], hac.bse, rtol=1e-8, err_msg=name)
        np.testing.assert_allclose(fits.t[j], hac.params / hac.bse, rtol=1e-8)
        np.testing.assert_allclose(fits.r_squared[j], ref.rsquared, rtol=1e-8)
        assert fits.n_obs[j] == int(ref.nobs) and fits.hac_lags[j] == L
        # intervals and p-values: Student t with n - k degrees of freedom (statsmodels'
        # own conf_int and pvalues use the same t distribution with use_t=True)
        hac_t = sm.OLS(y[ok, j], X).fit(cov_type="HAC", use_t=True,
                                         cov_kwds={"maxlags": L, "use_correction": True})
        np.testing.assert_allclose(np.column_stack([lo[j], hi[j]]), hac_t.conf_int(0.05),
                                   rtol=1e-8)
        np.testing.assert_allclose(fits.p_values[j, 0], hac_t.pvalues[0], rtol=1e-8)


def test_alphas_match_linearmodels_traded_factor_model(french):
    from linearmodels.asset_pricing import TradedFactorModel

    df = french.tail(120)
    y = df[PORTFOLIOS].to_numpy() - df[["RF"]].to_numpy()
    F = df[FACTORS].to_numpy()
    fits = fit_factor_model(y, df["MktRF"].to_numpy(), F, tuple(FACTORS), min_obs=24)
    # reference: linearmodels TradedFactorModel (time-series regressions on traded factors)
    ref = TradedFactorModel(y, df[["MktRF"] + FACTORS].to_numpy()).fit()
    np.testing.assert_allclose(fits.coef[:, 0], np.asarray(ref.alphas).ravel(), rtol=1e-8)
    np.testing.assert_allclose(fits.coef[:, 1:], np.asarray(ref.betas), rtol=1e-8)


def _grs_published(y: np.ndarray, f: np.ndarray) -> tuple[float, float]:
    """Gibbons, Ross and Shanken (1989), as written in Cochrane, Asset Pricing, eq. 12.6:
    (T - N - L)/N [1 + mu' Omega^-1 mu]^-1 a' Sigma^-1 a ~ F(N, T - N - L), Sigma and Omega
    the maximum-likelihood (divisor T) residual and factor covariances; the alphas from
    statsmodels OLS, one asset at a time."""
    T, N = y.shape
    L = f.shape[1]
    X = sm.add_constant(f)
    res = [sm.OLS(y[:, i], X).fit() for i in range(N)]
    a = np.array([r.params[0] for r in res])
    e = np.column_stack([r.resid for r in res])
    sigma = np.cov(e, rowvar=False, bias=True)
    omega = np.atleast_2d(np.cov(f, rowvar=False, bias=True))
    mu = f.mean(axis=0)
    stat = (T - N - L) / N * (a @ np.linalg.inv(sigma) @ a) / (1 + mu @ np.linalg.inv(omega) @ mu)
    return stat, stats.f.sf(stat, N, T - N - L)


def test_grs_matches_the_published_formula(french):
    df = french.tail(120)
    y = df[PORTFOLIOS].to_numpy() - df[["RF"]].to_numpy()
    f = df[["MktRF"] + FACTORS].to_numpy()
    g = grs_factor_test(y, f)
    want_f, want_p = _grs_published(y, f)
    assert g.applies and g.n_factors == 4 and g.n_assets == len(PORTFOLIOS)
    np.testing.assert_allclose([g.f_stat, g.p_value], [want_f, want_p], rtol=1e-8)
    # with the market alone it is the market model's GRS test already in the pack
    one = grs_factor_test(y, f[:, :1])
    market = grs_test(y, f[:, 0])
    np.testing.assert_allclose([one.f_stat, one.p_value], [market.f_stat, market.p_value],
                               rtol=1e-10)


def test_grs_says_why_it_cannot_apply(french):
    df = french.tail(16)
    y = df[PORTFOLIOS].to_numpy() - df[["RF"]].to_numpy()
    g = grs_factor_test(y, df[["MktRF"] + FACTORS].to_numpy())
    assert not g.applies and np.isnan(g.f_stat)
    assert g.reason == "needs more periods than holdings plus factors (T = 16, N = 12, factors = 4)"
    none = grs_factor_test(y[:, :0], df[["MktRF"]].to_numpy())
    assert not none.applies and "no holdings" in none.reason


def test_min_obs_and_positions(french):
    y, x, F = _data(french, 60, gaps=True)
    y[:40, 2] = np.nan                  # 20 observations: below min_obs
    fits = fit_factor_model(y, x, F, tuple(FACTORS), min_obs=24)
    assert not fits.fitted[2] and np.isnan(fits.coef[2]).all() and fits.n_obs[2] == 20
    assert fits.positions()[2] == ""
    lo, hi = fits.intervals()
    want = np.where(lo[:, 0] > 0, ABOVE, np.where(hi[:, 0] < 0, BELOW, WITHIN))
    assert list(fits.positions()[fits.fitted]) == list(want[fits.fitted])


def test_a_factor_portfolio_on_itself(french):
    # common practice, no source: a traded factor regressed on the factors that include it
    # loads 1 on itself, 0 on the others, with zero alpha and an R^2 of 1
    df = french.tail(60)
    F = df[FACTORS].to_numpy()
    fits = fit_factor_model(F[:, [1]], df["MktRF"].to_numpy(), F, tuple(FACTORS), min_obs=24)
    np.testing.assert_allclose(fits.coef[0], [0, 0, 0, 1, 0], atol=1e-12)
    np.testing.assert_allclose(fits.r_squared[0], 1.0, rtol=1e-12)


def test_ols_errors_drive_the_intervals_when_chosen(french):
    y, x, F = _data(french, 60, gaps=True)
    fits = fit_factor_model(y, x, F, tuple(FACTORS), min_obs=24, errors="ols")
    lo, hi = fits.intervals()
    for j in (0, 1, 4):
        ok = np.isfinite(y[:, j])
        # reference: statsmodels OLS with classical errors, its t-based intervals and p-values
        ref = sm.OLS(y[ok, j], sm.add_constant(np.column_stack([x, F])[ok])).fit()
        np.testing.assert_allclose(np.column_stack([lo[j], hi[j]]), ref.conf_int(0.05),
                                   rtol=1e-8)
        np.testing.assert_allclose(fits.p_values[j], ref.pvalues, rtol=1e-7)
