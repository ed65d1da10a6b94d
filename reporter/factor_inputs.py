"""The optional style inputs: ``[inputs] factors``, ``benchmark_sectors`` and
``weights_history``, read into :class:`reporter.analytics.style.StyleInputs`.

* ``factors``: ``date`` plus one column per factor (decimal returns of long-short factor
  portfolios per period). Every period of the window must be there; no factor may be
  constant over the window (the regression would be singular).
* ``benchmark_sectors``: ``date, sector, weight, return``: the benchmark's sector weights at
  the start of each period and its sector returns. Each period's weights sum to 1 (within
  ``checks.weight_tolerance``) and every period of the window is there.
* ``weights_history``: ``date, security_id, weight``: the portfolio's weights at the start of
  a period, for holdings of the holdings file. Every date lies in the window and the first is
  the window's first period; each period uses the latest weights dated in or before it.

Problems are gathered with every other input problem, one line each, naming file, row and
column (the build passes them to validation).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from reporter.analytics.returns import period_keys
from reporter.analytics.style import FactorReturns, StyleInputs
from reporter.config import Settings
from reporter.errors import Collector, Problem, place
from reporter.readers import RawTable
from reporter.validate import MAX_PER_CHECK, as_dates, as_float, as_text, looks_like_percent
from reporter.validate import validate_series as _validate_series
from reporter.validate.common import delimiter_hint
from reporter.validate.values import report_out_of_range

FACTOR_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,39}$")


def validate_style_inputs(settings: Settings, raws: dict[str, RawTable]
                          ) -> tuple[StyleInputs, list[Problem]]:
    """The style inputs the pack names (None for the others) and every problem found."""
    coll = Collector()
    win = _window(settings, raws)
    f = _factors(raws["factors"], settings, win, coll) if "factors" in raws else None
    b = _benchmark_sectors(raws["benchmark_sectors"], settings, win, coll) \
        if "benchmark_sectors" in raws else None
    h = _weights_history(raws["weights_history"], settings, win, raws.get("holdings"), coll) \
        if "weights_history" in raws else None
    if "weights_history" in settings.inputs and "benchmark_sectors" not in settings.inputs:
        coll.warn(settings.inputs["weights_history"].display, "not used: the weights history "
                  "serves only the attribution, which needs [inputs] benchmark_sectors")
    return StyleInputs(f, b, h), coll.problems


def _window(settings: Settings, raws: dict[str, RawTable]) -> tuple[np.ndarray, np.ndarray] | None:
    """(period keys, dates) of the window from the market proxy, or None when it is unread."""
    market = _validate_series(raws["market"], "return", settings, Collector()) \
        if "market" in raws else None
    if market is None:
        return None
    freq = settings.frequency
    end_key = period_keys(np.array([np.datetime64(settings.period_end, "D")]), freq)[0]
    keys = period_keys(market.dates, freq)
    upto = np.flatnonzero(keys <= end_key)[-settings.window:]
    return keys[upto], market.dates[upto]


def _dates(raw: RawTable, settings: Settings, role: str,
           coll: Collector) -> tuple[np.ndarray, np.ndarray]:
    d = as_dates(raw, "date", settings.inputs[role].date_format, coll)
    ok = ~np.isnat(d)
    keys = np.full(len(d), np.iinfo(np.int64).min)
    keys[ok] = period_keys(d[ok], settings.frequency)
    return d, keys


def _columns(raw: RawTable, required: tuple[str, ...], coll: Collector) -> bool:
    names = raw.table.column_names
    missing = [c for c in required if c not in names]
    hint = delimiter_hint(raw, missing)
    for c in missing:
        coll.error(place(raw.name, 1, c), "required column is missing "
                   f"(the file has: {', '.join(names) or 'no columns'}){hint}")
    if not missing and raw.table.num_rows == 0:
        coll.error(raw.name, "the file has no rows")
        return False
    return not missing


def _missing_periods(raw: RawTable, keys: np.ndarray, valid: np.ndarray,
                     win: tuple[np.ndarray, np.ndarray] | None, coll: Collector,
                     label: str) -> None:
    """One problem per window period the file lacks, at the first row dated after it."""
    if win is None:
        return
    wkeys, wdates = win
    missing = np.flatnonzero(~np.isin(wkeys, keys[valid]))
    rows = np.flatnonzero(valid)
    order = rows[np.argsort(keys[rows], kind="stable")]
    for m in missing[:MAX_PER_CHECK]:
        after = order[keys[order] > wkeys[m]]
        if len(after):
            coll.error(place(raw.name, raw.row_number(int(after[0])), "date"),
                       f"the {label} misses the window's period of {wdates[m]} "
                       "(missing before this row)")
        else:
            coll.error(place(raw.name, None, "date"), f"the {label} misses the window's "
                       f"period of {wdates[m]} (missing after the last row)")
    if len(missing) > MAX_PER_CHECK:
        coll.error(raw.name, f"... and {len(missing) - MAX_PER_CHECK} more periods of the "
                   f"window missing from the {label}")


def _repeats(raw: RawTable, keys: np.ndarray, coll: Collector, by: np.ndarray | None = None,
             what: str = "period") -> np.ndarray:
    """Report rows repeating an earlier row's period (and ``by`` value); their mask."""
    frame = pd.DataFrame({"k": keys} | ({} if by is None else {"b": by}))
    dup = frame.duplicated(keep="first").to_numpy() & (keys != np.iinfo(np.int64).min)
    for i in np.flatnonzero(dup)[:MAX_PER_CHECK]:
        coll.error(place(raw.name, raw.row_number(int(i)), "date"), f"a second row for the "
                   f"same {what}")
    return dup


