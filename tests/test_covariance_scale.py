"""The row-block covariance estimators against the code they replaced (tests/covariance_before.py,
today's functions kept as the reference): the same figures to rounding with nothing missing,
and the same to a tight tolerance with gaps, on real returns and on large invented panels."""

from __future__ import annotations

import numpy as np
import pytest

from reporter.analytics import covariance, moments
from reporter.analytics.covariance import _Moments, estimate_covariance, holdings_and_active
from reporter.analytics.psd import LowRank, _explained
from tests.covariance_before import estimate_before

METHODS = ("constant_correlation", "ledoit_wolf", "sample")
PORTFOLIOS = ["NoDur", "Durbl", "Manuf", "Enrgy", "Chems", "BusEq", "Telcm", "Utils", "Shops",
              "Hlth", "Money", "Other", "S1V1", "S1V3", "S1V5", "S3V1", "S3V3", "S3V5", "S5V1",
              "S5V3", "S5V5", "S1M1", "S1M3", "S1M5", "S3M1", "S3M3", "S3M5", "S5M1", "S5M3",
              "S5M5"]


def _panel(T: int, N: int, seed: int, late_share: float = 0.0) -> np.ndarray:
    """Single-index returns with sector shocks (invented), a share of holdings listed late."""
    rng = np.random.default_rng(seed)
    mkt = rng.normal(0.005, 0.042, T)
    sector = rng.integers(0, 10, N)
    shocks = rng.normal(0, 0.018, (T, 10))
    r = (rng.uniform(0.3, 1.8, N) * mkt[:, None] + 0.8 * shocks[:, sector]
         + rng.normal(0, 1, (T, N)) * rng.uniform(0.02, 0.075, N))
    late = np.flatnonzero(rng.random(N) < late_share)
    for j in late:
        r[: rng.integers(1, T // 2), j] = np.nan
    return r


def _same(got, want, rtol: float, atol: float = 0.0) -> None:
    assert got.method == want.method
    assert got.eigenvalues_clipped == want.eigenvalues_clipped
    assert got.shrinkage == pytest.approx(want.shrinkage, rel=1e-10, abs=1e-14)
    if got.method == "constant_correlation":
        assert got.average_correlation == pytest.approx(want.average_correlation, rel=1e-10)
    np.testing.assert_allclose(got.matrix, want.matrix, rtol=rtol, atol=atol)


@pytest.mark.parametrize("method", METHODS)
def test_complete_data_matches_the_code_it_replaced(french, method):
    # real returns (Ken French's 30 portfolios in linearmodels) and invented N > T panels
    real = french[PORTFOLIOS].to_numpy()
    for r in (real[:24], real[:120], real, _panel(24, 700, 1), _panel(60, 40, 2)):
        want = estimate_before(r, method)
        got = estimate_covariance(r, method)
        _same(got, want, rtol=1e-10, atol=1e-16)
        assert got.eigenvalues_clipped == 0


@pytest.mark.parametrize("method", METHODS)
def test_gaps_match_the_code_it_replaced(method):
    # over EXACT_CLIP_MAX holdings: the Schur complement route (Woodbury for the shrunk
    # estimates, Cholesky for the sample one), against the old full-Cholesky-first route
    for r in (_panel(24, 700, 3, late_share=0.05), _panel(36, 650, 4, late_share=0.2),
              _panel(24, 120, 5, late_share=0.1)):
        want = estimate_before(r, method)
        got = estimate_covariance(r, method)
        _same(got, want, rtol=1e-8, atol=1e-14)
        eig = np.linalg.eigvalsh(got.matrix)         # PSD to rounding: numpy's eigvalsh
        assert eig.min() >= -1e-12 * eig.max()


def test_a_clipped_estimate_matches_the_code_it_replaced():
    # a case that needs clipping with the Woodbury route: late listings whose short
    # histories give covariances no full-window matrix can have
    r = _panel(24, 600, 6, late_share=0.3)
    r[:20, :30] = np.nan
    r[20:, 30:40] = -r[20:, :10] * 3
    for method in ("constant_correlation", "ledoit_wolf"):
        want = estimate_before(r, method)
        got = estimate_covariance(r, method)
        assert want.eigenvalues_clipped > 0
        _same(got, want, rtol=1e-8, atol=1e-14)


def test_row_blocks_of_any_size_give_the_same_estimate(monkeypatch):
    # gapped rows fall inside, across and at the edges of blocks of 7 rows
    r = _panel(30, 90, 7, late_share=0.2)
    whole = {m: estimate_covariance(r, m) for m in METHODS}
    monkeypatch.setattr(moments, "BLOCK_ELEMENTS", 7 * 90)     # _row_blocks lives there
    for m in METHODS:
        _same(estimate_covariance(r, m), whole[m], rtol=1e-10, atol=1e-16)


def test_woodbury_matches_a_cholesky_factor():
    # B'A^-1 B with A = diag(lam) + V diag(sign) V' + X'X, against LAPACK's factor of the
    # dense A (the other route); X given in its own layout (periods x holdings) or not at
    # all; one negative sign (the core is then solved by LU) or none (by its Cholesky factor)
    rng = np.random.default_rng(8)
    nc, g, k, t = 300, 12, 25, 40
    lam = rng.uniform(0.5, 2.0, nc)
    v = rng.normal(size=(nc, k))
    v[:, 0] *= 0.05
    x = rng.normal(size=(t, nc)) * 0.3
    for first_sign in (-1.0, 1.0):
        sign = np.ones(k)
        sign[0] = first_sign
        for with_x in (False, True):
            a = np.diag(lam) + (v * sign) @ v.T + (x.T @ x if with_x else 0.0)
            assert np.linalg.eigvalsh(a).min() > 0
            b = rng.normal(size=(nc, g))
            mat = np.block([[a, b], [b.T, np.eye(g)]])
            gapped = np.r_[np.zeros(nc, bool), np.ones(g, bool)]
            low = LowRank(lam, v, sign, x.copy() if with_x else None)
            assert low.rank == k + (t if with_x else 0)
            np.testing.assert_allclose(_explained(mat, gapped, low),
                                       _explained(mat, gapped, None), rtol=1e-9)


def test_holdings_and_active_match_the_code_they_replaced(french):
    real = french[PORTFOLIOS].to_numpy()[-60:]
    mkt = real.mean(axis=1)
    held, active = holdings_and_active(real, mkt)
    _same(held, estimate_before(real), rtol=1e-10, atol=1e-16)
    _same(active, estimate_before(real - mkt[:, None]), rtol=1e-10, atol=1e-16)


def test_common_periods_by_rows_equal_the_full_matrix():
    # n_ij by row blocks against the direct N x N product of the masks
    r = _panel(20, 50, 9, late_share=0.3)
    r[5:8, 3] = np.nan
    mo = _Moments.of(r)
    m = np.isfinite(r).astype(float)
    full = m.T @ m
    for blk in (slice(0, 50), slice(0, 7), slice(3, 4), slice(40, 50)):
        np.testing.assert_array_equal(mo.n_rows(blk), full[blk])


def test_moments_with_gaps_match_the_full_masks():
    # the gap-columns-only masks and counts against the full T x N masks, and the moments
    # relative to a reference against a direct centring and product (numpy's own operations)
    r = _panel(30, 40, 11, late_share=0.3)
    r[10:13, 5] = np.nan                             # an interior gap
    ref = np.random.default_rng(12).normal(0.004, 0.04, 30)
    mask = np.isfinite(r)
    m = mask.astype(float)

    def direct(a):
        n = mask.sum(axis=0)
        x = np.where(mask, a, 0.0)
        x -= x.sum(axis=0) / n
        x[~mask] = 0.0
        return x

    mo = _Moments.of(r)
    np.testing.assert_array_equal(mo.n_own, m.sum(axis=0))
    np.testing.assert_array_equal(mo.n_gap, (m.T @ m)[mo.gap_idx])
    np.testing.assert_array_equal(mo.m_gap, m[:, mo.gap_idx])
    np.testing.assert_array_equal(mo.x, direct(r))
    np.testing.assert_array_equal(covariance.centred(r), direct(r))
    act = mo.relative_to(r, ref)
    xa = direct(r - ref[:, None])
    np.testing.assert_array_equal(act.x, xa)
    np.testing.assert_allclose(act.gram, xa.T @ xa, rtol=1e-12, atol=1e-15)
    assert 0 < mo.gap_idx.size < 40


def test_average_correlation_by_blocks_matches_the_full_matrix(monkeypatch):
    # reference: pandas DataFrame.corr() (pairwise complete), the mean of its upper triangle,
    # and numpy.nanmean of the off-diagonal covariances, as the code computed them before
    import pandas as pd

    from reporter.analytics import diversification as dv

    rng = np.random.default_rng(10)
    base = _panel(40, 60, 11)
    gappy = _panel(40, 60, 12, late_share=0.3)
    gappy[3, 5] = np.nan
    holes = np.where(rng.random(base.shape) < 0.05, np.nan, base)
    for r in (base, gappy, holes):
        cov, avg = dv.pairwise_covariance_and_average_correlation(r)
        corr = pd.DataFrame(r).corr().to_numpy()
        upper = corr[np.triu_indices(60, k=1)]
        assert avg == pytest.approx(np.nanmean(upper), rel=1e-12)
        ref_cov = pd.DataFrame(r).cov().to_numpy()
        np.testing.assert_allclose(cov, ref_cov, rtol=1e-10)
        curve = dv.equal_weight_curve(cov)
        off = ref_cov[~np.eye(60, dtype=bool)]
        assert curve.average_covariance == pytest.approx(np.nanmean(off), rel=1e-12)
        assert curve.average_variance == pytest.approx(np.nanmean(np.diag(ref_cov)), rel=1e-12)
        # blocks of 7 rows give the same figures as one block
        monkeypatch.setattr(dv, "_row_blocks", lambda n: (slice(i, min(i + 7, n))
                                                          for i in range(0, n, 7)))
        _, avg7 = dv.pairwise_covariance_and_average_correlation(r)
        assert avg7 == pytest.approx(avg, rel=1e-13)
        assert dv.equal_weight_curve(cov).average_covariance == pytest.approx(
            curve.average_covariance, rel=1e-13)
        monkeypatch.undo()


def test_active_gram_from_the_holdings_one_matches_the_code_it_replaced():
    # X_a'X_a derived from X'X (rank-two update, the gapped rows by their own products)
    # against the old estimate on r - m itself; a market with a missing period takes the
    # direct route
    for r in (_panel(24, 700, 13, late_share=0.05), _panel(30, 80, 14, late_share=0.3)):
        r[4:9, 2] = np.nan                              # an interior gap too
        mkt = np.nanmean(r, axis=1) + 0.01
        for method in METHODS:
            held, active = holdings_and_active(r, mkt, method)
            _same(held, estimate_before(r, method), rtol=1e-8, atol=1e-14)
            _same(active, estimate_before(r - mkt[:, None], method), rtol=1e-8, atol=1e-14)
    complete = _panel(36, 60, 15)
    mkt = complete.mean(axis=1)
    for method in METHODS:
        _, active = holdings_and_active(complete, mkt, method)
        _same(active, estimate_before(complete - mkt[:, None], method), rtol=1e-10,
              atol=1e-16)
    mkt[3] = np.nan
    _, active = holdings_and_active(complete, mkt)
    _same(active, estimate_before(complete - mkt[:, None]), rtol=1e-10, atol=1e-16)
