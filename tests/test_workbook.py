"""results/pack.xlsx: every cell against the results CSV and JSON files, text never a formula,
frozen headers, filters and number formats, and the same bytes for the same build time.

The workbook is read back with openpyxl's reader (independent of how it was written: the
reader parses the XML in the zip)."""

from __future__ import annotations

import datetime as dt
import hashlib
import io
import json
import math
import os
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from openpyxl import load_workbook

from reporter.csvsafe import unescape
from tests.conftest import DEMO, FIXED_EPOCH

REPO = Path(__file__).resolve().parent.parent
DEMO_FUND = REPO / "inputs" / "demo-fund"
CSV_SHEETS = {"securities": "securities.csv", "risk contributions": "risk_contributions.csv",
              "period returns": "period_returns.csv"}
FUND_SHEETS = CSV_SHEETS | {"mandates": "mandates.csv", "overlap": "overlap.csv",
                            "overlap pairs": "overlap_pairs.csv"}


@pytest.fixture(scope="module")
def book(demo_build):
    return load_workbook(demo_build / "results/pack.xlsx")


def _sig10(x: float) -> float:
    return float(f"{x:.10g}")


def assert_sheet_matches_csv(ws, csv: str, where: str) -> int:
    """Every cell of ``ws`` (names in row 2, rows from row 3) against the CSV text: numbers to
    the CSV's 10 significant figures, text after undoing the CSV's escape, empty for empty.
    Returns the number of cells compared."""
    df = pd.read_csv(io.StringIO(csv), dtype=str, keep_default_na=False)
    assert [c.value for c in ws[2]] == list(df.columns), where
    assert ws.max_row == len(df) + 2 and ws.max_column == len(df.columns), where
    n = 0
    for i, row in enumerate(df.itertuples(index=False, name=None), start=3):
        for j, text in enumerate(row, start=1):
            cell = ws.cell(row=i, column=j)
            at = f"{where} row {i} column {df.columns[j - 1]}"
            if text == "":
                assert cell.value is None, at
            elif cell.data_type == "s":
                assert cell.value == unescape(text), at
            elif isinstance(cell.value, bool):
                assert str(cell.value) == text, at
            elif isinstance(cell.value, dt.datetime):
                assert cell.value.date().isoformat() == text[:10], at
            else:
                assert cell.data_type == "n", at
                assert _sig10(cell.value) == float(text), at
            n += 1
    return n


def _json_rows(doc: dict, prefix: str = "") -> list[tuple[str, object]]:
    """The scalars of a JSON document as (dotted key, value), sorted; written here apart
    from the module's own flattening."""
    rows = []
    for k in sorted(doc):
        v = doc[k]
        if isinstance(v, dict):
            rows += _json_rows(v, f"{prefix}{k}.")
        elif isinstance(v, list):
            if not any(isinstance(x, dict) for x in v):
                rows.append((f"{prefix}{k}", "; ".join(map(str, v))))
        else:
            rows.append((f"{prefix}{k}", v))
    return rows


def same_json(cell_value, json_value) -> bool:
    """A cell read back against a JSON value: floats within 1e-15 relative (openpyxl writes
    numbers as "%.16g", half a unit of the 16th figure), null as an empty cell."""
    if isinstance(json_value, float):
        return math.isclose(cell_value, json_value, rel_tol=1e-15, abs_tol=0)
    return cell_value == json_value or (cell_value is None and json_value in ("", None))


def _key_values(ws) -> list[tuple[str, object]]:
    return [(r[0].value, r[1].value) for r in ws.iter_rows(min_row=3)]


def test_every_table_cell_matches_its_csv(book, demo_build):
    compared = 0
    for sheet, name in CSV_SHEETS.items():
        csv = (demo_build / "results" / name).read_text(encoding="utf-8")
        compared += assert_sheet_matches_csv(book[sheet], csv, sheet)
    n_sec = len(pd.read_csv(demo_build / "results/securities.csv"))
    assert compared > 40 * n_sec           # every column of every holding was compared


