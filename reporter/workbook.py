"""``results/pack.xlsx``: the officer's workbook, one sheet per results table.

A first "About" sheet (pack, period, build time, input fingerprint, tool version, the
cautions), then one sheet per results table of the build: securities, portfolio (key and
value), risk contributions, period returns, limits, changes, and for a fund the mandates
and the overlap between them. The rolling betas stay in their CSV only (a daily history of
2,000 holdings is 4.5 million rows, past a worksheet's 1,048,576).

Each table sheet has a units line in row 1 (``annualised`` for a column whose name carries
``_ann``, ``per period`` for the other returns, alphas, volatilities and per-period ratios),
the column names of the CSV in row 2, its rows from row 3; both header rows are frozen and an
autofilter sits on row 2. Decimal returns, weights, shares and volatilities are shown as
percentages, betas, t-statistics and ratios as ``0.00``; the stored value is the full float.

Text is written as text, never as a formula (OWASP guidance on CSV and formula injection):
every text cell is a string cell (``t="s"``), and one that begins with ``=``, ``+``, ``-``,
``@``, a tab, a carriage return or an apostrophe also carries the "quote prefix" style, so
that editing it in a spreadsheet keeps it text. The text is the original (the CSVs' escape
apostrophe is not added). Characters that XML 1.0 cannot hold (C0 controls other than tab
and line feed; carriage return too, which XML would read as a line feed) are written as
ECMA-376's ``_xHHHH_`` escape, which Excel shows as the character; openpyxl reads the escape
back as written (in the inline strings written here).

XlsxWriter writes the file (``constant_memory``: row by row, strings inline, a fraction of
openpyxl's time on a large pack; see BENCHMARKS.md).

The file is byte-identical for the same inputs and build time: the document's created and
modified times are the build time, and the zip is rewritten with every entry stamped with
the build time, in a fixed order.
"""

from __future__ import annotations

import datetime as dt
import io
import math
import tempfile
import zipfile

import numpy as np
import pandas as pd
import xlsxwriter

from reporter import __version__
from reporter.context import FUND_CAUTION
from reporter.csvsafe import needs_escape
from reporter.jsonvalues import json_ready
from reporter.workbook_format import (
    DATE,
    INTEGER,
    MAX_WIDTH,
    MIN_WIDTH,
    PERCENT,
    PERIOD_RETURNS,
    PERIOD_WORD,
    Sheet,
    number_format,
    sheet_text,
    unit_note,
)

# --- cells ---------------------------------------------------------------------------------

CELL_MAX = 32767                           # characters a worksheet cell holds (Excel's limit)
CUT_NOTE = " [cut here: a cell holds 32,767 characters; the full text is in the CSV or JSON]"

class _Formats:
    """The workbook's cell formats, one object per combination (XlsxWriter shares them)."""

    def __init__(self, wb) -> None:
        self.wb, self.made = wb, {}

    def __call__(self, num: str | None = None, *, quote: bool = False, bold: bool = False,
                 italic: bool = False, wrap: bool = False):
        key = (num, quote, bold, italic, wrap)
        if key not in self.made:
            spec = {"num_format": num, "quote_prefix": quote, "bold": bold, "italic": italic,
                    "text_wrap": wrap, "valign": "top" if wrap else None}
            self.made[key] = self.wb.add_format({k: v for k, v in spec.items() if v})
        return self.made[key]


def _put(ws, fmt: _Formats, r: int, c: int, value, num: str | None, **style) -> None:
    """Write ``value`` at (``r``, ``c``), zero-based: NaN and None as an empty cell (blank
    with its style when it has one), text as text."""
    if value is None or value is pd.NaT or (isinstance(value, float | np.floating)
                                            and math.isnan(value)):
        if style:
            ws.write_blank(r, c, None, fmt(**style))
        return
    if isinstance(value, bool | np.bool_):
        ws.write_boolean(r, c, bool(value), fmt(**style) if style else None)
    elif isinstance(value, int | np.integer):
        ws.write_number(r, c, int(value), fmt(num or INTEGER, **style))
    elif isinstance(value, float | np.floating):
        v = float(value)
        if math.isinf(v):                  # no number a worksheet holds; as the CSV writes it
            _text(ws, fmt, r, c, "inf" if v > 0 else "-inf", **style)
        else:
            ws.write_number(r, c, v, fmt(num, **style) if num or style else None)
    elif isinstance(value, pd.Timestamp | np.datetime64 | dt.datetime):
        ws.write_datetime(r, c, pd.Timestamp(value).to_pydatetime(), fmt(DATE, **style))
    elif isinstance(value, dt.date):
        ws.write_datetime(r, c, value, fmt(DATE, **style))
    elif isinstance(value, list | tuple):
        _text(ws, fmt, r, c, "; ".join(str(v) for v in value), **style)
    else:
        _text(ws, fmt, r, c, str(value), **style)


