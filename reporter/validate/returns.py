"""The holdings' returns file, long (``date,security_id,return``) or wide (``date`` + one
column per id), to a periods x holdings panel."""

from __future__ import annotations

import numpy as np

from reporter.analytics.returns import period_keys
from reporter.config import Settings
from reporter.errors import Collector, place
from reporter.models import Holdings, ReturnPanel
from reporter.readers import RawTable
from reporter.validate.cells import _dictionary, as_dates, as_float, column_of, date_codes
from reporter.validate.common import HoldingRows, _Capped, _period_word, _require_columns
from reporter.validate.long_quick import _clean_long_matrix
from reporter.validate.panel import _finish_panel
from reporter.validate.prices import (
    PRICE_COLUMN,
    price_returns,
    report_non_positive,
    report_price_jumps,
)
from reporter.validate.text import (
    case_clash_message,
    case_clashes,
    normalise_id,
    normalised_ids,
)
from reporter.validate.values import _percent_columns, out_of_range, report_out_of_range


def validate_returns(raw: RawTable, holdings: Holdings | None, settings: Settings,
                     coll: Collector, holdings_raw: RawTable | HoldingRows | None = None
                     ) -> ReturnPanel | None:
    """Long (``date,security_id,return``) or wide (``date`` + one column per id) returns.

    ``holdings_raw`` (the holdings file as read, or a fund's :class:`HoldingRows`) lets
    messages about a holding name its row.
    With ``values = "prices"`` (``[inputs] prices``) the file holds prices or index levels
    (long: ``date,security_id,price``), turned into returns by
    :func:`reporter.validate.prices.price_returns`.
    """
    if raw.clean is not None:            # read in streamed batches, and found clean
        return _finish_clean(raw, raw.clean.as_clean(), holdings, settings, coll, holdings_raw)
    names = raw.table.column_names
    value_col = PRICE_COLUMN if settings.inputs["returns"].values == "prices" else "return"
    if raw.table.num_rows == 0 and names:
        coll.error(raw.name, "the file has no rows")
        return None
    if "security_id" in names or value_col in names:
        return _returns_long(raw, holdings, settings, coll, holdings_raw, value_col)
    if "date" in names and len(names) > 1:
        return _returns_wide(raw, holdings, settings, coll, holdings_raw)
    _require_columns(raw, ("date", "security_id", value_col), (), coll)
    return None


