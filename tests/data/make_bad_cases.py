"""Generate the small bad-input packs under ``tests/data/bad/`` (seeded; the output is committed).

Each case is the same small, valid, invented pack (4 holdings, 30 month-ends, window 24,
min_obs 12) with one thing broken, in a folder named after the case. Every organisation
and security here is fictional.

Regenerate with::

    .venv/bin/python -m tests.data.make_bad_cases          # writes tests/data/bad/
    .venv/bin/python -m tests.data.make_bad_cases OUTDIR   # writes OUTDIR/<case>/

The cases of text, spreadsheet and number surprises are in surprise_cases.py.

The tests check that the committed folders are exactly what this script writes.
"""

from __future__ import annotations

import copy
import shutil
import sys
from collections.abc import Callable
from pathlib import Path

from tests.data import surprise_cases

# MIN_OBS, WINDOW, base_pack and write_pack are imported from here by other tests
from tests.data.bad_pack import (  # noqa: F401
    BAD_DIR,
    MIN_OBS,
    N_PERIODS,
    WINDOW,
    Pack,
    base_pack,
    drop_column,
    month_ends,
    returns_row,
    set_weights,
    write_pack,
)

# --------------------------------------------------------------------------- the cases
# Each function breaks one thing in a copy of the base pack. Row numbers in the comments
# are file lines (the header is line 1).

def missing_required_column(p: Pack) -> None:
    drop_column(p, "holdings.csv", "sector")


def unknown_column(p: Pack) -> None:
    header, rows = p.tables["holdings.csv"]
    header.append("analyst_note")
    for r in rows:
        r.append("none")


def duplicate_security_id(p: Pack) -> None:
    # holdings line 5 repeats the id of line 3; the fourth security's returns go with it
    p.rows("holdings.csv")[3][0] = "FWX02"
    p.tables["returns.csv"] = (p.tables["returns.csv"][0],
                               [r for r in p.rows("returns.csv") if r[1] != "FWX04"])


def duplicate_row_same_value(p: Pack) -> None:
    p.rows("returns.csv").append(list(returns_row(p, 10, 1)))      # line 122 repeats line 43


def duplicate_row_different_value(p: Pack) -> None:
    row = list(returns_row(p, 10, 1))
    row[2] = "0.012345"
    p.rows("returns.csv").append(row)                               # line 122 vs line 43


def non_numeric_return(p: Pack) -> None:
    returns_row(p, 5, 2)[2] = "#DIV/0!"                             # line 24


def unparseable_date(p: Pack) -> None:
    returns_row(p, 7, 0)[0] = "31/08/2024"                          # line 30


def impossible_date(p: Pack) -> None:
    row = next(r for r in p.rows("market.csv") if r[0] == "2026-02-28")
    row[0] = "2026-02-30"                                           # market line 27


def return_below_minus_100(p: Pack) -> None:
    returns_row(p, 12, 3)[2] = "-1.250000"                          # line 53


def returns_as_percentages(p: Pack) -> None:
    for t in range(N_PERIODS):
        row = returns_row(p, t, 2)                                  # FWX03, first line 4
        row[2] = f"{float(row[2]) * 100:.4f}"


def market_as_percentages(p: Pack) -> None:
    for row in p.rows("market.csv"):
        row[1] = f"{float(row[1]) * 100:.4f}"


def weights_not_summing_to_one(p: Pack) -> None:
    set_weights(p, [0.40, 0.30, 0.20, 0.05])


def weights_not_summing_normalised(p: Pack) -> None:
    weights_not_summing_to_one(p)
    p.toml["checks"] = {"normalise_weights": "true"}


def negative_weight(p: Pack) -> None:
    set_weights(p, [0.50, 0.35, 0.25, -0.10])                       # line 5


def negative_weight_allow_short(p: Pack) -> None:
    negative_weight(p)
    p.toml["checks"] = {"allow_short": "true"}


def holding_without_returns(p: Pack) -> None:
    p.tables["returns.csv"] = (p.tables["returns.csv"][0],
                               [r for r in p.rows("returns.csv") if r[1] != "FWX04"])


