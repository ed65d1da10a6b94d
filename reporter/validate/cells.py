"""Column converters: a raw column as floats, text or calendar days, each bad cell reported
with its place."""

from __future__ import annotations

import datetime as dt
import re

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from reporter.errors import Collector, InputError, Problem, place, quoted
from reporter.readers import RawTable
from reporter.validate.common import _Capped
from reporter.validate.text import normalise_id


def _is_text_type(t: pa.DataType) -> bool:
    return pa.types.is_string(t) or pa.types.is_large_string(t) or (
        pa.types.is_dictionary(t) and _is_text_type(t.value_type))


def _is_number_type(t: pa.DataType) -> bool:
    return pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t)


# The Arrow types a Parquet column may have, per use; any other (a duration, a time of day,
# binary, a list, struct or map, a boolean ...) is refused at the column, never cast.
def _is_number_or_text_type(t: pa.DataType) -> bool:
    """What a number or a text column may be: each is read from the other's types too (a
    number column of text is parsed; an empty optional text column arrives as floats)."""
    return _is_number_type(t) or _is_text_type(t) or pa.types.is_null(t)


ACCEPTED_TYPES = {
    "number": (_is_number_or_text_type, "plain numbers"),
    "text": (_is_number_or_text_type, "text"),
    "date": (lambda t: pa.types.is_date(t) or pa.types.is_timestamp(t) or _is_text_type(t)
             or pa.types.is_integer(t) or pa.types.is_null(t), "dates"),
}


def _type_name(t: pa.DataType) -> str:
    for test, name in ((pa.types.is_duration, "duration"), (pa.types.is_time, "time-of-day"),
                       (pa.types.is_boolean, "true/false"), (pa.types.is_date, "date"),
                       (pa.types.is_timestamp, "timestamp"), (pa.types.is_map, "map"),
                       (pa.types.is_struct, "struct"), (pa.types.is_dictionary, "dictionary"),
                       (pa.types.is_floating, "float"), (pa.types.is_decimal, "decimal"),
                       (lambda x: pa.types.is_list(x) or pa.types.is_large_list(x)
                        or pa.types.is_fixed_size_list(x), "list"),
                       (lambda x: pa.types.is_binary(x) or pa.types.is_large_binary(x)
                        or pa.types.is_fixed_size_binary(x), "binary")):
        if test(t):
            return name
    return str(t)


def column_of(raw: RawTable, column: str, use: str) -> pa.ChunkedArray:
    """``raw``'s column ``column``, refused (one message naming the column and its type) when
    the file is Parquet and the column's type cannot be read as ``use`` ("number", "text" or
    "date"; see :data:`ACCEPTED_TYPES`). CSV and spreadsheet columns are typed by the reader."""
    arr = raw.table[column]
    accepts, wanted = ACCEPTED_TYPES[use]
    if raw.format == "parquet" and not accepts(arr.type):
        raise InputError([Problem(place(raw.name, None, column),
                                  f"a {_type_name(arr.type)} column ({arr.type}); give {wanted}")])
    return arr


# the largest whole number a float64 holds exactly, and so the largest read as a number
EXACT_INTEGER = 2 ** 53


def _inexact_integers(arr: pa.ChunkedArray) -> np.ndarray:
    """Where a 64-bit integer column's value is beyond +-2^53 (no float holds it exactly)."""
    if arr.type.bit_width < 64:
        return np.zeros(len(arr), dtype=bool)
    big = pc.greater(arr, pa.scalar(EXACT_INTEGER, arr.type))
    if pa.types.is_signed_integer(arr.type):
        big = pc.or_(big, pc.less(arr, pa.scalar(-EXACT_INTEGER, arr.type)))
    return np.asarray(pc.fill_null(big, False).to_numpy(zero_copy_only=False), dtype=bool)


