"""A dated series file (``date,return`` or ``date,rate``): the market proxy, the risk-free
rate and the optional benchmark series."""

from __future__ import annotations

import numpy as np

from reporter.analytics.returns import period_keys
from reporter.config import Settings
from reporter.errors import Collector, place
from reporter.models import DatedSeries
from reporter.readers import RawTable
from reporter.validate.cells import as_dates, as_float
from reporter.validate.common import _Capped, _period_word, _require_columns
from reporter.validate.prices import (
    PRICE_COLUMN,
    report_non_positive,
    report_price_jumps,
    series_returns,
)
from reporter.validate.values import (
    PERCENT_MEDIAN,
    _check_return_values,
    implausible,
    looks_like_percent,
)


def validate_series(raw: RawTable, value_col: str, settings: Settings,
                    coll: Collector, optional: tuple[str, ...] = ()) -> DatedSeries | None:
    """A ``date,<value_col>`` series: dates valid, unique per period, values numeric.
    ``optional``: further columns allowed (read by the caller).

    A return series given as prices (``values = "prices"``) is a ``date,price`` file, and
    its returns are those of consecutive periods (:mod:`reporter.validate.prices`)."""
    spec = settings.inputs["market" if value_col == "return" else "risk_free"]
    prices = value_col == "return" and spec.values == "prices"
    if prices:
        value_col = PRICE_COLUMN
    if not _require_columns(raw, ("date", value_col), optional, coll):
        return None
    if raw.table.num_rows == 0:
        coll.error(raw.name, "the file has no rows")
        return None
    dates = as_dates(raw, "date", spec.date_format, coll)
    values = as_float(raw, value_col, coll, spec.decimal, allow_empty=False,
                      thousands=spec.thousands)
    ok = ~np.isnat(dates)
    keys = period_keys(dates[ok], settings.frequency)
    rows = np.flatnonzero(ok)
    order = np.argsort(keys, kind="stable")
    dup = np.flatnonzero(np.diff(keys[order]) == 0) + 1
    capped = _Capped(coll, "repeated periods")
    for d in dup:
        i, first = rows[order[d]], rows[order[d - 1]]
        same = dates[i] == dates[first]
        what = "duplicate date " if same else f"second date in the same {_period_word(settings)} "
        capped.add(place(raw.name, raw.row_number(int(i)), "date"),
                   what
                   + f"{dates[i]} (first at row {raw.row_number(int(first))})"
                   + ("" if same else f"; the data do not look {settings.frequency}"))
    capped.close()
    if prices:
        report_non_positive(raw, values, value_col, coll)
    else:
        _check_return_values(raw, values, value_col, settings, coll, label=value_col)
    if value_col == "return":
        _warn_extreme_index_moves(raw, values, settings, coll)
    if value_col == "rate":
        med = np.nanmedian(values) if np.isfinite(values).any() else 0.0
        if med * settings.periods_per_year > 0.25 and med <= PERCENT_MEDIAN[settings.frequency]:
            coll.warn(place(raw.name, None, value_col),
                      f"median rate {med:.4g} per period is {med * settings.periods_per_year:.1%}"
                      " a year: is this an annual rate? Give the rate per period")
    if len(dup) or not ok.any():
        return None         # (no valid date at all: every row has been reported already)
    d, v = dates[ok], values[ok]
    order = np.argsort(d)
    d, v, at = d[order], v[order], np.flatnonzero(ok)[order]
    if prices:
        d, v, at = series_returns(d, v, at, keys[order], settings.frequency)
        report_price_jumps(v[:, None], lambda t, _: place(raw.name, raw.row_number(int(at[t])),
                                                         value_col), coll)
    return DatedSeries(dates=d, values=v, rows=raw.row_numbers(at),
                       unread_rows=raw.row_numbers(np.flatnonzero(~ok)))


# The largest one-period move a broad market index makes: a common-practice bound, no
# source (the worst calendar months of broad equity indices in the last century were near
# -30%, recalled from memory). A move beyond it in a market proxy is almost always a data error.
INDEX_MOVE_LIMIT = {"monthly": 0.5, "weekly": 0.35, "daily": 0.25}


def _warn_extreme_index_moves(raw: RawTable, values: np.ndarray, settings: Settings,
                              coll: Collector) -> None:
    """A warning per market-proxy return beyond :data:`INDEX_MOVE_LIMIT` (not a percentage
    column, which is reported as such, and not below -100% or above MAX_PERIOD_RETURN, which
    are errors)."""
    limit = INDEX_MOVE_LIMIT[settings.frequency]
    finite = values[np.isfinite(values)]
    if not len(finite) or looks_like_percent(finite, settings.frequency):
        return
    capped = _Capped(coll, "extreme market moves", warning=True)
    for i in np.flatnonzero((np.abs(values) > limit) & (values >= -1.0)
                            & ~implausible(values)):   # (those are errors)
        capped.add(place(raw.name, raw.row_number(int(i)), "return"),
                   f"return {values[i]:g} in one {_period_word(settings)} is beyond what a broad "
                   f"market index does (more than {limit:.0%} either way); check the data")
    capped.close()