def _text(ws, fmt: _Formats, r: int, c: int, text: str, **style) -> None:
    """A string cell (``t="s"``), never a formula whatever its first character; XlsxWriter
    writes the ``_xHHHH_`` escapes of :func:`sheet_text` itself (and CR as ``_x000D_``)."""
    if not text:                           # as openpyxl wrote it: no string, an empty cell
        if style:
            ws.write_blank(r, c, None, fmt(**style))
        return
    if len(text) > CELL_MAX:               # XlsxWriter would cut it without a word
        text = text[:CELL_MAX - len(CUT_NOTE)] + CUT_NOTE
    quote = needs_escape(text)
    ws.write_string(r, c, text, fmt(quote=quote, **style) if quote or style else None)


def _width(values: list[str]) -> float:
    longest = max((len(v) for v in values), default=0)
    return float(min(MAX_WIDTH, max(MIN_WIDTH, longest + 2)))


def _set_width(ws, c: int, width: float) -> None:
    """Column ``c``'s width as ``width`` characters in the file: XlsxWriter adds 5/7 of a
    character of padding to what it is given (its docs, "set_column"), taken off here."""
    ws.set_column(c, c, width - 5 / 7)


def _shown(value) -> str:
    if isinstance(value, float | np.floating):
        return "" if not np.isfinite(value) else f"{value:.4g}"
    return "" if value is None else str(value)


def _float_writer(ws, fmt: _Formats, c: int, num: str | None):
    """The writer of a float column's cells (the common case, kept out of :func:`_put`'s
    type tests)."""
    f = fmt(num) if num else None
    write = ws.write_number

    def put(r: int, v: float) -> None:
        if v != v:
            return
        if v in (math.inf, -math.inf):
            _text(ws, fmt, r, c, "inf" if v > 0 else "-inf")
        else:
            write(r, c, v, f)
    return put


def _write_table(ws, fmt: _Formats, sheet: Sheet, period: str) -> None:
    """Row by row (the workbook keeps one row in memory, ``constant_memory``)."""
    df = sheet.table
    cols = [str(c) for c in df.columns]
    for j, name in enumerate(cols):
        note = "over the row's period, on its basis" if name in sheet.returns else unit_note(
            name, period)
        _text(ws, fmt, 0, j, note, italic=True)
    for j, name in enumerate(cols):
        _text(ws, fmt, 1, j, name, bold=True)
    formats = [PERCENT if c in sheet.returns else number_format(c) for c in cols]
    keyed = {cols.index(c) for c in sheet.keyed if c in cols}
    keys = df[sheet.key].tolist() if sheet.key in df.columns else [None] * len(df)
    writers = [_float_writer(ws, fmt, j, formats[j])
               if df.dtypes.iloc[j] == np.float64 and j not in keyed else None
               for j in range(len(cols))]
    columns = [df.iloc[:, j].tolist() for j in range(len(cols))]
    for r, (key, row) in enumerate(zip(keys, zip(*columns, strict=True), strict=True), start=2):
        row_fmt = number_format(str(key)) if sheet.key in df.columns else None
        for j, (put, value) in enumerate(zip(writers, row, strict=True)):
            if put is not None:
                put(r, value)
            else:
                _put(ws, fmt, r, j, value, row_fmt if j in keyed else formats[j])
    ws.freeze_panes(2, 0)                                   # rows 1 and 2: A3
    ws.autofilter(1, 0, max(len(df) + 1, 1), max(len(cols), 1) - 1)
    sample = df.head(500)
    for j, name in enumerate(cols):
        _set_width(ws, j, _width([name, *(_shown(v) for v in sample.iloc[:, j].tolist())]))


