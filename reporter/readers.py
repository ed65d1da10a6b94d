"""Read CSV, XLSX and Parquet files into raw tables; the reader is picked by extension.

No business rules live here: a reader returns the file's columns as a
:class:`pyarrow.Table` and says where its first data row sits, so that later
stages can name rows the way the user sees them (a CSV's line number, a
spreadsheet's row number, a Parquet file's 1-based row).
"""

from __future__ import annotations

import contextlib
import csv
import itertools
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from reporter.config import InputSpec
from reporter.errors import InputError, Problem, place
from reporter.raw_table import (
    TEXT_COLUMNS,
    RawTable,
    _drop_blank_rows,
    _refuse_duplicate_columns,
)

SUPPORTED = (".csv", ".txt", ".xlsx", ".parquet", ".pq")
MAX_BAD_LINES = 10
CSV_BLOCK_BYTES = 1 << 22    # the CSV reader's block: one column chunk per block


def read_input(spec: InputSpec) -> RawTable:
    """Read one input file. Raises :class:`InputError` if the file cannot be read at all."""
    suffix = spec.path.suffix.lower()
    try:
        if suffix in (".csv", ".txt"):
            return _read_csv(spec)
        if suffix == ".xlsx":
            from reporter.readers_xlsx import read_xlsx

            return read_xlsx(spec)
        if suffix in (".parquet", ".pq"):
            # a column named twice is refused by name before the read (pyarrow's own read
            # of such a file may fail with "Multiple matches for FieldRef ...")
            _refuse_duplicate_columns(spec.display, pq.read_schema(spec.path).names)
            table = pq.read_table(spec.path)
            return RawTable(spec.display, table, 1, "parquet")
    except InputError:
        raise
    except UnicodeDecodeError as exc:
        raise InputError([Problem(spec.display, "not a readable text file: it is not UTF-8 "
                                  f"(byte 0x{exc.object[exc.start]:02x})")]) from None
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
    _refuse_duplicate_columns(spec.display, header)
    table, bad = _read_csv_body(spec, header, use_threads=True)
    if bad:
        if any(row.number is None for row in bad):
            # a multi-threaded read does not know line numbers: re-read to name the lines
            table, bad = _read_csv_body(spec, header, use_threads=False)
        problems = [Problem(place(spec.display, row.number),
                            f"expected {row.expected_columns} fields (delimiter "
                            f"{spec.delimiter!r}), found {row.actual_columns}")
                    for row in bad[:MAX_BAD_LINES]]
        if len(bad) > MAX_BAD_LINES:
            problems.append(Problem(spec.display, f"... and {len(bad) - MAX_BAD_LINES} more "
                                    "lines with the wrong number of fields"))
        raise InputError(problems)
    table = _drop_trailing_empty_columns(table)
    lines = None
    if _has_line_breaks(table):
        lines = _record_lines(spec, table.num_rows)
        _refuse_swallowed_lines(spec, table, lines)
    if lines is None and table.num_rows:
        _refuse_open_last_line(spec, header, table.num_rows + 1)
    table, rows = _drop_blank_rows(table, first_row=2, lines=lines)
    return RawTable(spec.display, table, 2, "csv", rows)


def _has_line_breaks(table: pa.Table) -> bool:
    """Whether any text value holds a line break (only a quoted value can): then a record
    may span several lines of the file, and row numbers must be counted from the file."""
    for column in table.columns:
        if pa.types.is_dictionary(column.type):     # its distinct values only: cheap
            values = pa.chunked_array([c.dictionary for c in column.chunks], pa.string())
        elif pa.types.is_string(column.type):
            values = column
        else:
            continue
        if len(values) and pc.any(pc.match_substring_regex(values, "[\\r\\n]")).as_py():
            return True
    return False


def _text_values(column: pa.ChunkedArray) -> pa.ChunkedArray | None:
    """A column's values as strings (a dictionary column decoded), or None for another type."""
    if pa.types.is_dictionary(column.type):
        return column.cast(pa.string())
    return column if pa.types.is_string(column.type) else None


