"""Price or total-return index files in place of returns: a holding's prices (long
``date, security_id, price`` or wide), and a market proxy or benchmark given as
``date, price``.

The return of period t is P_t / P_(t-1) - 1, and only when t-1 is the period just before t
(consecutive months or weeks; for daily data, at most 5 days apart, as
:func:`reporter.analytics.returns.frequency_gaps` has it). A missing price is never bridged:
the periods on both sides of it have no return. A price that is zero or negative is an
error naming its row.
"""

from __future__ import annotations

import numpy as np

from reporter.errors import Collector, place
from reporter.readers import RawTable
from reporter.validate.common import _Capped
from reporter.validate.values import MAX_PERIOD_RETURN, implausible

PRICE_COLUMN = "price"


def consecutive(keys: np.ndarray, frequency: str) -> np.ndarray:
    """For sorted period keys, whether each key follows the one before it (length - 1)."""
    step = np.diff(np.asarray(keys, dtype=np.int64))
    return (step >= 1) & (step <= 5) if frequency == "daily" else step == 1


def report_non_positive(raw: RawTable, values: np.ndarray, column: str, coll: Collector,
                        rows: np.ndarray | None = None) -> None:
    """An error per price at or below zero (NaN is never one). ``rows``: the data row of
    each value when it is not its index (a wide file's column is indexed by row already)."""
    capped = _Capped(coll, f"prices at or below zero in column {column}")
    for i in np.flatnonzero(values <= 0):
        row = int(rows[i]) if rows is not None else int(i)
        capped.add(place(raw.name, raw.row_number(row), column),
                   f"price {values[i]:g} is not above zero; a price or index level must be "
                   "positive")
    capped.close()


def price_returns(prices: np.ndarray, keys: np.ndarray, frequency: str
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Periods x securities prices on sorted period ``keys`` -> the returns on ``keys[1:]``
    (NaN where either price is missing or not positive, or the periods are not consecutive).
    """
    p = np.where(prices > 0, prices, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = p[1:] / p[:-1] - 1.0
    r[~consecutive(keys, frequency)] = np.nan
    return r, np.asarray(keys)[1:]


def series_returns(dates: np.ndarray, prices: np.ndarray, rows: np.ndarray, keys: np.ndarray,
                   frequency: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A sorted ``date, price`` series -> (dates, returns, rows) of the periods that have a
    return: the later of two consecutive periods, both with a positive price."""
    r, _ = price_returns(prices[:, None], keys, frequency)
    ok = np.isfinite(r[:, 0])
    return dates[1:][ok], r[ok, 0], rows[1:][ok]


def report_price_jumps(returns: np.ndarray, where_cell, coll: Collector) -> None:
    """An error per return made from prices that is above :data:`MAX_PERIOD_RETURN` (a price
    more than 101 times the period before's), placed at the later price by ``where_cell(t,
    j)`` (``returns`` is periods x series): the bound that returns given as returns have."""
    capped = _Capped(coll, f"price rises above +{MAX_PERIOD_RETURN:,.0%} in one period")
    for t, j in zip(*np.nonzero(implausible(returns)), strict=True):
        r = float(returns[t, j])
        capped.add(where_cell(int(t), int(j)),
                   f"the price is {r + 1:,.4g} times the period before's (a return of {r:g}, "
                   f"above +{MAX_PERIOD_RETURN:,.0%} in one period); check the data")
    capped.close()