def as_float(raw: RawTable, column: str, coll: Collector, decimal: str, *,
             allow_empty: bool, label: str | None = None,
             thousands: str | None = None) -> np.ndarray:
    """Column ``column`` as float64 (NaN where empty); non-numbers are reported.

    Text is read with the ``decimal`` mark, without the ``thousands`` separator when one is
    given, and an accounting negative ``(1,234.50)`` as -1234.5; vectorised over the column
    (pyarrow string kernels, then one cast). A non-number that would read with a thousands
    separator or the other decimal mark says which setting to change.

    The texts ``nan``, ``inf``, ``Infinity`` (any case, any sign), and a number too large for
    a float, are "not a finite number", never taken as an empty value, even where an empty
    value is allowed.
    """
    arr = column_of(raw, column, "number")
    label = label or column
    if pa.types.is_floating(arr.type) or pa.types.is_integer(arr.type) or pa.types.is_null(
            arr.type):
        bad_text = (_inexact_integers(arr) if pa.types.is_integer(arr.type)
                    else np.zeros(len(arr), dtype=bool))
        if bad_text.any():
            capped = _Capped(coll, f"whole numbers too large in column {label}")
            for i in np.flatnonzero(bad_text):
                capped.add(place(raw.name, raw.row_number(int(i)), label),
                           f"value is too large to read exactly: {arr[int(i)].as_py()} "
                           f"(a whole number beyond 2^53 = {EXACT_INTEGER})")
            capped.close()
            arr = pc.if_else(pa.chunked_array([bad_text]), pa.scalar(None, arr.type), arr)
        values = np.array(arr.cast(pa.float64()).to_numpy(zero_copy_only=False), dtype=float)
        # the reader parsed "nan" and "inf" texts as floats: only an empty cell is null
        null = np.asarray(arr.is_null().to_numpy(zero_copy_only=False), dtype=bool)
        not_finite = ~np.isfinite(values) & ~null
        shown = np.full(len(values), None, dtype=object)
        # the text is gone: an infinity was written as one or overflowed (1e400)
        shown[not_finite] = [repr(repr(float(v))) if np.isnan(v) else
                             f"{repr(float(v))!r} as read (written so, or a number too large "
                             "for a float: beyond about 1.8e308)" for v in values[not_finite]]
    else:
        text = arr.cast(pa.string())
        stripped = pc.utf8_trim_whitespace(text)
        values = _parse_numbers(stripped, decimal, thousands)
        blank = np.asarray(pc.fill_null(pc.equal(stripped, ""), True).to_numpy(
            zero_copy_only=False), dtype=bool)
        spelled = np.asarray(pc.fill_null(pc.match_substring_regex(
            stripped, f"^{NOT_FINITE_TEXT}$", ignore_case=True), False).to_numpy(
            zero_copy_only=False), dtype=bool)
        not_finite = (spelled | np.isinf(values)) & ~blank
        bad_text = np.isnan(values) & ~blank & ~not_finite
        values[blank] = np.nan
        shown = np.full(len(values), None, dtype=object)
        capped = _Capped(coll, f"non-numeric values in column {label}")
        for i in np.flatnonzero(bad_text):
            cell = text[int(i)].as_py()
            capped.add(place(raw.name, raw.row_number(int(i)), label),
                       f"not a number: {quoted(cell)}{separator_hint(cell, decimal, thousands)}")
        capped.close()
    if not_finite.any():
        capped = _Capped(coll, f"values that are not finite numbers in column {label}")
        for i in np.flatnonzero(not_finite):
            value = shown[i] if shown[i] is not None else repr(arr[int(i)].as_py())
            capped.add(place(raw.name, raw.row_number(int(i)), label),
                       f"value is not a finite number: {value}")
        capped.close()
        values = np.where(not_finite, np.nan, values)
    if not allow_empty:
        empty = np.isnan(values) & ~bad_text & ~not_finite
        capped = _Capped(coll, f"empty values in column {label}")
        for i in np.flatnonzero(empty):
            capped.add(place(raw.name, raw.row_number(int(i)), label), "value is empty")
        capped.close()
    return values