def test_portfolio_and_limits_match_their_json(book, demo_build):
    doc = json.loads((demo_build / "results/portfolio.json").read_text())
    got = _key_values(book["portfolio"])
    want = _json_rows(doc)
    assert [k for k, _ in got] == [k for k, _ in want]
    for (k, v), (_, w) in zip(got, want, strict=True):
        assert same_json(v, w), k
    limits = json.loads((demo_build / "results/limits.json").read_text())
    ws = book["limits"]
    cols = [c.value for c in ws[2]]
    assert len(limits["limits"]) == ws.max_row - 2 > 0
    for i, check in enumerate(limits["limits"], start=3):
        for j, col in enumerate(cols, start=1):
            assert same_json(ws.cell(row=i, column=j).value, check[col]), (check["limit"], col)
    summary = dict(_key_values(book["limits summary"]))
    assert summary["watch_margin"] == limits["watch_margin"]
    assert summary["counts.breach"] == limits["counts"]["breach"]
    flagged = [(c["limit"], h["security_id"]) for c in limits["limits"] for h in c["holdings"]]
    if flagged:
        ws = book["limit holdings"]
        assert [(r[0].value, r[1].value) for r in ws.iter_rows(min_row=3)] == flagged


def test_headers_frozen_filtered_and_formatted(book, demo_build):
    assert book.sheetnames[:5] == ["About", "securities", "portfolio", "risk contributions",
                                   "period returns"]
    for ws in book.worksheets[1:]:
        assert ws.freeze_panes == "A3", ws.title
        last = ws.cell(row=2, column=ws.max_column).column_letter
        assert ws.auto_filter.ref == f"A2:{last}{ws.max_row}", ws.title
        assert all(8 <= ws.column_dimensions[c.column_letter].width <= 60 for c in ws[2])
    sec = book["securities"]
    col = {c.value: c.column for c in sec[2]}
    fmt = {name: sec.cell(row=3, column=col[name]).number_format for name in col}
    unit = {name: sec.cell(row=1, column=col[name]).value for name in col}
    for name in ("weight", "alpha", "alpha_ann", "residual_vol", "residual_vol_ann",
                 "mean_excess_return", "sml_residual"):
        assert fmt[name] == "0.00%", name
    for name in ("beta", "beta_t", "alpha_t", "beta_ci_low", "sharpe_ann", "appraisal_ratio"):
        assert fmt[name] == "0.00", name
    assert unit["alpha_ann"] == unit["residual_vol_ann"] == "annualised"
    assert unit["alpha"] == unit["mean_excess_return"] == "per period (month)"
    assert unit["weight"] is None and unit["beta"] is None and unit["alpha_t"] is None
    assert unit["sharpe"] == "per period (month)" and unit["sharpe_ann"] == "annualised"
    per = book["period returns"]
    pcol = {c.value: c.column for c in per[2]}
    assert per.cell(row=3, column=pcol["portfolio"]).number_format == "0.00%"
    assert per.cell(row=1, column=pcol["difference"]).value.startswith("over the row's period")
    # the portfolio's values take their format from their key
    port = {r[0].value: r[1] for r in book["portfolio"].iter_rows(min_row=3)}
    assert port["tracking_error_ann"].number_format == "0.00%"
    assert port["beta_regression"].number_format == "0.00"
    assert port["n_holdings"].number_format == "0"
    lim = {r[0].value: r[4] for r in book["limits"].iter_rows(min_row=3)}
    assert lim["max_holding_weight"].number_format == "0.00%"
    assert lim["beta_max"].number_format == "0.00"
    summary = {r[0].value: r[1] for r in book["limits summary"].iter_rows(min_row=3)}
    if "beta_target.cash_share" in summary:       # the beta mix, when beta is out of band
        assert summary["beta_target.cash_share"].number_format == "0.00%"
        assert summary["beta_target.target"].number_format == "0.00"


