"""Read CSV, XLSX and Parquet files into raw tables; the reader is picked by extension.

No business rules live here: a reader returns the file's columns as a
:class:`pyarrow.Table` and says where its first data row sits, so that later
stages can name rows the way the user sees them (a CSV's line number, a
spreadsheet's row number, a Parquet file's 1-based row).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path

import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from reporter.config import InputSpec
from reporter.errors import InputError, Problem

# Columns that are identifiers or labels: always read as text, never inferred.
TEXT_COLUMNS = ("date", "security_id", "name", "sector", "asset_class", "currency", "country")
SUPPORTED = (".csv", ".txt", ".xlsx", ".parquet", ".pq")


@dataclass(frozen=True)
class RawTable:
    """A file's columns as read, before any validation."""

    name: str            # the path as written in pack.toml
    table: pa.Table
    first_row: int       # row number of the first data row as the user sees it
    format: str          # "csv" | "xlsx" | "parquet"

    def row_number(self, index: int) -> int:
        """The user-visible row number of 0-based data row ``index``."""
        return self.first_row + index


def read_input(spec: InputSpec) -> RawTable:
    """Read one input file. Raises :class:`InputError` if the file cannot be read at all."""
    suffix = spec.path.suffix.lower()
    try:
        if suffix in (".csv", ".txt"):
            return _read_csv(spec)
        if suffix == ".xlsx":
            return _read_xlsx(spec)
        if suffix in (".parquet", ".pq"):
            return RawTable(spec.display, pq.read_table(spec.path), 1, "parquet")
    except InputError:
        raise
    except (pa.ArrowException, OSError, ValueError, KeyError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError([Problem(spec.display, f"cannot be read: {first}")]) from None
    raise InputError([Problem(spec.display,
                              f"unsupported file type {suffix!r}; use one of "
                              + ", ".join(SUPPORTED))])


def _read_csv(spec: InputSpec) -> RawTable:
    header = _csv_header(spec.path, spec.delimiter)
    if not header:
        raise InputError([Problem(spec.display, "the file is empty")])
    dupes = sorted({c for c in header if header.count(c) > 1})
    if dupes:
        raise InputError([Problem(f"{spec.display}:1:{c}", "column name appears more than once")
                          for c in dupes])
    table = pacsv.read_csv(
        spec.path,
        read_options=pacsv.ReadOptions(use_threads=True, block_size=1 << 24),
        parse_options=pacsv.ParseOptions(delimiter=spec.delimiter),
        convert_options=pacsv.ConvertOptions(
            column_types={c: pa.string() for c in header if c in TEXT_COLUMNS},
            decimal_point=spec.decimal,
            strings_can_be_null=True,
        ),
    )
    return RawTable(spec.display, table, 2, "csv")


def _csv_header(path: Path, delimiter: str) -> list[str]:
    with open(path, encoding="utf-8-sig", newline="") as fh:
        line = fh.readline()
    import csv

    rows = list(csv.reader([line], delimiter=delimiter))
    return [c.strip() for c in rows[0]] if rows and rows[0] else []


def _read_xlsx(spec: InputSpec) -> RawTable:
    from openpyxl import load_workbook

    wb = load_workbook(spec.path, read_only=True, data_only=True)
    try:
        if spec.sheet is not None:
            if spec.sheet not in wb.sheetnames:
                raise InputError([Problem(spec.display, f"no sheet named {spec.sheet!r}; sheets: "
                                          + ", ".join(wb.sheetnames))])
            ws = wb[spec.sheet]
        else:
            ws = wb.worksheets[0]
        rows = list(ws.iter_rows(values_only=True))
    finally:
        wb.close()
    if not rows or rows[0] is None:
        raise InputError([Problem(spec.display, "the sheet is empty")])
    header = ["" if h is None else str(h).strip() for h in rows[0]]
    body = [r for r in rows[1:]]
    columns = {}
    for j, name in enumerate(header):
        if not name:
            continue
        values = [r[j] if j < len(r) else None for r in body]
        columns[name] = _xlsx_column(values, force_text=name in TEXT_COLUMNS)
    return RawTable(spec.display, pa.table(columns), 2, "xlsx")


def _xlsx_column(values: list, force_text: bool) -> pa.Array:
    def text(v):
        if v is None:
            return None
        if isinstance(v, dt.datetime):
            return v.date().isoformat() if v.time() == dt.time(0) else v.isoformat()
        if isinstance(v, dt.date):
            return v.isoformat()
        if isinstance(v, float) and v.is_integer():
            return str(int(v))
        return str(v)

    if not force_text and all(v is None or (isinstance(v, int | float) and not isinstance(v, bool))
                              for v in values):
        return pa.array([None if v is None else float(v) for v in values], type=pa.float64())
    return pa.array([text(v) for v in values], type=pa.string())
