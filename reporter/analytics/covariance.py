"""Covariance matrices of holdings' returns: the sample estimate and Ledoit-Wolf shrinkage.

Source: O. Ledoit and M. Wolf (2004), "A well-conditioned estimator for large-dimensional
covariance matrices", J. Multivariate Analysis 88, 365-411: the sample covariance S shrunk
toward mu I, mu = trace(S)/N, with intensity min(b^2, d^2)/d^2 where
d^2 = ||S - mu I||_F^2 / N and b^2 = (1/(N T^2)) sum_t ||x_t x_t' - S||_F^2.
The normalisation (S with divisor T) is scikit-learn's ``LedoitWolf``, which the tests use as
the reference. Gaps: each column is centred on its own mean over the periods it has, and a
missing period contributes a zero deviation (nothing is filled into the returns themselves).
For returns relative to the market proxy this means a holding's missing period counts as the
holding at its own mean, so its relative deviation that period is minus the market's.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

METHODS = ("ledoit_wolf", "sample")
AUTO_RATIO = 0.1   # "auto" shrinks when holdings / periods >= this (common practice, no source)


@dataclass(frozen=True)
class CovarianceEstimate:
    """A covariance matrix of per-period returns (decimals squared) and how it was made."""

    matrix: np.ndarray     # N x N
    method: str            # "ledoit_wolf" | "sample"
    shrinkage: float       # Ledoit-Wolf intensity in [0, 1]; 0 for the sample estimate
    n_periods: int
    n_assets: int


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
    """Resolve ``"auto"``: Ledoit-Wolf when n_assets / n_periods >= AUTO_RATIO, else sample."""
    if method != "auto":
        return method
    return "ledoit_wolf" if n_assets >= AUTO_RATIO * n_periods else "sample"


def _shrink(gram: np.ndarray, row2: np.ndarray, T: int) -> tuple[np.ndarray, float]:
    """Ledoit-Wolf (2004) from the Gram matrix X'X of a centred T x N matrix X and its row
    norms ||x_t||^2: returns (shrunk covariance, intensity). No pass over X is needed."""
    N = gram.shape[0]
    s = gram / T
    trace = float(np.trace(s))
    mu = trace / N
    fro2 = float(np.einsum("ij,ij->", s, s))          # ||S||_F^2
    beta2 = (float(row2 @ row2) / T - fro2) / (N * T)  # (1/(N T^2)) sum ||x_t x_t' - S||^2
    delta2 = (fro2 - 2.0 * mu * trace + N * mu * mu) / N
    beta2 = min(beta2, delta2)
    shrink = 0.0 if beta2 <= 0 or delta2 <= 0 else beta2 / delta2
    s *= 1.0 - shrink
    s[np.diag_indices(N)] += shrink * mu
    return s, float(shrink)


def _estimate(gram: np.ndarray, row2: np.ndarray, T: int, method: str) -> CovarianceEstimate:
    N = gram.shape[0]
    if method == "sample":
        return CovarianceEstimate(gram / (T - 1), "sample", 0.0, T, N)
    if method != "ledoit_wolf":
        raise ValueError(f"unknown covariance method {method!r}")
    cov, shrink = _shrink(gram, row2, T)
    return CovarianceEstimate(cov, "ledoit_wolf", shrink, T, N)


def estimate_covariance(returns: np.ndarray, method: str = "auto") -> CovarianceEstimate:
    """Covariance of the columns of ``returns`` (T x N per-period decimals, NaN = missing).

    ``sample``: X'X / (T - 1) of the centred matrix X (numpy.cov when nothing is missing).
    ``ledoit_wolf``: Ledoit and Wolf (2004) shrinkage of X'X / T toward mu I, computed in one
    pass over X: one X'X product and a row-norm sum, with no T x N x N intermediate.
    """
    x = centred(returns)
    T, N = x.shape
    return _estimate(x.T @ x, np.einsum("ij,ij->i", x, x), T, choose_method(method, N, T))


def holdings_and_active(returns: np.ndarray, market: np.ndarray,
                        method: str = "auto") -> tuple[CovarianceEstimate, CovarianceEstimate]:
    """Covariance of the holdings' returns and of their returns relative to the market proxy,
    r_i - r_m, from one Gram matrix.

    With X the centred holdings (T x N) and x_m the centred market, the relative returns are
    D = X - x_m 1', so D'D = X'X - a 1' - 1 a' + (x_m'x_m) 1 1' with a = X'x_m, and
    ||d_t||^2 = ||x_t||^2 - 2 x_m,t (1'x_t) + N x_m,t^2: the second estimate costs O(N^2 + TN).
    Each is shrunk with its own Ledoit-Wolf intensity (or both sample, by ``method``).
    """
    x = centred(returns)
    xm = centred(np.asarray(market, dtype=float)[:, None])[:, 0]
    T, N = x.shape
    method = choose_method(method, N, T)
    gram = x.T @ x
    row2 = np.einsum("ij,ij->i", x, x)
    a = x.T @ xm
    b = float(xm @ xm)
    gram_d = gram - a[:, None] - a[None, :] + b
    row_sum = x.sum(axis=1)
    row2_d = row2 - 2.0 * xm * row_sum + N * xm * xm
    held = _estimate(gram, row2, T, method)
    active = _estimate(gram_d, row2_d, T, method)
    return held, active
