"""Market-model regressions checked against statsmodels OLS on real data.

Reference data: Ken French Data Library monthly industry portfolios and the market factor,
as bundled in ``linearmodels.datasets.french``. Reference library: statsmodels ``OLS``
(and ``scipy.stats.linregress`` for the slope and intercept).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from reporter.analytics.regression import fit_market_model, fit_portfolio
from reporter.analytics.returns import portfolio_returns

INDUSTRIES = ["NoDur", "Durbl", "Manuf", "Enrgy", "Chems", "BusEq", "Telcm", "Utils", "Shops",
              "Hlth", "Money", "Other"]


def _panel(french, window: int | None, gaps: bool):
    df = french if window is None else french.tail(window)
    y = df[INDUSTRIES].to_numpy() - df[["RF"]].to_numpy()
    x = df["MktRF"].to_numpy()
    y = y.copy()
    if gaps:
        rng = np.random.default_rng(7)
        # holes in three industries, a late start in one, an early end in another
        for j in (1, 4, 9):
            y[rng.choice(len(y), size=len(y) // 6, replace=False), j] = np.nan
        y[: len(y) // 3, 6] = np.nan
        y[-len(y) // 4:, 10] = np.nan
    return y, x


@pytest.mark.parametrize("window", [60, None], ids=["window60", "full"])
@pytest.mark.parametrize("gaps", [False, True], ids=["complete", "gaps"])
def test_ols_matches_statsmodels(french, window, gaps):
    y, x = _panel(french, window, gaps)
    fits = fit_market_model(y, x, min_obs=24)
    for j, name in enumerate(INDUSTRIES):
        ok = np.isfinite(y[:, j])
        # reference: statsmodels OLS on the holding's own periods (no filling)
        ref = sm.OLS(y[ok, j], sm.add_constant(x[ok])).fit()
        got = [fits.alpha[j], fits.beta[j], fits.alpha_se[j], fits.beta_se[j],
               fits.r_squared[j], np.sqrt(ref.scale)]
        want = [ref.params[0], ref.params[1], ref.bse[0], ref.bse[1], ref.rsquared,
                fits.residual_vol[j]]
        np.testing.assert_allclose(got, want, rtol=1e-8, atol=1e-12, err_msg=name)
        assert fits.n_obs[j] == int(ref.nobs)
        np.testing.assert_allclose(fits.alpha_t[j], ref.tvalues[0], rtol=1e-8)
        np.testing.assert_allclose(fits.beta_t[j], ref.tvalues[1], rtol=1e-8)
        # second reference: scipy.stats.linregress
        lr = stats.linregress(x[ok], y[ok, j])
        np.testing.assert_allclose([fits.beta[j], fits.alpha[j], fits.beta_se[j]],
                                   [lr.slope, lr.intercept, lr.stderr], rtol=1e-8)


def test_min_obs_leaves_statistics_empty_but_counts(french):
    y, x = _panel(french, 60, gaps=False)
    y[:50, 0] = np.nan                       # 10 observations left
    fits = fit_market_model(y, x, min_obs=24)
    assert fits.n_obs[0] == 10 and not fits.fitted[0]
    assert np.isnan([fits.alpha[0], fits.beta[0], fits.beta_se[0], fits.r_squared[0]]).all()
    assert fits.fitted[1:].all()


def test_market_on_itself_has_beta_one(french):
    # common practice, no source: a market proxy's beta against itself is 1, alpha 0, R^2 1
    x = french["MktRF"].to_numpy()[-120:]
    fits = fit_market_model(x[:, None], x, min_obs=24)
    np.testing.assert_allclose(fits.beta[0], 1.0, rtol=1e-12)
    np.testing.assert_allclose(fits.alpha[0], 0.0, atol=1e-15)
    np.testing.assert_allclose(fits.r_squared[0], 1.0, rtol=1e-12)


def test_weighted_betas_equal_portfolio_beta(french):
    # linearity identity: with full histories, sum w_i beta_i is the beta of sum w_i r_i
    df = french.tail(60)
    r = df[INDUSTRIES].to_numpy()
    rf = df["RF"].to_numpy()
    x = df["MktRF"].to_numpy()
    w = np.linspace(1, 3, len(INDUSTRIES))
    w /= w.sum()
    fits = fit_market_model(r - rf[:, None], x, min_obs=24)
    port = portfolio_returns(r, w)
    pfit = fit_portfolio(port - rf, x, confidence=0.95)
    np.testing.assert_allclose(w @ fits.beta, pfit.beta, rtol=1e-12)
    np.testing.assert_allclose(w @ fits.alpha, pfit.alpha, rtol=1e-10, atol=1e-15)
    # and the portfolio fit itself is statsmodels OLS with a t interval
    ref = sm.OLS(port - rf, sm.add_constant(x)).fit()
    lo, hi = ref.conf_int(alpha=0.05)[1]
    np.testing.assert_allclose(pfit.beta_ci, (lo, hi), rtol=1e-10)


def test_portfolio_returns_reweight_over_available_holdings():
    r = np.array([[0.01, 0.03], [np.nan, 0.02], [np.nan, np.nan]])
    out = portfolio_returns(r, np.array([0.25, 0.75]))
    np.testing.assert_allclose(out[:2], [0.25 * 0.01 + 0.75 * 0.03, 0.02])
    assert np.isnan(out[2])
