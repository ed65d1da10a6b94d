"""The change in the portfolio's value since the last pack, split into net external cash
flows and investment return, with the period's return by the Modified Dietz method (pure).

Modified Dietz (Dietz 1966; the GIPS standards accept it for periods between valuations):

    R = (V1 - V0 - sum F_i) / (V0 + sum W_i F_i),   W_i = (CD - D_i) / CD,

with V0 and V1 the values at the start and end of the period, F_i the external flows
(positive into the portfolio), CD the calendar days in the period and D_i the days from its
start to flow i. It approximates the time-weighted return when the portfolio is not valued
at each flow.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
from dataclasses import dataclass

import numpy as np

from reporter.jsonvalues import json_ready


def modified_dietz(start_value: float, end_value: float, flows: np.ndarray,
                   flow_days: np.ndarray, period_days: int) -> float:
    """The Modified Dietz return of one period (a decimal): see the module's formula.
    ``flow_days`` are the days from the period's start to each flow (0 < D_i <= CD); NaN
    when the average capital is not positive (no meaningful return)."""
    flows = np.asarray(flows, dtype=float)
    weights = (period_days - np.asarray(flow_days, dtype=float)) / period_days
    capital = start_value + float(weights @ flows)
    if not capital > 0:
        return float("nan")
    return (end_value - start_value - float(flows.sum())) / capital


@dataclass(frozen=True)
class ValueChange:
    """The portfolio's value at this pack's period end and, when known, the change since the
    last pack. Money in the pack's ``currency``; ``dietz_return`` a decimal for the period.

    ``start_value`` is None without a comparison (or when the last pack gave no value);
    ``net_flows`` is None without a cash-flow file. ``investment_return`` (money) is the
    change less the net flows.
    """

    currency: str
    start_date: dt.date | None
    end_date: dt.date
    start_value: float | None
    end_value: float
    net_flows: float | None
    inflows: float | None
    outflows: float | None
    n_flows: int
    dietz_return: float | None = None
    flow_start: dt.date | None = None     # the flows' period: after this day, to end_date

    @property
    def change(self) -> float | None:
        return None if self.start_value is None else self.end_value - self.start_value

    @property
    def investment_return(self) -> float | None:
        if self.change is None:
            return None
        return self.change - (self.net_flows or 0.0)

    @property
    def period_days(self) -> int | None:
        return None if self.start_date is None else (self.end_date - self.start_date).days

    def as_json(self) -> dict:
        out = {k: json_ready(getattr(self, k)) for k in (
            "currency", "start_value", "end_value", "net_flows", "inflows", "outflows",
            "n_flows", "change", "investment_return", "dietz_return", "period_days")}
        for k in ("start_date", "flow_start"):
            out[k] = None if getattr(self, k) is None else getattr(self, k).isoformat()
        out["end_date"] = self.end_date.isoformat()
        out["return_method"] = "Modified Dietz" if self.dietz_return is not None else None
        return out


def value_change(currency: str, end_date: dt.date, end_value: float,
                 start_date: dt.date | None, start_value: float | None,
                 flow_dates: np.ndarray | None, flows: np.ndarray | None) -> ValueChange:
    """The :class:`ValueChange` of a period from ``start_date`` (exclusive) to ``end_date``
    (inclusive): net flows when ``flows`` are given; the Modified Dietz return when the start
    value is known too (without flows, R = V1 / V0 - 1, the same formula)."""
    net = inflow = outflow = None
    n = 0
    if flows is not None:
        flows = np.asarray(flows, dtype=float)
        net, n = float(flows.sum()), len(flows)
        inflow, outflow = float(flows[flows > 0].sum()), float(flows[flows < 0].sum())
    dietz = None
    if start_value is not None and start_date is not None:
        cd = (end_date - start_date).days
        if flows is not None and len(flows):
            days = (np.asarray(flow_dates, dtype="datetime64[D]")
                    - np.datetime64(start_date, "D")).astype(int)
            dietz = modified_dietz(start_value, end_value, flows, days, cd)
        elif flows is not None:
            dietz = modified_dietz(start_value, end_value, np.zeros(0), np.zeros(0), cd)
    return ValueChange(currency=currency, start_date=start_date, end_date=end_date,
                       start_value=start_value, end_value=end_value, net_flows=net,
                       inflows=inflow, outflows=outflow, n_flows=n, dietz_return=dietz)


def pack_value_change(currency: str, end_date: dt.date, end_value: float | None,
                      previous_end: dt.date | None, previous_value: float | None,
                      flow_start: dt.date, flow_dates: np.ndarray | None,
                      flows: np.ndarray | None) -> ValueChange | None:
    """A pack's :class:`ValueChange`: None without market values; the change since the last
    pack when that pack gave a value; the flows after ``flow_start`` up to ``end_date``."""
    if end_value is None:
        return None
    known = previous_end is not None and previous_value is not None
    out = value_change(currency, end_date, end_value, previous_end if known else None,
                       previous_value if known else None, flow_dates, flows)
    return dataclasses.replace(out, flow_start=flow_start if flows is not None else None)