def test_about_sheet(book, demo_build):
    manifest = json.loads((demo_build / "results/manifest.json").read_text())
    about = {r[0].value: r[1].value for r in book["About"].iter_rows()}
    assert about["Pack"] == manifest["title"]
    assert about["Organisation"] == manifest["organisation"]
    assert about["Period end"].date().isoformat() == manifest["period_end"]
    assert about["Built (UTC)"].replace(" ", "T") + "Z" == manifest["built_utc"]
    assert about["Input fingerprint (sha256)"] == manifest["input_fingerprint"]
    assert about["Tool version"] == manifest["tool_version"]
    cautions = " ".join(v for k, v in about.items() if k.startswith("Caution"))
    for words in ("sampling error", "Past performance is not a reliable guide",
                  "not investment advice", "appointed investment adviser", "regulation"):
        assert words in cautions


def test_manifest_lists_workbook_and_bytes_repeat(demo_build):
    """The manifest carries the workbook's sha256 (so sign-off archives it); the same inputs
    and build time, assembled again at another wall-clock time, give the same bytes."""
    from reporter.build import assemble
    from reporter.config import load_settings
    from reporter.workbook import pack_workbook

    data = (demo_build / "results/pack.xlsx").read_bytes()
    manifest = json.loads((demo_build / "results/manifest.json").read_text())
    assert manifest["output_sha256"]["results/pack.xlsx"] == hashlib.sha256(data).hexdigest()
    at = dt.datetime.fromtimestamp(int(FIXED_EPOCH), tz=dt.UTC)
    again = pack_workbook(assemble(load_settings(DEMO), at=at))
    assert again == data
    with zipfile.ZipFile(io.BytesIO(data)) as z:
        assert {i.date_time for i in z.infolist()} == {(2026, 11, 30, 0, 0, 0)}
        assert z.namelist()[0] == "[Content_Types].xml"
        core = z.read("docProps/core.xml").decode()
    assert core.count("2026-11-30T00:00:00Z") == 2            # created and modified


def test_two_builds_same_epoch_identical(tmp_path, demo_build, monkeypatch):
    """A second full build with the same SOURCE_DATE_EPOCH writes the same workbook bytes."""
    from reporter.cli import main

    monkeypatch.setenv("SOURCE_DATE_EPOCH", FIXED_EPOCH)
    assert main(["build", str(DEMO), "--out", str(tmp_path / "b"), "--quiet"]) == 0
    assert ((tmp_path / "b/results/pack.xlsx").read_bytes()
            == (demo_build / "results/pack.xlsx").read_bytes())
    assert os.environ["SOURCE_DATE_EPOCH"] == FIXED_EPOCH


HOSTILE = ['=HYPERLINK("http://example.invalid/x","click")', "+x", "-x", "@x", "=1+1",
           "'already quoted", "\tTabbed", "-0.5", "plain", "bell\x07here", "_x0041_"]