def _write_about(ws, fmt: _Formats, about: list[tuple[str, object]]) -> None:
    _set_width(ws, 0, 30)
    _set_width(ws, 1, 110)
    for r, (label, value) in enumerate(about):
        _text(ws, fmt, r, 0, label, bold=True, wrap=True)
        _put(ws, fmt, r, 1, value, None, wrap=True)


def workbook_bytes(about: list[tuple[str, object]], sheets: list[Sheet], built: dt.datetime,
                   *, title: str = "", period: str = "period") -> bytes:
    """The workbook as XLSX bytes: an "About" sheet of ``about`` (label, value) rows, then
    each of ``sheets``. ``built`` (the build time, UTC) is the document's created and
    modified time and every zip entry's time, so equal inputs give equal bytes."""
    when = built.astimezone(dt.UTC).replace(tzinfo=None) if built.tzinfo else built
    buf = io.BytesIO()
    # constant_memory spools each sheet's rows to a file: in a folder of its own, removed
    # whatever happens (XlsxWriter removes its files only when it closes the workbook)
    with tempfile.TemporaryDirectory(prefix="reporter-xlsx-") as tmp:
        wb = xlsxwriter.Workbook(buf, {"constant_memory": True, "tmpdir": tmp,
                                       "strings_to_formulas": False, "strings_to_numbers": False,
                                       "strings_to_urls": False})
        fmt = _Formats(wb)
        _write_about(wb.add_worksheet("About"), fmt, about)
        for sheet in sheets:
            _write_table(wb.add_worksheet(sheet.name), fmt, sheet, period)
        props = {"author": f"reporter {__version__}", "created": when}
        if title:
            props["title"] = sheet_text(title)
        wb.set_properties(props)
        wb.close()
    return fixed_zip(buf.getvalue(), when)


def fixed_zip(data: bytes, when: dt.datetime) -> bytes:
    """The zip ``data`` rewritten with every entry stamped ``when`` (clamped to what a zip can
    hold, 1980-2107), the same permissions and system, and ``[Content_Types].xml`` first, then
    the rest in name order: :mod:`zipfile` otherwise stamps each entry with the clock."""
    stamp = max(min(when.timetuple()[:6], (2107, 12, 31, 23, 59, 58)), (1980, 1, 1, 0, 0, 0))
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(data)) as src, zipfile.ZipFile(out, "w") as dst:
        names = sorted(src.namelist(), key=lambda n: (n != "[Content_Types].xml", n))
        for name in names:
            info = zipfile.ZipInfo(name, date_time=stamp)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.create_system = 3
            info.external_attr = 0o644 << 16
            dst.writestr(info, src.read(name), compresslevel=6)
    return out.getvalue()


# --- from a build --------------------------------------------------------------------------

def flatten(doc, prefix: str = "") -> list[tuple[str, object]]:
    """A JSON document's scalars as ``(dotted key, value)`` in key order; a list of scalars
    joined by ``; ``; a list of records is left out (it gets a sheet of its own)."""
    out: list[tuple[str, object]] = []
    if isinstance(doc, dict):
        for k in sorted(doc):
            out += flatten(doc[k], f"{prefix}{k}.")
        return out
    key = prefix[:-1]
    if isinstance(doc, list):
        if any(isinstance(v, dict) for v in doc):
            return []
        return [(key, "; ".join(str(v) for v in doc))]
    return [(key, doc)]


def key_value(name: str, doc: dict) -> Sheet:
    return Sheet(name, pd.DataFrame(flatten(doc), columns=["key", "value"]),
                 key="key", keyed=("value",))


def _records(records: list[dict], first: dict | None = None) -> pd.DataFrame:
    rows = [(first or {}) | {k: v for k, v in r.items() if not isinstance(v, list | dict)}
            for r in records]
    return pd.DataFrame(rows)


def limits_sheets(doc: dict) -> list[Sheet]:
    """``results/limits.json`` as sheets: the checks, the holdings and sectors each check
    flags, and the rest (margin, counts, beta mix, notes) as key and value."""
    keyed = ("value", "threshold", "watch_from")
    out = [Sheet("limits", _records(doc["limits"]), key="limit", keyed=keyed)]
    for part in ("holdings", "sectors"):
        rows = [r for c in doc["limits"] for r in _records(c[part], {"limit": c["limit"]})
                .to_dict("records")]
        if rows:
            out.append(Sheet(f"limit {part}", pd.DataFrame(rows), key="limit", keyed=keyed))
    out.append(key_value("limits summary", {k: v for k, v in doc.items() if k != "limits"}))
    return out


