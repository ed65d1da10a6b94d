"""Checks on a holdings' returns panel as a whole, whatever the file's shape: percentages,
unheld and missing securities, stale prices."""

from __future__ import annotations

import numpy as np
import pandas as pd

from reporter.errors import place
from reporter.models import ReturnPanel
from reporter.validate.common import HoldingRows
from reporter.validate.holdings import PROXY_SERIES
from reporter.validate.values import PERCENT_MEDIAN, _percent_columns


def _finish_panel(raw, matrix, keys, ids, holdings, settings, coll, shape, where_of, where_cell,
                  holdings_raw, percent=None):
    """Per-security checks on the P x N matrix; reorder columns to the holdings' order.
    Warns of a holding whose longest run of one return (:func:`longest_constant_run`) is
    ``checks.stale_zero_run`` periods or more.

    ``holdings_raw`` is the holdings file as read (its row ``k`` is holding ``k``), or a fund's
    :class:`HoldingRows`, or None. ``where_of(j)`` places a message about security ``j`` as a
    whole, ``where_cell(t, j)`` one about its value in sorted period ``t``. ``percent`` is
    :func:`_percent_columns` of ``matrix`` when the caller has it already.
    """
    pct, med = percent if percent is not None else _percent_columns(matrix, settings.frequency)
    flagged = np.flatnonzero(pct)
    if len(flagged):         # one line for the file, however many securities
        limit = f"above {PERCENT_MEDIAN[settings.frequency]} for {settings.frequency} data"
        if len(flagged) == 1:
            j = flagged[0]
            what = f"{ids[j]} look like percentages (median |return| {med[j]:.3g} is {limit})"
        else:
            named = ", ".join(ids[j] for j in flagged[:5]) + (", ..." if len(flagged) > 5
                                                              else "")
            what = (f"{len(flagged)} securities look like percentages ({named}; median "
                    f"|return| {np.nanmin(med[flagged]):.3g} to {np.nanmax(med[flagged]):.3g}, "
                    f"{limit})")
        coll.error(where_of(flagged[0]), f"returns for {what}; give decimals, e.g. 0.012 for "
                   "1.2%")
    if holdings is None:
        return None
    held = set(holdings.ids)
    unheld = [s for s in ids if s not in held]
    # a holding without an id (null or blank: an error of the holdings file already) is
    # likely the one these returns belong to: no second line about them
    named = np.array([isinstance(s, str) and s != "" for s in holdings.ids], dtype=bool)
    if unheld and named.all():
        coll.warn(raw.name, f"{len(unheld)} security id(s) have returns but are not held, "
                  "ignored: " + ", ".join(unheld[:8]) + (" ..." if len(unheld) > 8 else ""))
    col_of = {s: j for j, s in enumerate(ids)}
    source = pd.Index(ids).get_indexer(list(holdings.ids))     # -1 where not in the file
    have = source >= 0
    if len(ids) == len(source) and np.array_equal(source, np.arange(len(ids))):
        out = matrix             # the file lists exactly the holdings, in their order
    else:
        out = np.full((matrix.shape[0], len(holdings.ids)), np.nan)
        out[:, have] = matrix[:, source[have]]
    run, start = longest_constant_run(out)
    proxies = holdings.proxies
    position = {sid: j for j, sid in enumerate(holdings.ids)}

    def can_stand_in(proxy: str) -> bool:
        """As the analysis decides (analytics.coverage): the market or benchmark series, or
        a holding with its own returns or cash (a proxy's proxy is not followed)."""
        j = position.get(proxy)
        return (proxy.lower() in PROXY_SERIES
                or (j is not None and bool(have[j] or holdings.cash[j])))

    # a holding without an id has no history to look for either; it read "holding nan has
    # no return history"
    for k in np.flatnonzero(~have & ~holdings.cash & named):    # cash earns the risk-free rate
        if isinstance(holdings_raw, HoldingRows):       # a fund's holdings, from mandates
            where = holdings_raw.place(int(k))
        else:    # the holdings frame keeps the file's rows in order: holding k is data row k
            row = holdings_raw.row_number(int(k)) if holdings_raw is not None else None
            where = place(settings.inputs["holdings"].display, row, "security_id")
        if not proxies[k]:
            stand_in = ("; give a proxy column (a security id, market or benchmark) to stand "
                        "in for it, else it is left out of every return figure")
        elif can_stand_in(proxies[k]):
            stand_in = f"; its proxy {proxies[k]!r} stands in for it"
        else:
            stand_in = (f"; its proxy {proxies[k]!r} has none either, so it is left out of "
                        "every return figure; name a proxy with returns")
        coll.warn(where, f"holding {holdings.ids[k]} has no return history in {raw.name}{stand_in}")
    for k in np.flatnonzero(have & (run >= settings.stale_zero_run)):
        sid, value = holdings.ids[k], out[start[k], k]
        what = (f"{run[k]} exact-zero returns in a row" if value == 0.0
                else f"the same return {value:g} for {run[k]} periods in a row")
        coll.warn(where_cell(int(start[k]), col_of[sid]),
                  f"holding {sid} has {what} from here: its prices may be stale")
    return ReturnPanel(period_keys=np.asarray(keys), security_ids=holdings.ids, values=out,
                       shape=shape, n_rows=raw.n_rows)


def longest_constant_run(matrix: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The longest run of identical consecutive returns in each column (NaN breaks a run)
    and the row where the first run of that length starts; vectorised over columns, in
    blocks, and only over the columns in which some return repeats the one before it.

    A run of exact zeros is the classic sign of a stale price; a run of one non-zero value
    (a fixed 1% a month) is as suspect in a return series (common practice, no source).
    """
    n_rows, n_cols = matrix.shape
    run = np.minimum(np.count_nonzero(np.isfinite(matrix), axis=0), 1)
    start = np.zeros(n_cols, dtype=np.int64)
    if n_rows < 2:
        return run, start
    idx = np.arange(n_rows - 1, dtype=np.int32)[:, None]
    for lo in range(0, n_cols, 256):
        block = matrix[:, lo:lo + 256]
        same = block[1:] == block[:-1]                 # same[t]: value t + 1 repeats value t
        cand = np.flatnonzero(same.any(axis=0))
        if not len(cand):
            continue
        s = same[:, cand]
        last_break = np.maximum.accumulate(np.where(s, np.int32(-1), idx), axis=0)
        streak = np.where(s, idx - last_break, 0)      # repeats ending at t
        best = streak.max(axis=0)
        end = streak.argmax(axis=0)                    # the first longest run
        run[lo + cand] = best + 1
        start[lo + cand] = end - best + 1
    return run, start
