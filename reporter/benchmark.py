"""The optional benchmark series (``[inputs] benchmark``): checked like the market proxy.

A benchmark is a ``date, return`` file of decimal returns per period. Its problems are
gathered with every other input problem (the build passes them to validation), and it must
cover the estimation window. Without one, tracking error and the information ratio are
measured against the market proxy.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from reporter.analytics.returns import period_keys
from reporter.config import Settings
from reporter.errors import Collector, Problem
from reporter.models import DatedSeries
from reporter.readers import RawTable
from reporter.validate import validate_series


def validate_benchmark(settings: Settings,
                       raws: dict[str, RawTable]) -> tuple[DatedSeries | None, list[Problem]]:
    """The benchmark series and its problems (errors and warnings), or (None, []) when the
    pack names none or its file could not be read (that problem is already reported).

    Checks: the columns ``date, return``, valid dates, one return per period, numbers,
    no return below -100% and none that look like percentages (as for the market proxy),
    and every period of the window present.
    """
    if "benchmark" not in raws:
        return None, []
    spec = settings.inputs["benchmark"]
    # validate_series reads the market's options; hand it the benchmark's own
    as_market = dataclasses.replace(settings, inputs={**settings.inputs, "market": spec})
    coll = Collector()
    series = validate_series(raws["benchmark"], "return", as_market, coll)
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
            coll.error(spec.display, f"the benchmark series does not cover the window: "
                       f"{len(missing)} period(s) missing, first {first}")
    return series, coll.problems