def changes_sheets(doc: dict) -> list[Sheet]:
    """``results/changes.json`` as sheets: its figures as key and value, then each list of
    holdings or limits that changed (when not empty)."""
    out = [key_value("changes", doc)]
    for part, title in (("new_holdings", "new holdings"), ("removed_holdings",
                        "removed holdings"), ("weight_changes", "weight changes"),
                        ("crossed_sml", "crossed SML"), ("limit_changes", "limit changes")):
        if doc.get(part):
            out.append(Sheet(title, _records(doc[part]),
                             key="key" if part == "limit_changes" else None,
                             keyed=("value_before", "value_now")))
    return out


def pack_sheets(a) -> list[Sheet]:
    """The sheets of a build (an ``Assembled`` or a fund's ``FundAssembled``), in the order of
    the results files; the tables are the DataFrames the CSVs are written from."""
    settings, res = a.settings, a.results
    if settings.is_fund:
        t = a.result_tables()
        tables = (t["securities"], t["risk_table"], t["period_table"])
        portfolio = res.portfolio_summary() | {"fund_benchmark": a.inputs.benchmark_label,
                                               "mandate_weight_source": a.inputs.weight_source}
    else:
        tables = (res.securities, res.risk_table, res.period_table)
        style = a.style.summary() if getattr(a, "style", None) is not None else {}
        portfolio = res.portfolio_summary() | style     # as portfolio.json (factor figures)
    sheets = [Sheet("securities", tables[0]),
              key_value("portfolio", json_ready(portfolio)),
              Sheet("risk contributions", tables[1]),
              Sheet("period returns", tables[2], returns=PERIOD_RETURNS)]
    if a.limits is not None:
        sheets += limits_sheets(json_ready(a.limits.as_json()))
    if settings.compare_build is not None or settings.compare_archive is not None:
        doc = a.changes.as_json() if a.changes is not None else {
            "previous": None, "note": a.context.compare_note}
        sheets += changes_sheets(json_ready(doc))
    if settings.is_fund:
        sheets += [Sheet("mandates", a.table), Sheet("overlap", a.overlap),
                   Sheet("overlap pairs", a.pairs)]
    return sheets


def about_rows(a) -> list[tuple[str, object]]:
    """The About sheet: what the pack is, when and from what it was built, and its cautions."""
    ctx = a.context
    period = PERIOD_WORD.get(ctx.periods_per_year, "period")
    cautions = list(ctx.cautions)
    if a.settings.is_fund:
        cautions.append(FUND_CAUTION)
    rows: list[tuple[str, object]] = [
        ("Pack", ctx.title),
        ("Organisation", ctx.organisation),
        ("Pack name", a.settings.name),
        ("Period end", ctx.period_end),
        ("Built (UTC)", ctx.build_time.strftime("%Y-%m-%d %H:%M:%S")),
        ("Input fingerprint (sha256)", ctx.fingerprint),
        ("Tool version", ctx.tool_version),
        ("Return frequency", f"{ctx.frequency} ({ctx.periods_per_year} periods a year)"),
        ("Units", "Returns, alphas, volatilities and weights are decimals, shown as "
                  "percentages. A column or key ending in _ann is annualised; the other "
                  f"returns, alphas, volatilities and ratios are per period (one {period}). "
                  "Row 1 of each sheet states this per column; row 2 holds the column names "
                  "of the results CSV files."),
        ("Source", "The same figures as the results CSV and JSON files of this build; "
                   "rolling betas are in results/rolling_beta.csv only."),
    ]
    rows += [(f"Caution {i}", text) for i, text in enumerate(cautions, start=1)]
    return rows


def pack_workbook(a) -> bytes:
    """``results/pack.xlsx`` of a build, dated with the build time of its context."""
    ctx = a.context
    return workbook_bytes(about_rows(a), pack_sheets(a), ctx.build_time, title=ctx.title,
                          period=PERIOD_WORD.get(ctx.periods_per_year, "period"))