def _refuse_swallowed_lines(spec: InputSpec, table: pa.Table, lines: np.ndarray | None
                            ) -> None:
    """Refuse the first value that holds both a line break and the delimiter: the mark of a
    quote closed lines after it was opened, which joins the lines between into one value and
    silently drops their rows (``"Alpha plc,...`` on one line and ``Gamma plc",...`` two
    lines on make one holding of three). The merged record keeps the right number of fields
    only when the quote closes in the column it opened in, and then the value holds the
    delimiters of the lines it swallowed. A quoted name over two lines with no delimiter in
    it (an address line, say) is a value as written, and stays. ``lines``: each record's
    first line in the file, or None if not known."""
    first: tuple[int, str, str] | None = None
    for name, column in zip(table.column_names, table.columns, strict=True):
        values = _text_values(column)
        if values is None:
            continue
        both = pc.and_(pc.match_substring_regex(values, "[\\r\\n]"),
                       pc.match_substring(values, spec.delimiter))
        hit = pc.index(both, True).as_py()
        if hit >= 0 and (first is None or hit < first[0]):
            first = (hit, name, values[hit].as_py())
    if first is None:
        return
    row, column, value = first
    breaks = value.count("\n") + value.replace("\r\n", "\n").count("\r")
    if lines is None:
        where, span = place(spec.display, None, column), f"record {row + 1}"
    else:
        start = int(lines[row])
        where = place(spec.display, start, column)
        span = f"lines {start} to {start + breaks}"
    raise InputError([Problem(where, f"a quoted value runs over {span} and holds the "
                              f"delimiter {spec.delimiter!r}: a quote is misplaced, and the "
                              "lines between would be read as one value and their rows lost; "
                              "close the quote on the line it opens, or remove it")])


def _record_lines(spec: InputSpec, n_records: int) -> np.ndarray | None:
    """The file line on which each data record starts (the header is line 1), counted by
    Python's csv reader, which follows quoted values across lines. Only called for a file
    with a line break inside a value (rare, and then the file is read twice)."""
    starts = []
    record: list[str] = []
    with _no_field_limit(), open(spec.path, encoding="utf-8-sig", newline="") as fh:
        reader = csv.reader(fh, delimiter=spec.delimiter)
        last = 0
        for fields in reader:
            record = fields                     # the last record is wanted below
            starts.append(last + 1)
            last = reader.line_num
    if starts and _ends_inside_quotes(spec, starts[-1]):
        raise _unclosed_quote(spec, _csv_header(spec.path, spec.delimiter), starts[-1], record)
    starts = starts[1:]                                # the header record
    return np.array(starts, dtype=np.int64) if len(starts) == n_records else None


def _refuse_open_last_line(spec: InputSpec, header: list[str], line: int) -> None:
    """A quote opened on the last line of a file that does not end in a line break holds no
    line break, so :func:`_record_lines` does not look: refuse it here (``line``: that last
    line's number, every record being one line)."""
    with open(spec.path, "rb") as fh:
        fh.seek(max(fh.seek(0, 2) - (1 << 16), 0))
        tail = fh.read()
    if not tail or tail.endswith((b"\n", b"\r")):
        return
    text = tail.rsplit(b"\n", 1)[-1].decode("utf-8", errors="replace")
    try:
        fields = next(csv.reader([text], delimiter=spec.delimiter, strict=True), [])
    except csv.Error as exc:
        if "unexpected end of data" not in str(exc):
            return
        fields = next(csv.reader([text], delimiter=spec.delimiter), [])
        raise _unclosed_quote(spec, header, line, fields) from None


@contextlib.contextmanager
def _no_field_limit():
    """The csv module's field size limit lifted for a while: an unclosed quote makes one
    field of the rest of the file, which must be read to find where it opened."""
    limit = csv.field_size_limit()
    csv.field_size_limit(sys.maxsize)
    try:
        yield
    finally:
        csv.field_size_limit(limit)


