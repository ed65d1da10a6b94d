"""Covariance shrinkage, Euler risk contributions and the diversification curve, each against
an outside reference named beside the check."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.covariance import LedoitWolf

from reporter.analytics.covariance import (
    centred,
    choose_method,
    estimate_covariance,
    holdings_and_active,
)
from reporter.analytics.diversification import (
    average_pairwise_correlation,
    equal_weight_curve,
    pairwise_correlation,
    random_subset_band,
    risk_contributions,
)

PORTFOLIOS = ["NoDur", "Durbl", "Manuf", "Enrgy", "Chems", "BusEq", "Telcm", "Utils", "Shops",
              "Hlth", "Money", "Other", "S1V1", "S1V3", "S1V5", "S3V1", "S3V3", "S3V5", "S5V1",
              "S5V3", "S5V5", "S1M1", "S1M3", "S1M5", "S3M1", "S3M3", "S3M5", "S5M1", "S5M3",
              "S5M5"]


def _two_asset():
    # The standard textbook two-asset example (Bodie, Kane and Marcus, *Investments*, the
    # chapter on optimal risky portfolios; recalled from memory): a bond fund with E = 8%,
    # sd = 12% and a stock fund with E = 13%, sd = 20%, correlation 0.3.
    sd = np.array([0.12, 0.20])
    corr = np.array([[1.0, 0.3], [0.3, 1.0]])
    return sd[:, None] * corr * sd[None, :]


def test_two_asset_textbook_example():
    cov = _two_asset()
    mean = np.array([0.08, 0.13])
    # the optimal risky portfolio with a 5% risk-free rate: 40% bonds, 60% stocks,
    # E = 11%, sd = 14.2%, Sharpe ratio 0.42 (textbook values, recalled from memory)
    w = np.array([0.4, 0.6])
    rc = risk_contributions(w, cov, cov)
    assert w @ mean == pytest.approx(0.11, abs=1e-12)
    assert rc.volatility == pytest.approx(0.142, abs=0.0005)
    assert (w @ mean - 0.05) / rc.volatility == pytest.approx(0.42, abs=0.005)
    # Euler contributions worked by hand from the same inputs: w_i (S w)_i / sigma_p
    sigma = np.sqrt(0.02016)
    np.testing.assert_allclose(rc.vol_contribution, [0.4 * 0.01008 / sigma,
                                                     0.6 * 0.02688 / sigma], rtol=1e-12)
    assert rc.vol_contribution.sum() == pytest.approx(rc.volatility, abs=1e-15)
    # diversification ratio (Choueifaty and Coignard 2008): w'sd / sigma_p, by hand
    assert rc.diversification_ratio == pytest.approx(0.168 / sigma, rel=1e-12)
    # the minimum-variance portfolio of the textbook: 82% bonds, sd 11.45%. At the minimum
    # every marginal contribution is equal, so each share of risk equals its weight.
    w_min = np.array([0.82, 0.18])
    m = risk_contributions(w_min, cov, cov)
    assert m.volatility == pytest.approx(0.1145, abs=0.00005)
    np.testing.assert_allclose(m.vol_share, w_min, rtol=1e-12)


def test_ledoit_wolf_matches_scikit_learn(french):
    # reference: sklearn.covariance.LedoitWolf (the same normalisation, divisor T)
    r = french[PORTFOLIOS].to_numpy()
    for rows in (slice(0, 24), slice(0, 120), slice(None)):   # N > T, N < T, T >> N
        x = r[rows]
        got = estimate_covariance(x, "ledoit_wolf")
        ref = LedoitWolf().fit(x)
        assert got.shrinkage == pytest.approx(ref.shrinkage_, rel=1e-10)
        np.testing.assert_allclose(got.matrix, ref.covariance_, rtol=1e-10, atol=1e-16)


def _constant_correlation_reference(r):
    """Ledoit and Wolf (2004), "Honey, I shrunk the sample covariance matrix", written out
    from the paper with T x N x N arrays: S (divisor T), r_bar, F, pi, rho, gamma, kappa."""
    T, N = r.shape
    x = r - r.mean(axis=0)
    S = x.T @ x / T
    var = np.diag(S)
    sd = np.sqrt(var)
    r_bar = ((S / np.outer(sd, sd)).sum() - N) / (N * (N - 1))
    F = r_bar * np.outer(sd, sd)
    np.fill_diagonal(F, var)
    Y = x[:, :, None] * x[:, None, :]
    pi = ((Y - S) ** 2).mean(axis=0)
    theta = ((x**2 - var)[:, :, None] * (Y - S)).mean(axis=0)     # theta[i, j] = theta_ii,ij
    rho = np.trace(pi)
    for i in range(N):
        for j in range(N):
            if i != j:
                rho += r_bar / 2 * (np.sqrt(var[j] / var[i]) * theta[i, j]
                                    + np.sqrt(var[i] / var[j]) * theta[j, i])
    kappa = (pi.sum() - rho) / ((F - S) ** 2).sum()
    delta = max(0.0, min(1.0, kappa / T))
    return delta * F + (1 - delta) * S, delta


def test_constant_correlation_matches_the_papers_formulas(french):
    # reference: Ledoit and Wolf (2004) "Honey" formulas, written independently above
    r = french[PORTFOLIOS[:12]].to_numpy()
    for rows in (slice(0, 24), slice(0, 120), slice(None)):
        got = estimate_covariance(r[rows])          # the default method
        want, delta = _constant_correlation_reference(r[rows])
        assert got.method == "constant_correlation" and got.eigenvalues_clipped == 0
        assert got.shrinkage == pytest.approx(delta, rel=1e-10)
        np.testing.assert_allclose(got.matrix, want, rtol=1e-10, atol=1e-16)
    # the target keeps each holding's own variance
    np.testing.assert_allclose(np.diag(got.matrix), r.var(axis=0), rtol=1e-12)


def test_late_starter_variance_from_its_own_periods(french):
    # real industry portfolios, 60 months; one starts 40 months late (20 of 60). The old
    # estimate filled its missing months with zero deviations, so its variance was about
    # 20/60 of its own: volatility x0.58. Now it is its sample variance over its own 20
    # periods (divisor n, as in the paper), and the matrix stays PSD.
    r = french[PORTFOLIOS].to_numpy()[-60:].copy()
    r[:40, 3] = np.nan
    r[30:35, 7] = np.nan
    own = r[40:, 3]
    for method in ("constant_correlation", "sample"):    # (the identity target moves it)
        est = estimate_covariance(r, method)
        assert np.linalg.eigvalsh(est.matrix).min() >= -1e-15
        ratio = np.sqrt(est.matrix[3, 3]) / np.std(own, ddof=1)
        if method == "constant_correlation":
            # the target keeps the diagonal; clipping to PSD can only raise a gapped one
            assert np.sqrt(19 / 20) - 1e-12 <= ratio < 1.05
            if est.eigenvalues_clipped == 0:
                assert ratio == pytest.approx(np.sqrt(19 / 20), rel=1e-9)
        else:                                          # divisor n - 1
            assert 1 - 1e-12 <= ratio < 1.1
    zero_filled = np.sqrt((centred(r)[:, 3] ** 2).sum() / 60) / np.std(own, ddof=1)
    assert zero_filled < 0.6                          # what it was


def test_gaps_match_a_pair_by_pair_computation(french):
    # the vectorised sums against a direct loop over pairs: each pair's covariance on its
    # common periods (own means), pi_ij / n_ij and theta / n_ij in the intensity
    r = french[PORTFOLIOS[:9]].to_numpy()[-60:].copy()
    r[:40, 3] = np.nan
    r[30:35, 7] = np.nan
    r[50:, 5] = np.nan
    T, N = r.shape
    ok = np.isfinite(r)
    x = r - np.nanmean(r, axis=0)
    n, S, pi, th = (np.zeros((N, N)) for _ in range(4))
    for i in range(N):
        for j in range(N):
            c = ok[:, i] & ok[:, j]
            n[i, j], S[i, j] = c.sum(), (x[c, i] * x[c, j]).mean()
    for i in range(N):
        for j in range(N):
            c = ok[:, i] & ok[:, j]
            pi[i, j] = ((x[c, i] * x[c, j] - S[i, j]) ** 2).mean()
            th[i, j] = ((x[c, i] ** 2 - S[i, i]) * (x[c, i] * x[c, j] - S[i, j])).mean()
    var = np.diag(S)
    sd = np.sqrt(var)
    r_bar = ((S / np.outer(sd, sd)).sum() - N) / (N * (N - 1))
    F = r_bar * np.outer(sd, sd)
    np.fill_diagonal(F, var)
    rho = np.trace(pi / n) + sum(
        r_bar / 2 * (np.sqrt(var[j] / var[i]) * th[i, j] + np.sqrt(var[i] / var[j]) * th[j, i])
        / n[i, j] for i in range(N) for j in range(N) if i != j)
    delta = np.clip(((pi / n).sum() - rho) / ((F - S) ** 2).sum(), 0, 1)
    got = estimate_covariance(r)
    assert got.shrinkage == pytest.approx(delta, rel=1e-10)
    np.testing.assert_allclose(got.matrix, delta * F + (1 - delta) * S, rtol=1e-10)


def test_clipping_keeps_the_matrix_positive_semi_definite():
    # pairwise estimates from different periods need not be PSD: three series where a and b
    # agree on the first half, b and c on the second, and a and c are opposite on the whole
    rng = np.random.default_rng(3)
    z = rng.normal(size=(40, 3))
    r = np.column_stack([z[:, 0], z[:, 0], -z[:, 0]]) + 0.01 * z
    r[20:, 0] = np.nan                   # a only in the first half
    r[:20, 2] = np.nan                   # c only in the second
    r[:20, 1] = z[:20, 0]
    r[20:, 1] = -z[20:, 0]
    raw = estimate_covariance(r, "sample")
    assert raw.eigenvalues_clipped >= 1
    assert np.linalg.eigvalsh(raw.matrix).min() >= -1e-12
    # the nearest PSD matrix (Frobenius norm; Higham 1988): the pairwise estimate, each
    # column on its own mean and each pair on its common periods (divisor n_ij - 1), with
    # its negative eigenvalues set to zero (numpy.linalg.eigh)
    ok = np.isfinite(r)
    x = r - np.nanmean(r, axis=0)
    pair = np.array([[(x[ok[:, i] & ok[:, j], i] * x[ok[:, i] & ok[:, j], j]).sum()
                      / ((ok[:, i] & ok[:, j]).sum() - 1) for j in range(3)] for i in range(3)])
    w, v = np.linalg.eigh(pair)
    assert w.min() < 0
    np.testing.assert_allclose(raw.matrix, (v * np.maximum(w, 0)) @ v.T, atol=1e-12)


def test_model_tracking_error_is_near_the_realised_one_on_real_data(french):
    # real data: 12 industries equally weighted against the market, 60 months. The realised
    # tracking error is sd(r_p - r_m); the identity target pulls correlations toward zero and
    # overstates the model's, the constant-correlation target stays close
    r = french[PORTFOLIOS[:12]].to_numpy()[-60:]
    m = (french["MktRF"] + french["RF"]).to_numpy()[-60:]
    w = np.full(12, 1 / 12)
    realised = np.std(r @ w - m, ddof=1)
    figures = {}
    for method in ("constant_correlation", "ledoit_wolf"):
        held, active = holdings_and_active(r, m, method)
        figures[method] = risk_contributions(w, held.matrix, active.matrix).tracking_error
    cc, ident = figures["constant_correlation"] / realised, figures["ledoit_wolf"] / realised
    assert 0.9 < cc < 1.1 and ident > 1.1
    assert abs(cc - 1) < abs(ident - 1) / 2


def test_active_covariance_matches_scikit_learn_on_relative_returns(french):
    # the relative-return estimate comes from the holdings' Gram matrix; reference:
    # LedoitWolf on r_i - r_m computed directly, and numpy.cov for the sample estimate
    r = french[PORTFOLIOS].to_numpy()[:48]
    m = (french["MktRF"] + french["RF"]).to_numpy()[:48]
    held, active = holdings_and_active(r, m, "ledoit_wolf")
    np.testing.assert_allclose(held.matrix, LedoitWolf().fit(r).covariance_, rtol=1e-10)
    ref = LedoitWolf().fit(r - m[:, None])
    assert active.shrinkage == pytest.approx(ref.shrinkage_, rel=1e-9)
    np.testing.assert_allclose(active.matrix, ref.covariance_, rtol=1e-9, atol=1e-16)
    s_held, s_active = holdings_and_active(r, m, "sample")
    np.testing.assert_allclose(s_held.matrix, np.cov(r, rowvar=False), rtol=1e-12)
    np.testing.assert_allclose(s_active.matrix, np.cov(r - m[:, None], rowvar=False),
                               rtol=1e-10, atol=1e-18)


def test_auto_rule():
    # common practice, no source: shrink when holdings are many relative to the periods
    assert choose_method("auto", 60, 60) == "ledoit_wolf"
    assert choose_method("constant_correlation", 5, 120) == "constant_correlation"
    assert choose_method("auto", 5, 120) == "sample"
    assert choose_method("sample", 500, 60) == "sample"


def test_euler_contributions_sum_to_the_total():
    # Euler's theorem for a function homogeneous of degree one: sum_i w_i dsigma/dw_i = sigma
    rng = np.random.default_rng(5)
    T, N = 250, 400
    mkt = rng.normal(0.0005, 0.01, T)
    r = mkt[:, None] * rng.uniform(0.5, 1.5, N) + rng.normal(0, 0.02, (T, N))
    r[:40, :30] = np.nan
    w = rng.dirichlet(np.ones(N))
    held, active = holdings_and_active(r, mkt, "ledoit_wolf")
    rc = risk_contributions(w, held.matrix, active.matrix)
    assert abs(rc.vol_contribution.sum() - rc.volatility) <= 1e-12
    assert abs(rc.te_contribution.sum() - rc.tracking_error) <= 1e-12
    # the volatility is sqrt(w'Sw) and the tracking error sqrt(var(sum w_i (r_i - r_m)))
    # from the same estimates (direct quadratic forms)
    assert rc.volatility == pytest.approx(np.sqrt(w @ held.matrix @ w), rel=1e-12)
    assert rc.tracking_error == pytest.approx(np.sqrt(w @ active.matrix @ w), rel=1e-12)


def test_pairwise_correlation_matches_pandas():
    # reference: pandas DataFrame.corr(), Pearson on pairwise-complete observations
    rng = np.random.default_rng(2)
    r = rng.normal(size=(80, 12)) + rng.normal(size=(80, 1))
    r[rng.random(r.shape) < 0.15] = np.nan
    ref = pd.DataFrame(r).corr().to_numpy()
    np.testing.assert_allclose(pairwise_correlation(r), ref, rtol=1e-10)
    iu = np.triu_indices(12, 1)
    assert average_pairwise_correlation(r) == pytest.approx(ref[iu].mean(), rel=1e-12)


def test_equal_weight_curve_tends_to_the_average_covariance(french):
    # common practice, no source: with equal weights, portfolio variance tends to the
    # average covariance as n grows; and for all N assets the curve is exactly 1'C1/N^2
    r = french[PORTFOLIOS].to_numpy()[-120:]
    C = np.cov(r, rowvar=False)
    curve = equal_weight_curve(C)
    N = C.shape[0]
    assert curve.variance(N) == pytest.approx(C.sum() / N**2, rel=1e-12)
    assert curve.variance(1e7) == pytest.approx(curve.average_covariance, rel=1e-6)
    excess = curve.variance(np.array([1, 2, 5, 10, 100])) - curve.average_covariance
    assert np.all(np.diff(excess) < 0)
    # random equal-weight subsets of all N assets are the one equal-weight portfolio
    band = random_subset_band(C, np.array([N]), 20, seed=1)
    assert band.median[0] == pytest.approx(np.sqrt(C.sum() / N**2), rel=1e-12)


def test_a_few_dozen_random_holdings_remove_most_diversifiable_variance():
    # common practice, no source: a few dozen randomly chosen holdings remove the large
    # majority (here at least 90%) of the diversifiable variance. Single-index returns with
    # typical monthly figures: market sd 4.5%, betas 0.5-1.5, specific sd 6-12%.
    rng = np.random.default_rng(7)
    T, N = 600, 800
    mkt = rng.normal(0.006, 0.045, T)
    r = mkt[:, None] * rng.uniform(0.5, 1.5, N) + rng.normal(0, 1, (T, N)) * rng.uniform(
        0.06, 0.12, N)
    C = np.cov(r, rowvar=False)
    curve = equal_weight_curve(C)
    band = random_subset_band(C, np.array([1, 30]), 300, seed=3)
    var1, var30 = band.median ** 2
    removed = (var1 - var30) / (var1 - curve.average_covariance)
    assert removed > 0.9
    assert curve.diversifiable_removed(30) > 0.9


def test_shared_pairwise_moments_match_the_separate_ones():
    # the one-pass covariance and correlation equal pandas' pairwise-complete cov() and
    # corr(), with gaps and without (reference: pandas DataFrame.cov / DataFrame.corr)
    from reporter.analytics.diversification import pairwise_covariance_and_correlation

    rng = np.random.default_rng(4)
    r = rng.normal(size=(70, 9)) + rng.normal(size=(70, 1))
    late = r.copy()
    late[:20, 2] = np.nan                    # two late listings, the rest complete: the
    late[:35, 6] = np.nan                    # masked products run against those two alone
    late[50, 6] = np.nan
    for data in (r, np.where(rng.random(r.shape) < 0.1, np.nan, r), late):
        cov, corr = pairwise_covariance_and_correlation(data)
        np.testing.assert_allclose(cov, pd.DataFrame(data).cov().to_numpy(), rtol=1e-10)
        np.testing.assert_allclose(corr, pd.DataFrame(data).corr().to_numpy(), rtol=1e-10)


def test_random_subset_sums_agree_both_ways_and_with_a_direct_sum():
    # the block gather and the indicator product are two exact forms of 1' C_sub 1; both are
    # checked against numpy's plain sum of each draw's submatrix (np.ix_), draw by draw
    from reporter.analytics.diversification import _block_sums, _indicator_sums

    rng = np.random.default_rng(11)
    r = rng.normal(size=(90, 40)) + rng.normal(size=(90, 1))
    C = np.cov(r, rowvar=False)
    pick = np.argsort(rng.random((300, 40)), axis=1)[:, :25]
    direct = np.array([C[np.ix_(p, p)].sum() for p in pick])
    np.testing.assert_allclose(_block_sums(C, pick), direct, rtol=1e-12)
    np.testing.assert_allclose(_indicator_sums(C, pick, chunk=64), direct, rtol=1e-12)
    # sizes on both sides of the switch (16 n^2 <= N^2: n <= 10 gathers here) give the band
    band = random_subset_band(C, np.array([5, 11, 39]), 50, seed=2)
    assert np.all(np.diff(band.median) < 0)
    # the gather in chunks of draws is the gather of all draws at once, value for value
    np.testing.assert_array_equal(_block_sums(C, pick, chunk=7),
                                  _block_sums(C, pick, chunk=len(pick)))


def test_random_picks_by_partition_are_numpys_argsort():
    # the n smallest of each row, in order of value: numpy's argsort, cut to n
    from reporter.analytics.diversification import _first_in_order

    u = np.random.default_rng(4).random((200, 60))
    for n in (1, 2, 17, 59, 60):
        np.testing.assert_array_equal(_first_in_order(u, n), np.argsort(u, axis=1)[:, :n])


def test_gram_pairwise_moments_with_gaps_match_pandas():
    # the pack's route: pairwise covariance and correlation from the shared Gram matrix, the
    # pairwise centring applied in the rows and columns of the holdings with gaps only; against
    # pandas DataFrame.cov / DataFrame.corr (pairwise complete, ddof 1), including pairs with
    # fewer than two common periods (NaN in both) and row blocks that start inside the matrix
    from reporter.analytics.covariance import _Moments
    from reporter.analytics.gram import pairwise_moments

    rng = np.random.default_rng(21)
    r = rng.normal(size=(60, 12)) * 0.02 + rng.normal(size=(60, 1)) * 0.01
    r[:25, 3] = np.nan                       # a late listing
    r[rng.random(60) < 0.3, 5] = np.nan      # holes
    r[:59, 8] = np.nan                       # one period: no pair with it has two
    r[30:, 9] = np.nan                       # delisted: one common period with the next
    r[:29, 10] = np.nan
    r[31:, 10] = np.nan
    cols = np.array([0, 1, 3, 5, 8, 9, 10, 11])
    mo = _Moments.of(r)
    gram = mo.gram.copy()
    covariance, corr_rows = pairwise_moments(mo, cols)
    frame = pd.DataFrame(r[:, cols])
    ref_cov, ref_corr = frame.cov().to_numpy(), frame.corr().to_numpy()
    assert np.isnan(ref_cov[5, 6]) and np.isnan(ref_cov[4, 0])   # the n_ij < 2 pairs exist
    for blk in (slice(0, 8), slice(2, 5), slice(5, 8)):
        got = corr_rows(blk)
        np.testing.assert_array_equal(np.isnan(got), np.isnan(ref_corr[blk]))
        np.testing.assert_allclose(got, ref_corr[blk], rtol=1e-10)
    # the covariance is built in place of the cross products the rows come from: after it,
    # rows are refused rather than made from the wrong matrix; asked twice, it is the same
    cov = covariance()
    np.testing.assert_array_equal(np.isnan(cov), np.isnan(ref_cov))
    np.testing.assert_allclose(cov, ref_cov, rtol=1e-10)
    with pytest.raises(RuntimeError, match="after the covariance"):
        corr_rows(slice(0, 8))
    assert covariance() is cov
    np.testing.assert_allclose(cov, ref_cov, rtol=1e-10)
    np.testing.assert_array_equal(mo.gram, gram)                 # the shared Gram: read only
