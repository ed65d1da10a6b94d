"""Estimators that share the one centred Gram matrix of the holdings' returns.

The pack forms X'X once, X the T x N returns of the window each centred on its own mean over
its own periods (0 where missing; :class:`reporter.analytics.moments._Moments`), and every
N x N figure below is taken from it with O(T N) corrections instead of a product of its own:

- the pairwise covariance and correlation (each pair over its common periods, each holding
  centred on its mean over those periods, as pandas ``DataFrame.cov()`` / ``corr()``): with
  d the own-centred returns and C the pair's common periods, sum_C (d_i - dbar_i)(d_j - dbar_j)
  = (X'X)_ij - S_ij S_ji / n_ij, S_ij = sum_C d_i; for a complete j, S_ij = sum of d_i over i's
  own periods (0 up to rounding), so only the columns with gaps need a product (N x g);
- the residual covariance of the GRS test (Gibbons, Ross and Shanken 1989): for holdings with
  every period, excess returns y = r - r_f centre to Y = X - f 1' (f the centred risk-free
  rate), Y'Y = X'X - u 1' - 1 u' + f'f with u = X'f, and the market model's residuals give
  E'E = Y'Y - (Y'z)(Y'z)' / z'z (z the centred market excess return): the identity of the
  OLS residual maker M = I - Z(Z'Z)^-1 Z' (standard; e.g. Greene, *Econometric Analysis*,
  ch. 3, recalled from memory).

No input is filled and nothing is approximated: each is the same estimate as the separate
computation it replaces, up to rounding (tests/test_analytics_frozen.py holds it to 1e-12
relative on the pack's outputs).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from reporter.analytics.diversification import mean_above_diagonal
from reporter.analytics.moments import _Moments


def _row_blocks(n: int):
    """Slices of about a million elements of an n x n matrix, by rows."""
    step = max(1, (1 << 20) // max(n, 1))
    for start in range(0, n, step):
        yield slice(start, min(start + step, n))


def pairwise_moments(mo: _Moments, cols: np.ndarray
                     ) -> tuple[Callable[[], np.ndarray], Callable[[slice], np.ndarray]]:
    """Two functions, from the shared Gram matrix ``mo.gram`` (read, not changed): one giving
    rows of the pairwise correlation of the holdings at positions ``cols``, and then one
    returning their pairwise covariance (divisor n_ij - 1; NaN where n_ij < 2). With a
    holding with gaps, the covariance is built in place of the centred cross products the
    correlation is made from, so that one k x k matrix is made, not two (10,000 holdings:
    800 MB): ask for every row wanted first; once the covariance is taken, rows are
    refused."""
    idx = np.asarray(cols, dtype=int)
    k, T = len(idx), mo.T
    every = k == mo.gram.shape[0] and bool(np.array_equal(idx, np.arange(k)))
    # a copy: the result is built in it
    G = mo.gram.copy() if every else mo.gram[np.ix_(idx, idx)]
    gpos = np.flatnonzero(mo.gapped[idx])
    if not gpos.size:
        with np.errstate(invalid="ignore", divide="ignore"):
            np.divide(G, T - 1.0, out=G)
        if T < 2:
            G[:] = np.nan
        sd = np.sqrt(np.diagonal(G))

        def complete_rows(blk: slice) -> np.ndarray:
            with np.errstate(invalid="ignore", divide="ignore"):
                return G[blk] / np.outer(sd[blk], sd)
        return (lambda: G), complete_rows
    # Each holding is centred on its own periods, so its deviations sum to zero over them:
    # pairwise centring (subtracting S_ij S_ji / n_ij, S_ij the sum of d_i over j's periods)
    # changes a pair only when both sums run over fewer periods than the holding has, which
    # needs a holding with gaps. Pairs of complete holdings keep G_ij (their correction is
    # rounding of the order eps^2), so only the g rows and columns of the holdings with gaps
    # are corrected: O(k g) work beside the copy of G, where the full form took a dozen
    # k x k passes.
    gcols = idx[gpos]
    cpos = np.flatnonzero(~mo.gapped[idx])
    gsel = np.searchsorted(mo.gap_idx, gcols)
    x_sub = mo.x if every else mo.x[:, idx]
    m_gap = mo.m_gap[:, gsel]
    n_g = mo.n_gap[gsel][:, idx]                        # n[gpos, :], g x k
    col_sum = x_sub.sum(axis=0)                         # sum of d_i over its own periods
    s_c = x_sub.T @ m_gap                               # S[:, gpos]: d_i over a gapped j's
    q_c = mo.squares_over_gaps()[np.ix_(idx, gsel)]     # Q[:, gpos] before centring (a copy)
    del x_sub, m_gap
    diag0 = np.diagonal(G).copy()                       # Q_ij = G_ii for a complete j
    s_r = np.repeat(col_sum[gpos][:, None], k, axis=1)  # S[gpos, :]
    s_r[:, gpos] = s_c[gpos]
    with np.errstate(invalid="ignore", divide="ignore"):
        G[gpos, :] -= s_r * s_c.T / n_g                 # rows of the holdings with gaps
        G[np.ix_(cpos, gpos)] -= (s_c * s_r.T / n_g.T)[cpos]      # and their columns
        q_c -= s_c * s_c / n_g.T
    few_g = n_g < 2                                     # n_ij < 2 only beside a gapped one
    g_of = np.full(k, -1)
    g_of[gpos] = np.arange(gpos.size)
    taken = []

    def covariance() -> np.ndarray:
        # G / (T - 1), with the rows and columns of the holdings with gaps over n_ij - 1:
        # those are divided out of G before it is divided in place (the same values as a
        # division into a new matrix)
        if taken:
            return G
        with np.errstate(invalid="ignore", divide="ignore"):
            rows = G[gpos, :] / (n_g - 1.0)
            cols_ = G[:, gpos] / (n_g.T - 1.0)
            np.divide(G, T - 1.0, out=G)
        G[gpos, :] = rows
        G[:, gpos] = cols_
        G[gpos] = np.where(few_g, np.nan, G[gpos])
        G[:, gpos] = np.where(few_g.T, np.nan, G[:, gpos])
        if T < 2:
            G[:] = np.nan
        taken.append(True)
        return G

    def gapped_rows(blk: slice) -> np.ndarray:
        if taken:
            raise RuntimeError("correlation rows asked for after the covariance was taken")
        # Q_ij = sum of d_i^2 over j's periods, centred: G_ii for a complete j
        a = np.repeat(diag0[blk, None], k, axis=1)
        a[:, gpos] = q_c[blk]
        b = np.repeat(diag0[None, :], blk.stop - blk.start, axis=0)     # Q_ji
        local = np.flatnonzero(g_of[blk] >= 0)
        if local.size:
            b[local] = q_c[:, g_of[blk][local]].T
        a *= b
        with np.errstate(invalid="ignore", divide="ignore"):
            c = G[blk] / np.sqrt(a, out=a)
        c[:, gpos] = np.where(few_g.T[blk], np.nan, c[:, gpos])
        if local.size:
            c[local] = np.where(few_g[g_of[blk][local]], np.nan, c[local])
        if T < 2:
            c[:] = np.nan
        return c
    return covariance, gapped_rows


def pairwise_covariance_and_average_correlation(mo: _Moments, cols: np.ndarray
                                                ) -> tuple[np.ndarray, float]:
    """The pairwise covariance of the holdings at ``cols`` and the mean of their pairwise
    correlations over the pairs above the diagonal (formed a block of rows at a time)."""
    covariance, corr_rows = pairwise_moments(mo, cols)
    average = mean_above_diagonal(corr_rows, len(cols))
    return covariance(), average


def residual_gram(mo: _Moments, cols: np.ndarray, risk_free: np.ndarray,
                  market_excess: np.ndarray) -> np.ndarray:
    """E'E, the cross products of the market-model residuals of the holdings at ``cols``
    (each with every period of the window) regressed on [1, market excess return], from the
    shared Gram matrix (see the module's docstring)."""
    idx = np.asarray(cols, dtype=int)
    rf = np.asarray(risk_free, dtype=float)
    z = np.asarray(market_excess, dtype=float)
    f = rf - rf.mean()
    zc = z - z.mean()
    u = (mo.x.T @ f)[idx]                               # (no copy of the columns)
    yz = (mo.x.T @ zc)[idx] - float(f @ zc)             # Y'z
    yy = mo.gram.take(idx, axis=0).take(idx, axis=1)
    yy -= u[:, None]
    yy -= u[None, :]
    yy += float(f @ f)
    v = yz / float(zc @ zc)
    for start in range(0, len(idx), 256):       # - yz yz' / z'z, a block of rows at a time
        yy[start:start + 256] -= np.outer(yz[start:start + 256], v)
    return yy


def excess_variance(mo: _Moments, cols: np.ndarray, risk_free: np.ndarray) -> np.ndarray:
    """The variance (divisor T) of the excess returns r - r_f of the holdings at ``cols``
    (each with every period of the window), from the diagonal of the shared Gram matrix:
    diag(Y'Y) / T, Y'Y as in :func:`residual_gram` (for the GRS test's singularity check)."""
    idx = np.asarray(cols, dtype=int)
    rf = np.asarray(risk_free, dtype=float)
    f = rf - rf.mean()
    return (np.diagonal(mo.gram)[idx] - 2.0 * (mo.x.T @ f)[idx] + float(f @ f)) / mo.T