def stale_prices(p: Pack) -> None:
    for t in range(14, 18):                                         # FWX02, 4 zeros in a row
        returns_row(p, t, 1)[2] = "0.000000"


def market_two_dates_in_one_month(p: Pack) -> None:
    rows = p.rows("market.csv")
    i = next(k for k, r in enumerate(rows) if r[0] == "2025-03-31")
    rows.insert(i, ["2025-03-14", "0.004000"])                      # line 16; 03-31 is line 17


def returns_two_dates_in_one_month(p: Pack) -> None:
    p.rows("returns.csv").append(["2025-03-14", "FWX01", "0.004000"])   # line 122


def returns_less_frequent_than_declared(p: Pack) -> None:
    # FWX02 reports every other month only: 15 returns, none of the 14 steps a single month
    rows = p.rows("returns.csv")
    odd = set(month_ends()[1::2])
    rows[:] = [r for r in rows if not (r[1] == "FWX02" and r[0] in odd)]


def market_short_history(p: Pack) -> None:
    del p.rows("market.csv")[:10]                                   # 20 periods left


def window_longer_than_data(p: Pack) -> None:
    p.toml["analysis"]["window"] = "36"


def market_gap(p: Pack) -> None:
    rows = p.rows("market.csv")
    rows[:] = [r for r in rows if r[0] != "2025-09-30"]


def risk_free_missing_periods(p: Pack) -> None:
    rows = p.rows("risk_free.csv")
    rows[:] = [r for r in rows if r[0] not in ("2025-05-31", "2025-06-30")]


def period_end_after_data(p: Pack) -> None:
    p.toml["pack"]["period_end"] = "2026-09-30"


def pack_toml_unknown_key(p: Pack) -> None:
    p.toml["analysis"]["window_length"] = "24"


def pack_toml_wrong_type(p: Pack) -> None:
    p.toml["analysis"]["window"] = '"24"'


def pack_toml_bad_date_format(p: Pack) -> None:
    p.toml["inputs"]["date_format"] = '"%Y-%Q"'


def path_leaves_pack(p: Pack) -> None:
    p.toml["inputs"]["holdings"] = '"../holdings.csv"'


def missing_input_file(p: Pack) -> None:
    del p.tables["risk_free.csv"]


def risk_free_annual_percentage(p: Pack) -> None:
    for row in p.rows("risk_free.csv"):                             # e.g. 3.6 for 0.3%/month
        row[1] = f"{float(row[1]) * 12 * 100:.4f}"


def risk_free_annual_decimal(p: Pack) -> None:
    for row in p.rows("risk_free.csv"):                             # e.g. 0.036 for 0.3%/month
        row[1] = f"{float(row[1]) * 12:.6f}"


def blank_line_then_bad_value(p: Pack) -> None:
    # a blank line (line 21) must not shift the line numbers of what follows
    header, rows = p.tables["returns.csv"]
    returns_row(p, 9, 0)[2] = "n.a."                # line 38, and 39 below the blank line
    lines = [",".join(header)] + [",".join(r) for r in rows]
    lines.insert(20, "")
    del p.tables["returns.csv"]
    p.raw["returns.csv"] = "\n".join(lines) + "\n"


def quoted_line_break_then_bad_value(p: Pack) -> None:
    # a quoted name spanning two lines (lines 3-4) must not shift the line numbers of what
    # follows: the bad weight of FWX03 is on line 5, its fourth record
    header, rows = p.tables["holdings.csv"]
    rows[2][header.index("weight")] = "abc"
    lines = [",".join(header)] + [",".join(r) for r in rows]
    name = rows[1][header.index("name")]
    lines[2] = lines[2].replace(name, f'"{name}\nregistered office: Harbour Row"')
    del p.tables["holdings.csv"]
    p.raw["holdings.csv"] = "\n".join(lines) + "\n"


def returns_without_rows(p: Pack) -> None:
    p.tables["returns.csv"] = (p.tables["returns.csv"][0], [])


