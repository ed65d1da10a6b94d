"""Concentration, the single-index split of variance and the equal-weight curve.

Sources: the effective number of holdings 1/sum(w^2) is the inverse Herfindahl index;
the single-index variance split sigma_p^2 = beta_p^2 sigma_m^2 + sum w_i^2 sigma_e,i^2 is
Sharpe's (1963) diagonal model; the equal-weight curve var(n) = avg_var/n + (1 - 1/n) avg_cov
is the standard textbook decomposition (e.g. Elton and Gruber, *Modern Portfolio Theory
and Investment Analysis*, ch. 4; recalled from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd


@dataclass(frozen=True)
class Concentration:
    n_holdings: int
    effective_n: float      # 1 / sum(w^2)
    top10_weight: float
    largest_weight: float


def concentration(weights: np.ndarray) -> Concentration:
    """Holding count, effective number of holdings 1/sum(w^2), top-10 and largest weight."""
    w = np.asarray(weights, dtype=float)
    s = np.sort(np.abs(w))[::-1]
    return Concentration(n_holdings=len(w), effective_n=float(1.0 / np.sum(w**2)),
                         top10_weight=float(s[:10].sum()), largest_weight=float(s[0]))


def sector_weights(sectors: pd.Series, weights: np.ndarray) -> pd.DataFrame:
    """Weight and holding count by sector, largest weight first (ties by name)."""
    df = pd.DataFrame({"sector": sectors.to_numpy(), "weight": weights})
    out = df.groupby("sector", sort=True).agg(weight=("weight", "sum"),
                                               n_holdings=("weight", "size")).reset_index()
    return out.sort_values(["weight", "sector"], ascending=[False, True],
                           kind="stable").reset_index(drop=True)


@dataclass(frozen=True)
class VarianceSplit:
    """Single-index split of portfolio variance per period (decimals squared)."""

    systematic: float       # beta_p^2 sigma_m^2
    idiosyncratic: float    # sum w_i^2 sigma_e,i^2
    covered_weight: float   # weight of the fitted holdings used

    @property
    def systematic_share(self) -> float:
        return self.systematic / (self.systematic + self.idiosyncratic)


def variance_split(weights: np.ndarray, betas: np.ndarray, residual_vols: np.ndarray,
                   market_excess: np.ndarray) -> VarianceSplit:
    """sigma_p^2 = beta_p^2 sigma_m^2 + sum w_i^2 sigma_e,i^2 over the fitted holdings,
    with weights rescaled to the fitted holdings' total."""
    ok = np.isfinite(betas) & np.isfinite(residual_vols)
    covered = float(weights[ok].sum())
    w = weights[ok] / covered
    beta_p = float(w @ betas[ok])
    sys_var = beta_p**2 * float(np.var(market_excess, ddof=1))
    idio = float(np.sum(w**2 * residual_vols[ok] ** 2))
    return VarianceSplit(systematic=sys_var, idiosyncratic=idio, covered_weight=covered)


def pairwise_covariance(returns: np.ndarray) -> np.ndarray:
    """Sample covariance (ddof=1) of the columns of ``returns`` on pairwise-complete periods.

    Vectorised with masked cross-products; NaN where a pair shares fewer than two periods.
    """
    mask = np.isfinite(returns)
    m = mask.astype(float)
    x = np.where(mask, returns, 0.0)
    n = m.T @ m
    sxy = x.T @ x
    sx = x.T @ m          # sx[i, j] = sum of x_i over periods where j is present too
    with np.errstate(invalid="ignore", divide="ignore"):
        cov = (sxy - sx * sx.T / n) / (n - 1)
    cov[n < 2] = np.nan
    return cov


@dataclass(frozen=True)
class EqualWeightCurve:
    """var(n) = avg_var / n + (1 - 1/n) avg_cov for n equally weighted holdings (per period)."""

    average_variance: float
    average_covariance: float

    def variance(self, n: np.ndarray | float) -> np.ndarray | float:
        n = np.asarray(n, dtype=float)
        return self.average_variance / n + (1.0 - 1.0 / n) * self.average_covariance

    def diversifiable_removed(self, n: np.ndarray | float) -> np.ndarray | float:
        """Share of the diversifiable variance (avg_var - avg_cov) removed at n holdings:
        1 - 1/n."""
        return 1.0 - 1.0 / np.asarray(n, dtype=float)

    def holdings_for_share(self, share: float) -> int | None:
        """Smallest n of equally weighted holdings whose volatility has fallen by ``share``
        of the way from one holding's to the floor: sigma(1) - sigma(n) >=
        share x (sigma(1) - sigma(inf)), with sigma(n) = sqrt(v/n + (1 - 1/n) c) and
        sigma(inf) = sqrt(max(c, 0)), v the average variance and c the average covariance.
        In volatility, the unit trustees see, so it moves with the average correlation:
        sigma(n)^2 <= s^2 with s = sigma(1) - share x (sigma(1) - sigma(inf)) gives
        n >= (v - c) / (s^2 - c). 1 when nothing is diversifiable; None without figures."""
        v, c = self.average_variance, self.average_covariance
        if not (np.isfinite(v) and np.isfinite(c)) or v <= 0:
            return None
        if v <= c:
            return 1
        s1, s_inf = np.sqrt(v), np.sqrt(max(c, 0.0))
        target = s1 - share * (s1 - s_inf)
        gap = target * target - c
        if gap <= 0:
            return None
        return max(int(np.ceil((v - c) / gap - 1e-9)), 1)