def _returns_long(raw, holdings, settings, coll, holdings_raw, value_col) -> ReturnPanel | None:
    if not _require_columns(raw, ("date", "security_id", value_col), (), coll):
        return None
    spec = settings.inputs["returns"]
    prices = value_col == PRICE_COLUMN
    clean = None if prices else _clean_long_matrix(raw, spec.date_format, settings.frequency)
    if clean is not None:
        return _finish_clean(raw, clean, holdings, settings, coll, holdings_raw)
    dcodes, days = date_codes(raw, "date", spec.date_format, coll)
    values = as_float(raw, value_col, coll, spec.decimal, allow_empty=False,
                      thousands=spec.thousands)
    # ids are trimmed and put in NFC, so that " FWX01" and "FWX01" are one security, and a
    # blank id is empty: the distinct values are normalised (few), then the codes remapped
    enc = _dictionary(column_of(raw, "security_id", "text"))
    ids, id_of_text, _ = normalised_ids(enc.dictionary.to_pylist())
    remap = np.append(id_of_text, -1).astype(np.int32)               # last slot: null id
    raw_codes = enc.indices.fill_null(-1).to_numpy(zero_copy_only=False)     # int32
    codes_all = remap[raw_codes]                                     # -1 indexes the last slot
    for first, later in case_clashes(ids):
        at_first, at_later = (raw.row_number(int(np.argmax(codes_all == j)))
                              for j in (first, later))
        coll.error(place(raw.name, at_later, "security_id"),
                   case_clash_message(ids[later], ids[first], at_first))
    id_null = codes_all < 0
    capped = _Capped(coll, "empty security ids")
    for i in np.flatnonzero(id_null):
        capped.add(place(raw.name, raw.row_number(int(i)), "security_id"), "value is empty")
    capped.close()

    ok = (dcodes >= 0) & ~id_null
    all_ok = bool(ok.all())
    rows = np.arange(len(ok), dtype=np.int64) if all_ok else np.flatnonzero(ok)
    day_of = dcodes if all_ok else dcodes[ok]
    codes = codes_all if all_ok else codes_all[ok]
    # the periods are those of the distinct days in use (few): rank them once, then look up
    # each row's period through its day's code
    used = np.bincount(day_of, minlength=len(days)) > 0
    uniq_keys, rank = np.unique(period_keys(days[used], settings.frequency),
                                return_inverse=True)
    # each row's cell in the periods x ids matrix, period * n_ids + id (in place, and in
    # 32 bits when the matrix allows: a long file has millions of rows, and every fresh array
    # of that length costs)
    n_ids = max(len(ids), 1)
    space = len(uniq_keys) * n_ids
    period_of_day = np.full(len(days), -1, dtype=np.int32 if space < 2**31 else np.int64)
    period_of_day[used] = rank
    combined = period_of_day[day_of]
    combined *= n_ids
    combined += codes
    if space <= 200_000_000:
        seen = np.zeros(space, dtype=bool)
        seen[combined] = True
        n_cells = int(np.count_nonzero(seen))
        del seen
    else:
        n_cells = len(np.unique(combined))
    has_dupes = n_cells < len(combined)
    if has_dupes:
        dates = days[np.maximum(dcodes, 0)]          # only read where the date is good
        order = np.argsort(combined, kind="stable")
        s = combined[order]
        dup = np.flatnonzero(s[1:] == s[:-1]) + 1
        capped = _Capped(coll, "repeated (date, security) rows")
        for d in dup:
            i, first = rows[order[d]], rows[order[d - 1]]
            sid = ids[codes_all[i]]
            if dates[i] == dates[first]:
                agree = "the same" if values[i] == values[first] else "a different"
                msg = (f"duplicate row for ({dates[i]}, {sid}) with {agree} value "
                       f"(first at row {raw.row_number(int(first))})")
            else:
                msg = (f"second return for {sid} in the same {_period_word(settings)} "
                       f"({dates[first]} and {dates[i]}); the data do not look "
                       f"{settings.frequency}")
            capped.add(place(raw.name, raw.row_number(int(i)), "date"), msg)
        capped.close()

    # every cell is written below when every (period, id) has a row: no NaN fill needed
    shape = (len(uniq_keys), len(ids))
    matrix = np.empty(shape) if n_cells == space else np.full(shape, np.nan)
    matrix.ravel()[combined] = values if all_ok else values[ok]

    # file rows are looked up only when a message needs one (rare), not for every cell
    def first_row(j: int) -> int:
        return int(rows[np.argmax(codes == j)])

    def row_of(t: int, j: int) -> int:
        return int(rows[np.flatnonzero(combined == t * n_ids + j)[0]])

    if prices:
        report_non_positive(raw, values, value_col, coll)
        returns, keys = price_returns(matrix, uniq_keys, settings.frequency)

        def later_price(t: int, j: int) -> str:
            return place(raw.name, raw.row_number(row_of(t + 1, j)), value_col)

        report_price_jumps(returns, later_price, coll)
        return _finish_panel(raw, returns, keys, ids, holdings, settings, coll, "long",
                             lambda j: place(raw.name, raw.row_number(first_row(j)), value_col),
                             later_price, holdings_raw, _no_percent(len(ids)))
    # securities that look like percentages are reported once, in _finish_panel
    percent = _percent_columns(matrix, settings.frequency)
    if out_of_range(values).any():
        pct_code = np.append(percent[0], False)
        code_of_row = np.where(id_null, len(ids), codes_all)  # len(ids): the "no id" slot
        report_out_of_range(raw, np.where(pct_code[code_of_row], np.nan, values),
                            "return", "returns below -100%", coll)
    return _finish_panel(raw, matrix, uniq_keys, ids, holdings, settings, coll, "long",
                         lambda j: place(raw.name, raw.row_number(first_row(j)), "return"),
                         lambda t, j: place(raw.name, raw.row_number(row_of(t, j)), "return"),
                         holdings_raw, percent)