def test_hostile_text_stays_text(tmp_path):
    from reporter.workbook import Sheet, workbook_bytes

    df = pd.DataFrame({"security_id": [f"H{i:02d}" for i in range(len(HOSTILE))],
                       "name": HOSTILE,
                       "weight": np.linspace(0.01, 0.11, len(HOSTILE)),
                       "beta": [np.nan, np.inf, -np.inf, *np.arange(len(HOSTILE) - 3) / 4]})
    about = [("Pack", "=cmd|' /C calc'!A0"), ("Period end", dt.date(2026, 11, 30))]
    built = dt.datetime(2026, 11, 30, tzinfo=dt.UTC)
    data = workbook_bytes(about, [Sheet("securities", df)], built, title="@title")
    path = tmp_path / "hostile.xlsx"
    path.write_bytes(data)
    wb = load_workbook(path)
    ws = wb["securities"]
    for i, text in enumerate(HOSTILE, start=3):
        cell = ws.cell(row=i, column=2)
        assert cell.data_type == "s", text
        expected = {"bell\x07here": "bell_x0007_here",          # ECMA-376 ST_Xstring escape
                    "_x0041_": "_x005F_x0041_"}.get(text, text)
        assert cell.value == expected
        assert cell.quotePrefix == (text[0] in "=+-@'\t" and text != "-0.5"), text
    assert ws["A1"].value is None and ws["C1"].value is None and ws["C2"].value == "weight"
    assert ws.cell(row=3, column=4).value is None                 # NaN: an empty cell
    assert [ws.cell(row=r, column=4).value for r in (4, 5)] == ["inf", "-inf"]
    assert ws.cell(row=6, column=4).value == 0.0 and ws.cell(row=7, column=4).value == 0.25
    assert wb["About"]["B1"].value == "=cmd|' /C calc'!A0"
    assert wb["About"]["B1"].data_type == "s"
    # styled cells keep the quote prefix exactly where the text needs it
    assert wb["About"]["B1"].quotePrefix and not wb["About"]["A1"].quotePrefix
    assert wb["About"]["A1"].font.b and wb["About"]["A1"].alignment.wrap_text
    assert wb["About"]["B2"].number_format == "yyyy-mm-dd"
    assert ws["B2"].font.b and not ws["B2"].quotePrefix and ws["B1"].font.i
    with zipfile.ZipFile(io.BytesIO(data)) as z:
        xml = b"".join(z.read(n) for n in z.namelist() if n.startswith("xl/"))
    assert b"<f>" not in xml and b"<f " not in xml              # no formula anywhere
    assert not any(c.data_type == "f" for row in ws.iter_rows() for c in row)
    # another build time, other bytes (the time is the only clock in the file)
    later = workbook_bytes(about, [Sheet("securities", df)], built + dt.timedelta(days=1),
                           title="@title")
    assert later != data
    assert workbook_bytes(about, [Sheet("securities", df)], built, title="@title") == data


def test_fund_workbook_matches_its_csvs(tmp_path):
    """A fund's workbook (assembled without the PDF): the long tables and the mandates and
    overlap tables, cell by cell against the CSV text the build writes."""
    from reporter.build import assemble
    from reporter.config import load_settings
    from reporter.pipeline.results import fund_results_files
    from reporter.workbook import pack_workbook

    at = dt.datetime.fromtimestamp(int(FIXED_EPOCH), tz=dt.UTC)
    a = assemble(load_settings(DEMO_FUND), at=at)
    path = tmp_path / "fund.xlsx"
    path.write_bytes(pack_workbook(a))
    wb = load_workbook(path)
    texts = fund_results_files(a)
    for sheet, name in FUND_SHEETS.items():
        assert_sheet_matches_csv(wb[sheet], texts[f"results/{name}"], sheet)
    assert wb["securities"]["A2"].value == "mandate"
    port = dict(_key_values(wb["portfolio"]))
    assert port["fund_benchmark"] == a.inputs.benchmark_label
    about = {r[0].value: r[1].value for r in wb["About"].iter_rows()}
    assert any("own benchmark" in v for k, v in about.items() if k.startswith("Caution"))
    assert math.isfinite(port["beta_regression"])


def test_text_past_a_cells_limit_is_cut_openly():
    """A text longer than a cell holds (32,767 characters, Excel's specification) is cut
    with a note saying so, never silently; a text at the limit is kept whole."""
    from reporter.workbook import CUT_NOTE, Sheet, workbook_bytes

    df = pd.DataFrame({"name": ["y" * 32767, "=" + "x" * 40000]})
    data = workbook_bytes([], [Sheet("securities", df)], dt.datetime(2026, 11, 30))
    ws = load_workbook(io.BytesIO(data))["securities"]
    assert ws["A3"].value == "y" * 32767
    cut = ws["A4"].value
    assert len(cut) == 32767 and cut.endswith(CUT_NOTE) and cut.startswith("=xxx")
    assert ws["A4"].data_type == "s" and ws["A4"].quotePrefix