def _factors(raw: RawTable, settings: Settings, win, coll: Collector) -> FactorReturns | None:
    if not _columns(raw, ("date",), coll):
        return None
    names = [c for c in raw.table.column_names if c != "date"]
    if not names:
        coll.error(place(raw.name, 1, None), "no factor columns: give date and one column "
                   "per factor")
        return None
    bad = [n for n in names if not FACTOR_NAME.match(n)]
    for n in bad:
        coll.error(place(raw.name, 1, n[:60]), "a factor's name must start with a letter and "
                   "hold only letters, digits and underscores (at most 40)")
    spec = settings.inputs["factors"]
    dates, keys = _dates(raw, settings, "factors", coll)
    valid = ~np.isnat(dates)
    dup = _repeats(raw, keys, coll)
    in_win = valid & np.isin(keys, win[0]) if win is not None else valid
    values = np.column_stack([as_float(raw, n, coll, spec.decimal, allow_empty=True)
                              for n in names])
    for j, n in enumerate(names):
        v = values[:, j]
        fin = v[np.isfinite(v)]
        if len(fin) and looks_like_percent(fin, settings.frequency):
            first = int(np.flatnonzero(np.isfinite(v))[0])
            coll.error(place(raw.name, raw.row_number(first), n), "values look like "
                       "percentages; give decimals, e.g. 0.012 for 1.2%")
            continue
        for i in np.flatnonzero(in_win & ~np.isfinite(v))[:MAX_PER_CHECK]:
            coll.error(place(raw.name, raw.row_number(int(i)), n), "value is empty, and the "
                       "window needs it")
        report_out_of_range(raw, v, n, None, coll)
        w = v[in_win & ~dup]
        if len(w) > 1 and np.isfinite(w).all() and np.ptp(w) == 0:
            first = int(np.flatnonzero(in_win)[0])
            coll.error(place(raw.name, raw.row_number(first), n),
                       f"factor {n!r} is constant over the window ({w[0]:g} in every period), "
                       "which makes the regression singular; remove the column")
    _missing_periods(raw, keys, valid, win, coll, "factors file")
    if bad or dup.any() or not valid.any():
        return None
    order = np.argsort(keys[valid], kind="stable")
    return FactorReturns(tuple(names), dates[valid][order], values[valid][order])


