"""The moments every estimator of the holdings' covariance shares, from one pass over the
returns of the window, each holding centred on its own mean over the periods it has (0 where
missing): the Gram matrix X'X, the holdings with gaps and their common periods.

Only holdings with gaps can have a missing period, so every mask and count is formed for
their columns alone: the common periods of a gapped holding with a complete one are its own
count, and only the gapped x gapped block needs a product of masks (integers, exact in
floating point). Nothing is filled or approximated: the figures are those of the full
T x N masks, which tests/test_covariance_scale.py checks against the direct products.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

BLOCK_ELEMENTS = 1 << 20   # N x N work runs over row blocks of about this many elements


def _row_blocks(N: int):
    step = max(1, BLOCK_ELEMENTS // max(N, 1))
    for start in range(0, N, step):
        yield slice(start, min(start + step, N))


def _diagonal_of(block: slice) -> tuple[np.ndarray, np.ndarray]:
    """(row, column) positions of the main diagonal inside the row block ``block``."""
    rows = np.arange(block.stop - block.start)
    return rows, rows + block.start


def _centre_in_place(a: np.ndarray, gap_idx: np.ndarray, gap_mask: np.ndarray) -> None:
    """Centre each column of ``a`` (T x N, finite except in the columns ``gap_idx``, whose
    T x g mask of periods present is ``gap_mask``) on its mean over its own periods, and set
    its missing periods to 0, in place: the same sums and the same values as
    :func:`centred`, without a T x N mask or copy."""
    T = a.shape[0]
    n = np.full(a.shape[1], T)
    if gap_idx.size:
        missing = ~gap_mask
        sub = a[:, gap_idx]
        sub[missing] = 0.0
        a[:, gap_idx] = sub
        n[gap_idx] = gap_mask.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n > 0, a.sum(axis=0) / np.maximum(n, 1), 0.0)
    a -= mean
    if gap_idx.size:
        sub = a[:, gap_idx]
        sub[missing] = 0.0
        a[:, gap_idx] = sub


def centred(returns: np.ndarray) -> np.ndarray:
    """Deviations of each column from its own mean over the periods it has; 0 where missing."""
    r = np.asarray(returns, dtype=float)
    mask = np.isfinite(r)
    gap_idx = np.flatnonzero(~mask.all(axis=0))
    x = r.copy()
    _centre_in_place(x, gap_idx, mask[:, gap_idx])
    return x


@dataclass(frozen=True)
class _Moments:
    """The pieces every estimator shares, from one pass over the centred returns. Only the
    rows of n_ij for holdings with gaps are stored: every other pair has n_ij = T."""

    x: np.ndarray          # T x N deviations from each column's own mean, 0 where missing
    m_gap: np.ndarray      # T x g float mask of the holdings with gaps (others: all ones)
    gram: np.ndarray       # N x N sum over common periods of x_i x_j (the estimate is built in it)
    gapped: np.ndarray     # bool N: columns missing a period of the window
    gap_idx: np.ndarray    # their positions
    n_gap: np.ndarray      # g x N: common periods of each gapped holding with every holding
    n_own: np.ndarray      # N: periods each holding has
    T: int
    _products: dict = field(default_factory=dict, compare=False, repr=False)

    def squares_over_gaps(self, x2: np.ndarray | None = None) -> np.ndarray:
        """(x^2)'M_g, N x g: each holding's sum of squared deviations over each gapped
        holding's periods; formed once (from ``x2`` = x * x when the caller has it) and
        kept for the pairwise moments and the estimate of these same moments."""
        if "x2_gap" not in self._products:
            if x2 is None:
                x2 = self.x * self.x
            self._products["x2_gap"] = x2.T @ self.m_gap
        return self._products["x2_gap"]

    @classmethod
    def of(cls, returns: np.ndarray) -> _Moments:
        r = np.asarray(returns, dtype=float)
        T = r.shape[0]
        mask = np.isfinite(r)
        n_own = mask.sum(axis=0).astype(float)
        del mask
        gapped = n_own < T
        gap_idx = np.flatnonzero(gapped)
        gap_mask = np.isfinite(r[:, gap_idx])
        x = r.copy()
        _centre_in_place(x, gap_idx, gap_mask)
        m_gap = gap_mask.astype(float)
        # common periods: a gapped holding's own count against every complete holding
        n_gap = np.repeat(n_own[gap_idx, None], r.shape[1], axis=1)
        n_gap[:, gap_idx] = m_gap.T @ m_gap
        return cls(x=x, m_gap=m_gap, gram=x.T @ x, gapped=gapped, gap_idx=gap_idx,
                   n_gap=n_gap, n_own=n_own, T=T)

    def relative_to(self, returns: np.ndarray, ref: np.ndarray,
                    gram: np.ndarray | None = None) -> _Moments:
        """The moments of ``returns - ref`` for a reference ``ref`` with every period (so the
        mask is this one), its Gram matrix taken from this one's instead of a new T N^2
        product: with e = ref - mean(ref), a complete holding's deviation is x_i - e, so
        among complete holdings X_a'X_a = X'X - u 1' - 1 u' + e'e, u = X'e (``gram``, from
        :meth:`relative_gram`, when the caller has taken it already). The rows and columns
        of the holdings with gaps (whose means run over their own periods) are their own
        products x_a,g' X_a."""
        if gram is None:
            gram = self.relative_gram(ref)
        xa = np.subtract(np.asarray(returns, dtype=float), ref[:, None])
        gi = self.gap_idx
        _centre_in_place(xa, gi, self.m_gap > 0)
        if gi.size:
            g_rows = xa[:, gi].T @ xa
            gram[gi, :] = g_rows
            gram[:, gi] = g_rows.T
        return _Moments(x=xa, m_gap=self.m_gap, gram=gram, gapped=self.gapped, gap_idx=gi,
                        n_gap=self.n_gap, n_own=self.n_own, T=self.T)

    def relative_gram(self, ref: np.ndarray) -> np.ndarray:
        """X'X - u 1' - 1 u' + e'e (see :meth:`relative_to`): a new N x N matrix, right for
        the pairs of complete holdings (the rows of the holdings with gaps are replaced).

        A holding whose returns are the reference's (one that stands in with the market
        proxy's returns) has relative deviations of zero, but the formula leaves rounding of
        the order of eps (X_ii + e'e) on its diagonal, negative as often as not: a negative
        variance, whose square root spoilt every figure of the active risk model. A diagonal
        within 1e-12 of what cancelled in it is zero, and so are that holding's covariances,
        as the direct product of its zero deviations gives them."""
        e = ref - ref.mean()
        u, ee = self.x.T @ e, float(e @ e)
        gram = self.gram.copy()
        for blk in _row_blocks(gram.shape[0]):
            rows = gram[blk]
            rows -= u[blk, None]
            rows -= u[None, :]
            rows += ee
        zero = np.flatnonzero(np.diagonal(gram) <= 1e-12 * (np.diagonal(self.gram) + ee))
        if zero.size:
            gram[zero, :] = 0.0
            gram[:, zero] = 0.0
        return gram

    def release_deviations(self) -> None:
        """Drop the T x N deviations ``x`` once these moments are spent (their Gram matrix
        consumed by an estimate), so that they are freed before the next T x N work."""
        object.__setattr__(self, "x", None)
        self._products.clear()

    def n_rows(self, block: slice) -> np.ndarray:
        """Rows ``block`` of the N x N common periods n_ij."""
        nb = np.full((block.stop - block.start, self.gram.shape[0]), float(self.T))
        if self.gap_idx.size:
            nb[:, self.gap_idx] = self.n_gap[:, block].T
            local = np.flatnonzero(self.gapped[block])
            if local.size:
                nb[local] = self.n_gap[np.searchsorted(self.gap_idx, local + block.start)]
        return nb

    def pair_sum(self, a: np.ndarray, b: np.ndarray, p: np.ndarray, q: np.ndarray,
                 h_gg: np.ndarray, h_full: float) -> float:
        """sum_ij p_i q_j h_ij (a'b)_ij for T x N ``a``, ``b`` without forming a'b, where h_ij
        depends on the pair only through n_ij (0 if n_ij < 2): ``h_full`` wherever both columns
        are complete, ``h_gg`` among the gapped holdings. Against a complete holding j, n_ij
        is i's own count, so each block but the gapped x gapped one is a product of
        T-vectors."""
        c, g = ~self.gapped, self.gapped
        a_p, b_q = a @ np.where(c, p, 0.0), b @ np.where(c, q, 0.0)
        total = h_full * float(a_p @ b_q)
        if g.any():
            gi = self.gap_idx
            with np.errstate(divide="ignore"):
                h_own = np.where(self.n_own[gi] >= 2, 1.0 / self.n_own[gi] ** 2, 0.0)
            total += float((p[gi] * h_own) @ (a[:, gi].T @ b_q))
            total += float((q[gi] * h_own) @ (b[:, gi].T @ a_p))
            total += float(np.sum(p[gi, None] * q[None, gi] * h_gg
                                  * (a[:, gi].T @ b[:, gi])))
        return total
