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
semi-definite matrix: negative eigenvalues are set to zero (see :func:`_to_psd`;
``eigenvalues_clipped`` counts them). With no gaps no clipping is needed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_triangular

METHODS = ("constant_correlation", "ledoit_wolf", "sample")
DEFAULT_METHOD = "constant_correlation"
EXACT_CLIP_MAX = 500   # holdings up to which a non-PSD estimate gets a full eigendecomposition
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


def centred(returns: np.ndarray) -> np.ndarray:
    """Deviations of each column from its own mean over the periods it has; 0 where missing."""
    r = np.asarray(returns, dtype=float)
    mask = np.isfinite(r)
    x = np.where(mask, r, 0.0)
    n = mask.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n > 0, x.sum(axis=0) / np.maximum(n, 1), 0.0)
    x -= mean
    x[~mask] = 0.0
    return x


def choose_method(method: str, n_assets: int, n_periods: int) -> str:
    """Resolve ``"auto"`` (the older rule, kept for packs that name it): Ledoit-Wolf toward the
    identity when n_assets / n_periods >= AUTO_RATIO, else sample. Other names pass through."""
    if method != "auto":
        return method
    return "ledoit_wolf" if n_assets >= AUTO_RATIO * n_periods else "sample"


@dataclass(frozen=True)
class _Moments:
    """The pieces every estimator shares, from one pass over the centred returns."""

    x: np.ndarray          # T x N deviations from each column's own mean, 0 where missing
    m: np.ndarray          # T x N float mask
    n: np.ndarray          # N x N common periods n_ij
    gram: np.ndarray       # N x N sum over common periods of x_i x_j
    gapped: np.ndarray     # bool N: columns missing a period of the window
    T: int

    @classmethod
    def of(cls, returns: np.ndarray) -> _Moments:
        r = np.asarray(returns, dtype=float)
        mask = np.isfinite(r)
        x = centred(r)
        T, N = x.shape
        m = mask.astype(float)
        gapped = mask.sum(axis=0) < T
        n = np.full((N, N), float(T))
        if gapped.any():
            ng = m[:, gapped].T @ m
            n[gapped, :] = ng
            n[:, gapped] = ng.T
        return cls(x=x, m=m, n=n, gram=x.T @ x, gapped=gapped, T=T)

    def pair_sum(self, a: np.ndarray, b: np.ndarray, p: np.ndarray, q: np.ndarray,
                 h: np.ndarray, h_full: float) -> float:
        """sum_ij p_i q_j h_ij (a'b)_ij for T x N ``a``, ``b`` without forming a'b: ``h`` is
        ``h_full`` wherever both columns are complete, so that block is
        sum_t (a_t . p)(b_t . q); only rows or columns of gapped holdings need products."""
        c, g = ~self.gapped, self.gapped
        total = h_full * float((a[:, c] @ p[c]) @ (b[:, c] @ q[c]))
        if g.any():
            total += float(np.sum(p[g, None] * q[None, :] * h[g, :] * (a[:, g].T @ b)))
            total += float(np.sum(p[c, None] * q[None, g] * h[np.ix_(c, g)]
                                  * (a[:, c].T @ b[:, g])))
        return total


def _to_psd(mat: np.ndarray, gapped: np.ndarray) -> tuple[np.ndarray, int]:
    """``mat`` made positive semi-definite; returns it and the number of negative eigenvalues
    set to zero. A matrix with a Cholesky factor is returned unchanged. Up to EXACT_CLIP_MAX
    holdings, every negative eigenvalue is set to zero with the eigenvectors kept: the
    nearest positive semi-definite matrix in the Frobenius norm (Higham 1988). Above that,
    to spare an N^3 eigendecomposition, when the block A of the holdings with a complete
    window is positive definite and the others are at most half, only the block among the
    holdings with gaps changes: the Schur complement D - B'A^-1 B has its negative
    eigenvalues set to zero (the complete holdings' estimates, all from one common sample,
    stay as they are; a gapped holding's variance can only rise). Else the whole matrix is
    clipped as for a small one."""
    try:
        np.linalg.cholesky(mat)
        return mat, 0
    except np.linalg.LinAlgError:
        pass
    N = mat.shape[0]
    tol = 1e-12 * max(float(np.abs(np.diagonal(mat)).max(initial=0.0)), 1e-300)
    g, c = gapped, ~gapped
    if N > EXACT_CLIP_MAX and 0 < g.sum() <= N / 2:
        try:
            low = np.linalg.cholesky(mat[np.ix_(c, c)])
        except np.linalg.LinAlgError:
            low = None
        if low is not None:
            z = solve_triangular(low, mat[np.ix_(c, g)], lower=True)
            explained = z.T @ z                                   # B'A^-1 B
            w, v = np.linalg.eigh(mat[np.ix_(g, g)] - explained)
            neg = w < -tol
            if not neg.any():
                return mat, 0
            block = explained + (v * np.where(neg, 0.0, w)) @ v.T
            out = mat.copy()
            out[np.ix_(g, g)] = (block + block.T) / 2.0
            return out, int(neg.sum())
    w, v = np.linalg.eigh(mat)
    neg = w < -tol
    if not neg.any():
        return mat, 0
    out = (v * np.where(neg, 0.0, w)) @ v.T
    return (out + out.T) / 2.0, int(neg.sum())


