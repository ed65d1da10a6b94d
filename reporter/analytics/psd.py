"""Positive semi-definite repair of covariance estimates made from unequal histories.

Source: N. J. Higham (1988), "Computing a nearest symmetric positive semidefinite matrix",
Linear Algebra Appl. 103, 103-118 (negative eigenvalues set to zero); the Schur complement
test of a block matrix and the Woodbury identity (M. A. Woodbury 1950), standard linear
algebra (e.g. Golub and Van Loan, *Matrix Computations*; recalled from memory).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy.linalg import solve_triangular
from scipy.linalg.lapack import dpotrf

EXACT_CLIP_MAX = 500   # holdings up to which a non-PSD estimate gets a full eigendecomposition


class LowRank(NamedTuple):
    """A = diag(lam) + V diag(sign) V' + X'X, lam > 0, sign = +-1 (the caller vouches that A
    is positive definite). ``x`` (periods x holdings, C-ordered; or None) stands for T more
    columns of V, X', with sign +1: it is given in its own layout, so that no transposed
    copy is made, and it is consumed (scaled in place)."""

    lam: np.ndarray
    v: np.ndarray
    sign: np.ndarray
    x: np.ndarray | None = None

    @property
    def rank(self) -> int:
        return self.v.shape[1] + (0 if self.x is None else self.x.shape[0])


def cholesky_in_place(a: np.ndarray, clean: bool = False) -> np.ndarray | None:
    """The lower Cholesky factor L of the symmetric positive definite C-ordered ``a``, made
    in ``a``'s own memory and returned as ``a``: L is its lower triangle, and the strict upper
    triangle keeps ``a``'s values (read it with a triangular routine, which looks at one
    triangle only), or is zeroed with ``clean``. None when ``a`` is not positive definite.
    LAPACK's dpotrf on ``a.T`` (``a`` read as the Fortran-ordered ``a'`` = ``a``), upper:
    U'U = a, U' = L.

    numpy's ``linalg.cholesky`` copies its argument and zeroes a triangle, and took twice as
    long: Large's 1,891-holding block, best of 15 in one process, 0.064 s against 0.033 s.
    (An earlier note found scipy's LAPACK slower inside the analysis: its OpenBLAS threads then
    shared the cores with numpy's still spinning ones, which OPENBLAS_THREAD_TIMEOUT, set in
    reporter/__init__.py, ends.)"""
    if not a.flags.c_contiguous:
        raise ValueError("cholesky_in_place needs a C-ordered array")
    _, info = dpotrf(a.T, lower=0, overwrite_a=1, clean=int(clean))
    return a if info == 0 else None


def _explained(mat: np.ndarray, gapped: np.ndarray,
               low_rank: LowRank | None) -> np.ndarray | None:
    """B'A^-1 B for the block A of the complete holdings and B = mat[complete, gapped], or
    None when A is not positive definite. With ``low_rank`` (:class:`LowRank`: A =
    diag(lam) + W diag(sign) W', W = [V, X']), by the Woodbury identity
    A^-1 = L^-1 - L^-1 W (diag(sign) + W'L^-1 W)^-1 W'L^-1 with L = diag(lam): O(N k^2)
    for k = T + 1 columns of W, instead of an O(N^3) Cholesky factor of A (used when it is
    the cheaper: long windows, T > N / sqrt(3)). W'L^-1 W is formed by blocks, X L^-1 X' as
    one product of X in its own layout (10,000 holdings: W as one N x (T + 1) matrix took a
    transposed copy of X, 0.46 s, and a second copy for L^-1/2 W)."""
    c, g = ~gapped, gapped
    b = mat[np.ix_(c, g)]
    if low_rank is not None and 3 * low_rank.rank ** 2 > low_rank.lam.size ** 2:
        low_rank = None          # k > N_c / sqrt(3): N_c k^2 exceeds the N_c^3 / 3 of Cholesky
    if low_rank is None:
        ci = np.flatnonzero(c)
        low = cholesky_in_place(mat.take(ci, axis=0).take(ci, axis=1))    # (a fresh copy)
        if low is None:
            return None
        z = solve_triangular(low, b, lower=True, check_finite=False)
        return z.T @ z
    lam, v, sign, x = low_rank
    root = np.sqrt(lam)[:, None]
    bs = b / root                                   # L^-1/2 B
    vs = v / root                                   # L^-1/2 V
    w = vs.T @ bs                                   # W'L^-1 B, by blocks of W
    core = vs.T @ vs                                # W'L^-1 W + diag(sign), by blocks
    if x is not None:
        xs = x
        xs /= root.T                                # (L^-1/2 X')', in place
        xv = xs @ vs
        core = np.block([[core, xv.T], [xv, xs @ xs.T]])
        w = np.vstack([w, xs @ bs])
        sign = np.concatenate([sign, np.ones(len(xs))])
    core[np.diag_indices_from(core)] += sign
    if np.all(sign > 0):        # core = I + W'L^-1 W is positive definite: w'core^-1 w = z'z
        low = cholesky_in_place(core.copy())        # (core kept should rounding refuse it)
        if low is not None:
            z = solve_triangular(low, w, lower=True, check_finite=False)
            return bs.T @ bs - z.T @ z
    return bs.T @ bs - w.T @ np.linalg.solve(core, w)


def to_psd(mat: np.ndarray, gapped: np.ndarray,
            low_rank: LowRank | None = None
            ) -> tuple[np.ndarray, int]:
    """``mat`` made positive semi-definite (in place where it can); returns it and the number
    of negative eigenvalues set to zero. Up to EXACT_CLIP_MAX holdings, a matrix with a
    Cholesky factor is returned unchanged, and otherwise every negative eigenvalue is set to
    zero with the eigenvectors kept: the nearest positive semi-definite matrix in the
    Frobenius norm (Higham 1988). Above that, to spare N^3 work, when the block A of the
    holdings with a complete window is positive definite and the others are at most half,
    only the block among the holdings with gaps can change: the Schur complement
    D - B'A^-1 B has its negative eigenvalues set to zero (the complete holdings' estimates,
    all from one common sample, stay as they are; a gapped holding's variance can only
    rise). The whole matrix is PSD exactly when that Schur complement is (A being positive
    definite), so no Cholesky factor of the whole matrix is tried first: none clipped means
    unchanged, as before. ``low_rank`` gives A as diagonal plus low rank (see
    :func:`_explained`). Else the whole matrix is clipped as for a small one."""
    N = mat.shape[0]
    tol = 1e-12 * max(float(np.abs(np.diagonal(mat)).max(initial=0.0)), 1e-300)
    g = gapped
    if N > EXACT_CLIP_MAX and 0 < g.sum() <= N / 2:
        explained = _explained(mat, gapped, low_rank)
        if explained is not None:
            gg = np.ix_(g, g)
            w, v = np.linalg.eigh(mat[gg] - explained)
            neg = w < -tol
            if not neg.any():
                return mat, 0
            block = explained + (v * np.where(neg, 0.0, w)) @ v.T
            mat[gg] = (block + block.T) / 2.0
            return mat, int(neg.sum())
    try:
        np.linalg.cholesky(mat)
        return mat, 0
    except np.linalg.LinAlgError:
        pass
    w, v = np.linalg.eigh(mat)
    neg = w < -tol
    if not neg.any():
        return mat, 0
    out = (v * np.where(neg, 0.0, w)) @ v.T
    return (out + out.T) / 2.0, int(neg.sum())
