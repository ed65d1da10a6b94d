"""Read an .xlsx workbook into a raw table (:func:`reporter.readers.read_input` picks this
reader by extension): the first visible sheet or the one named, date cells as calendar days,
the text columns as text. A workbook that would unpack too far is refused unread."""

from __future__ import annotations

import datetime as dt
import zipfile

import pyarrow as pa

from reporter.config import InputSpec
from reporter.errors import InputError, Problem
from reporter.raw_table import (
    TEXT_COLUMNS,
    RawTable,
    _drop_blank_rows,
    _refuse_duplicate_columns,
)

# every input names its dates column so (returns, market, risk-free rate, benchmark, cash
# flows, factors, prices)
DATE_COLUMN = "date"

# an .xlsx file is a zip archive of XML parts: a workbook whose parts unpack to more than
# this, or one large part packed more tightly than any sheet of figures (numeric sheet XML
# packs about 5-30 to 1), is refused before it is unpacked. A 1 MB file unpacking to 1 GB
# took 2.4 GB of memory to read. Data this size belongs in CSV or Parquet.
XLSX_MAX_UNPACKED = 512 << 20
XLSX_MAX_RATIO, XLSX_RATIO_FROM = 200, 16 << 20


def _refuse_zip_bomb(spec: InputSpec) -> None:
    """Refuse an .xlsx whose parts unpack too far (the sizes its zip directory declares,
    which also bound what is read); a file that is not a zip archive is left to openpyxl."""
    try:
        with zipfile.ZipFile(spec.path) as zf:
            parts = zf.infolist()
    except (zipfile.BadZipFile, OSError, ValueError):
        return
    total = sum(i.file_size for i in parts)
    tight = [i for i in parts if i.file_size > XLSX_RATIO_FROM
             and i.file_size > XLSX_MAX_RATIO * max(i.compress_size, 1)]
    if total > XLSX_MAX_UNPACKED:
        why = (f"its parts unpack to {total / 2**20:,.1f} MB (at most "
               f"{XLSX_MAX_UNPACKED / 2**20:,.1f} MB)")
    elif tight:
        part = max(tight, key=lambda i: i.file_size / max(i.compress_size, 1))
        why = (f"its part {part.filename} unpacks {part.file_size // max(part.compress_size, 1):,}"
               f" to 1, to {part.file_size / 2**20:,.0f} MB (a sheet of figures packs at most "
               f"about 30 to 1; refused above {XLSX_MAX_RATIO})")
    else:
        return
    raise InputError([Problem(spec.display, f"refused unread: {why}; save the data as CSV "
                              "or Parquet")])


def read_xlsx(spec: InputSpec) -> RawTable:
    from openpyxl import load_workbook

    notes: tuple[Problem, ...] = ()
    _refuse_zip_bomb(spec)
    try:
        wb = load_workbook(spec.path, read_only=True, data_only=True)
    except Exception as exc:      # noqa: BLE001 - whatever a damaged archive raises inside
        raise InputError([_not_a_workbook(spec, exc)]) from None
    try:
        if spec.sheet is not None:
            if spec.sheet not in wb.sheetnames:
                raise InputError([Problem(spec.display, f"no sheet named {spec.sheet!r}; sheets: "
                                          + ", ".join(wb.sheetnames))])
            ws = wb[spec.sheet]
        else:
            ws, notes = _first_visible_sheet(spec, wb)
        rows = list(ws.iter_rows(values_only=True))
    except InputError:
        raise
    except Exception as exc:      # noqa: BLE001 - a sheet part missing or damaged
        raise InputError([_not_a_workbook(spec, exc)]) from None
    finally:
        wb.close()
    if not rows or rows[0] is None:
        raise InputError([Problem(spec.display, "the sheet is empty")])
    header = ["" if h is None else str(h).strip() for h in rows[0]]
    _refuse_duplicate_columns(spec.display, [h for h in header if h])  # unnamed: skipped
    body = rows[1:]
    columns = {}
    for j, name in enumerate(header):
        if not name:
            continue
        values = [r[j] if j < len(r) else None for r in body]
        columns[name] = _xlsx_column(values, force_text=name in TEXT_COLUMNS,
                                     is_date=name == DATE_COLUMN)
    table, rows = _drop_blank_rows(pa.table(columns), first_row=2)
    return RawTable(spec.display, table, 2, "xlsx", rows, notes)


def _not_a_workbook(spec: InputSpec, exc: Exception) -> Problem:
    """One line for an .xlsx file that openpyxl cannot open: empty, renamed, or damaged
    (openpyxl raises BadZipFile, InvalidFileException, KeyError and others for these)."""
    empty = spec.path.stat().st_size == 0
    why = "the file is empty" if empty else f"{type(exc).__name__}: {_first_line(exc)}"
    return Problem(spec.display, f"not a readable .xlsx workbook ({why})")


def _first_line(exc: Exception) -> str:
    text = str(exc).strip().strip('"')
    return text.splitlines()[0] if text else "no detail"


def _first_visible_sheet(spec: InputSpec, wb) -> tuple[object, tuple[Problem, ...]]:
    """The first sheet that is not hidden, and a warning naming the hidden sheets skipped
    before it (a hidden first sheet is often last quarter's figures). Every sheet hidden is
    an error."""
    hidden = []
    for ws in wb.worksheets:
        if ws.sheet_state == "visible":
            if not hidden:
                return ws, ()
            plural = "s" if len(hidden) > 1 else ""
            names = ", ".join(repr(n) for n in hidden)
            return ws, (Problem(spec.display, f"skipped hidden sheet{plural} {names}; read "
                                f"sheet {ws.title!r}", "warning"),)
        hidden.append(ws.title)
    raise InputError([Problem(spec.display, "every sheet is hidden ("
                              + ", ".join(repr(n) for n in hidden)
                              + "); unhide the sheet to read, or name it with sheet = ...")])


def _xlsx_column(values: list, force_text: bool, is_date: bool = False) -> pa.Array:
    """One column's cells as an Arrow array. In the date column (``is_date``) a date cell
    with a time of day is that calendar day (README: "its time of day is dropped"); in any
    other column only a cell at midnight is a date, and one with a time keeps it as text."""
    def text(v):
        if v is None:
            return None
        if isinstance(v, dt.datetime):
            keep_time = v.time() != dt.time(0) and not is_date
            return v.isoformat() if keep_time else v.date().isoformat()
        if isinstance(v, dt.date):
            return v.isoformat()
        if isinstance(v, float) and v.is_integer():
            return str(int(v))
        return str(v)

    if all(v is None or _is_calendar_date(v, is_date) for v in values) and any(
            v is not None for v in values):
        # real date cells: keep them as dates, so that date_format (for text dates) is not
        # applied to the ISO text they would otherwise become
        return pa.array([None if v is None else _as_date(v) for v in values], type=pa.date32())
    if not force_text and all(v is None or (isinstance(v, int | float) and not isinstance(v, bool))
                              for v in values):
        return pa.array([None if v is None else float(v) for v in values], type=pa.float64())
    return pa.array([text(v) for v in values], type=pa.string())


def _is_calendar_date(v, any_time: bool = False) -> bool:
    """A date cell, or a datetime cell at midnight (how spreadsheets store dates); with
    ``any_time`` (the date column) a datetime cell at any time of day."""
    if isinstance(v, dt.datetime):
        return any_time or (v.time() == dt.time(0) and v.tzinfo is None)
    return isinstance(v, dt.date)


def _as_date(v) -> dt.date:
    return v.date() if isinstance(v, dt.datetime) else v
