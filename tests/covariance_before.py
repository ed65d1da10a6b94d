"""The covariance estimators as they were before the row-block rewrite (commit d72390a of
reporter/analytics/covariance.py, copied unchanged but for names): the reference that the
rewrite must reproduce to rounding. Not a test module; imported by tests/test_covariance_scale.py.
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
class Estimate:
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


def _estimate(mo: _Moments, method: str) -> Estimate:
    T, N = mo.T, mo.n.shape[0]
    valid = mo.n >= 2
    with np.errstate(invalid="ignore", divide="ignore"):
        if method == "sample":
            mat, clipped = _to_psd(np.where(valid, mo.gram / (mo.n - 1.0), 0.0),
                                   mo.gapped)
            return Estimate(mat, "sample", 0.0, T, N, clipped)
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
        return Estimate(mat, "ledoit_wolf", float(shrink), T, N, clipped)
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
    return Estimate(mat, "constant_correlation", shrink, T, N, clipped, r_bar)


def estimate_before(returns: np.ndarray, method: str = DEFAULT_METHOD) -> Estimate:
    """The estimate of the code before the rewrite."""
    mo = _Moments.of(returns)
    return _estimate(mo, method)
