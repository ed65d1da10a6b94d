"""The optional return series: ``[inputs] benchmark`` and ``[inputs] portfolio_returns``.

Each is a ``date, return`` file of decimal returns per period, checked like the market proxy.
Their problems are gathered with every other input problem (the build passes them to
validation), and each must cover the estimation window. Without a benchmark, tracking error
and the information ratio are measured against the market proxy; without a portfolio returns
file, the portfolio's return is built from today's weights.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from reporter.analytics.returns import period_keys
from reporter.config import Settings
from reporter.errors import Collector, Problem, place
from reporter.models import DatedSeries
from reporter.readers import RawTable
from reporter.validate import validate_series

GROSS = "gross_return"      # optional column of a portfolio returns file: before fees


def validate_benchmark(settings: Settings,
                       raws: dict[str, RawTable]) -> tuple[DatedSeries | None, list[Problem]]:
    """The benchmark series and its problems; see :func:`validate_optional_series`."""
    return validate_optional_series(settings, raws, "benchmark", "benchmark series")


def validate_portfolio_returns(settings: Settings, raws: dict[str, RawTable],
                               role: str = "portfolio_returns"
                               ) -> tuple[DatedSeries | None, list[Problem]]:
    """The portfolio's (or a mandate's) own returns, net of fees, and their problems; see
    :func:`validate_optional_series`. The file may also carry ``gross_return``."""
    return validate_optional_series(settings, raws, role, "portfolio returns series",
                                    optional=(GROSS,))


def validate_gross_returns(settings: Settings, raws: dict[str, RawTable],
                           role: str = "portfolio_returns"
                           ) -> tuple[DatedSeries | None, list[Problem]]:
    """The ``gross_return`` column of a portfolio returns file (before fees), checked like
    the net ``return``; (None, []) when the file has none."""
    raw = raws.get(role)
    if raw is None or GROSS not in raw.table.column_names:
        return None, []
    gross = dataclasses.replace(raw, table=raw.table.select(["date", GROSS]))
    return validate_optional_series(settings, {**raws, role: gross}, role,
                                    "gross returns series", value_col=GROSS)


def validate_optional_series(settings: Settings, raws: dict[str, RawTable], role: str,
                             label: str, optional: tuple[str, ...] = (),
                             value_col: str = "return"
                             ) -> tuple[DatedSeries | None, list[Problem]]:
    """The optional series ``role`` and its problems (errors and warnings), or (None, []) when
    the pack names none or its file could not be read (that problem is already reported).

    Checks: the columns ``date, return``, valid dates, one return per period, numbers,
    no return below -100% and none that look like percentages (as for the market proxy),
    and every period of the window present.
    """
    if role not in raws:
        return None, []
    spec = settings.inputs[role]
    # validate_series reads the market's options; hand it the series' own
    as_market = dataclasses.replace(settings, inputs={**settings.inputs, "market": spec,
                                                      "risk_free": spec})
    coll = Collector()
    series = validate_series(raws[role], value_col, as_market, coll, optional)
    market = validate_series(raws["market"], "return", settings, Collector()) \
        if "market" in raws else None
    if series is not None and market is not None:
        freq = settings.frequency
        end_key = period_keys(np.array([np.datetime64(settings.period_end, "D")]), freq)[0]
        mkeys = period_keys(market.dates, freq)
        win = mkeys[mkeys <= end_key][-settings.window:]
        missing = np.setdiff1d(win, period_keys(series.dates, freq))
        if len(missing):
            first = market.dates[np.isin(mkeys, missing)][0]
            coll.error(place(spec.display, None, "date"), f"the {label} does not cover "
                       "the window: "
                       f"{len(missing)} period(s) missing, first {first}")
    return series, coll.problems
