"""Raw tables -> typed, checked inputs. Every problem is gathered with its place.

Each problem is reported as ``file:row:column: message`` where ``row`` is the row
as the user sees it (a CSV line number, a spreadsheet row, a Parquet 1-based row).
Per kind of problem at most :data:`MAX_PER_CHECK` places are listed, followed by a
count of the rest, so that a wholly wrong file gives a readable report.

Stated rules (also in the README):

* a security's returns look like percentages when their median absolute value is
  above :data:`PERCENT_MEDIAN` for the frequency, or more than half of them are above 1
  in absolute value;
* a risk-free rate whose median, annualised, is above 25% is warned about as a likely
  annual rate given per period;
* a holding's prices look stale when it has ``checks.stale_zero_run`` or more exact-zero
  returns in a row.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from reporter.analytics.returns import frequency_gaps, period_keys
from reporter.config import Settings
from reporter.errors import Collector, InputError, place
from reporter.models import DatedSeries, Holdings, ReturnPanel, ValidInputs
from reporter.readers import RawTable, read_input

MAX_PER_CHECK = 10
PERCENT_MEDIAN = {"monthly": 0.25, "weekly": 0.15, "daily": 0.10}
HOLDINGS_REQUIRED = ("security_id", "name", "sector")
HOLDINGS_OPTIONAL = ("asset_class", "currency", "country")


class _Capped:
    """Adds problems of one kind to a collector, listing at most MAX_PER_CHECK places."""

    def __init__(self, coll: Collector, summary: str, warning: bool = False) -> None:
        self.coll, self.summary, self.warning, self.count = coll, summary, warning, 0
        self._last_file = ""

    def add(self, where: str, message: str) -> None:
        self.count += 1
        self._last_file = where.split(":", 1)[0]
        if self.count <= MAX_PER_CHECK:
            (self.coll.warn if self.warning else self.coll.error)(where, message)

    def close(self) -> None:
        rest = self.count - MAX_PER_CHECK
        if rest > 0:
            msg = f"... and {rest} more {self.summary}"
            (self.coll.warn if self.warning else self.coll.error)(self._last_file, msg)


# --------------------------------------------------------------------------- columns

def _require_columns(raw: RawTable, required: tuple[str, ...], optional: tuple[str, ...],
                     coll: Collector) -> bool:
    names = raw.table.column_names
    missing = [c for c in required if c not in names]
    for c in missing:
        coll.error(place(raw.name, 1, c), "required column is missing "
                   f"(the file has: {', '.join(names) or 'no columns'})")
    for c in names:
        if c not in required and c not in optional:
            coll.warn(place(raw.name, 1, c), "unknown column, ignored")
    return not missing


def as_float(raw: RawTable, column: str, coll: Collector, decimal: str, *,
             allow_empty: bool, label: str | None = None) -> np.ndarray:
    """Column ``column`` as float64 (NaN where empty); non-numbers are reported."""
    arr = raw.table[column]
    label = label or column
    if pa.types.is_floating(arr.type) or pa.types.is_integer(arr.type) or pa.types.is_null(
            arr.type):
        values = arr.cast(pa.float64()).to_numpy(zero_copy_only=False)
        bad_text = np.zeros(len(values), dtype=bool)
    else:
        text = pd.Series(arr.cast(pa.string()).to_pylist(), dtype=object)
        stripped = text.str.strip()
        if decimal == ",":
            stripped = stripped.str.replace(",", ".", regex=False)
        # a copy: under pandas copy-on-write to_numpy() may return a read-only view
        values = np.array(pd.to_numeric(stripped, errors="coerce"), dtype=float)
        blank = text.isna().to_numpy() | (stripped == "").fillna(True).to_numpy()
        bad_text = np.isnan(values) & ~blank
        values[blank] = np.nan
        capped = _Capped(coll, f"non-numeric values in column {label}")
        for i in np.flatnonzero(bad_text):
            capped.add(place(raw.name, raw.row_number(int(i)), label),
                       f"not a number: {text.iloc[i]!r}")
        capped.close()
    inf = np.isinf(values)
    if inf.any():
        capped = _Capped(coll, f"infinite values in column {label}")
        for i in np.flatnonzero(inf):
            capped.add(place(raw.name, raw.row_number(int(i)), label), "value is infinite")
        capped.close()
        values = np.where(inf, np.nan, values)
    if not allow_empty:
        empty = np.isnan(values) & ~bad_text & ~inf
        capped = _Capped(coll, f"empty values in column {label}")
        for i in np.flatnonzero(empty):
            capped.add(place(raw.name, raw.row_number(int(i)), label), "value is empty")
        capped.close()
    return values


def date_codes(raw: RawTable, column: str, date_format: str,
               coll: Collector) -> tuple[np.ndarray, np.ndarray]:
    """Column ``column`` as a code per row into an array of distinct calendar days.

    Returns ``(codes, days)``: ``codes`` (int32, one per row) indexes ``days``
    (``datetime64[D]``), and is -1 where the date is empty or bad. Each distinct date text is
    parsed once, with ``date_format`` only: day-first and month-first are never guessed, and
    impossible dates (30 February) are errors. Spreadsheet and Parquet date cells are taken as
    calendar days. A long returns file repeats each date for every security, so this is one
    pass over the rows (the CSV reader already delivers the column dictionary-encoded).
    """
    arr = raw.table[column]
    if pa.types.is_date(arr.type) or pa.types.is_timestamp(arr.type):
        if not pa.types.is_date32(arr.type):       # date64 or timestamp: to calendar days
            arr = arr.cast(pa.timestamp("s")).cast(pa.date32())
        enc = pc.dictionary_encode(arr).combine_chunks()
        texts = None
        parsed = np.asarray(enc.dictionary.to_numpy(zero_copy_only=False),
                            dtype="datetime64[D]")
    else:
        enc = _dictionary(arr)
        texts = enc.dictionary.to_pylist()
        parsed = _parse_date_texts(texts, date_format)
    good = ~np.isnat(parsed)
    # distinct texts -> distinct valid days; -1 for a bad text and (last slot) an empty cell
    remap = np.append(np.where(good, np.cumsum(good) - 1, -1), -1).astype(np.int32)
    raw_codes = enc.indices.fill_null(-1).to_numpy(zero_copy_only=False)     # int32
    codes = remap[raw_codes]
    capped = _Capped(coll, f"bad dates in column {column}")
    for i in np.flatnonzero(codes < 0):
        where = place(raw.name, raw.row_number(int(i)), column)
        if raw_codes[i] < 0:
            capped.add(where, "date is empty")
        else:
            text = texts[raw_codes[i]] if texts is not None else str(parsed[raw_codes[i]])
            capped.add(where, f"not a valid date in the format {date_format!r}: {text!r}")
    capped.close()
    return codes, parsed[good]


def _parse_date_texts(texts: list, date_format: str) -> np.ndarray:
    """Distinct date texts (spaces around them ignored) as ``datetime64[D]``, NaT where a
    text is not a date in ``date_format``."""
    stripped = pd.Series(texts, dtype=object).str.strip()
    return pd.to_datetime(stripped, format=date_format, errors="coerce").to_numpy(
        dtype="datetime64[ns]").astype("datetime64[D]")


def as_dates(raw: RawTable, column: str, date_format: str, coll: Collector) -> np.ndarray:
    """Column ``column`` as ``datetime64[D]`` (NaT where empty or bad; each bad value is
    reported, see :func:`date_codes`)."""
    codes, days = date_codes(raw, column, date_format, coll)
    out = np.full(len(codes), np.datetime64("NaT"), dtype="datetime64[D]")
    ok = codes >= 0
    out[ok] = days[codes[ok]]
    return out


def as_text(raw: RawTable, column: str, coll: Collector, *, allow_empty: bool) -> np.ndarray:
    values = np.array([None if v is None else str(v).strip()
                       for v in raw.table[column].cast(pa.string()).to_pylist()], dtype=object)
    if not allow_empty:
        capped = _Capped(coll, f"empty values in column {column}")
        for i in np.flatnonzero([v is None or v == "" for v in values]):
            capped.add(place(raw.name, raw.row_number(int(i)), column), "value is empty")
        capped.close()
    return values


# --------------------------------------------------------------------------- holdings

def validate_holdings(raw: RawTable, settings: Settings, coll: Collector) -> Holdings | None:
    """Check the holdings file and derive weights (from ``weight`` or ``market_value``)."""
    names = raw.table.column_names
    has_w, has_mv = "weight" in names, "market_value" in names
    if not (has_w or has_mv):
        coll.error(place(raw.name, 1, "weight"),
                   "required column is missing: give weight or market_value")
    optional = HOLDINGS_OPTIONAL + ("weight", "market_value")
    if not _require_columns(raw, HOLDINGS_REQUIRED, optional, coll) or not (has_w or has_mv):
        return None
    if raw.table.num_rows == 0:
        coll.error(raw.name, "the file has no holdings")
        return None
    spec = settings.inputs["holdings"]
    ids = as_text(raw, "security_id", coll, allow_empty=False)
    frame = pd.DataFrame({
        "security_id": ids,
        "name": as_text(raw, "name", coll, allow_empty=False),
        "sector": as_text(raw, "sector", coll, allow_empty=False),
    })
    seen: dict[str, int] = {}
    for i, sid in enumerate(ids):
        if sid is None or sid == "":
            continue
        if sid in seen:
            coll.error(place(raw.name, raw.row_number(i), "security_id"),
                       f"duplicate security id {sid!r} (first at row {raw.row_number(seen[sid])})")
        else:
            seen[sid] = i
    column = "weight" if has_w else "market_value"
    if has_w and has_mv:
        coll.warn(place(raw.name, 1, "market_value"), "both weight and market_value given; "
                  "weights are taken from the weight column")
    raw_w = as_float(raw, column, coll, spec.decimal, allow_empty=False)
    if has_mv:
        frame["market_value"] = as_float(raw, "market_value", coll, spec.decimal,
                                         allow_empty=False) if has_w else raw_w
    neg = np.flatnonzero(raw_w < 0)
    if len(neg) and not settings.allow_short:
        capped = _Capped(coll, f"negative values in column {column}")
        for i in neg:
            capped.add(place(raw.name, raw.row_number(int(i)), column),
                       f"negative {column} {raw_w[i]:g}: short positions are not allowed "
                       "(set checks.allow_short = true)")
        capped.close()
    for opt in HOLDINGS_OPTIONAL:
        if opt in names:
            frame[opt] = as_text(raw, opt, coll, allow_empty=True)

    normalised = False
    if not np.isnan(raw_w).any():
        total = float(raw_w.sum())
        if column == "market_value":
            if total <= 0:
                coll.error(place(raw.name, None, column), "market values sum to zero or less")
                return None
            weights = raw_w / total
        else:
            weights = raw_w
            if abs(total - 1.0) > settings.weight_tolerance:
                msg = (f"weights sum to {total:.6g}, not 1 (tolerance "
                       f"{settings.weight_tolerance:g})")
                if settings.normalise_weights:
                    coll.warn(place(raw.name, None, column), msg + "; rescaled to sum to 1")
                    weights = raw_w / total
                    normalised = True
                else:
                    coll.error(place(raw.name, None, column), msg + "; fix the file or set "
                               "checks.normalise_weights = true")
        frame["weight"] = weights
    else:
        frame["weight"] = raw_w
    frame = frame[["security_id", "name", "sector", "weight"]
                  + [c for c in frame.columns if c not in ("security_id", "name", "sector",
                                                           "weight")]]
    return Holdings(frame=frame, weight_source=column, normalised=normalised)


# --------------------------------------------------------------------------- series

def validate_series(raw: RawTable, value_col: str, settings: Settings,
                    coll: Collector) -> DatedSeries | None:
    """A ``date,<value_col>`` series: dates valid, unique per period, values numeric."""
    if not _require_columns(raw, ("date", value_col), (), coll):
        return None
    if raw.table.num_rows == 0:
        coll.error(raw.name, "the file has no rows")
        return None
    spec = settings.inputs["market" if value_col == "return" else "risk_free"]
    dates = as_dates(raw, "date", spec.date_format, coll)
    values = as_float(raw, value_col, coll, spec.decimal, allow_empty=False)
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
    return DatedSeries(dates=d[order], values=v[order],
                       rows=raw.row_numbers(np.flatnonzero(ok)[order]),
                       unread_rows=raw.row_numbers(np.flatnonzero(~ok)))


# The largest one-period move a broad market index makes: a common-practice bound, no
# source (the worst calendar months of broad equity indices in the last century were near
# -30%, recalled from memory). A move beyond it in a market proxy is almost always a data error.
INDEX_MOVE_LIMIT = {"monthly": 0.5, "weekly": 0.35, "daily": 0.25}


def _warn_extreme_index_moves(raw: RawTable, values: np.ndarray, settings: Settings,
                              coll: Collector) -> None:
    """A warning per market-proxy return beyond :data:`INDEX_MOVE_LIMIT` (not a percentage
    column, which is reported as such, and not below -100%, which is an error)."""
    limit = INDEX_MOVE_LIMIT[settings.frequency]
    finite = values[np.isfinite(values)]
    if not len(finite) or looks_like_percent(finite, settings.frequency):
        return
    capped = _Capped(coll, "extreme market moves", warning=True)
    for i in np.flatnonzero((np.abs(values) > limit) & (values >= -1.0)):
        capped.add(place(raw.name, raw.row_number(int(i)), "return"),
                   f"return {values[i]:g} in one {_period_word(settings)} is beyond what a broad "
                   f"market index does (more than {limit:.0%} either way); check the data")
    capped.close()


def _period_word(settings: Settings) -> str:
    return {"monthly": "month", "weekly": "week", "daily": "day"}[settings.frequency]


def _report_below_minus_100(raw: RawTable, values: np.ndarray, label: str, summary: str,
                            coll: Collector) -> None:
    """One problem per data row whose return is below -100% (NaN is never below)."""
    capped = _Capped(coll, summary)
    for i in np.flatnonzero(values < -1.0):
        capped.add(place(raw.name, raw.row_number(int(i)), label),
                   f"return {values[i]:g} is below -100%")
    capped.close()


def _check_return_values(raw: RawTable, values: np.ndarray, column: str, settings: Settings,
                         coll: Collector, label: str) -> None:
    """Returns below -100%, and a column that looks like percentages (then only that is
    reported: its values below -100% are the same problem)."""
    finite = values[np.isfinite(values)]
    percent = bool(len(finite)) and looks_like_percent(finite, settings.frequency)
    if not percent:
        _report_below_minus_100(raw, values, label, f"returns below -100% in column {label}",
                                coll)
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


# --------------------------------------------------------------------------- returns

def validate_returns(raw: RawTable, holdings: Holdings | None, settings: Settings,
                     coll: Collector, holdings_raw: RawTable | None = None) -> ReturnPanel | None:
    """Long (``date,security_id,return``) or wide (``date`` + one column per id) returns.

    ``holdings_raw`` (the holdings file as read) lets messages about a holding name its row.
    """
    names = raw.table.column_names
    if raw.table.num_rows == 0 and names:
        coll.error(raw.name, "the file has no rows")
        return None
    if "security_id" in names or "return" in names:
        return _returns_long(raw, holdings, settings, coll, holdings_raw)
    if "date" in names and len(names) > 1:
        return _returns_wide(raw, holdings, settings, coll, holdings_raw)
    _require_columns(raw, ("date", "security_id", "return"), (), coll)
    return None


def _returns_long(raw, holdings, settings, coll, holdings_raw) -> ReturnPanel | None:
    if not _require_columns(raw, ("date", "security_id", "return"), (), coll):
        return None
    spec = settings.inputs["returns"]
    clean = _clean_long_matrix(raw, spec.date_format, settings.frequency)
    if clean is not None:
        matrix, keys, ids, percent, row_where = clean
        return _finish_panel(
            raw, matrix, keys, ids, holdings, settings, coll, "long",
            lambda j: place(raw.name, raw.row_number(row_where(lambda p, s: s == j)), "return"),
            lambda t, j: place(raw.name, raw.row_number(row_where(
                lambda p, s: (p == t) & (s == j))), "return"),
            holdings_raw, percent)
    dcodes, days = date_codes(raw, "date", spec.date_format, coll)
    values = as_float(raw, "return", coll, spec.decimal, allow_empty=False)
    # ids are trimmed, so that " FWX01" and "FWX01" are one security, and a blank id is
    # empty: the distinct values are trimmed (few), then the codes remapped (one pass)
    enc = _dictionary(raw.table["security_id"])
    ids, id_of_text = _trimmed_ids(enc.dictionary.to_pylist())
    remap = np.append(id_of_text, -1).astype(np.int32)               # last slot: null id
    raw_codes = enc.indices.fill_null(-1).to_numpy(zero_copy_only=False)     # int32
    codes_all = remap[raw_codes]                                     # -1 indexes the last slot
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

    # securities that look like percentages are reported once, in _finish_panel
    percent = _percent_columns(matrix, settings.frequency)
    if (values < -1.0).any():
        pct_code = np.append(percent[0], False)
        code_of_row = np.where(id_null, len(ids), codes_all)  # len(ids): the "no id" slot
        _report_below_minus_100(raw, np.where(pct_code[code_of_row], np.nan, values),
                                "return", "returns below -100%", coll)

    # file rows are looked up only when a message needs one (rare), not for every cell
    def first_row(j: int) -> int:
        return int(rows[np.argmax(codes == j)])

    def row_of(t: int, j: int) -> int:
        return int(rows[np.flatnonzero(combined == t * n_ids + j)[0]])

    return _finish_panel(raw, matrix, uniq_keys, ids, holdings, settings, coll, "long",
                         lambda j: place(raw.name, raw.row_number(first_row(j)), "return"),
                         lambda t, j: place(raw.name, raw.row_number(row_of(t, j)), "return"),
                         holdings_raw, percent)


def _clean_long_matrix(raw: RawTable, date_format: str, frequency: str):
    """The periods x ids matrix of a long returns file in one pass over the reader's column
    chunks, for a file in which no row needs a message; else None, and the caller runs the
    full checks of :func:`_returns_long`, which find and place every problem.

    This is not a second set of rules, only a quicker route to the same panel: it gives up
    (returns None) at the first sign that a row might need a message (an empty or bad date
    or id, a return that is not a finite number at or above -100%, two rows for one cell, a
    period with no row, a security that looks like percentages). Then it has touched no
    file row twice and allocated nothing of the file's length: ids and dates are mapped per
    chunk through the chunk's own (small) dictionary, and each chunk's cells are written
    straight into the matrix. Returns ``(matrix, keys, ids, percent, row_where)``;
    ``row_where(test)`` is the first data row whose (period, id) codes pass
    ``test(periods, ids)`` (for the rare message about a clean file: a stale price).
    """
    table = raw.table
    cols = [table[c] for c in ("date", "security_id", "return")]
    date, sid, ret = cols
    if not (pa.types.is_dictionary(date.type) and pa.types.is_dictionary(sid.type)
            and pa.types.is_floating(ret.type)) or any(c.null_count for c in cols):
        return None
    batches = pa.table({"d": date, "s": sid, "r": ret}).to_batches()
    # distinct texts over the chunks' own dictionaries, in order of first appearance, and
    # each chunk's dictionary as positions in them
    distinct = [pc.unique(pa.concat_arrays([b.column(k).dictionary for b in batches]))
                for k in (0, 1)]
    local = [tuple(pc.index_in(b.column(k).dictionary, value_set=distinct[k]).to_numpy()
                   for k in (0, 1)) for b in batches]
    date_texts, id_texts = (d.to_pylist() for d in distinct)
    days = _parse_date_texts(date_texts, date_format)
    if np.isnat(days).any():
        return None
    keys, period_of_text = np.unique(period_keys(days, frequency), return_inverse=True)
    ids, id_of_text = _trimmed_ids(id_texts)
    if (id_of_text < 0).any():
        return None
    n_ids = len(ids)
    space = len(keys) * n_ids
    if space > 200_000_000:
        return None              # the full checks find repeated cells without a bit map
    itype = np.int32 if space < 2**31 else np.int64
    maps = [((period_of_text[dl] * n_ids).astype(itype), id_of_text[il].astype(itype))
            for dl, il in local]
    seen = np.zeros(space, dtype=bool)
    flat = np.empty(space)
    for b, (pmap, smap) in zip(batches, maps, strict=True):
        v = b.column(2).to_numpy()
        if not ((v >= -1.0) & (v < np.inf)).all():      # NaN fails the first test
            return None
        cell = pmap[b.column(0).indices.to_numpy()]
        cell += smap[b.column(1).indices.to_numpy()]
        seen[cell] = True
        flat[cell] = v
    n_cells = int(np.count_nonzero(seen))
    if n_cells < table.num_rows or not seen.reshape(len(keys), n_ids).any(axis=1).all():
        return None
    if n_cells < space:
        flat[~seen] = np.nan
    matrix = flat.reshape(len(keys), n_ids)
    percent = _percent_columns(matrix, frequency)
    if percent[0].any():
        return None

    def row_where(test) -> int:
        offset = 0
        for b, (pmap, smap) in zip(batches, maps, strict=True):
            hit = np.flatnonzero(test(pmap[b.column(0).indices.to_numpy()] // n_ids,
                                      smap[b.column(1).indices.to_numpy()]))
            if len(hit):
                return offset + int(hit[0])
            offset += b.num_rows
        raise LookupError("no such row")

    return matrix, keys, ids, percent, row_where


def _trimmed_ids(texts: list[str]) -> tuple[list[str], np.ndarray]:
    """Distinct security-id texts trimmed of spaces, so that " FWX01" and "FWX01" are one
    security: returns the ids in order of first appearance and, for each text, its id's
    position (-1 for a blank text)."""
    ids: list[str] = []
    index_of: dict[str, int] = {}
    id_of_text = np.full(len(texts), -1, dtype=np.int64)
    for k, text in enumerate(texts):
        text = text.strip()
        if text:
            id_of_text[k] = index_of.setdefault(text, len(ids))
            if id_of_text[k] == len(ids):
                ids.append(text)
    return ids, id_of_text


def _dictionary(column: pa.ChunkedArray) -> pa.DictionaryArray:
    """A text column as one dictionary array (the CSV reader may already deliver one)."""
    if pa.types.is_dictionary(column.type):
        return pa.table({"c": column}).unify_dictionaries().column(0).combine_chunks()
    return pc.dictionary_encode(column.cast(pa.string())).combine_chunks()


def _returns_wide(raw, holdings, settings, coll, holdings_raw) -> ReturnPanel | None:
    spec = settings.inputs["returns"]
    dates = as_dates(raw, "date", spec.date_format, coll)
    ids = [c for c in raw.table.column_names if c != "date"]
    cols = [as_float(raw, sid, coll, spec.decimal, allow_empty=True) for sid in ids]
    full = np.column_stack(cols) if cols else np.empty((len(dates), 0))
    # a column that looks like percentages is reported once, in _finish_panel
    percent = _percent_columns(full, settings.frequency)
    for j in np.flatnonzero(~percent[0] & (full < -1.0).any(axis=0)):
        _report_below_minus_100(raw, full[:, j], ids[j],
                                f"returns below -100% in column {ids[j]}", coll)
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
    if len(dup):
        return None
    matrix = full[ok][order]
    sorted_rows = rows[order]
    return _finish_panel(raw, matrix, keys[order], ids, holdings, settings, coll, "wide",
                         lambda j: place(raw.name, 1, ids[j]),
                         lambda t, j: place(raw.name, raw.row_number(int(sorted_rows[t])),
                                            ids[j]),
                         # column statistics do not depend on row order: reuse them when no
                         # row was dropped for a bad date
                         holdings_raw, percent if ok.all() else None)


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


# --------------------------------------------------------------------------- whole pack

def read_inputs(settings: Settings) -> tuple[dict[str, RawTable], list]:
    """Read every input file; returns the tables read and the problems of those that failed."""
    raws: dict[str, RawTable] = {}
    problems = []
    for role, spec in settings.inputs.items():
        try:
            raws[role] = read_input(spec)
        except InputError as exc:
            problems.extend(exc.problems)
    return raws, problems


def validate_tables(settings: Settings, raws: dict[str, RawTable], read_problems=(),
                    strict: bool = False) -> ValidInputs:
    """Check every table; raise :class:`InputError` listing every problem found."""
    coll = Collector()
    coll.problems.extend(read_problems)
    holdings = validate_holdings(raws["holdings"], settings, coll) if "holdings" in raws else None
    market = validate_series(raws["market"], "return", settings, coll) if "market" in raws \
        else None
    rf = validate_series(raws["risk_free"], "rate", settings, coll) if "risk_free" in raws \
        else None
    panel = validate_returns(raws["returns"], holdings, settings, coll,
                             raws.get("holdings")) if "returns" in raws \
        else None
    if market is not None and rf is not None:
        _check_coverage(settings, market, rf, panel, coll)
    coll.raise_if_errors(strict=strict)
    assert holdings is not None and market is not None and rf is not None and panel is not None
    return ValidInputs(holdings=holdings, returns=panel, market=market, risk_free=rf,
                       warnings=coll.warnings)


def validate_pack(settings: Settings, strict: bool = False) -> ValidInputs:
    """Read and check every input in one call."""
    raws, problems = read_inputs(settings)
    return validate_tables(settings, raws, problems, strict=strict)


def _check_return_frequency(settings: Settings, panel: ReturnPanel, mkeys: np.ndarray,
                            coll: Collector) -> None:
    """A holding's returns must come at the declared frequency: on the market's calendar, at
    least half of the steps between its consecutive returns must be a single period (a
    suspension leaves one long step; quarterly data in a monthly pack leave no short one)."""
    pos = np.searchsorted(mkeys, panel.period_keys)
    pos_c = np.minimum(pos, len(mkeys) - 1)
    on_calendar = (pos < len(mkeys)) & (mkeys[pos_c] == panel.period_keys)
    if on_calendar.all() and np.array_equal(pos_c, np.arange(len(mkeys))):
        present = np.isfinite(panel.values)      # the panel is on the market's calendar
    else:
        present = np.zeros((len(mkeys), panel.values.shape[1]), dtype=bool)
        present[pos_c[on_calendar]] = np.isfinite(panel.values[on_calendar])
    n = np.count_nonzero(present, axis=0)
    single = np.count_nonzero(present[1:] & present[:-1], axis=0)
    bad = np.flatnonzero((n >= 3) & (2 * single < n - 1))
    capped = _Capped(coll, "holdings whose returns are less frequent than declared")
    for j in bad:
        capped.add(place(settings.inputs["returns"].display, None, "date"),
                   f"returns for {panel.security_ids[j]} look less frequent than "
                   f"{settings.frequency}: {single[j]} of the {n[j] - 1} steps between them are "
                   f"one {_period_word(settings)}")
    capped.close()


def _check_coverage(settings: Settings, market: DatedSeries, rf: DatedSeries,
                    panel: ReturnPanel | None, coll: Collector) -> None:
    cfg = settings.config_path.name
    end = np.datetime64(settings.period_end, "D")
    end_key = period_keys(np.array([end]), settings.frequency)[0]
    mkeys = period_keys(market.dates, settings.frequency)
    mname, rname = settings.inputs["market"].display, settings.inputs["risk_free"].display
    if mkeys[-1] < end_key:
        coll.error(f"{cfg}:pack.period_end", f"period_end {settings.period_end} is after the "
                   f"last date in {mname} ({market.dates[-1]})")
        return
    if panel is not None and len(panel.period_keys) and panel.period_keys[-1] < end_key:
        coll.warn(settings.inputs["returns"].display,
                  f"no holding has a return for the period of period_end {settings.period_end}")
    upto = np.flatnonzero(mkeys <= end_key)
    if len(upto) < settings.window:
        coll.error(f"{cfg}:analysis.window", f"the window ({settings.window} periods) is longer "
                   f"than the data: {mname} has {len(upto)} periods up to {settings.period_end}")
        return
    win = upto[-settings.window:]
    gaps = frequency_gaps(market.dates[win], settings.frequency)
    if market.rows is not None and market.unread_rows is not None and len(market.unread_rows):
        lo, hi = market.rows[win][gaps - 1], market.rows[win][gaps]
        unread = np.sort(market.unread_rows)
        explained = np.searchsorted(unread, hi) > np.searchsorted(unread, lo, side="right")
        gaps = gaps[~explained]     # a date that could not be read is reported already
    for g in gaps[:MAX_PER_CHECK]:
        where = (place(mname, int(market.rows[win][g]), "date") if market.rows is not None
                 else mname)
        coll.error(where, f"the dates {market.dates[win][g - 1]} and {market.dates[win][g]} "
                   f"are not consecutive {settings.frequency} periods (a period is missing "
                   "between them)")
    if len(gaps) > MAX_PER_CHECK:
        coll.error(mname, f"... and {len(gaps) - MAX_PER_CHECK} more gaps in the window")
    if panel is not None:
        _check_return_frequency(settings, panel, mkeys, coll)
    rkeys = period_keys(rf.dates, settings.frequency)
    missing = np.setdiff1d(mkeys[win], rkeys)
    if len(missing):
        at = np.isin(mkeys[win], missing)
        dates, mrows = market.dates[win][at], (market.rows[win][at] if market.rows is not None
                                                else [None] * int(at.sum()))
        after = np.searchsorted(rkeys, missing)     # the risk-free row it is missing before
        for k in range(min(len(missing), MAX_PER_CHECK)):
            if rf.rows is not None and after[k] < len(rf.rows):
                where = place(rname, int(rf.rows[after[k]]), "date")
                hint = "missing before this row"
            else:
                where, hint = rname, "missing after the last row"
            market_at = f" ({mname} row {mrows[k]})" if mrows[k] is not None else ""
            coll.error(where, f"no rate for the period of {dates[k]}{market_at}, which the "
                       f"window needs; {hint}")
        if len(missing) > MAX_PER_CHECK:
            coll.error(rname, f"... and {len(missing) - MAX_PER_CHECK} more periods of the "
                       "window with no rate")
