"""Bad-input cases of spreadsheets, text and numbers that used to pass without a word: a
hidden first sheet, an unreadable workbook or CSV, ids that differ only by case or Unicode
form, invisible characters, ``nan`` in a number column, a return repeated period after period.

Each function changes a copy of the base pack (see make_bad_cases.py). Row numbers in the
comments are file lines (the header is line 1). Every name here is fictional.
"""

from __future__ import annotations

from tests.data.bad_pack import Pack, returns_row, xlsx_bytes

LAST_QUARTER = [0.25, 0.25, 0.25, 0.25]         # the hidden sheet's stale weights


def _holdings_as_xlsx(p: Pack, sheets: list[tuple[str, str]]) -> None:
    """Move holdings.csv into holdings.xlsx with ``(title, state)`` sheets: "Last quarter"
    holds last quarter's weights, any other sheet today's."""
    header, rows = p.tables.pop("holdings.csv")
    made = []
    for title, state in sheets:
        body = [[r[0], r[1], r[2], w if title == "Last quarter" else float(r[3])]
                for r, w in zip(rows, LAST_QUARTER, strict=True)]
        made.append((title, [header, *body], state))
    p.binary["holdings.xlsx"] = xlsx_bytes(made)
    p.toml["inputs"]["holdings"] = '"holdings.xlsx"'


def hidden_first_sheet(p: Pack) -> None:
    _holdings_as_xlsx(p, [("Last quarter", "hidden"), ("Holdings", "visible")])


def all_sheets_hidden(p: Pack) -> None:
    _holdings_as_xlsx(p, [("Last quarter", "hidden"), ("Holdings", "hidden")])


def empty_xlsx(p: Pack) -> None:
    del p.tables["holdings.csv"]
    p.binary["holdings.xlsx"] = b""                             # 0 bytes
    p.toml["inputs"]["holdings"] = '"holdings.xlsx"'


def renamed_xlsx(p: Pack) -> None:
    header, rows = p.tables.pop("holdings.csv")                 # a CSV saved as .xlsx
    p.binary["holdings.xlsx"] = "\n".join(",".join(r) for r in [header, *rows]).encode()
    p.toml["inputs"]["holdings"] = '"holdings.xlsx"'


def empty_csv(p: Pack) -> None:
    del p.tables["returns.csv"]
    p.binary["returns.csv"] = b""


def binary_csv(p: Pack) -> None:
    del p.tables["risk_free.csv"]                               # a PNG image renamed .csv
    p.binary["risk_free.csv"] = b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\x00\x00\x00\x10"


def ids_differ_by_case(p: Pack) -> None:
    # FWX04 becomes "fwx03" in both files: holdings line 5 against line 4, and returns
    # line 5 (its first return) against line 4 (FWX03's first)
    p.rows("holdings.csv")[3][0] = "fwx03"
    for r in p.rows("returns.csv"):
        if r[1] == "FWX04":
            r[1] = "fwx03"


def ids_in_two_unicode_forms(p: Pack) -> None:
    # FWX01 is FWXÉ01: composed (U+00C9) with a trailing space in the holdings, decomposed
    # (E + U+0301) in the returns. One security: no problem at all.
    p.rows("holdings.csv")[0][0] = "FWX\u00c901 "
    for r in p.rows("returns.csv"):
        if r[1] == "FWX01":
            r[1] = "FWXE\u030101"


def bidi_override_in_id(p: Pack) -> None:
    p.rows("holdings.csv")[3][0] = "FWX\u202e04"                 # line 5 shows as FWX40


def zero_width_space_in_returns_id(p: Pack) -> None:
    returns_row(p, 5, 2)[1] = "FWX03\u200b"                      # line 24


def byte_order_mark_inside_text(p: Pack) -> None:
    # a BOM at the start of the file is fine; the one inside a sector (line 3) is not
    header, rows = p.tables.pop("holdings.csv")
    rows[1][2] = "Consumer\ufeffStaples"
    p.raw["holdings.csv"] = "\ufeff" + "\n".join(",".join(r) for r in [header, *rows]) + "\n"


def nan_text_in_numbers(p: Pack) -> None:
    returns_row(p, 5, 2)[2] = "nan"                             # returns line 24
    p.rows("market.csv")[8][1] = "-Infinity"                    # market line 10


def constant_return_run(p: Pack) -> None:
    for t in range(14, 18):                                     # FWX02, line 59 onwards
        returns_row(p, t, 1)[2] = "0.010000"


CASES = (hidden_first_sheet, all_sheets_hidden, empty_xlsx, renamed_xlsx, empty_csv,
         binary_csv, ids_differ_by_case, ids_in_two_unicode_forms, bidi_override_in_id,
         zero_width_space_in_returns_id, byte_order_mark_inside_text, nan_text_in_numbers,
         constant_return_run)