def _parse_numbers(stripped: pa.ChunkedArray, decimal: str, thousands: str | None
                   ) -> np.ndarray:
    """Trimmed number texts as float64, NaN where a text is empty or not a number."""
    num = stripped
    if thousands:
        # a separator only where it groups the whole part in threes: "1155087,64" with
        # thousands = "," is not 115,508,764 but a number written with another decimal
        # mark, and "0,012" not 12 (the text is refused, and the hint says why)
        misplaced = pc.and_(
            pc.fill_null(pc.match_substring(num, thousands), False),
            pc.invert(pc.fill_null(pc.match_substring_regex(
                num, grouped_pattern(thousands, decimal)), False)))
        num = pc.if_else(misplaced, pa.scalar("not a number"),
                         pc.replace_substring(num, thousands, ""))
    num = pc.replace_substring_regex(num, r"^\((.*)\)$", r"-\1")     # (12.5) -> -12.5
    if decimal == ",":
        num = pc.replace_substring(num, ",", ".")
    try:
        out = pc.cast(num, pa.float64()).to_numpy(zero_copy_only=False)
    except pa.ArrowInvalid:              # some text is not a number: NaN there
        out = pd.to_numeric(num.to_pandas(), errors="coerce")
    # a copy: the array may be read-only
    return np.array(out, dtype=float)


_GROUPED = re.compile(r"^\(?[+-]?\d{1,3}(?P<sep>[,.' ])\d{3}(?:(?P=sep)\d{3})*"
                      r"(?:(?P<dec>[.,])\d+)?\)?$", re.ASCII)   # digits 0-9 only, as read


def grouped_pattern(thousands: str, decimal: str) -> str:
    """A number whose whole part is grouped in threes by ``thousands`` (the first group one
    to three digits, not starting with 0), optionally with a fraction after ``decimal``, an
    exponent, a sign, or in accounting brackets: the only texts in which a thousands
    separator is taken (and dropped)."""
    sep, dec = re.escape(thousands), re.escape(decimal)
    return (rf"^\(?[+-]?[1-9]\d{{0,2}}(?:{sep}\d{{3}})+(?:{dec}\d*)?(?:[eE][+-]?\d+)?\)?$")


def separator_hint(text: str | None, decimal: str, thousands: str | None) -> str:
    """``; ... set thousands = ","`` when ``text`` reads as a number with a thousands
    separator (and a decimal mark other than ``decimal``); why a separator set is refused
    where it does not group the digits in threes; else ''."""
    if any(ch.isdigit() and not ch.isascii() for ch in text or ""):
        return "; its digits are not the digits 0-9 (full-width or another script's)"
    if thousands and thousands in (text or "") and not re.match(
            grouped_pattern(thousands, decimal), (text or "").strip(), re.ASCII):
        return (f'; the thousands separator "{thousands}" must group the digits before the '
                f'decimal mark "{decimal}" in threes (1{thousands}234{thousands}567{decimal}8)')
    m = _GROUPED.match((text or "").strip())
    if m is None or m.group("sep") == m.group("dec"):
        return ""
    sep, dec = m.group("sep"), m.group("dec")
    hint = f"thousands = {sep!r}" if sep != thousands else ""
    if dec is not None and dec != decimal:
        hint += (" and " if hint else "") + f"decimal = {dec!r}"
    return f"; it has thousands separators: set {hint}".replace("'", '"') if hint else ""


# how "not a number" and infinity are spelled in text (numpy, pandas, spreadsheets, C)
NOT_FINITE_TEXT = r"[+-]?(nan|inf|infinity)"


