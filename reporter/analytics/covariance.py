"""Covariance matrices of holdings' returns: shrinkage toward constant correlation (the
default), toward a scaled identity, or the sample estimate.

Sources:
- ``constant_correlation`` (default): O. Ledoit and M. Wolf (2004), "Honey, I shrunk the sample
  covariance matrix", J. Portfolio Management 30(4), 110-119. The target F keeps every
  holding's own variance and sets every correlation to the average sample correlation r_bar:
  f_ii = s_ii, f_ij = r_bar sqrt(s_ii s_jj). Intensity delta = max(0, min(1, kappa / T)),
  kappa = (pi - rho) / gamma, with pi = sum_ij pi_ij, pi_ij = mean_t((x_it x_jt - s_ij)^2),
  rho = sum_i pi_ii + sum_{i != j} (r_bar / 2)(sqrt(s_jj/s_ii) theta_ii,ij
  + sqrt(s_ii/s_jj) theta_jj,ij), theta_ii,ij = mean_t((x_it^2 - s_ii)(x_it x_jt - s_ij)),
  gamma = ||F - S||_F^2. Equity returns share a common factor, so their correlations are far
  from zero: this target keeps that, where the identity target pulls every correlation
  toward zero and so overstates diversification against the market.
- ``ledoit_wolf``: O. Ledoit and M. Wolf (2004), "A well-conditioned estimator for
  large-dimensional covariance matrices", J. Multivariate Analysis 88, 365-411: S shrunk toward
  mu I, mu = trace(S)/N, intensity min(b^2, d^2)/d^2 with d^2 = ||S - mu I||_F^2 / N and
  b^2 = (1/N) sum_ij pi_ij / T (scikit-learn's ``LedoitWolf`` normalisation, divisor T).
- ``sample``: the sample covariance (divisor n - 1).

Gaps. Each holding is centred on its own mean over the periods it has, its variance comes
from those periods alone (nothing is filled), and each covariance from the pair's common
periods n_ij. In the intensity, each pair's sampling variance pi_ij / T becomes
pi_ij / n_ij (and likewise for theta): our generalisation to unequal histories, the same as
the papers' formulas when nothing is missing. A pair with fewer than two common periods has
no covariance estimate: the constant-correlation target's value stands in for it (zero for
the other two methods). Estimates from different periods need not form a positive
semi-definite matrix: negative eigenvalues are set to zero (see
:func:`reporter.analytics.psd.to_psd`; ``eigenvalues_clipped`` counts them). With no gaps no
clipping is needed, and none is tested for (the argument is in ``_estimate``).

Memory: the estimate is built in place in the N x N Gram matrix X'X, a block of rows at a
time; besides it only block-sized and N x (holdings with gaps) temporaries are alive. The
positive semi-definite test with gaps needs no N x N factorisation (see ``to_psd``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reporter.analytics.moments import (  # noqa: F401  (centred: re-exported)
    _diagonal_of,
    _Moments,
    _row_blocks,
    centred,
)
from reporter.analytics.psd import LowRank, to_psd

METHODS = ("constant_correlation", "ledoit_wolf", "sample")
DEFAULT_METHOD = "constant_correlation"
AUTO_RATIO = 0.1   # "auto" shrinks when holdings / periods >= this (common practice, no source)


@dataclass(frozen=True)
class CovarianceEstimate:
    """A covariance matrix of per-period returns (decimals squared) and how it was made."""

    matrix: np.ndarray     # N x N, positive semi-definite
    method: str            # "constant_correlation" | "ledoit_wolf" | "sample"
    shrinkage: float       # intensity in [0, 1]; 0 for the sample estimate
    n_periods: int
    n_assets: int
    eigenvalues_clipped: int = 0   # negative eigenvalues set to zero (gaps only)
    average_correlation: float = float("nan")   # r_bar of the constant-correlation target


def choose_method(method: str, n_assets: int, n_periods: int) -> str:
    """Resolve ``"auto"`` (the older rule, kept for packs that name it): Ledoit-Wolf toward the
    identity when n_assets / n_periods >= AUTO_RATIO, else sample. Other names pass through."""
    if method != "auto":
        return method
    return "ledoit_wolf" if n_assets >= AUTO_RATIO * n_periods else "sample"


def _complete_block_form(mo: _Moments, diag: np.ndarray, scale: float, rank_one: np.ndarray,
                         rank_one_weight: float, x_weight: float) -> LowRank | None:
    """The complete holdings' block of diag(diag) + rank_one_weight r r' + x_weight X_c'X_c
    as a :class:`~reporter.analytics.psd.LowRank` (X_c scaled by sqrt(x_weight), periods x
    holdings, a copy of its own), or None if a lam is not clearly positive (then the Cholesky
    test decides, as before) or the window is long."""
    c = ~mo.gapped
    lam = diag[c]
    if not lam.size or lam.min() <= 1e-8 * scale or 3 * (mo.T + 1) ** 2 > lam.size ** 2:
        return None                  # (the last: a Cholesky factor of the block is cheaper)
    v, sign = np.zeros((lam.size, 0)), np.zeros(0)
    if rank_one_weight != 0.0:
        v = np.sqrt(abs(rank_one_weight)) * rank_one[c][:, None]
        sign = np.array([np.sign(rank_one_weight)])
    x = None
    if x_weight > 0.0:
        x = mo.x[:, c]                             # (a copy: fancy indexing)
        x *= np.sqrt(x_weight)
    return LowRank(lam, v, sign, x)


def _estimate(mo: _Moments, method: str) -> CovarianceEstimate:
    """The estimate by ``method``, built in ``mo.gram`` (which it consumes) a block of rows at a
    time, so that besides the N x N result only block-sized temporaries are alive."""
    if method not in METHODS:
        raise ValueError(f"unknown covariance method {method!r}")
    T, N = mo.T, mo.gram.shape[0]
    mat, has_gaps = mo.gram, bool(mo.gapped.any())
    n_own = mo.n_own
    gram_diag = np.diagonal(mat).copy()
    with np.errstate(invalid="ignore", divide="ignore"):
        s_diag = np.where(n_own >= 2, gram_diag / n_own, 0.0)
        n_gg = mo.n_gap[:, mo.gap_idx]                 # gapped x gapped common periods
        h_gg = np.where(n_gg >= 2, 1.0 / n_gg**2, 0.0)
    if method == "sample":
        for blk in _row_blocks(N):
            nb = mo.n_rows(blk)
            with np.errstate(invalid="ignore", divide="ignore"):
                mat[blk] = np.where(nb >= 2, mat[blk] / (nb - 1.0), 0.0)
        # with no gaps the sample covariance is a Gram matrix over one sample: PSD
        mat, clipped = to_psd(mat, mo.gapped) if has_gaps else (mat, 0)
        return CovarianceEstimate(mat, "sample", 0.0, T, N, clipped)
    sd = np.sqrt(s_diag)
    inv_sd = np.where(sd > 0, 1.0 / np.where(sd > 0, sd, 1.0), 0.0)
    cc = method == "constant_correlation"
    # first pass: s (divisor n_ij, as in the papers; 0 where n_ij < 2) in place of the Gram
    # matrix, and the sums over pairs: s^2 / n, s^2, and for the constant-correlation target
    # the correlations over the off-diagonal pairs (r_bar) and theta_b below
    s2_over_n = s2 = corr_sum = theta_b = 0.0
    n_off = 0
    x2 = mo.x * mo.x
    if cc:
        q = x2.sum(axis=0)
        b_gap = mo.squares_over_gaps(x2)            # B = (x^2)'m against the gapped columns
    for blk in _row_blocks(N):
        nb = mo.n_rows(blk)
        valid = nb >= 2
        s = mat[blk]
        with np.errstate(invalid="ignore", divide="ignore"):
            np.divide(s, nb, out=s)
        s[~valid] = 0.0
        np.maximum(nb, 1.0, out=nb)               # (s is 0 wherever n_ij < 2)
        s2_over_n += float(np.einsum("ij,ij->", s, s / nb))
        if not cc:
            s2 += float(np.einsum("ij,ij->", s, s))
            continue
        # the off-diagonal pairs with a covariance, between holdings that vary: s is 0 on
        # every other pair but the diagonal ones, so the sums below are matrix-vector
        # products with the diagonal taken out
        rows, cols = _diagonal_of(blk)
        off = valid & (sd[blk, None] > 0) & (sd[None, :] > 0)
        off[rows, cols] = False
        n_off += int(np.count_nonzero(off))
        del off, valid
        corr_sum += float(inv_sd[blk] @ (s @ inv_sd)) - float(s_diag[blk] @ inv_sd[blk] ** 2)
        # theta_ii,ij / n_ij = (A_ij - s_ij B_ij) / n_ij^2, A = (x^3)'x, B = (x^2)'m; here
        # sum_ij sqrt(s_jj / s_ii) s_ij B_ij / n_ij^2, with B_ij = q_i for a complete j
        e = s * q[blk, None]
        e[:, mo.gap_idx] = s[:, mo.gap_idx] * b_gap[blk]
        e /= nb
        e /= nb
        e[rows, cols] = 0.0
        theta_b += float(inv_sd[blk] @ (e @ sd))
        del e, nb
    ones = np.ones(N)
        # sum_ij pi_ij / n_ij, pi_ij = mean over common periods of (x_i x_j)^2 - s_ij^2
    pi_sum = mo.pair_sum(x2, x2, ones, ones, h_gg, 1.0 / T**2) - s2_over_n
    if method == "ledoit_wolf":
        mu = float(s_diag.sum()) / N
        d2 = (s2 - 2.0 * mu * float(s_diag.sum()) + N * mu * mu) / N
        b2 = min(pi_sum / N, d2)
        shrink = 0.0 if b2 <= 0 or d2 <= 0 else b2 / d2
        for blk in _row_blocks(N):
            mat[blk] *= 1.0 - shrink
        mat[np.diag_indices(N)] += shrink * mu
        # with no gaps: (1 - delta) S + delta mu I, S a Gram matrix and mu >= 0, is PSD
        low = (None if not has_gaps else _complete_block_form(
            mo, np.full(N, shrink * mu), float(s_diag.max(initial=0.0)), ones, 0.0,
            (1.0 - shrink) / T))
        mat, clipped = to_psd(mat, mo.gapped, low) if has_gaps else (mat, 0)
        return CovarianceEstimate(mat, "ledoit_wolf", float(shrink), T, N, clipped)
    r_bar = corr_sum / n_off if n_off else 0.0

    def target_rows(blk: slice) -> np.ndarray:
        t = r_bar * np.outer(sd[blk], sd)
        t[_diagonal_of(blk)] = s_diag[blk]
        return t

    # second pass: the target stands in where a pair has no covariance (n_ij < 2); gamma
    gamma = 0.0
    for blk in _row_blocks(N):
        s, t = mat[blk], target_rows(blk)
        if has_gaps:
            invalid = mo.n_rows(blk) < 2
            s[invalid] = t[invalid]
        t -= s
        gamma += float(np.einsum("ij,ij->", t, t))
    x4 = np.einsum("ij,ij->j", x2, x2)            # sum_t x_it^4 over own periods
    with np.errstate(invalid="ignore", divide="ignore"):
        pi_diag = np.where(n_own >= 2, (x4 / n_own - s_diag**2) / n_own, 0.0)
        a_diag = np.where(n_own >= 2, x4 / n_own**2, 0.0) * (sd > 0)
    x3 = np.multiply(x2, mo.x, out=x2)            # x^3 in place of x^2 (no longer needed)
    del x2
    theta_a = mo.pair_sum(x3, mo.x, inv_sd, sd, h_gg, 1.0 / T**2) - float(a_diag.sum())
    del x3                      # T x N: freed before the estimate and its PSD test
    rho = float(pi_diag.sum()) + r_bar * (theta_a - theta_b)
    shrink = 0.0 if gamma <= 0 else float(np.clip((pi_sum - rho) / gamma, 0.0, 1.0))
    # third pass: shrink F + (1 - shrink) S, in place
    for blk in _row_blocks(N):
        t = target_rows(blk)
        t *= shrink
        s = mat[blk]
        s *= 1.0 - shrink
        s += t
    n_pos = int((sd > 0).sum())
    # With no gaps, S is a Gram matrix (PSD) and F = D (r_bar 11' + (1 - r_bar) I) D,
    # D = diag(sd), whose eigenvalues are D-scaled 1 - r_bar and 1 + (n - 1) r_bar over the
    # n holdings with sd > 0: F is PSD when -1/(n - 1) <= r_bar <= 1 (always so in exact
    # arithmetic, the correlations of one sample forming a PSD matrix), and then so is the
    # convex combination shrink F + (1 - shrink) S. So no Cholesky test is run: the earlier
    # code's test found nothing to clip here either (a singular S, N >= T and shrink = 0,
    # has only rounding-sized negative eigenvalues, far inside its -1e-12 max(s_ii) margin).
    # Should rounding put r_bar below the bound, the test runs as before.
    if not has_gaps and (n_pos < 2 or r_bar * (n_pos - 1) >= -1.0):
        return CovarianceEstimate(mat, "constant_correlation", shrink, T, N, 0, r_bar)
    # With gaps, the complete holdings' block is shrink (1 - r_bar) diag(s) + shrink r_bar
    # sd sd' + (1 - shrink) X_c'X_c / T: positive definite when shrink > 0, every sd > 0 and
    # -1/(N_c - 1) < r_bar < 1 (F_c positive definite, S_c PSD)
    n_c = int((~mo.gapped).sum())
    low = None
    if (shrink > 0 and r_bar < 1 and r_bar * (n_c - 1) > -1.0
            and bool(np.all(sd[~mo.gapped] > 0))):
        low = _complete_block_form(mo, shrink * (1.0 - r_bar) * s_diag,
                                   float(s_diag.max(initial=0.0)), sd, shrink * r_bar,
                                   (1.0 - shrink) / T)
    mat, clipped = to_psd(mat, mo.gapped, low)
    return CovarianceEstimate(mat, "constant_correlation", shrink, T, N, clipped, r_bar)


def estimate_covariance(returns: np.ndarray,
                        method: str = DEFAULT_METHOD) -> CovarianceEstimate:
    """Covariance of the columns of ``returns`` (T x N per-period decimals, NaN = missing) by
    ``method`` (see the module's docstring for each method's source and formulas).

    Costs one X'X product plus a few O(TN) sums; holdings with gaps add products over their
    own columns only. With nothing missing: ``sample`` is numpy.cov, ``ledoit_wolf`` is
    scikit-learn's LedoitWolf, ``constant_correlation`` the Ledoit-Wolf (2004) formulas.
    """
    mo = _Moments.of(returns)
    return _estimate(mo, choose_method(method, mo.gram.shape[0], mo.T))


def holdings_and_active(returns: np.ndarray, market: np.ndarray,
                        method: str = DEFAULT_METHOD, moments: _Moments | None = None
                        ) -> tuple[CovarianceEstimate, CovarianceEstimate]:
    """Covariance of the holdings' returns and of their returns relative to the reference
    (market proxy or benchmark), r_i - r_m, each estimated by ``method`` on its own data with
    its own intensity. A period where the reference has no return is missing for every
    relative return. ``moments`` (``_Moments.of(returns)``), when given, is the Gram matrix
    the caller already holds; it is consumed (the estimate is built in it, and its T x N
    deviations are released once that estimate is made)."""
    r = np.asarray(returns, dtype=float)
    ref = np.asarray(market, dtype=float)
    T, N = r.shape
    method = choose_method(method, N, T)
    held = _Moments.of(r) if moments is None else moments
    every = bool(np.isfinite(ref).all())
    gram_active = held.relative_gram(ref) if every else None
    # each estimate is built in its own Gram matrix: two N x N matrices, as the results; the
    # held estimate first, so that its deviations are freed before the active ones are formed
    cov_held = _estimate(held, method)
    held.release_deviations()
    active = (held.relative_to(r, ref, gram_active) if every
              else _Moments.of(r - ref[:, None]))
    del held, gram_active
    return cov_held, _estimate(active, method)


def model_figures(held: CovarianceEstimate, active: CovarianceEstimate, model_vol: float,
                  model_te: float, realised_vol: float, realised_te: float,
                  periods_per_year: int) -> dict:
    """The risk model's figures for ``results/portfolio.json``: how it was estimated, its
    volatility and tracking error (per period and ``_ann`` = x sqrt(P)) and each over the
    realised figure of the same window (1 = the model reproduces the realised risk; the
    realised figures use ddof = 1, the shrinkage estimates divisor n)."""
    root = float(np.sqrt(periods_per_year))

    def ratio(a: float, b: float) -> float:
        return float(a / b) if b > 0 and np.isfinite(a) else float("nan")

    return {
        "covariance_method": held.method,
        "covariance_shrinkage": held.shrinkage,
        "covariance_active_shrinkage": active.shrinkage,
        "covariance_eigenvalues_clipped": held.eigenvalues_clipped,
        "covariance_active_eigenvalues_clipped": active.eigenvalues_clipped,
        "model_volatility": model_vol,
        "model_volatility_ann": model_vol * root,
        "model_tracking_error": model_te,
        "model_tracking_error_ann": model_te * root,
        "model_to_realised_volatility": ratio(model_vol, realised_vol),
        "model_to_realised_tracking_error": ratio(model_te, realised_te),
    }
