"""Return alignment, frequency checks, excess returns and annualisation.

Returns are decimals per period throughout. Periods are matched across files by
a *period key*: the calendar month for monthly data, the ISO week for weekly
data and the calendar date for daily data. A custodian's month-end (say the
last business day) and a data vendor's calendar month-end therefore align.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from reporter.analytics.market_model import Prepared


def period_keys(dates: np.ndarray, frequency: str) -> np.ndarray:
    """Integer period key for each ``datetime64[D]`` date: months, ISO weeks or days since 1970."""
    d = np.asarray(dates, dtype="datetime64[D]")
    if frequency == "monthly":
        return d.astype("datetime64[M]").astype(np.int64)
    if frequency == "weekly":
        # Monday-based weeks: 1970-01-01 was a Thursday, so shift by 3 days.
        return (d.astype(np.int64) + 3) // 7
    return d.astype(np.int64)


def frequency_gaps(dates: np.ndarray, frequency: str) -> np.ndarray:
    """Indices ``i`` (into sorted ``dates``) where ``dates[i]`` does not follow ``dates[i-1]``
    as the frequency requires: consecutive months or weeks, or at most 5 days apart for
    daily data (a long weekend). A repeated period is also flagged."""
    keys = period_keys(dates, frequency)
    step = np.diff(keys)
    if frequency == "daily":
        bad = (step < 1) | (step > 5)
    else:
        bad = step != 1
    return np.flatnonzero(bad) + 1


@dataclass(frozen=True)
class Window:
    """The estimation window: market periods ``dates`` and the aligned data.

    ``returns`` is T x N (holdings in ``security_ids`` order), NaN where a holding has
    no return for that period; ``market`` and ``risk_free`` are length T.
    """

    dates: np.ndarray          # datetime64[D], the market's dates
    security_ids: tuple[str, ...]
    returns: np.ndarray
    market: np.ndarray
    risk_free: np.ndarray

    @property
    def n_periods(self) -> int:
        return len(self.dates)

    @property
    def excess_returns(self) -> np.ndarray:
        """Holdings' excess returns r_i - r_f (T x N), NaN where missing."""
        return self.returns - self.risk_free[:, None]

    @property
    def market_excess(self) -> np.ndarray:
        """Market excess return r_m - r_f (length T)."""
        return self.market - self.risk_free


def portfolio_returns(returns: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Portfolio return per period from current weights, r_p,t = sum_i w_i r_i,t / sum_avail w_i.

    Where a holding has no return in a period its weight is spread over the holdings
    that do (re-weighting over the available holdings); a period with none is NaN.
    """
    r = np.asarray(returns, dtype=float)
    w = np.asarray(weights, dtype=float)
    total, num = np.empty(r.shape[0]), np.empty(r.shape[0])
    # a block of rows at a time: no T x N copy. (Blocks of a multiple of 64 rows keep the
    # matrix-vector product's roundings those of one call on all rows, with this BLAS.)
    step = 64 * max(1, (1 << 18) // (64 * max(r.shape[1], 1)))
    for start in range(0, r.shape[0], step):
        rows = r[start:start + step]
        present = ~np.isnan(rows)
        total[start:start + step] = np.where(present, w, 0.0).sum(axis=1)
        num[start:start + step] = np.where(present, rows, 0.0) @ w
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / total
    out[total == 0] = np.nan
    return out


def sector_returns(returns: np.ndarray, weights: np.ndarray, sector_of: np.ndarray,
                   sectors: list[str]) -> np.ndarray:
    """:func:`portfolio_returns` of each sector's holdings (T x len(sectors)), all from two
    matrix products with the N x S matrix of the weights by sector."""
    by_sector = _by_sector(weights, sector_of, sectors)
    present = ~np.isnan(returns)
    total = present.astype(float) @ by_sector
    num = np.where(present, returns, 0.0) @ by_sector
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / total
    out[total == 0] = np.nan
    return out


def sector_excess_returns(returns: np.ndarray, risk_free: np.ndarray, weights: np.ndarray,
                          sector_of: np.ndarray, sectors: list[str],
                          prep: Prepared | None = None) -> np.ndarray:
    """:func:`sector_returns` less the risk-free rate of each period. ``prep``
    (``Prepared.of(returns - risk_free, market excess)``), when given and both the market and
    the risk-free rate have every period, supplies the mask and the zero-filled excess
    returns, so that no T x N matrix is made here: the weighted mean of the excess returns
    is the weighted mean of the returns less the rate (the same figures to rounding)."""
    rf = np.asarray(risk_free, dtype=float)
    if prep is None or not (prep.x_ok.all() and np.isfinite(rf).all()):
        return sector_returns(returns, weights, sector_of, sectors) - rf[:, None]
    by_sector = _by_sector(weights, sector_of, sectors)
    total = prep.m @ by_sector
    with np.errstate(invalid="ignore", divide="ignore"):
        out = (prep.y0 @ by_sector) / total
    out[total == 0] = np.nan
    return out


def _by_sector(weights: np.ndarray, sector_of: np.ndarray, sectors: list[str]) -> np.ndarray:
    """The N x S matrix of each holding's weight in its sector's column."""
    w = np.asarray(weights, dtype=float)
    return np.where(np.asarray(sector_of)[:, None] == np.asarray(sectors)[None, :],
                    w[:, None], 0.0)


def annualise_mean(mean_per_period: float | np.ndarray, periods_per_year: int):
    """Arithmetic annualisation of a mean per-period return: mean x P."""
    return mean_per_period * periods_per_year


def annualise_vol(vol_per_period: float | np.ndarray, periods_per_year: int):
    """Annualised volatility under independent periods: sigma x sqrt(P)."""
    return vol_per_period * np.sqrt(periods_per_year)


def to_period_index(dates: np.ndarray) -> pd.DatetimeIndex:
    return pd.DatetimeIndex(np.asarray(dates, dtype="datetime64[ns]"))
