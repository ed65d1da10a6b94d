"""Checks on a holdings' returns panel as a whole, whatever the file's shape: percentages,
unheld and missing securities, stale prices."""

from __future__ import annotations

import numpy as np
import pandas as pd

from reporter.errors import place
from reporter.models import ReturnPanel
from reporter.validate.values import PERCENT_MEDIAN, _percent_columns


def _finish_panel(raw, matrix, keys, ids, holdings, settings, coll, shape, where_of, where_cell,
                  holdings_raw, percent=None):
    """Per-security checks on the P x N matrix; reorder columns to the holdings' order.

    ``where_of(j)`` places a message about security ``j`` as a whole, ``where_cell(t, j)`` one
    about its value in sorted period ``t``. ``percent`` is :func:`_percent_columns` of
    ``matrix`` when the caller has it already.
    """
    pct, med = percent if percent is not None else _percent_columns(matrix, settings.frequency)
    for j in np.flatnonzero(pct):
        coll.error(where_of(j), f"returns for {ids[j]} look like percentages (median |return| "
                   f"{med[j]:.3g} is above {PERCENT_MEDIAN[settings.frequency]} for "
                   f"{settings.frequency} data); give decimals, e.g. 0.012 for 1.2%")
    held = set(holdings.ids) if holdings is not None else set(ids)
    unheld = [s for s in ids if s not in held]
    if unheld and holdings is not None:
        coll.warn(raw.name, f"{len(unheld)} security id(s) have returns but are not held, "
                  "ignored: " + ", ".join(unheld[:8]) + (" ..." if len(unheld) > 8 else ""))
    if holdings is None:
        return None
    col_of = {s: j for j, s in enumerate(ids)}
    source = pd.Index(ids).get_indexer(list(holdings.ids))     # -1 where not in the file
    have = source >= 0
    if len(ids) == len(source) and np.array_equal(source, np.arange(len(ids))):
        out = matrix             # the file lists exactly the holdings, in their order
    else:
        out = np.full((matrix.shape[0], len(holdings.ids)), np.nan)
        out[:, have] = matrix[:, source[have]]
    run = longest_zero_run(out)
    for k in np.flatnonzero(~have):
        # the holdings frame keeps the file's rows in order: holding k is data row k
        row = holdings_raw.row_number(int(k)) if holdings_raw is not None else None
        coll.warn(place(settings.inputs["holdings"].display, row, "security_id"),
                  f"holding {holdings.ids[k]} has no return history in {raw.name}")
    for k in np.flatnonzero(have & (run >= settings.stale_zero_run)):
        sid = holdings.ids[k]
        start = _run_start(out[:, k], int(run[k]))
        coll.warn(where_cell(start, col_of[sid]), f"holding {sid} has {run[k]} exact-zero "
                  "returns in a row from here: its prices may be stale")
    return ReturnPanel(period_keys=np.asarray(keys), security_ids=holdings.ids, values=out,
                       shape=shape, n_rows=raw.table.num_rows)


def longest_zero_run(matrix: np.ndarray) -> np.ndarray:
    """Longest run of exact-zero returns in each column (NaN breaks a run); vectorised, and
    only over the columns that hold two or more zeros at all."""
    zero = matrix == 0.0
    counts = zero.sum(axis=0)
    run = np.minimum(counts, 1)
    cand = np.flatnonzero(counts >= 2)
    if len(cand):
        z = zero[:, cand]
        idx = np.arange(matrix.shape[0])[:, None]
        last_break = np.maximum.accumulate(np.where(z, -1, idx), axis=0)
        run[cand] = np.where(z, idx - last_break, 0).max(axis=0)
    return run


def _run_start(column: np.ndarray, length: int) -> int:
    """Index where the first run of ``length`` exact zeros in ``column`` starts."""
    csum = np.concatenate([[0], np.cumsum(column == 0.0)])
    # a run of `length` zeros starts at i when column[i:i + length] are all zero
    full = csum[length:] - csum[:-length] == length
    return int(np.flatnonzero(full)[0])