def equal_weight_curve(cov: np.ndarray) -> EqualWeightCurve:
    """Average variance and average pairwise covariance from a covariance matrix."""
    n = cov.shape[0]
    diag = np.diag(cov)
    total, count = 0.0, 0
    for blk in _row_blocks(n):          # the off-diagonal mean, a block of rows at a time
        rows = cov[blk]
        keep = np.isfinite(rows)
        keep[np.arange(blk.stop - blk.start), np.arange(blk.start, blk.stop)] = False
        total += float(rows[keep].sum())
        count += int(keep.sum())
    return EqualWeightCurve(average_variance=float(np.nanmean(diag)),
                            average_covariance=(total / count if count else float("nan"))
                            if n > 1 else 0.0)


def _row_blocks(n: int):
    """Slices of about a million elements of an n x n matrix, by rows."""
    step = max(1, (1 << 20) // max(n, 1))
    for start in range(0, n, step):
        yield slice(start, min(start + step, n))


def pairwise_correlation(returns: np.ndarray) -> np.ndarray:
    """Pearson correlation of every pair of columns on the periods both have (as pandas
    ``DataFrame.corr()``); NaN where a pair shares fewer than two periods. Vectorised with
    masked cross-products."""
    mask = np.isfinite(returns)
    m = mask.astype(float)
    x = np.where(mask, returns, 0.0)
    n = m.T @ m
    sx = x.T @ m                 # sum of x_i over the periods j has too
    sxx = (x * x).T @ m          # sum of x_i^2 over the same periods
    with np.errstate(invalid="ignore", divide="ignore"):
        cxy = x.T @ x - sx * sx.T / n
        vx = sxx - sx * sx / n
        corr = cxy / np.sqrt(vx * vx.T)
    corr[n < 2] = np.nan
    return corr


def pairwise_covariance_and_correlation(returns: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`pairwise_covariance` and :func:`pairwise_correlation` from one set of masked
    cross-products (four matrix products; one when no return is missing)."""
    cov, corr_rows = _pairwise_moments(returns)
    N = cov.shape[0]
    return cov, (corr_rows(slice(0, N)) if N else np.empty((0, 0)))


def pairwise_covariance_and_average_correlation(returns: np.ndarray
                                                ) -> tuple[np.ndarray, float]:
    """:func:`pairwise_covariance` and :func:`average_pairwise_correlation` without keeping an
    N x N correlation matrix: the correlations are formed a block of rows at a time and only
    their mean over the pairs above the diagonal is kept."""
    cov, corr_rows = _pairwise_moments(returns)
    return cov, mean_above_diagonal(corr_rows, cov.shape[0])


def mean_above_diagonal(rows, n: int) -> float:
    """The mean of the finite entries above the diagonal of an n x n matrix given a block of
    rows at a time by ``rows(slice)`` (NaN when there are none), never holding it whole."""
    total, count = 0.0, 0
    for blk in _row_blocks(n):
        c = rows(blk)
        upper = np.arange(n)[None, :] > np.arange(blk.start, blk.stop)[:, None]
        upper &= np.isfinite(c)
        total += float(c[upper].sum())
        count += int(upper.sum())
    return total / count if count else float("nan")


def _pairwise_moments(returns: np.ndarray):
    """The pairwise covariance and a function giving rows of the pairwise correlation."""
    returns = np.asarray(returns, dtype=float)      # the in-place steps below stay float64
    mask = np.isfinite(returns)
    if mask.all():
        cov = np.atleast_2d(np.cov(returns, rowvar=False))
        sd = np.sqrt(np.diagonal(cov))
        if len(returns) < 2:
            cov[:] = np.nan

        def complete_rows(blk: slice) -> np.ndarray:
            with np.errstate(invalid="ignore", divide="ignore"):
                return cov[blk] / np.outer(sd[blk], sd)
        return cov, complete_rows
    # Per pair (i, j), over the periods where both have a return: n[i, j] periods, sx[i, j]
    # the sum of i's returns, sxx[i, j] the sum of their squares (x is 0 where missing). Against
    # a holding j with no gap these are T and i's own column sums, so the masked products are
    # needed only against the columns with gaps (a few late listings, typically): one N x N
    # product x'x and three N x g ones, instead of four N x N products.
    T, N = returns.shape
    x = np.where(mask, returns, 0.0)
    gap = np.flatnonzero(~mask.all(axis=0))
    m_gap = mask[:, gap].astype(float)
    n = np.full((N, N), float(T))
    n_gap = mask.T.astype(float) @ m_gap
    del mask
    n[:, gap] = n_gap
    n[gap, :] = n_gap.T
    del n_gap
    sx, sxx = np.empty((N, N)), np.empty((N, N))
    sx[:] = x.sum(axis=0)[:, None]
    sx[:, gap] = x.T @ m_gap
    sq = x * x
    sxx[:] = sq.sum(axis=0)[:, None]
    sxx[:, gap] = sq.T @ m_gap
    del sq
    # N x N matrices are 32 MB each for 2,000 holdings: the arithmetic below works in place
    # through one scratch matrix, so that at most six are alive at once
    with np.errstate(invalid="ignore", divide="ignore"):
        cxy = x.T @ x
        del x
        tmp = np.multiply(sx, sx.T)
        tmp /= n
        cxy -= tmp                              # sum (x_i - mean_i)(x_j - mean_j), pairwise
        np.multiply(sx, sx, out=tmp)
        tmp /= n
        sxx -= tmp                              # vx: sum (x_i - mean_i)^2 over the same periods
        vx = sxx
        del sx
        cov = np.subtract(n, 1.0)
        np.divide(cxy, cov, out=cov)
        del tmp
    few = n < 2
    cov[few] = np.nan

    def gapped_rows(blk: slice) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            c = cxy[blk] / np.sqrt(vx[blk] * vx[:, blk].T)
        c[few[blk]] = np.nan
        return c
    return cov, gapped_rows


def average_pairwise_correlation(returns: np.ndarray | None = None, *,
                                 corr: np.ndarray | None = None) -> float:
    """Mean of the off-diagonal pairwise correlations (each pair once), from ``returns`` or
    from a correlation matrix ``corr`` already computed."""
    c = pairwise_correlation(returns) if corr is None else corr
    iu = np.triu_indices(c.shape[0], k=1)
    vals = c[iu]
    vals = vals[np.isfinite(vals)]
    return float(vals.mean()) if len(vals) else float("nan")


@dataclass(frozen=True)
class RiskContributions:
    """Euler decomposition of portfolio volatility and tracking error (per period).

    sigma_p = sqrt(w' S w) and contribution_i = w_i (S w)_i / sigma_p, which sum to sigma_p
    exactly (Euler's theorem for a function homogeneous of degree one). Tracking error uses
    the covariance of r_i - r_m, since r_p - r_m = sum w_i (r_i - r_m) when sum w = 1.
    """

    volatility: float            # sqrt(w' S w) from the estimated covariance
    vol_contribution: np.ndarray
    tracking_error: float        # sqrt(w' S_d w), S_d = covariance of r_i - r_m
    te_contribution: np.ndarray
    asset_vol: np.ndarray        # sqrt(diag S)
    diversification_ratio: float  # w' sigma / sigma_p (Choueifaty and Coignard 2008)

    @property
    def vol_share(self) -> np.ndarray:
        return self.vol_contribution / self.volatility

    @property
    def te_share(self) -> np.ndarray:
        return self.te_contribution / self.tracking_error


def risk_contributions(weights: np.ndarray, cov: np.ndarray,
                       cov_active: np.ndarray) -> RiskContributions:
    """Euler risk contributions to volatility and to tracking error against the market.

    ``cov`` is the N x N covariance of the holdings' returns, ``cov_active`` that of their
    returns relative to the market proxy, r_i - r_m (Euler 1755; Litterman 1996 for its use
    in risk budgeting; Choueifaty and Coignard 2008 for the diversification ratio). Two
    matrix-vector products.
    """
    w = np.asarray(weights, dtype=float)
    sw = cov @ w
    vol = float(np.sqrt(max(float(w @ sw), 0.0)))
    sdw = cov_active @ w
    te = float(np.sqrt(max(float(w @ sdw), 0.0)))
    asset_vol = np.sqrt(np.maximum(np.diagonal(cov), 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        return RiskContributions(
            volatility=vol, vol_contribution=w * sw / vol, tracking_error=te,
            te_contribution=w * sdw / te, asset_vol=asset_vol,
            diversification_ratio=float(w @ asset_vol / vol))


@dataclass(frozen=True)
class RandomSubsetBand:
    """Volatility of random equal-weight portfolios of n holdings (per period)."""

    n: np.ndarray            # portfolio sizes
    low: np.ndarray          # 5th percentile of volatility across the draws
    median: np.ndarray
    high: np.ndarray         # 95th percentile
    draws: int
    seed: int
    vols: np.ndarray         # sizes x draws: every draw's volatility

    def share_below(self, n: int, vol: float) -> float:
        """Share of the random portfolios of size ``n`` (nearest size drawn) with a lower
        volatility than ``vol``."""
        i = int(np.argmin(np.abs(self.n - n)))
        return float(np.mean(self.vols[i] < vol))


def random_subset_band(cov: np.ndarray, sizes: np.ndarray, draws: int,
                       seed: int) -> RandomSubsetBand:
    """For each size n, ``draws`` random sets of n distinct holdings (numpy ``default_rng``
    with ``seed``), each equally weighted; volatility sqrt(1' C_sub 1) / n from ``cov``.
    Vectorised over draws and holdings (one loop over the few sizes). Each draw's sum
    1' C_sub 1 is taken the cheaper of two exact ways: gathering its n x n block (draws x
    n (n + 1) / 2 values, C being symmetric) for small n, or, once n^2 exceeds N^2 / 16, as
    s' C s with s the draw's 0/1 indicator over all N holdings (one draws x N x N matrix
    product, draws x N memory), so that a size near N costs neither draws x n^2 memory nor
    time."""
    rng = np.random.default_rng(seed)
    N = cov.shape[0]
    # a copy only when something is missing (N x N is 800 MB for 10,000 holdings)
    c = cov if np.isfinite(np.sum(cov)) else np.nan_to_num(cov)
    lo, med, hi, ns, all_vols = [], [], [], [], []
    for n in np.asarray(sizes, dtype=int):
        if n < 1 or n > N:
            continue
        pick = _first_in_order(rng.random((draws, N)), n)
        total = _block_sums(c, pick) if 16 * n * n <= N * N else _indicator_sums(c, pick)
        vol = np.sqrt(np.maximum(total / n**2, 0.0))
        q = np.percentile(vol, [5, 50, 95])
        ns.append(n)
        all_vols.append(vol)
        lo.append(q[0])
        med.append(q[1])
        hi.append(q[2])
    return RandomSubsetBand(np.array(ns), np.array(lo), np.array(med), np.array(hi), draws,
                            seed, np.array(all_vols).reshape(len(ns), draws))


def _first_in_order(u: np.ndarray, n: int) -> np.ndarray:
    """``np.argsort(u, axis=1)[:, :n]`` (the positions of each row's n smallest values, in
    ascending order of value) by a partition and a sort of those n alone: O(N) a row, not
    O(N log N)."""
    if n >= u.shape[1]:
        return np.argsort(u, axis=1)[:, :n]
    pick = np.argpartition(u, n - 1, axis=1)[:, :n]
    order = np.argsort(np.take_along_axis(u, pick, axis=1), axis=1)
    return np.take_along_axis(pick, order, axis=1)


def _block_sums(c: np.ndarray, pick: np.ndarray, chunk: int = 64) -> np.ndarray:
    """1' C[p, p] 1 for each row p of ``pick``: the diagonal plus twice the pairs above it
    (C symmetric), gathered by flat position ``chunk`` draws at a time: n (n + 1) / 2 values a
    draw, not n^2 (the Large band's gather took 0.11-0.12 s for 0.17-0.18 s)."""
    flat, N = c.reshape(-1), c.shape[1]
    iu, ju = np.triu_indices(pick.shape[1], 1)
    out = np.empty(len(pick))
    for start in range(0, len(pick), chunk):
        p = pick[start:start + chunk]
        off = np.take(flat, p[:, iu] * N + p[:, ju]).sum(axis=1)
        out[start:start + chunk] = np.take(flat, p * (N + 1)).sum(axis=1) + 2.0 * off
    return out


def _indicator_sums(c: np.ndarray, pick: np.ndarray, chunk: int = 256) -> np.ndarray:
    """1' C[p, p] 1 for each row p of ``pick`` as s' C s, s the 0/1 indicator of p over all
    N holdings; ``chunk`` draws at a time (chunk x N memory)."""
    out = np.empty(len(pick))
    for start in range(0, len(pick), chunk):
        rows = pick[start:start + chunk]
        s = np.zeros((len(rows), c.shape[0]))
        np.put_along_axis(s, rows, 1.0, axis=1)
        out[start:start + chunk] = np.einsum("ij,ij->i", s @ c, s)
    return out