def _benchmark_sectors(raw: RawTable, settings: Settings, win,
                       coll: Collector) -> pd.DataFrame | None:
    if not _columns(raw, ("date", "sector", "weight", "return"), coll):
        return None
    dec = settings.inputs["benchmark_sectors"].decimal
    dates, keys = _dates(raw, settings, "benchmark_sectors", coll)
    sector = as_text(raw, "sector", coll, allow_empty=False)
    weight = as_float(raw, "weight", coll, dec, allow_empty=False)
    ret = as_float(raw, "return", coll, dec, allow_empty=False)
    for i in np.flatnonzero(weight < 0)[:MAX_PER_CHECK]:
        coll.error(place(raw.name, raw.row_number(int(i)), "weight"),
                   f"negative benchmark weight {weight[i]:g}")
    report_out_of_range(raw, ret, "return", None, coll)
    valid = ~np.isnat(dates)
    dup = _repeats(raw, keys, coll, sector, "period and sector")
    frame = pd.DataFrame({"key": keys, "sector": sector, "weight": weight, "return": ret,
                          "row": np.arange(len(keys)), "date": dates})[valid & ~dup]
    sums = frame.groupby("key", sort=True).agg(total=("weight", "sum"), row=("row", "min"),
                                               date=("date", "min"))
    off = sums[np.abs(sums["total"] - 1.0) > settings.weight_tolerance]
    for _, r in off.head(MAX_PER_CHECK).iterrows():
        coll.error(place(raw.name, raw.row_number(int(r["row"])), "weight"),
                   f"the benchmark's sector weights for {np.datetime64(r['date'], 'D')} "
                   f"sum to {r['total']:.6g}, not 1 (tolerance {settings.weight_tolerance:g})")
    if len(off) > MAX_PER_CHECK:
        coll.error(raw.name, f"... and {len(off) - MAX_PER_CHECK} more periods whose sector "
                   "weights do not sum to 1")
    _missing_periods(raw, keys, valid, win, coll, "benchmark sectors file")
    return frame[["key", "sector", "weight", "return"]].reset_index(drop=True)


def _weights_history(raw: RawTable, settings: Settings, win, holdings: RawTable | None,
                     coll: Collector) -> pd.DataFrame | None:
    if not _columns(raw, ("date", "security_id", "weight"), coll):
        return None
    dates, keys = _dates(raw, settings, "weights_history", coll)
    ids = as_text(raw, "security_id", coll, allow_empty=False)
    weight = as_float(raw, "weight", coll, settings.inputs["weights_history"].decimal,
                      allow_empty=False)
    valid = ~np.isnat(dates)
    if holdings is not None and "security_id" in holdings.table.column_names:
        known = set(as_text(holdings, "security_id", Collector(), allow_empty=True))
        for i in np.flatnonzero([bool(v) and v not in known for v in ids])[:MAX_PER_CHECK]:
            coll.error(place(raw.name, raw.row_number(int(i)), "security_id"),
                       f"security id {ids[i]!r} is not in the holdings file")
    if not settings.allow_short:
        for i in np.flatnonzero(weight < 0)[:MAX_PER_CHECK]:
            coll.error(place(raw.name, raw.row_number(int(i)), "weight"),
                       f"negative weight {weight[i]:g}: short positions are not allowed")
    _repeats(raw, keys, coll, ids, "date and security")
    if win is not None:
        wkeys, wdates = win
        outside = valid & ~np.isin(keys, wkeys)
        for i in np.flatnonzero(outside)[:MAX_PER_CHECK]:
            coll.error(place(raw.name, raw.row_number(int(i)), "date"),
                       f"date {dates[i]} is outside the window ({wdates[0]} to {wdates[-1]})")
        inside = np.flatnonzero(valid & ~outside)
        if len(inside) and keys[inside].min() > wkeys[0]:
            first = inside[np.argmin(keys[inside])]
            coll.error(place(raw.name, raw.row_number(int(first)), "date"),
                       f"the weights history starts at {dates[first]}, after the window's "
                       f"first period ({wdates[0]}); give the weights for that period")
    return pd.DataFrame({"key": keys, "security_id": ids, "weight": weight})[valid]
