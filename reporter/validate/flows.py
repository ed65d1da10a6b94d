"""The optional cash-flow file: ``date, amount`` in the pack's currency, positive for money
into the portfolio (contributions) and negative for money out (benefits paid, fees paid from
the portfolio). Every flow must fall in the period that the pack's change in value covers."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
import pandas as pd

from reporter.config import Settings
from reporter.errors import Collector, Problem, place
from reporter.readers import RawTable
from reporter.validate.cells import as_dates, as_float
from reporter.validate.common import _Capped, _require_columns


@dataclass(frozen=True)
class CashFlows:
    """External flows, sorted by date: ``dates`` (``datetime64[D]``) and ``amounts``."""

    dates: np.ndarray
    amounts: np.ndarray


def earlier_end(settings: Settings, previous) -> dt.date | None:
    """The period end of the pack compared with, when it is before this pack's (a pack
    compared with one of the same period has no period between them)."""
    end = previous.period_end if previous is not None else None
    return end if end is not None and end < settings.period_end else None


def flow_period_start(settings: Settings, previous_end: dt.date | None) -> dt.date:
    """The day before the period the flows belong to: the last pack's period end when there
    is one to compare with, else the end of the period before this pack's last (the last
    month, week or day)."""
    if previous_end is not None:
        return previous_end
    end = pd.Timestamp(settings.period_end)
    if settings.frequency == "monthly":       # the month end before period_end's month
        return (end - pd.offsets.MonthEnd(1)).date()
    return (end - pd.Timedelta(days=7 if settings.frequency == "weekly" else 1)).date()


def validate_cash_flows(settings: Settings, raws: dict[str, RawTable],
                        previous_end: dt.date | None) -> tuple[CashFlows | None, list[Problem]]:
    """The cash flows and their problems, or (None, []) when the pack names no file (or it
    could not be read, which is reported already). Each flow needs a valid date after
    :func:`flow_period_start` and no later than the period end, and a finite, non-zero
    amount; each problem names its row and column."""
    raw = raws.get("cash_flows")
    if raw is None:
        return None, []
    coll = Collector()
    if not _require_columns(raw, ("date", "amount"), (), coll):
        return None, coll.problems
    spec = settings.inputs["cash_flows"]
    dates = as_dates(raw, "date", spec.date_format, coll)
    amounts = as_float(raw, "amount", coll, spec.decimal, allow_empty=False)
    start = np.datetime64(flow_period_start(settings, previous_end), "D")
    end = np.datetime64(settings.period_end, "D")
    outside = _Capped(coll, "cash flows outside the period")
    for i in np.flatnonzero(~np.isnat(dates) & ((dates <= start) | (dates > end))):
        outside.add(place(raw.name, raw.row_number(int(i)), "date"),
                    f"cash flow dated {dates[i]} is outside the period it must fall in, "
                    f"after {start} and up to {end} (the "
                    + ("last pack's" if previous_end is not None else "previous period's")
                    + " end to this pack's)")
    outside.close()
    zero = _Capped(coll, "zero cash flows")
    for i in np.flatnonzero(amounts == 0):
        zero.add(place(raw.name, raw.row_number(int(i)), "amount"),
                 "a cash flow of zero: leave the row out")
    zero.close()
    if coll.problems:
        return None, coll.problems
    order = np.argsort(dates, kind="stable")
    return CashFlows(dates=dates[order], amounts=amounts[order]), []
