"""The same data in other layouts gives the same figures as the plain CSV demo.

Each test rewrites the demo pack (in a temporary folder) as ``;``-separated files with a
decimal comma, an XLSX workbook with named sheets, Parquet files, wide returns, or
day-first dates with an explicit ``date_format``, then compares ``validate_pack`` +
``analyse`` with the plain demo. Full PDF builds are not needed for this.
"""

from __future__ import annotations

import csv
import datetime as dt
import re
import shutil
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from openpyxl import Workbook

from reporter.analytics.pack import analyse
from reporter.cli import main
from reporter.config import INPUT_ROLES, load_settings
from reporter.validate import validate_pack
from tests.conftest import DEMO
from tests.data.make_bad_cases import base_pack, write_pack

FILES = {"holdings": "holdings.csv", "returns": "returns.csv", "market": "market.csv",
         "risk_free": "risk_free.csv", "cash_flows": "cash_flows.csv"}
NUMERIC = {"weight", "market_value", "return", "rate", "amount"}


def read_text_table(path: Path) -> tuple[list[str], list[list[str]]]:
    """A CSV file as text, exactly as written (no number parsing)."""
    with open(path, encoding="utf-8", newline="") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def write_text_table(path: Path, header: list[str], rows: list[list[str]],
                     delimiter: str = ",") -> None:
    with open(path, "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, delimiter=delimiter, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)


def pack_toml_with_inputs(inputs_section: str) -> str:
    """The demo's pack.toml with its [inputs] section replaced."""
    text = (DEMO / "pack.toml").read_text(encoding="utf-8")
    new, n = re.subn(r"\[inputs\]\n(?:[^\[].*\n|\n)*", inputs_section.strip() + "\n\n", text)
    assert n == 1
    return new


def figures(pack: Path):
    settings = load_settings(pack)
    inputs = validate_pack(settings, strict=True)
    return inputs, analyse(inputs, settings)


@pytest.fixture(scope="module")
def reference():
    """The plain CSV demo's validated inputs and results."""
    return figures(DEMO)


def assert_same_figures(pack: Path, reference) -> None:
    ref_inputs, ref = reference
    inputs, res = figures(pack)
    pd.testing.assert_frame_equal(inputs.holdings.frame, ref_inputs.holdings.frame)
    pd.testing.assert_frame_equal(res.securities, ref.securities, check_exact=True)
    assert res.portfolio_summary() == ref.portfolio_summary()


def demo_tables() -> dict[str, tuple[list[str], list[list[str]]]]:
    return {role: read_text_table(DEMO / name) for role, name in FILES.items()}


def test_reference_is_the_full_demo(reference):
    """Guards the comparisons below: the reference has every holding and real figures."""
    inputs, res = reference
    holdings = pd.read_csv(DEMO / "holdings.csv")
    assert list(res.securities["security_id"]) == list(holdings["security_id"])
    assert res.securities["beta"].notna().sum() >= len(holdings) - 4
    assert inputs.returns.shape == "long"


@pytest.mark.parametrize("where", ["inline", "section"])
def test_semicolon_and_decimal_comma(tmp_path, reference, where):
    pack = tmp_path / "pack"
    pack.mkdir()
    for role, (header, rows) in demo_tables().items():
        numeric = [j for j, c in enumerate(header) if c in NUMERIC]
        for r in rows:
            for j in numeric:
                r[j] = r[j].replace(".", ",")
        write_text_table(pack / FILES[role], header, rows, delimiter=";")
    if where == "inline":
        inputs = "[inputs]\n" + "\n".join(
            f'{role} = {{ path = "{name}", delimiter = ";", decimal = "," }}'
            for role, name in FILES.items())
    else:
        inputs = "[inputs]\n" + "\n".join(f'{role} = "{name}"' for role, name in FILES.items())
        inputs += '\ndelimiter = ";"\ndecimal = ","'
    (pack / "pack.toml").write_text(pack_toml_with_inputs(inputs), encoding="utf-8")
    sample = (pack / "returns.csv").read_text(encoding="utf-8").splitlines()[1]
    assert re.fullmatch(r"\d{4}-\d\d-\d\d;\w+;-?\d+,\d+", sample), sample
    assert_same_figures(pack, reference)


def test_decimal_comma_without_the_setting_fails(tmp_path, capsys):
    """The same files read as plain CSV are refused: the settings above are what counts."""
    pack = tmp_path / "pack"
    pack.mkdir()
    for role, (header, rows) in demo_tables().items():
        write_text_table(pack / FILES[role], header, rows, delimiter=";")
    # the demo's pack.toml without its optional style files (not written here)
    text = (DEMO / "pack.toml").read_text(encoding="utf-8")
    (pack / "pack.toml").write_text(re.sub(r"(?m)^(factors|benchmark_sectors) = .*\n", "", text),
                                    encoding="utf-8")
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err
    assert "holdings.csv:1:security_id: required column is missing" in err


@pytest.mark.parametrize("sep, toml", [(";", '";"'), ("\t", '"\\t"')])
def test_other_delimiter_without_the_setting_says_what_to_set(tmp_path, capsys, sep, toml):
    """A semicolon (or tab) file read with the default comma is one column named
    ``date;return``: each missing column's line says which delimiter to set."""
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    for role in ("holdings", "market"):
        header, rows = read_text_table(DEMO / FILES[role])
        write_text_table(pack / FILES[role], header, rows, delimiter=sep)
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err.splitlines()
    hint = f"; the header holds them separated by {sep!r}: set delimiter = {toml}"
    # a control character in a message is shown escaped (a tab as \t)
    m_has = sep.join(read_text_table(DEMO / "market.csv")[0]).replace("\t", "\\t")
    assert f"market.csv:1:date: required column is missing (the file has: {m_has}){hint}" in err
    assert f"market.csv:1:return: required column is missing (the file has: {m_has}){hint}" in err
    assert ("holdings.csv:1:weight: required column is missing: give weight or market_value"
            + hint.replace("them", "it")) in err
    assert "Traceback" not in "\n".join(err)


@pytest.mark.parametrize("demo, file, column", [("demo-fund", "holdings.csv", "mandate"),
                                                 ("demo", "factors.csv", "date")])
def test_other_delimiter_hint_for_fund_holdings_and_factors(tmp_path, capsys, demo, file,
                                                             column):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO.parent / demo, pack)
    header, rows = read_text_table(pack / file)
    write_text_table(pack / file, header, rows, delimiter=";")
    assert main(["check", str(pack)]) == 2
    (line,) = [x for x in capsys.readouterr().err.splitlines()
               if x.startswith(f"{file}:1:{column}: required column is missing")]
    assert line.endswith("; the header holds it separated by ';': set delimiter = \";\"")