def date_codes(raw: RawTable, column: str, date_format: str,
               coll: Collector) -> tuple[np.ndarray, np.ndarray]:
    """Column ``column`` as a code per row into an array of distinct calendar days.

    Returns ``(codes, days)``: ``codes`` (int32, one per row) indexes ``days``
    (``datetime64[D]``), and is -1 where the date is empty or bad. Each distinct date text is
    parsed once, with ``date_format`` only: day-first and month-first are never guessed, and
    impossible dates (30 February) are errors. Spreadsheet and Parquet date cells are taken as
    calendar days: a timestamp's day where it was stamped (a time zone's own clock), its
    time of day dropped. A long returns file repeats each date for every security, so this is one
    pass over the rows (the CSV reader already delivers the column dictionary-encoded).
    """
    arr = column_of(raw, column, "date")
    if pa.types.is_date(arr.type) or pa.types.is_timestamp(arr.type):
        if pa.types.is_timestamp(arr.type) and arr.type.tz is not None:
            # the day on the clock where it was stamped: a month-end at 20:00 in New York is
            # 1 a.m. the next day in UTC, which shifted every date of a series by one period
            arr = pc.local_timestamp(arr)
        if not pa.types.is_date32(arr.type):       # date64 or timestamp: to calendar days
            arr = arr.cast(pa.date32())            # (the time of day dropped, not refused)
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
            capped.add(where, f"not a valid date in the format {date_format!r}: {quoted(text)}"
                       + date_format_hint(text, date_format))
    capped.close()
    return codes, parsed[good]


# formats a custodian's export often uses, tried on a date that fails, to say what to set
OTHER_DATE_FORMATS = (("%d/%m/%Y", "day-first"), ("%d.%m.%Y", "day-first"),
                      ("%d-%m-%Y", "day-first"), ("%m/%d/%Y", "month-first"),
                      ("%Y-%m-%d", "year-first"), ("%Y/%m/%d", "year-first"))


def date_format_hint(text: str, date_format: str) -> str:
    """``; it reads as day-first: set date_format = "%d/%m/%Y"`` when ``text`` is a date in
    one of :data:`OTHER_DATE_FORMATS` (the first that reads it), else ''."""
    for fmt, kind in OTHER_DATE_FORMATS:
        if fmt == date_format:
            continue
        try:
            dt.datetime.strptime(str(text).strip(), fmt)
        except ValueError:
            continue
        return f'; it reads as {kind}: set date_format = "{fmt}"'
    return ""


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


# the longest text cell (an id, a name, a sector) an input may hold: the pack prints these in
# tables, charts and the PDF, where a 20,000-character name held a build for minutes
LONGEST_CELL = 300


def as_text(raw: RawTable, column: str, coll: Collector, *, allow_empty: bool) -> np.ndarray:
    """Column ``column`` as text, each value trimmed and in Unicode NFC (see
    :func:`reporter.validate.text.normalise_id`); None where the cell is empty. A value over
    :data:`LONGEST_CELL` characters is an error."""
    values = np.array([None if v is None else normalise_id(str(v))
                       for v in column_of(raw, column, "text").cast(pa.string()).to_pylist()],
                      dtype=object)
    capped = _Capped(coll, f"overlong values in column {column}")
    for i in np.flatnonzero([v is not None and len(v) > LONGEST_CELL for v in values]):
        capped.add(place(raw.name, raw.row_number(int(i)), column),
                   f"{len(values[i]):,} characters long; at most {LONGEST_CELL}")
    capped.close()
    if not allow_empty:
        capped = _Capped(coll, f"empty values in column {column}")
        for i in np.flatnonzero([v is None or v == "" for v in values]):
            capped.add(place(raw.name, raw.row_number(int(i)), column), "value is empty")
        capped.close()
    return values



def _dictionary(column: pa.ChunkedArray) -> pa.DictionaryArray:
    """A text column as one dictionary array (the CSV reader may already deliver one)."""
    if pa.types.is_dictionary(column.type):
        return pa.table({"c": column}).unify_dictionaries().column(0).combine_chunks()
    return pc.dictionary_encode(column.cast(pa.string())).combine_chunks()