def _finish_clean(raw, clean, holdings, settings, coll, holdings_raw) -> ReturnPanel | None:
    """The panel of a long file in which no row needs a message (see
    :func:`reporter.validate.long_quick._clean_long_matrix`)."""
    matrix, keys, ids, percent, row_where = clean
    return _finish_panel(
        raw, matrix, keys, ids, holdings, settings, coll, "long",
        lambda j: place(raw.name, raw.row_number(row_where(lambda p, s: s == j)), "return"),
        lambda t, j: place(raw.name, raw.row_number(row_where(
            lambda p, s: (p == t) & (s == j))), "return"),
        holdings_raw, percent)


def _returns_wide(raw, holdings, settings, coll, holdings_raw) -> ReturnPanel | None:
    spec = settings.inputs["returns"]
    dates = as_dates(raw, "date", spec.date_format, coll)
    columns = [c for c in raw.table.column_names if c != "date"]
    cols = [as_float(raw, c, coll, spec.decimal, allow_empty=True, thousands=spec.thousands)
            for c in columns]
    full = np.column_stack(cols) if cols else np.empty((len(dates), 0))
    prices = spec.values == "prices"
    # a column that looks like percentages is reported once, in _finish_panel
    percent = _no_percent(len(columns)) if prices else _percent_columns(full,
                                                                          settings.frequency)
    for j in np.flatnonzero((full <= 0).any(axis=0) if prices else []):
        report_non_positive(raw, full[:, j], columns[j], coll)
    for j in np.flatnonzero(~percent[0] & out_of_range(full).any(axis=0) & (not prices)):
        report_out_of_range(raw, full[:, j], columns[j], None, coll)
    ids_ok = _wide_ids(raw, columns, coll)
    ok = ~np.isnat(dates)
    keys = period_keys(dates[ok], settings.frequency)
    rows = np.flatnonzero(ok)
    order = np.argsort(keys, kind="stable")
    dup = np.flatnonzero(np.diff(keys[order]) == 0) + 1
    capped = _Capped(coll, "repeated dates")
    for d in dup:
        i, first = rows[order[d]], rows[order[d - 1]]
        capped.add(place(raw.name, raw.row_number(int(i)), "date"),
                   f"date {dates[i]} repeats the period of row {raw.row_number(int(first))}")
    capped.close()
    if len(dup) or not ids_ok:
        return None
    ids = [normalise_id(c) for c in columns]
    matrix, keys = full[ok][order], keys[order]
    sorted_rows = rows[order]
    def cell(t: int, j: int) -> str:
        return place(raw.name, raw.row_number(int(sorted_rows[t])), columns[j])

    if prices:
        matrix, keys = price_returns(matrix, keys, settings.frequency)
        sorted_rows = sorted_rows[1:]
        report_price_jumps(matrix, cell, coll)
    return _finish_panel(raw, matrix, keys, ids, holdings, settings, coll, "wide",
                         lambda j: place(raw.name, 1, columns[j]), cell,
                         # column statistics do not depend on row order: reuse them when no
                         # row was dropped for a bad date
                         holdings_raw, percent if prices or ok.all() else None)


def _wide_ids(raw: RawTable, columns: list[str], coll: Collector) -> bool:
    """The security ids of a wide file's columns, trimmed and in NFC: an error for a column
    whose id is blank or repeats an earlier column's, and for ids that differ only by case.
    Returns whether each column is a security of its own."""
    ids, id_of, _ = normalised_ids(columns)
    distinct = True
    first_column: dict[int, str] = {}
    for column, j in zip(columns, id_of, strict=True):
        if j < 0:
            coll.error(place(raw.name, 1, repr(column)), "column has no security id")
            distinct = False
        elif j in first_column:
            coll.error(place(raw.name, 1, column), f"security id {ids[j]!r} repeats column "
                       f"{first_column[j]!r} (ids are trimmed and in Unicode NFC)")
            distinct = False
        else:
            first_column[int(j)] = column
    for first, later in case_clashes(ids):
        coll.error(place(raw.name, 1, first_column[later]),
                   case_clash_message(ids[later], ids[first], None))
    return distinct


def _no_percent(n: int) -> tuple[np.ndarray, np.ndarray]:
    """No column flagged as percentages (prices are never checked for that)."""
    return np.zeros(n, dtype=bool), np.full(n, np.nan)