def ragged_row(p: Pack) -> None:
    returns_row(p, 3, 1).append("0.001")                            # line 15 has 4 fields


def trailing_delimiter(p: Pack) -> None:
    # every line of market.csv ends with the delimiter, as some exports write them: the
    # nameless empty column this makes is no problem at all
    header, rows = p.tables["market.csv"]
    lines = [",".join(header) + ","] + [",".join(r) + "," for r in rows]
    del p.tables["market.csv"]
    p.raw["market.csv"] = "\n".join(lines) + "\n"


def market_extreme_return(p: Pack) -> None:
    p.rows("market.csv")[20][1] = "4.2"                  # line 22: +420% in one month


def _as_prices(p: Pack) -> None:
    """The returns file as a long price file: each security's returns compounded from 100
    (the first period's price is 100, so that file has one return fewer)."""
    level: dict[str, float] = {}
    rows = []
    for date, sid, r in p.rows("returns.csv"):
        level[sid] = level[sid] * (1 + float(r)) if sid in level else 100.0
        rows.append([date, sid, f"{level[sid]:.6f}"])
    del p.tables["returns.csv"]
    p.tables["prices.csv"] = (["date", "security_id", "price"], rows)
    del p.toml["inputs"]["returns"]
    p.toml["inputs"]["prices"] = '"prices.csv"'


def prices_not_positive(p: Pack) -> None:
    _as_prices(p)
    p.rows("prices.csv")[10 * 4 + 1][2] = "0"                       # line 43 (FWX02)
    p.rows("prices.csv")[20 * 4 + 3][2] = "-5.5"                    # line 85 (FWX04)


def market_gap_short_data(p: Pack) -> None:
    # the window is every period of the file, and one month is missing: the gap is the
    # problem, not the length of the window
    p.toml["analysis"]["window"] = "30"
    market_gap(p)


def thousands_without_setting(p: Pack) -> None:
    header, rows = p.tables["holdings.csv"]
    header[3] = "market_value"
    for row, value in zip(rows, ('"4,000,000.00"', "3000000", "2000000", "1000000"),
                          strict=True):
        row[3] = value                                              # line 2: separators


def many_securities_as_percentages(p: Pack) -> None:
    for row in p.rows("returns.csv"):                               # every security
        row[2] = f"{float(row[2]) * 100:.4f}"


CASES: dict[str, Callable[[Pack], None]] = {f.__name__: f for f in (
    missing_required_column, unknown_column, duplicate_security_id, duplicate_row_same_value,
    duplicate_row_different_value, non_numeric_return, unparseable_date, impossible_date,
    return_below_minus_100, returns_as_percentages, market_as_percentages,
    weights_not_summing_to_one, weights_not_summing_normalised, negative_weight,
    negative_weight_allow_short, holding_without_returns, stale_prices,
    market_two_dates_in_one_month, returns_two_dates_in_one_month,
    returns_less_frequent_than_declared, market_short_history,
    window_longer_than_data, market_gap, risk_free_missing_periods, period_end_after_data,
    pack_toml_unknown_key, pack_toml_wrong_type, pack_toml_bad_date_format, path_leaves_pack,
    missing_input_file, risk_free_annual_percentage, risk_free_annual_decimal,
    blank_line_then_bad_value, quoted_line_break_then_bad_value, ragged_row,
    returns_without_rows, trailing_delimiter,
    market_extreme_return, prices_not_positive, market_gap_short_data,
    thousands_without_setting, many_securities_as_percentages,
    *surprise_cases.CASES,
)}


def make_case(name: str) -> Pack:
    pack = copy.deepcopy(base_pack())
    CASES[name](pack)
    return pack


def generate(out: Path) -> None:
    """Write every case into ``out/<case>/``, replacing what was there."""
    out.mkdir(parents=True, exist_ok=True)
    for name in CASES:
        folder = out / name
        if folder.exists():
            shutil.rmtree(folder)
        write_pack(make_case(name), folder)


if __name__ == "__main__":
    generate(Path(sys.argv[1]) if len(sys.argv) > 1 else BAD_DIR)
