"""Rules on return values shared by every returns file: below -100%, and columns that look
like percentages."""

from __future__ import annotations

import warnings

import numpy as np

from reporter.config import Settings
from reporter.errors import Collector, place
from reporter.readers import RawTable
from reporter.validate.common import _Capped

PERCENT_MEDIAN = {"monthly": 0.25, "weekly": 0.15, "daily": 0.10}

# The largest return one period may hold, as a decimal: 100.0 is +10,000%, the value
# multiplied by 101. No listed security, index or deposit earns that in a month, a week or
# a day (the wildest meme-stock and hyperinflation months are a few thousand percent at
# most), so a value above it is a data error: a price given for a return, a lost decimal
# point, a spreadsheet's overflow. Far below the bound, the arithmetic already fails: a
# value of 1e150 squared in a variance is 1e300, and at 1e308 the sums overflow to inf, so
# that the regressions return NaN or fail to converge. The demo's and the tests' data stay
# below 5 (a few tests give percentages such as 3.4, which are reported as percentages).
MAX_PERIOD_RETURN = 100.0


def implausible(values: np.ndarray) -> np.ndarray:
    """Where ``values`` (decimal returns for one period) are above :data:`MAX_PERIOD_RETURN`
    (NaN is never above; +inf is, but is reported as not a finite number when read)."""
    return values > MAX_PERIOD_RETURN


def implausible_message(value: float) -> str:
    return (f"return {value:g} is above {MAX_PERIOD_RETURN:g} (+{MAX_PERIOD_RETURN:,.0%}) in "
            "one period, more than any security earns; check the data")


def out_of_range(values: np.ndarray) -> np.ndarray:
    """Returns below -100% or above :data:`MAX_PERIOD_RETURN` (NaN is neither)."""
    return (values < -1.0) | implausible(values)


def report_out_of_range(raw: RawTable, values: np.ndarray, label: str, summary: str | None,
                        coll: Collector) -> None:
    """One problem per data row whose return is below -100% (NaN is never below), and one per
    row whose return is above :data:`MAX_PERIOD_RETURN`, each kind capped (``summary``: the
    cap's words for the first; default "returns below -100% in column ``label``")."""
    capped = _Capped(coll, summary or f"returns below -100% in column {label}")
    for i in np.flatnonzero(values < -1.0):
        capped.add(place(raw.name, raw.row_number(int(i)), label),
                   f"return {values[i]:.10g} is below -100%")
    capped.close()
    capped = _Capped(coll, f"returns above {MAX_PERIOD_RETURN:g} in column {label}")
    for i in np.flatnonzero(implausible(values)):
        capped.add(place(raw.name, raw.row_number(int(i)), label),
                   implausible_message(float(values[i])))
    capped.close()


def _check_return_values(raw: RawTable, values: np.ndarray, column: str, settings: Settings,
                         coll: Collector, label: str) -> None:
    """Returns below -100%, and a column that looks like percentages (then only that is
    reported: its values below -100% are the same problem)."""
    finite = values[np.isfinite(values)]
    percent = bool(len(finite)) and looks_like_percent(finite, settings.frequency)
    if not percent:
        report_out_of_range(raw, values, label, None, coll)
    else:
        first = int(np.flatnonzero(np.isfinite(values))[0])
        if column == "rate":
            advice = (f"give the rate per period as a decimal, e.g. "
                      f"{0.036 / settings.periods_per_year:.3g} for 3.6% a year")
        else:
            advice = "give decimals, e.g. 0.012 for 1.2%"
        coll.error(place(raw.name, raw.row_number(first), label),
                   f"values look like percentages (median |value| {np.median(np.abs(finite)):.3g}"
                   f" is above {PERCENT_MEDIAN[settings.frequency]} for {settings.frequency} data"
                   f"); {advice}")


def looks_like_percent(values: np.ndarray, frequency: str) -> bool:
    """The stated percentage rule: median |v| above PERCENT_MEDIAN[frequency], or most |v| > 1."""
    a = np.abs(values)
    return bool(np.median(a) > PERCENT_MEDIAN[frequency] or np.mean(a > 1.0) > 0.5)


def _percent_columns(matrix: np.ndarray, frequency: str) -> tuple[np.ndarray, np.ndarray]:
    """:func:`looks_like_percent` for each column of ``matrix`` (NaN ignored), vectorised;
    returns the flags and each column's median |value|."""
    if matrix.size == 0:
        return np.zeros(matrix.shape[1], dtype=bool), np.full(matrix.shape[1], np.nan)
    thr = PERCENT_MEDIAN[frequency]
    N = matrix.shape[1]
    n, over_thr, over1 = (np.zeros(N, dtype=np.int64) for _ in range(3))
    med = np.full(N, np.nan)
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)   # a column with no values
        # blocks of columns, so that the temporaries stay small for a long daily panel
        for lo in range(0, N, 256):
            absm = np.abs(matrix[:, lo:lo + 256])          # NaN stays NaN; comparisons False
            n[lo:lo + 256] = np.count_nonzero(np.isfinite(absm), axis=0)
            over_thr[lo:lo + 256] = np.count_nonzero(absm > thr, axis=0)
            over1[lo:lo + 256] = np.count_nonzero(absm > 1.0, axis=0)
        # the median can exceed thr only if at least half the values do: the exact median
        # is needed (and computed) for those columns alone
        cand = np.flatnonzero((n > 0) & (2 * over_thr >= n))
        if len(cand):
            med[cand] = np.nanmedian(np.abs(matrix[:, cand]), axis=0)
    return (med > thr) | (2 * over1 > n), med