def test_a_column_truly_missing_gets_no_delimiter_hint(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    (pack / "market.csv").write_text("date;x,rate\n2016-12-31;1,0.1\n", encoding="utf-8")
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert "market.csv:1:return: required column is missing (the file has: date;x, rate)" in err


def test_xlsx_with_named_sheets(tmp_path, reference):
    pack = tmp_path / "pack"
    pack.mkdir()
    wb = Workbook()
    decoy = wb.active
    decoy.title = "Notes"                      # the first sheet is not the data
    decoy.append(["prepared by", "the pack team"])
    sheet_names = {}
    for role, (header, rows) in demo_tables().items():
        ws = wb.create_sheet(title=f"{role.title().replace('_', ' ')} data")
        sheet_names[role] = ws.title
        ws.append(header)
        for r in rows:
            cells = []
            for col, v in zip(header, r, strict=True):
                if col == "date":
                    cells.append(dt.datetime.strptime(v, "%Y-%m-%d"))   # a real date cell
                elif col in NUMERIC:
                    cells.append(float(v))
                else:
                    cells.append(v)
            ws.append(cells)
    wb.save(pack / "pack.xlsx")
    inputs = "[inputs]\n" + "\n".join(
        f'{role} = {{ path = "pack.xlsx", sheet = "{sheet_names[role]}" }}' for role in FILES)
    (pack / "pack.toml").write_text(pack_toml_with_inputs(inputs), encoding="utf-8")
    assert_same_figures(pack, reference)


def test_xlsx_date_cells_are_dates_whatever_the_text_date_format(tmp_path, reference):
    """date_format is for dates written as text; a spreadsheet's date cells are dates."""
    pack = tmp_path / "pack"
    pack.mkdir()
    for role, (header, rows) in demo_tables().items():
        if role == "market":
            continue
        if "date" in header:
            for r in rows:
                r[0] = dt.date.fromisoformat(r[0]).strftime("%d/%m/%Y")
        write_text_table(pack / FILES[role], header, rows)
    wb = Workbook()
    header, rows = read_text_table(DEMO / "market.csv")
    wb.active.append(header)
    for d, v in rows:
        wb.active.append([dt.datetime.strptime(d, "%Y-%m-%d"), float(v)])
    wb.save(pack / "market.xlsx")
    inputs = "[inputs]\n" + "\n".join(
        f'{role} = "{"market.xlsx" if role == "market" else name}"'
        for role, name in FILES.items()) + '\ndate_format = "%d/%m/%Y"'
    (pack / "pack.toml").write_text(pack_toml_with_inputs(inputs), encoding="utf-8")
    assert_same_figures(pack, reference)


def test_xlsx_date_cells_with_a_time_of_day_are_their_days(tmp_path, reference):
    """README: a spreadsheet date cell's "time of day is dropped". Every file with dates
    (returns, market, risk-free rate, cash flows) as a workbook whose date cells carry a
    time (23:59:59 on the first, 18:30 on the rest) gives the plain demo's figures; such a
    cell was refused as "not a valid date in the format '%Y-%m-%d': '2017-01-31T23:59:59'"."""
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    text = (pack / "pack.toml").read_text(encoding="utf-8")
    for role, (header, rows) in demo_tables().items():
        if "date" not in header:
            continue
        wb = Workbook()
        wb.active.append(header)
        for i, r in enumerate(rows):
            clock = dt.time(23, 59, 59) if i == 0 else dt.time(18, 30)
            cells = [dt.datetime.combine(dt.date.fromisoformat(v), clock) if c == "date"
                     else float(v) if c in NUMERIC else v for c, v in zip(header, r, strict=True)]
            wb.active.append(cells)
        wb.save(pack / f"{role}.xlsx")
        (pack / FILES[role]).unlink()
        text = text.replace(f'{role} = "{FILES[role]}"', f'{role} = "{role}.xlsx"')
    (pack / "pack.toml").write_text(text, encoding="utf-8")
    assert text.count(".xlsx") == 4
    assert_same_figures(pack, reference)


def test_xlsx_unknown_sheet_is_named(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    wb = Workbook()
    wb.active.title = "Holdings"
    header, rows = read_text_table(DEMO / "holdings.csv")
    wb.active.append(header)
    for r in rows:
        wb.active.append(r[:-1] + [float(r[-1])])       # market_value, the last column
    wb.save(pack / "holdings.xlsx")
    text = (pack / "pack.toml").read_text(encoding="utf-8").replace(
        'holdings = "holdings.csv"', 'holdings = { path = "holdings.xlsx", sheet = "Positions" }')
    (pack / "pack.toml").write_text(text, encoding="utf-8")
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err
    assert err.splitlines()[0] == "holdings.xlsx: no sheet named 'Positions'; sheets: Holdings"


def test_xlsx_column_named_twice_is_refused(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    wb = Workbook()
    wb.active.append(["security_id", "name", "sector", "weight", "weight"])
    wb.active.append(["TVX001", "A plc", "Utilities", 0.5, 0.4])
    wb.save(pack / "holdings.xlsx")
    text = (pack / "pack.toml").read_text(encoding="utf-8").replace(
        'holdings = "holdings.csv"', 'holdings = "holdings.xlsx"')
    (pack / "pack.toml").write_text(text, encoding="utf-8")
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err
    assert err.splitlines()[0] == "holdings.xlsx:1:weight: column name appears more than once"


def test_parquet(tmp_path, reference):
    pack = tmp_path / "pack"
    pack.mkdir()
    for role, (header, rows) in demo_tables().items():
        columns = {}
        for j, col in enumerate(header):
            values = [r[j] for r in rows]
            if col == "date":
                columns[col] = pa.array([dt.date.fromisoformat(v) for v in values], pa.date32())
            elif col in NUMERIC:
                columns[col] = pa.array([float(v) for v in values], pa.float64())
            else:
                columns[col] = pa.array(values, pa.string())
        pq.write_table(pa.table(columns), pack / f"{role}.parquet")
    inputs = "[inputs]\n" + "\n".join(f'{role} = "{role}.parquet"' for role in FILES)
    (pack / "pack.toml").write_text(pack_toml_with_inputs(inputs), encoding="utf-8")
    assert_same_figures(pack, reference)


@pytest.mark.parametrize("zone", ["America/New_York", "Asia/Tokyo"])
def test_parquet_timestamps_are_the_days_they_were_stamped(tmp_path, reference, zone):
    """Parquet dates as timestamps with a time of day: the market's month-ends stamped at
    20:00:00.250 on a time zone's clock (in New York that is the next day in UTC, in Tokyo
    the same day), the returns' as naive timestamps at 18:30. Each is its calendar day where
    it was stamped, so the figures are the plain demo's (the UTC day had shifted the market
    one month against the holdings: beta 0.015 instead of 1.05); sub-second times, once an
    ArrowInvalid, are read too."""
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    for role, hour, tz in (("market", "20:00:00.250", zone), ("returns", "18:30:00", None)):
        frame = pd.read_csv(DEMO / FILES[role], dtype=str)
        stamps = pd.to_datetime(frame["date"] + " " + hour, format="ISO8601")
        frame["date"] = stamps.dt.tz_localize(tz) if tz else stamps
        frame[frame.columns[-1]] = frame[frame.columns[-1]].astype(float)
        frame.to_parquet(pack / f"{role}.parquet", index=False)
    text = (pack / "pack.toml").read_text(encoding="utf-8")
    for role in ("market", "returns"):
        text = text.replace(f'{role} = "{FILES[role]}"', f'{role} = "{role}.parquet"')
    (pack / "pack.toml").write_text(text, encoding="utf-8")
    assert_same_figures(pack, reference)


def test_wide_returns(tmp_path, reference):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    header, rows = read_text_table(DEMO / "returns.csv")
    assert header == ["date", "security_id", "return"]
    ids = list(dict.fromkeys(r[1] for r in rows))
    by_date: dict[str, dict[str, str]] = {}
    for date, sid, value in rows:
        by_date.setdefault(date, {})[sid] = value
    wide = [[date] + [cells.get(sid, "") for sid in ids] for date, cells in by_date.items()]
    assert any("" in r for r in wide)          # holdings with short histories leave gaps
    write_text_table(pack / "returns.csv", ["date"] + ids, wide)
    inputs, _ = figures(pack)
    assert inputs.returns.shape == "wide"
    assert_same_figures(pack, reference)


def test_day_first_dates_with_date_format(tmp_path, reference, capsys):
    pack = tmp_path / "pack"
    pack.mkdir()
    for role, (header, rows) in demo_tables().items():
        if "date" in header:
            j = header.index("date")
            for r in rows:
                r[j] = dt.date.fromisoformat(r[j]).strftime("%d/%m/%Y")
        write_text_table(pack / FILES[role], header, rows)
    plain = "[inputs]\n" + "\n".join(f'{role} = "{name}"' for role, name in FILES.items())
    (pack / "pack.toml").write_text(pack_toml_with_inputs(plain), encoding="utf-8")
    # without the setting, day-first dates are not guessed
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err
    assert "returns.csv:2:date: not a valid date in the format '%Y-%m-%d': '31/12/2016'" in err
    (pack / "pack.toml").write_text(pack_toml_with_inputs(plain + '\ndate_format = "%d/%m/%Y"'),
                                    encoding="utf-8")
    assert_same_figures(pack, reference)


def test_date_format_on_one_file_only(tmp_path, reference):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    header, rows = read_text_table(DEMO / "market.csv")
    for r in rows:
        r[0] = dt.date.fromisoformat(r[0]).strftime("%d/%m/%Y")
    write_text_table(pack / "market.csv", header, rows)
    text = (pack / "pack.toml").read_text(encoding="utf-8").replace(
        'market = "market.csv"', 'market = { path = "market.csv", date_format = "%d/%m/%Y" }')
    (pack / "pack.toml").write_text(text, encoding="utf-8")
    assert_same_figures(pack, reference)


# --------------------------------------------------------------------------- small packs

def small_pack(tmp_path: Path, edit=None) -> Path:
    pack = base_pack()
    if edit:
        edit(pack)
    folder = tmp_path / "pack"
    write_pack(pack, folder)
    return folder


def test_text_that_looks_like_a_missing_value_is_kept(tmp_path, capsys):
    """A security id "NA" is an id, not a missing value (only an empty field is empty)."""
    def rename(p):
        for r in p.rows("holdings.csv") + p.rows("returns.csv"):
            if "FWX04" in r:
                r[r.index("FWX04")] = "NA"
    folder = small_pack(tmp_path, rename)
    settings = load_settings(folder)
    inputs = validate_pack(settings, strict=True)
    assert inputs.holdings.ids == ("FWX01", "FWX02", "FWX03", "NA")
    assert inputs.returns.security_ids[-1] == "NA"
    assert inputs.returns.values[:, -1].tolist() == [
        float(r[2]) for r in base_pack().rows("returns.csv") if r[1] == "FWX04"]


def test_spaces_in_the_header_and_a_byte_order_mark(tmp_path):
    folder = small_pack(tmp_path)
    path = folder / "returns.csv"
    lines = path.read_text(encoding="utf-8").splitlines()
    lines[0] = "date, security_id , return"
    path.write_text("\ufeff" + "\n".join(lines) + "\n", encoding="utf-8")
    reference_inputs = validate_pack(load_settings(small_pack(tmp_path / "plain")), strict=True)
    inputs = validate_pack(load_settings(folder), strict=True)
    assert inputs.returns.values.tolist() == reference_inputs.returns.values.tolist()


def test_blank_lines_are_skipped(tmp_path):
    folder = small_pack(tmp_path)
    for name in ("holdings.csv", "market.csv"):
        lines = (folder / name).read_text(encoding="utf-8").splitlines()
        lines.insert(3, "")
        (folder / name).write_text("\n".join(lines) + "\n\n", encoding="utf-8")
    settings = load_settings(folder)
    inputs = validate_pack(settings, strict=True)
    assert len(inputs.holdings.ids) == 4
    assert len(inputs.market.dates) == 30


def test_every_role_has_a_file():
    assert set(FILES) == set(INPUT_ROLES) | {"cash_flows"}     # the demo also has flows


def test_xlsx_that_unpacks_too_far_is_refused_unread(tmp_path, capsys, monkeypatch):
    """A workbook is a zip archive: one whose part packs 20 MB of zeros into a few kB (far
    tighter than any sheet of figures) is refused before openpyxl unpacks it, and so is one
    whose parts unpack past the size limit (lowered here to keep the file small)."""
    import zipfile

    from reporter import readers_xlsx

    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    wb = Workbook()
    wb.active.append(["security_id", "name", "sector", "weight"])
    wb.active.append(["TVX001", "A plc", "Utilities", 1.0])
    wb.save(pack / "holdings.xlsx")
    text = (pack / "pack.toml").read_text(encoding="utf-8").replace(
        'holdings = "holdings.csv"', 'holdings = "holdings.xlsx"')
    (pack / "pack.toml").write_text(text, encoding="utf-8")
    assert main(["check", str(pack)]) == 0            # a small workbook is read
    capsys.readouterr()
    monkeypatch.setattr(readers_xlsx, "XLSX_MAX_UNPACKED", 4096)
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err[1:] == ["reporter: 1 error(s) in the inputs; nothing was written"]
    assert re.fullmatch(
        r"holdings\.xlsx: refused unread: its parts unpack to [\d.]+ MB \(at most 0\.0 MB\); "
        r"save the data as CSV or Parquet", err[0]), err
    monkeypatch.undo()
    with zipfile.ZipFile(pack / "holdings.xlsx", "a", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("xl/media/padding.bin", bytes(20 << 20))
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err[1:] == ["reporter: 1 error(s) in the inputs; nothing was written"]
    assert re.fullmatch(
        r"holdings\.xlsx: refused unread: its part xl/media/padding\.bin unpacks [\d,]+ to 1, "
        r"to 20 MB \(a sheet of figures packs at most about 30 to 1; refused above 200\); "
        r"save the data as CSV or Parquet", err[0]), err
