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


def equal_weight_curve(cov: np.ndarray) -> EqualWeightCurve:
    """Average variance and average pairwise covariance from a covariance matrix."""
    n = cov.shape[0]
    diag = np.diag(cov)
    off = cov[~np.eye(n, dtype=bool)]
    return EqualWeightCurve(average_variance=float(np.nanmean(diag)),
                            average_covariance=float(np.nanmean(off)) if n > 1 else 0.0)