def _estimate(mo: _Moments, method: str) -> CovarianceEstimate:
    T, N = mo.T, mo.n.shape[0]
    valid = mo.n >= 2
    with np.errstate(invalid="ignore", divide="ignore"):
        if method == "sample":
            mat, clipped = _to_psd(np.where(valid, mo.gram / (mo.n - 1.0), 0.0),
                                   mo.gapped)
            return CovarianceEstimate(mat, "sample", 0.0, T, N, clipped)
        if method not in METHODS:
            raise ValueError(f"unknown covariance method {method!r}")
        s = np.where(valid, mo.gram / mo.n, 0.0)             # divisor n_ij, as in the papers
        h = np.where(valid, 1.0 / mo.n**2, 0.0)
    x2 = mo.x * mo.x
    ones = np.ones(N)
    # sum_ij pi_ij / n_ij, pi_ij = mean over common periods of (x_i x_j)^2 - s_ij^2
    pi_sum = mo.pair_sum(x2, x2, ones, ones, h, 1.0 / T**2) - float(
        np.sum(np.where(valid, s * s / np.where(valid, mo.n, 1.0), 0.0)))
    if method == "ledoit_wolf":
        mu = float(np.trace(s)) / N
        d2 = (float(np.einsum("ij,ij->", s, s)) - 2.0 * mu * float(np.trace(s))
              + N * mu * mu) / N
        b2 = min(pi_sum / N, d2)
        shrink = 0.0 if b2 <= 0 or d2 <= 0 else b2 / d2
        mat = s * (1.0 - shrink)
        mat[np.diag_indices(N)] += shrink * mu
        mat, clipped = _to_psd(mat, mo.gapped)
        return CovarianceEstimate(mat, "ledoit_wolf", float(shrink), T, N, clipped)
    sd = np.sqrt(np.diagonal(s))
    inv_sd = np.where(sd > 0, 1.0 / np.where(sd > 0, sd, 1.0), 0.0)
    off = valid & ~np.eye(N, dtype=bool) & (sd[:, None] > 0) & (sd[None, :] > 0)
    corr = s * inv_sd[:, None] * inv_sd[None, :]
    r_bar = float(corr[off].mean()) if off.any() else 0.0
    target = r_bar * np.outer(sd, sd)
    np.fill_diagonal(target, np.diagonal(s))
    s = np.where(valid, s, target)                # no common periods: the target stands in
    gamma = float(np.sum((target - s) ** 2))
    n_own = np.diagonal(mo.n)
    x4 = np.einsum("ij,ij->j", x2, x2)            # sum_t x_it^4 over own periods
    with np.errstate(invalid="ignore", divide="ignore"):
        pi_diag = np.where(n_own >= 2, (x4 / n_own - np.diagonal(s) ** 2) / n_own, 0.0)
        a_diag = np.where(n_own >= 2, x4 / n_own**2, 0.0) * (sd > 0)
    # theta_ii,ij / n_ij = (A_ij - s_ij B_ij) / n_ij^2, A = (x^3)'x, B = (x^2)'m
    b_mat = np.repeat(x2.sum(axis=0)[:, None], N, axis=1)
    if mo.gapped.any():
        b_mat[:, mo.gapped] = x2.T @ mo.m[:, mo.gapped]
    ratio = inv_sd[:, None] * sd[None, :]          # sqrt(s_jj / s_ii)
    theta_a = mo.pair_sum(x2 * mo.x, mo.x, inv_sd, sd, h, 1.0 / T**2) - float(a_diag.sum())
    theta_b = float(np.sum(ratio * s * b_mat * np.where(off, h, 0.0)))
    rho = float(pi_diag.sum()) + r_bar * (theta_a - theta_b)
    shrink = 0.0 if gamma <= 0 else float(np.clip((pi_sum - rho) / gamma, 0.0, 1.0))
    mat, clipped = _to_psd(shrink * target + (1.0 - shrink) * s, mo.gapped)
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
    return _estimate(mo, choose_method(method, mo.n.shape[0], mo.T))


def holdings_and_active(returns: np.ndarray, market: np.ndarray,
                        method: str = DEFAULT_METHOD
                        ) -> tuple[CovarianceEstimate, CovarianceEstimate]:
    """Covariance of the holdings' returns and of their returns relative to the reference
    (market proxy or benchmark), r_i - r_m, each estimated by ``method`` on its own data with
    its own intensity. A period where the reference has no return is missing for every
    relative return."""
    r = np.asarray(returns, dtype=float)
    ref = np.asarray(market, dtype=float)
    T, N = r.shape
    method = choose_method(method, N, T)
    return (_estimate(_Moments.of(r), method),
            _estimate(_Moments.of(r - ref[:, None]), method))


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