def _unclosed_quote(spec: InputSpec, header: list[str], line: int,
                    fields: list[str]) -> InputError:
    """The one problem of a quote opened on ``line`` and never closed; ``fields``: that
    record's fields as read, the last being the one the quote opens."""
    k = len(fields) - 1
    return InputError([Problem(place(spec.display, line,
                                     header[k] if 0 <= k < len(header) else None),
                               "a quoted field opened on this line is never closed (the "
                               "quote runs to the end of the file); close it or remove it")])


def _ends_inside_quotes(spec: InputSpec, line: int) -> bool:
    """Whether the record starting on ``line`` (the file's last) opens a quoted field that the
    file never closes: read strictly from that line, it ends inside the quotes."""
    with _no_field_limit(), open(spec.path, encoding="utf-8-sig", newline="") as fh:
        rest = itertools.islice(fh, line - 1, None)
        try:
            for _ in csv.reader(rest, delimiter=spec.delimiter, strict=True):
                pass
        except csv.Error as exc:
            return "unexpected end of data" in str(exc)
    return False


def _drop_trailing_empty_columns(table: pa.Table) -> pa.Table:
    """Drop the nameless, empty column that a delimiter at the end of every line makes (a
    common habit of spreadsheet and custodian exports). A nameless column with any value in
    it is kept, and validation reports it as an unknown column."""
    while table.num_columns and not table.column_names[-1].strip() \
            and table.column(table.num_columns - 1).null_count == table.num_rows:
        table = table.remove_column(table.num_columns - 1)
    return table


def csv_options(spec: InputSpec, header: list[str], bad: list, column_types: dict, *,
                block_size: int, use_threads: bool = True) -> dict:
    """pyarrow's read, parse and convert options for a data file's lines under ``header``
    (the header line skipped): the pack's delimiter and decimal point, blank lines kept, only
    an empty field null, and each malformed line appended to ``bad`` and skipped."""
    def on_bad_row(row) -> str:
        bad.append(row)
        return "skip"

    return {
        "read_options": pacsv.ReadOptions(use_threads=use_threads, block_size=block_size,
                                          column_names=header, skip_rows=1),
        "parse_options": pacsv.ParseOptions(delimiter=spec.delimiter, ignore_empty_lines=False,
                                            invalid_row_handler=on_bad_row),
        "convert_options": pacsv.ConvertOptions(column_types=column_types,
                                                decimal_point=spec.decimal,
                                                strings_can_be_null=True, null_values=[""]),
    }


def _read_csv_body(spec: InputSpec, header: list[str], *, use_threads: bool):
    """Read the data lines under ``header``; returns the table and the malformed lines.

    The header's names are passed in (stripped of spaces), so that ``date, return`` gives a
    column ``return``. Blank lines are kept as all-null rows here (see :func:`_drop_blank_rows`)
    so that row numbers stay the file's line numbers. Only an empty field is null: text such as
    ``NA`` or ``null`` is kept as written (a security id may well be ``NA``), and in a number
    column it is reported as not a number.
    """
    bad: list = []
    table = pacsv.read_csv(spec.path, **csv_options(
        spec, header, bad, {c: _text_type(c) for c in header if c in TEXT_COLUMNS},
        block_size=CSV_BLOCK_BYTES, use_threads=use_threads))
    return table, bad


# Ids and dates repeat on every row of a long returns file: pyarrow builds their dictionary
# while it parses, which is much cheaper than building millions of strings (or parsing
# millions of dates) and encoding them after. Validation then parses each distinct date
# text once, with the pack's date_format (see validate.date_codes).
_CODED_TYPE = pa.dictionary(pa.int32(), pa.string())
_CODED_COLUMNS = ("date", "security_id")


def _text_type(column: str) -> pa.DataType:
    return _CODED_TYPE if column in _CODED_COLUMNS else pa.string()


def _csv_header(path: Path, delimiter: str) -> list[str]:
    with open(path, encoding="utf-8-sig", newline="") as fh:
        line = fh.readline()
    rows = list(csv.reader([line], delimiter=delimiter))
    return [c.strip() for c in rows[0]] if rows and rows[0] else []
