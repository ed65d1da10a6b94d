"""Bad inputs: one small pack per case under tests/data/bad/, made by make_bad_cases.py.

For each case, ``reporter check`` and ``reporter build`` must print exactly the expected
``file:row:column: message`` lines, exit 2, show no traceback and leave an existing output
folder byte-for-byte as it was. Warning-only cases pass (exit 0) and fail with ``--strict``.
The expected lines are the specification: the row numbers were worked out from how each
case is made (see the comments in make_bad_cases.py), not copied from the tool's output.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

from reporter.cli import main
from reporter.writer import BUILD_MARKER
from tests.data import make_bad_cases

BAD = Path(__file__).resolve().parent / "data" / "bad"
ERROR, WARNING, OK = "error", "warning", "ok"

# case -> (kind, the problem lines printed, in order)
CASES: dict[str, tuple[str, list[str]]] = {
    "missing_required_column": (ERROR, [
        "holdings.csv:1:sector: required column is missing "
        "(the file has: security_id, name, weight)"]),
    "unknown_column": (WARNING, [
        "holdings.csv:1:analyst_note: warning: unknown column, ignored"]),
    "duplicate_security_id": (ERROR, [
        "holdings.csv:5:security_id: duplicate security id 'FWX02' (first at row 3)"]),
    "duplicate_row_same_value": (ERROR, [
        "returns.csv:122:date: duplicate row for (2024-11-30, FWX02) with the same value "
        "(first at row 43)"]),
    "duplicate_row_different_value": (ERROR, [
        "returns.csv:122:date: duplicate row for (2024-11-30, FWX02) with a different value "
        "(first at row 43)"]),
    "non_numeric_return": (ERROR, [
        "returns.csv:24:return: not a number: '#DIV/0!'"]),
    "unparseable_date": (ERROR, [
        "returns.csv:30:date: not a valid date in the format '%Y-%m-%d': '31/08/2024'; it "
        'reads as day-first: set date_format = "%d/%m/%Y"']),
    # the impossible date drops the market's February; the gap it leaves is not reported
    # again as a missing period
    "impossible_date": (ERROR, [
        "market.csv:27:date: not a valid date in the format '%Y-%m-%d': '2026-02-30'"]),
    "return_below_minus_100": (ERROR, [
        "returns.csv:53:return: return -1.25 is below -100%"]),
    # one line for the whole security, not one per value below -100%
    "returns_as_percentages": (ERROR, [
        "returns.csv:4:return: returns for FWX03 look like percentages (median |return| 3.12 "
        "is above 0.25 for monthly data); give decimals, e.g. 0.012 for 1.2%"]),
    "market_as_percentages": (ERROR, [
        "market.csv:2:return: values look like percentages (median |value| 3.43 is above 0.25 "
        "for monthly data); give decimals, e.g. 0.012 for 1.2%"]),
    "weights_not_summing_to_one": (ERROR, [
        "holdings.csv:weight: weights sum to 0.95, not 1 (tolerance 0.0001); fix the file or "
        "set checks.normalise_weights = true"]),
    "weights_not_summing_normalised": (WARNING, [
        "holdings.csv:weight: warning: weights sum to 0.95, not 1 (tolerance 0.0001); "
        "rescaled to sum to 1"]),
    "negative_weight": (ERROR, [
        "holdings.csv:5:weight: negative weight -0.1: short positions are not allowed "
        "(set checks.allow_short = true)"]),
    "negative_weight_allow_short": (OK, []),
    "trailing_delimiter": (OK, []),
    "market_extreme_return": (WARNING, [
        "market.csv:22:return: warning: return 4.2 in one month is beyond what a broad market "
        "index does (more than 50% either way); check the data"]),
    "holding_without_returns": (WARNING, [
        "holdings.csv:5:security_id: warning: holding FWX04 has no return history in "
        "returns.csv; give a proxy column (a security id, market or benchmark) to stand in "
        "for it, else it is left out of every return figure"]),
    # the run of zeros starts at FWX02's return for period 15 (line 59)
    "stale_prices": (WARNING, [
        "returns.csv:59:return: warning: holding FWX02 has 4 exact-zero returns in a row from "
        "here: its prices may be stale"]),
    "market_two_dates_in_one_month": (ERROR, [
        "market.csv:17:date: second date in the same month 2025-03-31 (first at row 16); the "
        "data do not look monthly"]),
    "returns_two_dates_in_one_month": (ERROR, [
        "returns.csv:122:date: second return for FWX01 in the same month (2025-03-31 and "
        "2025-03-14); the data do not look monthly"]),
    "returns_less_frequent_than_declared": (ERROR, [
        "returns.csv:date: returns for FWX02 look less frequent than monthly: 0 of the 14 steps "
        "between them are one month"]),
    "market_short_history": (ERROR, [
        "pack.toml:analysis.window: the window (24 periods) is longer than the data: market.csv "
        "has 20 periods up to 2026-06-30"]),
    "window_longer_than_data": (ERROR, [
        "pack.toml:analysis.window: the window (36 periods) is longer than the data: market.csv "
        "has 30 periods up to 2026-06-30"]),
    # prices compounded from the returns (make_bad_cases._as_prices); a zero and a negative
    "prices_not_positive": (ERROR, [
        "prices.csv:43:price: price 0 is not above zero; a price or index level must be "
        "positive",
        "prices.csv:85:price: price -5.5 is not above zero; a price or index level must be "
        "positive"]),
    # the window is the whole file, one month short because of the gap: the gap is named
    "market_gap_short_data": (ERROR, [
        "market.csv:22:date: the dates 2025-08-31 and 2025-10-31 are not consecutive monthly "
        "periods (a period is missing between them)"]),
    "thousands_without_setting": (ERROR, [
        "holdings.csv:2:market_value: not a number: '4,000,000.00'; it has thousands "
        'separators: set thousands = ","']),
    # one line for the file; medians of |return| per security: FWX02 1.6468, FWX01 3.65725
    # (pandas groupby median on the case's file)
    "many_securities_as_percentages": (ERROR, [
        "returns.csv:2:return: returns for 4 securities look like percentages (FWX01, FWX02, "
        "FWX03, FWX04; median |return| 1.65 to 3.66, above 0.25 for monthly data); give "
        "decimals, e.g. 0.012 for 1.2%"]),
    "market_gap": (ERROR, [
        "market.csv:22:date: the dates 2025-08-31 and 2025-10-31 are not consecutive monthly "
        "periods (a period is missing between them)"]),
    "risk_free_missing_periods": (ERROR, [
        "risk_free.csv:18:date: no rate for the period of 2025-05-31 (market.csv row 18), which "
        "the window needs; missing before this row",
        "risk_free.csv:18:date: no rate for the period of 2025-06-30 (market.csv row 19), which "
        "the window needs; missing before this row"]),
    "period_end_after_data": (ERROR, [
        "pack.toml:pack.period_end: period_end 2026-09-30 is after the last date in market.csv "
        "(2026-06-30)"]),
    "pack_toml_unknown_key": (ERROR, [
        "pack.toml:analysis.window_length: unknown key"]),
    "pack_toml_wrong_type": (ERROR, [
        "pack.toml:analysis.window: Input should be a valid integer (got '24')"]),
    "pack_toml_bad_date_format": (ERROR, [
        "pack.toml:inputs.date_format: date format '%Y-%Q' cannot be used: 'Q' is a bad "
        "directive in format '%Y-%Q'"]),
    "path_leaves_pack": (ERROR, [
        "pack.toml:inputs.holdings: path '../holdings.csv' leaves the pack folder"]),
    "missing_input_file": (ERROR, [
        "pack.toml:inputs.risk_free: file 'risk_free.csv' does not exist"]),
    # 12 x 100 x a monthly rate near 0.003: an annual percentage
    "risk_free_annual_percentage": (ERROR, [
        "risk_free.csv:2:rate: values look like percentages (median |value| 3.52 is above 0.25 "
        "for monthly data); give the rate per period as a decimal, e.g. 0.003 for 3.6% a year"]),
    "risk_free_annual_decimal": (WARNING, [
        "risk_free.csv:rate: warning: median rate 0.0352 per period is 42.2% a year: is this an "
        "annual rate? Give the rate per period"]),
    # the blank line 21 counts: the bad value is on line 39 of the file
    "blank_line_then_bad_value": (ERROR, [
        "returns.csv:39:return: not a number: 'n.a.'"]),
    "quoted_line_break_then_bad_value": (ERROR, [
        "holdings.csv:5:weight: not a number: 'abc'"]),
    "ragged_row": (ERROR, [
        "returns.csv:15: expected 3 fields (delimiter ','), found 4"]),
    "returns_without_rows": (ERROR, [
        "returns.csv: the file has no rows"]),
    # spreadsheets, text and numbers (surprise_cases.py)
    "hidden_first_sheet": (WARNING, [
        "holdings.xlsx: warning: skipped hidden sheet 'Last quarter'; read sheet 'Holdings'"]),
    "all_sheets_hidden": (ERROR, [
        "holdings.xlsx: every sheet is hidden ('Last quarter', 'Holdings'); unhide the sheet "
        "to read, or name it with sheet = ..."]),
    "empty_xlsx": (ERROR, [
        "holdings.xlsx: not a readable .xlsx workbook (the file is empty)"]),
    "renamed_xlsx": (ERROR, [
        "holdings.xlsx: not a readable .xlsx workbook (BadZipFile: File is not a zip file)"]),
    "empty_csv": (ERROR, [
        "returns.csv: the file is empty"]),
    "binary_csv": (ERROR, [
        "risk_free.csv: not a readable text file: it is not UTF-8 (byte 0x89)"]),
    "ids_differ_by_case": (ERROR, [
        "holdings.csv:5:security_id: security id 'fwx03' differs from 'FWX03' (row 4) only by "
        "case: give one security one id",
        "returns.csv:5:security_id: security id 'fwx03' differs from 'FWX03' (row 4) only by "
        "case: give one security one id"]),
    # composed with a trailing space in one file, decomposed in the other: one security
    "ids_in_two_unicode_forms": (OK, []),
    "bidi_override_in_id": (ERROR, [
        "holdings.csv:5:security_id: invisible control character U+202E"]),
    "zero_width_space_in_returns_id": (ERROR, [
        "returns.csv:24:security_id: invisible control character U+200B"]),
    # the byte-order mark that starts the file is no problem; the one inside line 3 is
    "byte_order_mark_inside_text": (ERROR, [
        "holdings.csv:3:sector: invisible control character U+FEFF"]),
    "nan_text_in_numbers": (ERROR, [
        "market.csv:10:return: value is not a finite number: '-inf' as read (written so, or a "
        "number too large for a float: beyond about 1.8e308)",
        "returns.csv:24:return: value is not a finite number: 'nan'"]),
    # the run of 0.01 starts at FWX02's return for period 15 (line 59), as stale_prices
    "constant_return_run": (WARNING, [
        "returns.csv:59:return: warning: holding FWX02 has the same return 0.01 for 4 periods "
        "in a row from here: its prices may be stale"]),
}
FAILING = sorted(c for c, (kind, _) in CASES.items() if kind != OK)
SUMMARY_PREFIX = "reporter: "


def problem_lines(err: str) -> list[str]:
    return [line for line in err.splitlines() if not line.startswith(SUMMARY_PREFIX)]


def snapshot(folder: Path) -> dict[str, bytes | None]:
    """Every file (bytes) and folder (None) under ``folder``, and what sits beside it."""
    tree: dict[str, bytes | None] = {}
    for root, dirs, files in os.walk(folder):
        for name in dirs:
            tree[os.path.relpath(os.path.join(root, name), folder)] = None
        for name in files:
            path = os.path.join(root, name)
            tree[os.path.relpath(path, folder)] = Path(path).read_bytes()
    tree["<beside>"] = "\n".join(sorted(os.listdir(folder.parent))).encode()
    return tree


@pytest.fixture()
def previous_build(tmp_path) -> Path:
    """An output folder that holds an earlier build (the marker and some files)."""
    out = tmp_path / "out"
    (out / "results").mkdir(parents=True)
    (out / BUILD_MARKER).write_bytes(b"committee-pack-reporter build output\n")
    (out / "pack.html").write_bytes(b"<!doctype html><p>the earlier pack</p>\n")
    (out / "results" / "securities.csv").write_bytes(b"security_id,beta\nSENTINEL,1.0\n")
    return out


def test_every_case_folder_is_listed():
    assert sorted(p.name for p in BAD.iterdir() if p.is_dir()) == sorted(CASES)
    assert sorted(make_bad_cases.CASES) == sorted(CASES)


def test_committed_cases_are_what_the_script_makes(tmp_path):
    make_bad_cases.generate(tmp_path)
    for case in CASES:
        made = {p.relative_to(tmp_path / case): p.read_bytes()
                for p in (tmp_path / case).rglob("*") if p.is_file()}
        committed = {p.relative_to(BAD / case): p.read_bytes()
                     for p in (BAD / case).rglob("*") if p.is_file()}
        assert made == committed, f"{case}: run python -m tests.data.make_bad_cases and commit"


@pytest.mark.parametrize("case", sorted(CASES))
def test_check(case, capsys):
    kind, expected = CASES[case]
    code = main(["check", str(BAD / case)])
    out, err = capsys.readouterr()
    assert "Traceback" not in out + err
    assert problem_lines(err) == expected
    if kind == ERROR:
        assert code == 2
        n_errors = sum(": warning: " not in line for line in expected)
        assert err.splitlines()[-1] == (f"reporter: {n_errors} error(s) in the inputs; "
                                        "nothing was written")
        assert "ok: the inputs pass every check" not in out
    else:
        assert code == 0
        assert out.splitlines()[-1] == "ok: the inputs pass every check"
        assert out.splitlines()[-2] == f"warnings: {len(expected)}"


@pytest.mark.parametrize("case", sorted(c for c, (kind, _) in CASES.items() if kind == WARNING))
def test_check_strict_fails_on_warnings(case, capsys):
    _, expected = CASES[case]
    code = main(["check", str(BAD / case), "--strict"])
    out, err = capsys.readouterr()
    assert code == 2
    assert "Traceback" not in out + err
    assert problem_lines(err) == expected
    assert err.splitlines()[-1].endswith("nothing was written")
    assert "ok:" not in out


@pytest.mark.parametrize("case", FAILING)
def test_build_fails_and_leaves_output_untouched(case, previous_build, capsys):
    """Warning-only cases are built with --strict, so that they fail too."""
    kind, expected = CASES[case]
    before = snapshot(previous_build)
    argv = ["build", str(BAD / case), "--out", str(previous_build), "--quiet"]
    code = main(argv + (["--strict"] if kind == WARNING else []))
    out, err = capsys.readouterr()
    assert code == 2
    assert "Traceback" not in out + err
    assert problem_lines(err) == expected
    assert err.splitlines()[-1].endswith("nothing was written")
    assert "wrote" not in out
    assert snapshot(previous_build) == before


def test_build_into_a_new_folder_creates_nothing_on_bad_input(tmp_path, capsys):
    out = tmp_path / "new"
    code = main(["build", str(BAD / "non_numeric_return"), "--out", str(out), "--quiet"])
    capsys.readouterr()
    assert code == 2
    assert os.listdir(tmp_path) == []


def test_debug_shows_the_traceback(capsys):
    """The traceback is hidden by default (above) and shown with --debug."""
    code = main(["check", str(BAD / "non_numeric_return"), "--debug"])
    _, err = capsys.readouterr()
    assert code == 2
    assert "Traceback" in err
    assert "returns.csv:24:return: not a number: '#DIV/0!'" in err


def test_path_leaving_the_pack_is_refused_even_when_the_file_exists(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(BAD / "path_leaves_pack", pack)
    shutil.copy(BAD / "path_leaves_pack" / "holdings.csv", tmp_path / "holdings.csv")
    code = main(["check", str(pack)])
    _, err = capsys.readouterr()
    assert code == 2
    assert problem_lines(err) == [
        "pack.toml:inputs.holdings: path '../holdings.csv' leaves the pack folder"]


def test_symlink_out_of_the_pack_is_refused(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(BAD / "negative_weight_allow_short", pack)
    outside = tmp_path / "elsewhere.csv"
    shutil.move(pack / "holdings.csv", outside)
    (pack / "holdings.csv").symlink_to(outside)
    code = main(["check", str(pack)])
    _, err = capsys.readouterr()
    assert code == 2
    assert problem_lines(err) == [
        "pack.toml:inputs.holdings: path 'holdings.csv' leaves the pack folder"]


def test_allow_short_accepts_the_negative_weight(capsys):
    """The same file as negative_weight passes once short positions are allowed."""
    assert (BAD / "negative_weight" / "holdings.csv").read_bytes() == (
        BAD / "negative_weight_allow_short" / "holdings.csv").read_bytes()
    code = main(["check", str(BAD / "negative_weight_allow_short"), "--strict"])
    out, err = capsys.readouterr()
    assert code == 0 and err == ""
    assert "holdings: 4 from holdings.csv, weights from weight" in out
