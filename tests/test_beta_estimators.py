"""Robust, adjusted, asymmetric, thin-trading and rolling betas against outside references.

Reference data: Ken French Data Library monthly industry portfolios and market factor, as
bundled in ``linearmodels.datasets.french``. Reference library: statsmodels ``OLS`` (plain
and ``cov_type='HAC'`` with ``maxlags`` and ``use_correction`` pinned).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st

from reporter.analytics.regression import (
    Prepared,
    blume_beta,
    dimson_beta,
    fit_market_model,
    hac_standard_errors,
    masked_ols,
    newey_west_lags,
    rolling_betas,
    scholes_williams_beta,
    shift,
    up_down_betas,
    vasicek_beta,
    vasicek_prior,
)

INDUSTRIES = ["NoDur", "Durbl", "Manuf", "Enrgy", "Chems", "BusEq", "Telcm", "Utils"]


def panel(french, window=None, gaps=True):
    df = french if window is None else french.tail(window)
    y = (df[INDUSTRIES].to_numpy() - df[["RF"]].to_numpy()).copy()
    x = df["MktRF"].to_numpy()
    if gaps:
        T = len(y)
        y[::9, 1] = np.nan                 # scattered holes: interior gaps
        y[: T // 3, 2] = np.nan            # late start
        y[-T // 5:, 3] = np.nan            # early end
        y[T // 2: T // 2 + 7, 4] = np.nan  # a suspension
    return y, x


def test_newey_west_lag_rule():
    # L = floor(4 (T/100)^(2/9)): T=60 -> 3, T=120 -> 4, T=819 -> 6, T=2520 -> 8
    assert newey_west_lags(np.array([60, 120, 819, 2520])).tolist() == [3, 4, 6, 8]


@pytest.mark.parametrize("window", [60, None], ids=["window60", "full"])
@pytest.mark.parametrize("lags", [None, 2], ids=["default-lags", "two-lags"])
def test_hac_matches_statsmodels(french, window, lags):
    y, x = panel(french, window)
    fits = fit_market_model(y, x, min_obs=24)
    se_a, se_b = hac_standard_errors(y, x, fits, lags=lags)
    for j in range(len(INDUSTRIES)):
        ok = np.isfinite(y[:, j])
        L = int(newey_west_lags(ok.sum())) if lags is None else lags
        # reference: statsmodels HAC, Bartlett kernel, lag and correction pinned
        ref = sm.OLS(y[ok, j], sm.add_constant(x[ok])).fit(
            cov_type="HAC", cov_kwds={"maxlags": L, "use_correction": True})
        np.testing.assert_allclose([se_a[j], se_b[j]], ref.bse, rtol=1e-9, err_msg=INDUSTRIES[j])


def test_up_down_matches_statsmodels(french):
    y, x = panel(french, 120)
    up, down = up_down_betas(y, x, min_obs=24)
    X = np.column_stack([np.ones_like(x), np.where(x > 0, x, 0), np.where(x <= 0, x, 0)])
    for j in range(len(INDUSTRIES)):
        ok = np.isfinite(y[:, j])
        ref = sm.OLS(y[ok, j], X[ok]).fit()  # reference: statsmodels OLS, same regressors
        np.testing.assert_allclose([up[j], down[j]], ref.params[1:], rtol=1e-9)


@pytest.mark.parametrize("k", [1, 2])
def test_dimson_matches_statsmodels(french, k):
    y, x = panel(french, 240)
    got = dimson_beta(y, x, lags=k, min_obs=24)
    X = np.column_stack([np.ones_like(x)] + [shift(x, s) for s in range(-k, k + 1)])
    for j in range(len(INDUSTRIES)):
        ok = np.isfinite(y[:, j]) & np.isfinite(X).all(axis=1)
        ref = sm.OLS(y[ok, j], X[ok]).fit()  # reference: statsmodels OLS with lags and leads
        np.testing.assert_allclose(got[j], ref.params[1:].sum(), rtol=1e-9)


def test_masked_ols_errors_match_statsmodels(french):
    y, x = panel(french, 240)
    X = np.column_stack([np.ones_like(x), x, french["SMB"].to_numpy()[-240:]])
    coef, se, n = masked_ols(y, X, 24)
    for j in range(len(INDUSTRIES)):
        ok = np.isfinite(y[:, j])
        ref = sm.OLS(y[ok, j], X[ok]).fit()
        np.testing.assert_allclose(coef[j], ref.params, rtol=1e-9)
        np.testing.assert_allclose(se[j], ref.bse, rtol=1e-8)
        assert n[j] == ref.nobs


def test_scholes_williams_against_direct_formula(french):
    # Scholes and Williams (1977): (b_-1 + b_0 + b_+1) / (1 + 2 rho_m), each b a simple OLS
    # slope (statsmodels) on the periods where the lag and lead both exist, and rho_m the
    # market's first-order autocorrelation over every consecutive pair of the window
    y, x = panel(french, 240, gaps=False)
    got = scholes_williams_beta(y, x, 24)
    lag, lead = shift(x, 1), shift(x, -1)
    rows = slice(1, len(x) - 1)
    rho = np.corrcoef(x[1:], x[:-1])[0, 1]            # all 239 pairs of the window
    for j in range(len(INDUSTRIES)):
        b = [sm.OLS(y[rows, j], sm.add_constant(z[rows])).fit().params[1]
             for z in (lag, x, lead)]
        np.testing.assert_allclose(got[j], sum(b) / (1 + 2 * rho), rtol=1e-9)
    # with the period before the window, the first period has its lag too (statsmodels on
    # rows 0..T-2 with the lag taken from the longer series)
    y_long, x_long = panel(french, 241, gaps=False)
    got = scholes_williams_beta(y, x, 24, before=x_long[:1])
    lag = x_long[:-1]
    rows = slice(0, len(x) - 1)
    for j in range(len(INDUSTRIES)):
        b = [sm.OLS(y[rows, j], sm.add_constant(z[rows])).fit().params[1]
             for z in (lag, x, lead)]
        np.testing.assert_allclose(got[j], sum(b) / (1 + 2 * rho), rtol=1e-9)


@pytest.mark.parametrize("k", [1, 2])
def test_dimson_uses_market_lags_from_before_the_window(french, k):
    # Dimson (1979) with the window's first k periods keeping their lags, taken from the
    # market's returns just before the window; reference: statsmodels OLS on the lags and
    # leads built from the longer series (leads after the window are never used)
    y, x = panel(french, 240)
    x_long = french["MktRF"].to_numpy()[-240 - k:]
    got = dimson_beta(y, x, lags=k, min_obs=24, before=x_long[:k])
    X = np.column_stack([np.ones_like(x)] + [shift(x_long, s)[k:] if s > 0 else shift(x, s)
                                             for s in range(-k, k + 1)])
    for j in range(len(INDUSTRIES)):
        ok = np.isfinite(y[:, j]) & np.isfinite(X).all(axis=1)
        assert ok[:k].any() or not np.isfinite(y[:k, j]).any()
        ref = sm.OLS(y[ok, j], X[ok]).fit()
        np.testing.assert_allclose(got[j], ref.params[1:].sum(), rtol=1e-9)
    # without the earlier periods the estimate differs (fewer periods are used)
    assert not np.allclose(got, dimson_beta(y, x, lags=k, min_obs=24), rtol=1e-6)


def test_blume_formula():
    # Blume (1971), practitioner coefficients: 0.67 beta + 0.33
    np.testing.assert_allclose(blume_beta(np.array([0.4, 1.0, 1.6])), [0.598, 1.0, 1.402])
    np.testing.assert_allclose(blume_beta(np.array([2.0]), 0.2, 0.8), [1.8])


def test_vasicek_hand_computed():
    # Vasicek (1973): (m/v + b/s^2) / (1/v + 1/s^2), with v the variance of the *true* betas.
    # Betas 0.6, 1.0, 1.4 with s = 0.1, 0.2, 0.2, worked by hand: spread (ddof=1) 0.16,
    # mean s^2 = 0.09/3 = 0.03, so v = 0.13 and m = 1.0. For b = 1.4:
    # (1/0.13 + 1.4/0.04) / (1/0.13 + 1/0.04).
    b, s = np.array([0.6, 1.0, 1.4]), np.array([0.1, 0.2, 0.2])
    assert vasicek_prior(b, s) == pytest.approx((1.0, 0.13), rel=1e-12)
    got = vasicek_beta(b, s)
    assert got[2] == pytest.approx((1 / 0.13 + 1.4 / 0.04) / (1 / 0.13 + 25), rel=1e-12)
    assert got[0] == pytest.approx((1 / 0.13 + 0.6 / 0.01) / (1 / 0.13 + 100), rel=1e-12)
    # prior "market": m = 1 and the spread about it, mean((b - 1)^2) = 0.32/3, by hand
    m, v = vasicek_prior(b, s, "market")
    assert (m, v) == pytest.approx((1.0, 0.32 / 3 - 0.03), rel=1e-12)
    got = vasicek_beta(np.array([0.6, 1.2, 1.4]), s, "market")
    v = (0.16 + 0.04 + 0.16) / 3 - 0.03
    assert got[1] == pytest.approx((1 / v + 1.2 / 0.04) / (1 / v + 25), rel=1e-12)
    # noise larger than the spread: the stated floor, a tenth of the spread (0.04 here)
    m, v = vasicek_prior(np.array([0.8, 1.0, 1.2]), np.array([0.1, 0.3, 0.2]))
    assert v == pytest.approx(0.004, rel=1e-12)


def test_vasicek_matches_published_formula_on_real_data(french):
    # Vasicek (1973): (m/v + b/s^2) / (1/v + 1/s^2), m across holdings and v the spread of
    # the betas (ddof=1) less their mean squared standard error, here the Newey-West ones
    # (statsmodels HAC, the pack's default errors)
    y, x = panel(french, 60, gaps=False)
    fits = fit_market_model(y, x, 24)
    _, se = hac_standard_errors(y, x, fits)
    for j in range(len(INDUSTRIES)):
        X = sm.add_constant(x)
        L = int(newey_west_lags(60))
        ref = sm.OLS(y[:, j], X).fit(cov_type="HAC", cov_kwds={"maxlags": L,
                                                               "use_correction": True})
        assert se[j] == pytest.approx(ref.bse[1], rel=1e-9)
    m = fits.beta.mean()
    v = fits.beta.var(ddof=1) - np.mean(se**2)
    assert v > 0.1 * fits.beta.var(ddof=1)          # not at the floor on these data
    s2 = se**2
    want = (m / v + fits.beta / s2) / (1 / v + 1 / s2)
    adj = vasicek_beta(fits.beta, se)
    np.testing.assert_allclose(adj, want, rtol=1e-12)
    # shrinkage: each adjusted beta lies between its OLS beta and the cross-sectional mean
    assert np.all((adj - m) * (fits.beta - m) >= 0) and np.all(abs(adj - m) <= abs(fits.beta - m))
    # toward the market's beta of 1 with prior "market"
    adj1 = vasicek_beta(fits.beta, se, "market")
    assert np.all(abs(adj1 - 1) <= abs(fits.beta - 1))


def test_rolling_matches_statsmodels_refit(french):
    y, x = panel(french, None)
    W = 36
    rb = rolling_betas(y, x, W)
    T = len(x)
    for t in (W - 1, T // 2, T - 1):          # three window positions
        for j in range(len(INDUSTRIES)):
            rows = slice(t - W + 1, t + 1)
            yy = y[rows, j]
            if np.isnan(yy).any():              # a gap breaks the window: no value
                assert np.isnan(rb.beta[t, j])
                continue
            ref = sm.OLS(yy, sm.add_constant(x[rows])).fit()  # direct statsmodels refit
            np.testing.assert_allclose([rb.beta[t, j], rb.beta_se[t, j]],
                                       [ref.params[1], ref.bse[1]], rtol=1e-8)
    assert np.isnan(rb.beta[: W - 1]).all()
    # the holding with scattered holes never has a complete 36-period window
    assert np.isnan(rb.beta[:, 1]).all()


def test_holdings_rolling_blocks_are_the_whole_matrix_bitwise(french):
    # the build makes the holdings' rolling betas a block of columns at a time, from the
    # returns and the risk-free rate; every block must be exactly the whole matrix' columns
    from reporter.analytics.rolling import HoldingsRolling

    y, x = panel(french, None)
    rf = np.linspace(0.001, 0.004, len(x))        # any rate: the returns are y + rf
    lazy = HoldingsRolling(36, y + rf[:, None], rf, x)
    whole = rolling_betas((y + rf[:, None]) - rf[:, None], x, 36)
    for cols in ([0], [1, 3], [4, 2, 0], list(range(y.shape[1]))):
        part = lazy.block(np.array(cols))
        np.testing.assert_array_equal(part.beta, whole.beta[:, cols])
        np.testing.assert_array_equal(part.beta_se, whole.beta_se[:, cols])
    assert np.isfinite(whole.beta).sum() > 100          # windows that are complete
    assert lazy.released().returns.size == 0 and lazy.released().n_series == 0


def test_prepared_is_shared_without_changing_results(french):
    y, x = panel(french, 120)
    prep = Prepared.of(y, x)
    a = fit_market_model(y, x, 24)
    b = fit_market_model(y, x, 24, prep=prep)
    np.testing.assert_array_equal(a.beta, b.beta)
    np.testing.assert_array_equal(hac_standard_errors(y, x, a)[1],
                                  hac_standard_errors(y, x, b, prep=prep)[1])


returns = st.lists(st.floats(-0.2, 0.2, allow_nan=False), min_size=30, max_size=30)


@settings(max_examples=60, deadline=None)
@given(x=returns, noise=returns, beta=st.floats(0.2, 2.0), rf_shift=st.floats(-0.01, 0.01),
       scale=st.floats(0.1, 5.0))
def test_beta_invariance_properties(x, noise, beta, rf_shift, scale):
    x = np.array(x)
    if np.std(x) < 1e-3:
        return
    market, holding = x, beta * x + 0.5 * np.array(noise)
    rf = np.full_like(x, 0.002)
    base = fit_market_model((holding - rf)[:, None], market - rf, 10)
    # adding a constant to the risk-free rate while the market and the holding move with it
    # leaves every excess return, and so beta, unchanged
    shifted = fit_market_model((holding + rf_shift - (rf + rf_shift))[:, None],
                               (market + rf_shift) - (rf + rf_shift), 10)
    np.testing.assert_allclose(shifted.beta, base.beta, rtol=1e-7, atol=1e-9)
    # scaling a holding's excess return scales its beta, alpha and their errors
    scaled = fit_market_model(scale * (holding - rf)[:, None], market - rf, 10)
    np.testing.assert_allclose(scaled.beta, scale * base.beta, rtol=1e-7, atol=1e-9)
    # a near-perfect fit leaves ~1e-8 of rounding in the closed-form residual sum
    np.testing.assert_allclose(scaled.beta_se, scale * base.beta_se, rtol=1e-6, atol=1e-7)


def test_scholes_williams_from_shared_matrices_matches_its_own(french):
    # with the analysis' prepared matrices (mask of y and the market, zero-filled y) the
    # rows outside the lag/lead-complete periods are weighted out instead of masked: the
    # same slopes to rounding, on a panel with every kind of gap, with and without the
    # period before the window; and each still the statsmodels slopes of the direct formula
    y, x = panel(french, 240)
    _, x_long = panel(french, 241)
    for before in (None, x_long[:1]):
        own = scholes_williams_beta(y, x, 24, before=before)
        shared = scholes_williams_beta(y, x, 24, before=before, prep=Prepared.of(y, x))
        np.testing.assert_allclose(shared, own, rtol=1e-12)
        assert np.isfinite(shared).all()
    lag, lead = shift(x, 1), shift(x, -1)
    rho = np.corrcoef(x[1:], x[:-1])[0, 1]
    got = scholes_williams_beta(y, x, 24, prep=Prepared.of(y, x))
    for j in (1, 2, 4):                                   # holed, late start, suspended
        rows = np.isfinite(y[:, j]) & np.isfinite(lag) & np.isfinite(lead)
        b = [sm.OLS(y[rows, j], sm.add_constant(z[rows])).fit().params[1]
             for z in (lag, x, lead)]
        np.testing.assert_allclose(got[j], sum(b) / (1 + 2 * rho), rtol=1e-9)
