"""Hostile inputs: values that are well-formed enough to pass a casual look but break the
arithmetic (leverage that wipes the portfolio out, weights that cancel, huge returns,
non-finite settings, an unterminated quote). Each must give one ``file:row:column: message``
line (or ``pack.toml:key: message``), exit 2 from both ``check`` and ``build``, no traceback,
and no output folder."""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from reporter.cli import main
from tests.conftest import DEMO, text_past_the_right_edge, words_past_the_text_block

SUMMARY = "reporter: "


def _pack(tmp_path: Path) -> Path:
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    return pack


def _toml(pack: Path, section: str, lines: str) -> None:
    """Add ``lines`` at the top of ``[section]`` of the pack's pack.toml (made if absent)."""
    path = pack / "pack.toml"
    text = path.read_text()
    if f"[{section}]\n" in text:
        text = text.replace(f"[{section}]\n", f"[{section}]\n{lines}\n", 1)
    else:
        text = text.replace("[analysis]\n", f"[{section}]\n{lines}\n\n[analysis]\n", 1)
    path.write_text(text)


def _refused(pack: Path, tmp_path: Path, capsys) -> list[str]:
    """Run ``check`` and ``build`` on ``pack``: both exit 2 with the same problem lines, no
    traceback, and the build writes nothing. Returns the problem lines."""
    code = main(["check", str(pack)])
    _, err = capsys.readouterr()
    assert code == 2, err
    assert "Traceback" not in err and "internal error" not in err
    lines = [ln for ln in err.splitlines() if not ln.startswith(SUMMARY)]
    out = tmp_path / "out"
    code = main(["build", str(pack), "--out", str(out), "--quiet"])
    _, err = capsys.readouterr()
    assert code == 2, err
    assert "Traceback" not in err and "internal error" not in err
    assert [ln for ln in err.splitlines() if not ln.startswith(SUMMARY)] == lines
    assert not out.exists()
    return lines


def _weights(pack: Path, weights: list[float]) -> None:
    """Give the holdings file a weight column (in place of market values)."""
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    h = h.drop(columns="market_value")
    h["weight"] = [repr(float(w)) for w in weights]
    h.to_csv(pack / "holdings.csv", index=False)


# -- 1. leverage that wipes the portfolio out; weights that sum to zero ---------------------

def _cash_earns_the_rate(pack: Path, h: pd.DataFrame, month: pd.Series, date: str) -> None:
    """Give ``month`` (returns by security id) the cash holdings' return of ``date``: the
    risk-free rate, as the pack reckons cash."""
    rate = float(pd.read_csv(pack / "risk_free.csv").set_index("date").loc[date, "rate"])
    for cid in h.loc[h["asset_class"].str.lower() == "cash", "security_id"]:
        month[cid] = rate


def test_leverage_that_wipes_the_portfolio_out_is_one_error(tmp_path, capsys):
    pack = _pack(tmp_path)
    h = pd.read_csv(pack / "holdings.csv")
    mv = h["market_value"].to_numpy(dtype=float)
    rest = mv[2:] / mv[2:].sum()          # the others sum to 1, so the two legs net to zero
    _weights(pack, [2.0, -2.0, *rest])
    _toml(pack, "checks", "allow_short = true")
    # one month in which the long leg halves and the short leg rises by half: -200% from
    # the two legs, whatever the others did
    r = pd.read_csv(pack / "returns.csv", dtype={"return": str})
    at = r["date"] == "2026-10-31"
    r.loc[at & (r["security_id"] == "TVX001"), "return"] = "-0.5"
    r.loc[at & (r["security_id"] == "TVX002"), "return"] = "0.5"
    r.to_csv(pack / "returns.csv", index=False)
    # the month's portfolio return as the pack would compute it: cash earns the risk-free
    # rate, and the weights of holdings with a return that month are re-weighted over them
    month = r[at].set_index("security_id")["return"].astype(float)
    _cash_earns_the_rate(pack, h, month, "2026-10-31")
    w = pd.Series([2.0, -2.0, *rest], index=h["security_id"])
    present = w.index.isin(month.index)
    expected = float((w[present] * month.reindex(w.index[present])).sum() / w[present].sum())
    assert expected < -1
    assert _refused(pack, tmp_path, capsys) == [
        "holdings.csv:weight: the gross leverage of 5 (sum of |weights|) wipes the portfolio "
        f"out: its return in the period of 2026-10-31 is {expected:.0%}, and nothing is left "
        "to compound; reduce the long and short weights"]


@pytest.mark.parametrize("proxy", ["market", "benchmark"])
def test_leverage_that_wipes_out_only_through_a_proxy_is_refused_by_check_and_build(
        tmp_path, capsys, proxy):
    # a short holding with no history of its own that names the market as its proxy: the
    # back-cast wipes out only with the proxy standing in. Validation reckoned from the
    # holdings' own returns alone, so `check` said ok and only the analysis refused
    pack = _pack(tmp_path)
    h = pd.read_csv(pack / "holdings.csv")
    mv = h["market_value"].to_numpy(dtype=float)
    rest = mv[2:] / mv[2:].sum()
    weights = [-2.0, 2.0, *rest]
    _weights(pack, weights)
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    h["proxy"] = [proxy] + [""] * (len(h) - 1)
    h.to_csv(pack / "holdings.csv", index=False)
    _toml(pack, "checks", "allow_short = true")
    if proxy == "benchmark":        # a copy of the market's file, read as the benchmark
        shutil.copy(pack / "market.csv", pack / "benchmark.csv")
        _toml(pack, "inputs", 'benchmark = "benchmark.csv"')
    r = pd.read_csv(pack / "returns.csv", dtype={"return": str})
    r = r[r["security_id"] != "TVX001"]            # its proxy's returns stand in
    at = r["date"] == "2026-10-31"
    r.loc[at & (r["security_id"] == "TVX002"), "return"] = "-0.5"
    r.to_csv(pack / "returns.csv", index=False)
    m = pd.read_csv(pack / f"{proxy}.csv", dtype={"return": str})
    m.loc[m["date"] == "2026-10-31", "return"] = "0.5"
    m.to_csv(pack / f"{proxy}.csv", index=False)
    # the month as validation sees it (TVX001 absent, the others re-weighted) loses less
    # than all; with the proxy standing in for TVX001 it loses more than all
    month = r[at].set_index("security_id")["return"].astype(float)
    w = pd.Series(weights, index=h["security_id"])
    own = w.index.isin(month.index)
    seen = float((w[own] * month.reindex(w.index[own])).sum() / w[own].sum())
    month["TVX001"] = 0.5
    _cash_earns_the_rate(pack, h, month, "2026-10-31")
    expected = float((w * month.reindex(w.index)).sum() / w.sum())
    assert seen > -1 > expected
    assert _refused(pack, tmp_path, capsys) == [
        "holdings.csv:weight: the gross leverage of 5 (sum of |weights|) wipes the portfolio "
        f"out: its return in the period of 2026-10-31 is {expected:.0%}, and nothing is left "
        "to compound; reduce the long and short weights",
        "holdings.csv:2:security_id: warning: holding TVX001 has no return history in "
        f"returns.csv; its proxy '{proxy}' stands in for it"]


def test_weights_summing_to_zero_are_not_rescaled(tmp_path, capsys):
    pack = _pack(tmp_path)
    n = len(pd.read_csv(pack / "holdings.csv"))
    # long and short legs that cancel, to rounding (0.1 + 0.2 - 0.3 is not exactly 0)
    w = np.resize([0.1, 0.2, -0.3], n)
    w[-1] = 0.0 if n % 3 else w[-1]
    _weights(pack, list(w))
    _toml(pack, "checks", "allow_short = true\nnormalise_weights = true")
    total = float(np.asarray(pd.read_csv(pack / "holdings.csv")["weight"]).sum())
    assert abs(total) < 1e-12
    assert _refused(pack, tmp_path, capsys) == [
        f"holdings.csv:weight: weights sum to {total:.6g}, which is zero to rounding, so they "
        "cannot be rescaled to sum to 1; give weights that sum to 1"]


# -- 2. HAC lags beyond what a fit can have ------------------------------------------------

@pytest.mark.parametrize("lags", [24, 1000])
def test_hac_lags_not_below_min_obs_are_refused(tmp_path, capsys, lags):
    pack = _pack(tmp_path)
    text = (pack / "pack.toml").read_text()
    assert "\nmin_obs = 24\n" in text
    (pack / "pack.toml").write_text(text.replace("\nmin_obs = 24\n",
                                                 f"\nmin_obs = 24\nhac_lags = {lags}\n"))
    assert _refused(pack, tmp_path, capsys) == [
        f"pack.toml:analysis.hac_lags: hac_lags ({lags}) must be below min_obs (24), the "
        "fewest observations a holding's fit may have"]


# -- 3. nan and inf in pack.toml -------------------------------------------------------------

# every float setting of pack.toml: (section, the line with {v} for the value, the key named)
FLOAT_SETTINGS = [
    ("analysis", "confidence = {v}", "analysis.confidence"),
    ("analysis", "blume_intercept = {v}", "analysis.blume_intercept"),
    ("analysis", "blume_slope = {v}", "analysis.blume_slope"),
    ("analysis", "mar = {v}", "analysis.mar"),
    ("checks", "weight_tolerance = {v}", "checks.weight_tolerance"),
    ("limits", "beta_min = {v}", "limits.beta_min"),
    ("limits", "beta_max = {v}", "limits.beta_max"),
    ("limits", "max_holding_weight = {v}", "limits.max_holding_weight"),
    ("limits", "max_sector_weight = {v}", "limits.max_sector_weight"),
    ("limits", "max_sector_weight = {{ Energy = {v} }}", "limits.max_sector_weight.Energy"),
    ("limits", "min_effective_n = {v}", "limits.min_effective_n"),
    ("limits", "max_tracking_error_ann = {v}", "limits.max_tracking_error_ann"),
    ("limits", "max_idiosyncratic_share = {v}", "limits.max_idiosyncratic_share"),
    ("limits", "max_var_95_ann = {v}", "limits.max_var_95_ann"),
    ("limits", "max_stress_loss = {v}", "limits.max_stress_loss"),
    ("limits", "stress_shock = {v}", "limits.stress_shock"),
    ("limits", "watch_margin = {v}", "limits.watch_margin"),
    ("limits", "asset_class_ranges = {{ Equity = [0.9, {v}] }}",
     "limits.asset_class_ranges.Equity"),
    ("stress", "market_shocks = [{v}]", "stress.market_shocks"),
    ("stress", "levels = [{v}]", "stress.levels"),
    ("stress", "block_length = {v}", "stress.block_length"),
    ("stress", "backtest_level = {v}", "stress.backtest_level"),
]


@pytest.mark.parametrize("value", ["nan", "inf", "-inf"])
@pytest.mark.parametrize(("section", "line", "key"), FLOAT_SETTINGS,
                         ids=[c[1].split(" =")[0] + ("_table" if "{{" in c[1] else "")
                              for c in FLOAT_SETTINGS])
def test_non_finite_float_settings_are_refused(tmp_path, capsys, section, line, key, value):
    pack = _pack(tmp_path)
    path = pack / "pack.toml"
    name = line.split(" =")[0]
    # the demo's own setting of the key, if any, gives way to the one under test
    path.write_text("".join(ln for ln in path.read_text().splitlines(keepends=True)
                            if not ln.startswith(f"{name} =")))
    _toml(pack, section, line.format(v=value))
    assert _refused(pack, tmp_path, capsys) == [
        f"pack.toml:{key}: Input should be a finite number (got {value})"]


# -- 4. returns too large for any security, and for the arithmetic --------------------------

def _set_field(path: Path, prefix: str, column: str, value: str) -> int:
    """Set ``column`` on the first line of the CSV ``path`` that starts with ``prefix``;
    return that line's number (the header is line 1)."""
    lines = path.read_text().splitlines(keepends=True)
    j = lines[0].rstrip("\n").split(",").index(column)
    n = next(k for k, ln in enumerate(lines) if ln.startswith(prefix))
    fields = lines[n].rstrip("\n").split(",")
    fields[j] = value
    lines[n] = ",".join(fields) + "\n"
    path.write_text("".join(lines))
    return n + 1


@pytest.mark.parametrize("value", ["1e308", "1e150", "1e20", "100.5"])
@pytest.mark.parametrize(("file", "prefix", "column"), [
    ("returns.csv", "2026-10-31,TVX001,", "return"),
    ("market.csv", "2025-02-28,", "return"),
    ("risk_free.csv", "2025-02-28,", "rate"),
    ("factors.csv", "2025-02-28,", "value"),
    ("benchmark_sectors.csv", "2025-02-28,", "return"),
])
def test_returns_above_the_plausible_bound_are_refused(tmp_path, capsys, file, prefix, column,
                                                       value):
    pack = _pack(tmp_path)
    row = _set_field(pack / file, prefix, column, value)
    shown = f"{float(value):g}"
    assert _refused(pack, tmp_path, capsys) == [
        f"{file}:{row}:{column}: return {shown} is above 100 (+10,000%) in one period, more "
        "than any security earns; check the data"]


def test_a_return_at_the_bound_is_accepted(tmp_path, capsys):
    """+10,000% itself is the bound, not beyond it (and below -100% is still refused)."""
    pack = _pack(tmp_path)
    _set_field(pack / "returns.csv", "2026-10-31,TVX001,", "return", "100")
    assert main(["check", str(pack)]) == 0
    capsys.readouterr()
    row = _set_field(pack / "returns.csv", "2026-10-31,TVX002,", "return", "-1.5")
    assert _refused(pack, tmp_path, capsys) == [
        f"returns.csv:{row}:return: return -1.5 is below -100%"]


def test_a_return_just_below_minus_100_is_quoted_as_written(tmp_path, capsys):
    """-1.0000001 is below -100% by a hair; the message quotes it so (it once read "return -1
    is below -100%", which looks wrong)."""
    pack = _pack(tmp_path)
    row = _set_field(pack / "returns.csv", "2026-10-31,TVX002,", "return", "-1.0000001")
    assert _refused(pack, tmp_path, capsys) == [
        f"returns.csv:{row}:return: return -1.0000001 is below -100%"]


# -- 5. a quoted field that is never closed ---------------------------------------------------

@pytest.mark.parametrize(("file", "line", "column", "end"), [
    ("returns.csv", 5, "return", "\n"),   # a long file: the rest of it is one field of 130+ KB
    ("market.csv", 30, "return", "\n"),   # a small one: the rest is read as one "number"
    ("market.csv", 121, "return", ""),    # the last line, with no line break after it
])
def test_an_unclosed_quote_is_one_line_naming_where_it_opens(tmp_path, capsys, file, line,
                                                             column, end):
    pack = _pack(tmp_path)
    path = pack / file
    lines = path.read_text().splitlines()
    assert len(lines) >= line
    head, _, value = lines[line - 1].rpartition(",")
    lines[line - 1] = f'{head},"{value}'           # the quote is opened and never closed
    path.write_text("\n".join(lines) + end)
    assert _refused(pack, tmp_path, capsys) == [
        f"{file}:{line}:{column}: a quoted field opened on this line is never closed (the "
        "quote runs to the end of the file); close it or remove it"]


@pytest.mark.parametrize(("file", "column", "opens", "closes", "sep"), [
    ("holdings.csv", "name", 3, 5, "\n"),       # two holdings swallowed into a name
    ("holdings.csv", "sector", 10, 11, "\r\n"),  # one, in a file with Windows line ends
    ("returns.csv", "security_id", 40, 42, "\n"),    # a long returns file: two returns lost
])
def test_a_quote_closed_lines_later_is_refused_not_read_as_one_value(
        tmp_path, capsys, file, column, opens, closes, sep):
    # a quote opened in one line and closed in the same column lines later keeps the right
    # number of fields, so the lines between became one value and their rows were lost in
    # silence (two holdings dropped, `check` said "ok"): now refused where the quote opens
    pack = _pack(tmp_path)
    path = pack / file
    lines = path.read_text().splitlines()
    k = lines[0].split(",").index(column)
    first, last = lines[opens - 1].split(","), lines[closes - 1].split(",")
    first[k], last[k] = '"' + first[k], last[k] + '"'
    lines[opens - 1], lines[closes - 1] = ",".join(first), ",".join(last)
    path.write_bytes((sep.join(lines) + sep).encode())
    assert _refused(pack, tmp_path, capsys) == [
        f"{file}:{opens}:{column}: a quoted value runs over lines {opens} to {closes} and "
        "holds the delimiter ',': a quote is misplaced, and the lines between would be read "
        "as one value and their rows lost; close the quote on the line it opens, or remove it"]


def test_a_quoted_name_over_two_lines_without_the_delimiter_is_still_read(tmp_path, capsys):
    # the same shape a custodian's export gives a name with an address line: a value as
    # written, so it stays (the rows after it keep their numbers: test_bad_inputs.py)
    pack = _pack(tmp_path)
    path = pack / "holdings.csv"
    lines = path.read_text().splitlines()
    k = lines[0].split(",").index("name")
    cells = lines[2].split(",")
    cells[k] = f'"{cells[k]}\nRegistered office: Harbour Row"'
    lines[2] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n")
    assert main(["check", str(pack)]) == 0
    assert "61 from holdings.csv" in capsys.readouterr().out


def test_an_overflowing_number_is_not_quoted_back_as_if_written_inf(tmp_path, capsys):
    # the CSV reader parses 1e400 to inf and its text is gone: the message said "'inf'",
    # which the user never wrote
    pack = _pack(tmp_path)
    path = pack / "returns.csv"
    lines = path.read_text().splitlines()
    lines[5] = lines[5].rsplit(",", 1)[0] + ",1e400"
    path.write_text("\n".join(lines) + "\n")
    assert _refused(pack, tmp_path, capsys) == [
        "returns.csv:6:return: value is not a finite number: 'inf' as read (written so, or a "
        "number too large for a float: beyond about 1.8e308)"]


def test_an_overlong_name_wraps_and_keeps_the_figures_on_the_page(tmp_path):
    # a 300-character name with no space kept its table cell on one line, and the weight,
    # beta and interval columns beside it were drawn past the page's right edge
    pack = _pack(tmp_path)
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    h.loc[1, "name"] = "W" * 300
    h.to_csv(pack / "holdings.csv", index=False)
    out = tmp_path / "out"
    assert main(["build", str(pack), "--out", str(out), "--quiet"]) == 0
    assert 'class="name long">' + "W" * 300 in (out / "pack.html").read_text()
    for pdf in ("pack.pdf", "pack-trustees.pdf"):
        assert text_past_the_right_edge(out / pdf) == [], pdf


def test_text_too_long_to_print_is_refused_at_its_cell_before_any_layout(tmp_path, capsys):
    """A 20,000-character name or a 3,000-character sector held the PDF stage for minutes
    (the layout breaks a word with no space anywhere, at a cost that grows with the square
    of its length); so did one long word in commentary or actions.csv. Each is refused at
    its cell or line, and nothing is built; 300 characters are still taken (the tests above
    build with them)."""
    word = ("a word of {:,} characters with no space ('{}'...); at most 300: break it, or make "
            "a long address a link's target").format
    pack = _pack(tmp_path)
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    h.loc[0, "name"] = "W" * 20_000
    h.loc[1, "sector"] = "S" * 301
    h.to_csv(pack / "holdings.csv", index=False)
    assert _refused(pack, tmp_path, capsys) == [
        "holdings.csv:2:name: 20,000 characters long; at most 300",
        "holdings.csv:3:sector: 301 characters long; at most 300"]

    pack = _pack(tmp_path / "commentary")
    note = pack / "commentary" / "summary.md"
    lines = note.read_text().split("\n")
    lines[5] += " " + "x" * 50_000
    lines.append("```\n" + "c" * 400 + "\n```")
    note.write_text("\n".join(lines))
    assert _refused(pack, tmp_path, capsys) == [
        f"commentary/summary.md:6: {word(50_000, 'x' * 40)}",
        f"commentary/summary.md:{len(lines) + 1}: {word(400, 'c' * 40)}"]   # in the block

    pack = _pack(tmp_path / "actions")
    actions = pack / "actions.csv"
    rows = actions.read_text().split("\n")
    rows[2] = rows[2].replace("Awaiting two quotes", "Awaiting " + "q" * 1000)
    actions.write_text("\n".join(rows))
    assert _refused(pack, tmp_path, capsys) == [f"actions.csv:3:note: {word(1000, 'q' * 40)}"]


def test_an_overlong_sector_wraps_and_keeps_the_figures_on_the_page(tmp_path):
    # a 120-character sector with no space kept its cell on one line in the attribution,
    # sector limit, risk and appendix tables, whose figures were drawn past the page's edge
    pack = _pack(tmp_path)
    sector = "S" * 120
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    held = h.loc[1, "sector"]
    h.loc[h["sector"] == held, "sector"] = sector
    h.to_csv(pack / "holdings.csv", index=False)
    b = pd.read_csv(pack / "benchmark_sectors.csv", dtype=str)
    b.loc[b["sector"] == held, "sector"] = sector
    b.to_csv(pack / "benchmark_sectors.csv", index=False)
    out = tmp_path / "out"
    assert main(["build", str(pack), "--out", str(out), "--quiet"]) == 0
    assert '<td class="long">' + sector in (out / "pack.html").read_text()
    for pdf in ("pack.pdf", "pack-trustees.pdf"):
        assert text_past_the_right_edge(out / pdf) == [], pdf
        # and no word runs into the margin: the attribution's "Reading." paragraph, which
        # names the sector, had set it on one line far past the text block
        if shutil.which("pdftotext") is not None:
            assert words_past_the_text_block(out / pdf) == [], pdf


def _holdings_parquet(pack: Path, column: str, array=None, *, extra=None) -> None:
    """The demo holdings as ``holdings.parquet``, its ``column`` replaced by ``array`` (or a
    second column named ``extra`` appended)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.Table.from_pandas(pd.read_csv(pack / "holdings.csv"), preserve_index=False)
    if array is not None:
        table = table.set_column(table.schema.get_field_index(column), column, array)
    if extra is not None:
        table = table.append_column(extra, table[extra])
    pq.write_table(table, pack / "holdings.parquet")
    toml = pack / "pack.toml"
    toml.write_text(toml.read_text().replace('"holdings.csv"', '"holdings.parquet"'))


def _parquet_types():
    import pyarrow as pa

    n = len(pd.read_csv(DEMO / "holdings.csv"))
    return [
        ("market_value", pa.array([86400 * (1 + i) for i in range(n)], pa.duration("s")),
         "holdings.parquet:market_value: a duration column (duration[s]); give plain numbers"),
        ("market_value", pa.array([True] * n),
         "holdings.parquet:market_value: a true/false column (bool); give plain numbers"),
        ("market_value", pa.array([[1.0]] * n, pa.list_(pa.float64())),
         "holdings.parquet:market_value: a list column (list<element: double>); give plain "
         "numbers"),
        ("name", pa.array([["a"]] * n, pa.list_(pa.string())),
         "holdings.parquet:name: a list column (list<element: string>); give text"),
        ("name", pa.array([{"a": "x"}] * n, pa.struct([("a", pa.string())])),
         "holdings.parquet:name: a struct column (struct<a: string>); give text"),
        ("name", pa.array([[("a", "x")]] * n, pa.map_(pa.string(), pa.string())),
         "holdings.parquet:name: a map column (map<string, string ('name')>); give text"),
        ("sector", pa.array([b"x"] * n, pa.binary()),
         "holdings.parquet:sector: a binary column (binary); give text"),
        ("security_id", pa.array([3600] * n, pa.time32("s")),
         "holdings.parquet:security_id: a time-of-day column (time32[ms]); give text"),
    ]


@pytest.mark.parametrize("case", range(8))
def test_a_parquet_column_of_an_unreadable_type_is_refused_at_the_column(
        tmp_path, capsys, case):
    # a duration was read as its count of seconds, silently; a list, struct or map gave an
    # internal error (Arrow could not cast it to text)
    column, array, message = _parquet_types()[case]
    pack = _pack(tmp_path)
    _holdings_parquet(pack, column, array)
    assert _refused(pack, tmp_path, capsys) == [message]


def test_a_parquet_whole_number_beyond_2_53_is_refused_at_its_row(tmp_path, capsys):
    # a uint64 of 2^64-1 gave "internal error: ArrowInvalid: Integer value ... not in range"
    import pyarrow as pa

    pack = _pack(tmp_path)
    values = [int(v) for v in pd.read_csv(pack / "holdings.csv")["market_value"]]
    _holdings_parquet(pack, "market_value", pa.array([2**64 - 1] + values[1:], pa.uint64()))
    assert _refused(pack, tmp_path, capsys) == [
        "holdings.parquet:1:market_value: value is too large to read exactly: "
        "18446744073709551615 (a whole number beyond 2^53 = 9007199254740992)"]


@pytest.mark.parametrize("type_", ["uint64", "int64"])
def test_parquet_whole_numbers_a_float_holds_exactly_are_read(tmp_path, capsys, type_):
    import pyarrow as pa

    pack = _pack(tmp_path)
    values = [int(v) for v in pd.read_csv(pack / "holdings.csv")["market_value"]]
    _holdings_parquet(pack, "market_value", pa.array([2**53] + values[1:], type_))
    assert main(["check", str(pack)]) == 0, capsys.readouterr().err


def test_a_parquet_column_named_twice_is_named_not_arrow_text(tmp_path, capsys):
    # the read failed first: "cannot be read: Multiple matches for FieldRef.Name(...)"
    pack = _pack(tmp_path)
    _holdings_parquet(pack, "market_value", extra="market_value")
    assert _refused(pack, tmp_path, capsys) == [
        "holdings.parquet:1:market_value: column name appears more than once"]


def test_a_parquet_float_nan_is_not_a_finite_number_not_empty(tmp_path, capsys):
    import pyarrow as pa

    pack = _pack(tmp_path)
    values = pd.read_csv(pack / "holdings.csv")["market_value"].to_numpy(dtype=float, copy=True)
    values[1] = np.nan
    _holdings_parquet(pack, "market_value", pa.array(values))
    assert _refused(pack, tmp_path, capsys) == [
        "holdings.parquet:2:market_value: value is not a finite number: 'nan'"]


@pytest.mark.parametrize("value", [None, "  "])
def test_a_parquet_null_or_blank_id_is_one_line_at_its_row(tmp_path, capsys, value):
    # the error was there, but warnings followed it: "holding nan has no return history"
    # (or "holding  has ...", for a blank id), and "1 security id(s) have returns but are
    # not held, ignored: TVX003", the returns of the holding whose id is missing
    import pyarrow as pa

    pack = _pack(tmp_path)
    ids = list(pd.read_csv(pack / "holdings.csv", dtype=str)["security_id"])
    assert ids[2] == "TVX003"
    ids[2] = value
    _holdings_parquet(pack, "security_id", pa.array(ids, pa.string()))
    assert _refused(pack, tmp_path, capsys) == [
        "holdings.parquet:3:security_id: value is empty"]


def test_a_blank_csv_id_is_one_line_at_its_row(tmp_path, capsys):
    pack = _pack(tmp_path)
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    assert h.loc[2, "security_id"] == "TVX003"
    h.loc[2, "security_id"] = ""
    h.to_csv(pack / "holdings.csv", index=False)
    assert _refused(pack, tmp_path, capsys) == [
        "holdings.csv:4:security_id: value is empty"]

def test_a_parquet_date_column_of_times_of_day_is_refused_at_the_column(tmp_path, capsys):
    import pyarrow as pa
    import pyarrow.parquet as pq

    pack = _pack(tmp_path)
    market = pa.Table.from_pandas(pd.read_csv(pack / "market.csv"), preserve_index=False)
    market = market.set_column(0, "date", pa.array([3600] * market.num_rows, pa.time32("s")))
    pq.write_table(market, pack / "market.parquet")
    toml = pack / "pack.toml"
    toml.write_text(toml.read_text().replace('"market.csv"', '"market.parquet"'))
    assert _refused(pack, tmp_path, capsys) == [
        "market.parquet:date: a time-of-day column (time32[ms]); give dates"]


@pytest.mark.parametrize("where", ["--out", "previous", "archive:"])
def test_a_symbolic_link_loop_is_one_line_not_an_internal_error(tmp_path, capsys, where):
    # Path.resolve raised RuntimeError("Symlink loop from ...") wherever a path was resolved
    (tmp_path / "loop2").symlink_to(tmp_path / "loop1")
    (tmp_path / "loop1").symlink_to(tmp_path / "loop2")
    pack = _pack(tmp_path)
    args = ["build", str(pack), "--out", str(tmp_path / "out"), "--quiet"]
    if where == "--out":
        args[3] = str(tmp_path / "loop1")
    else:
        target = "../loop1" if where == "previous" else "archive:../loop1"
        _toml(pack, "compare", f'previous = "{target}"')
    code = main(args)
    _, err = capsys.readouterr()
    assert code == 2, err
    assert err.splitlines() == [f"reporter: '{tmp_path / 'loop1'}': a symbolic link that "
                                "loops (it leads back to itself); give a real folder or file"]
    assert not (tmp_path / "out").exists()


def test_a_portfolio_of_cash_alone_is_refused_not_divided_by_zero(tmp_path, capsys):
    # every excess return is zero: the build failed with ZeroDivisionError (check said ok)
    pack = _pack(tmp_path)
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    cash = h[h["asset_class"].str.lower() == "cash"]
    both = pd.concat([cash, cash.assign(security_id="CASH02")])
    both.to_csv(pack / "holdings.csv", index=False)
    text = (pack / "pack.toml").read_text()
    start, end = text.index("# The scheme's policy limits"), text.index("# A named window")
    (pack / "pack.toml").write_text(text[:start] + text[end:])    # limits need holdings
    lines = _refused(pack, tmp_path, capsys)
    assert lines[0] == ("holdings.csv:asset_class: every holding is cash, which earns the "
                        "risk-free rate: the pack has no market exposure to measure; a pack "
                        "needs at least one holding that is not cash")


def test_autocorrelations_of_a_constant_series_are_undefined_not_a_division_by_zero():
    from reporter.analytics.performance import autocorrelations

    assert np.isnan(autocorrelations(np.full(12, 0.001), 2)).all()
    # a varying series as statsmodels' acf (adjusted=False) gives it, by its definition
    x = np.array([0.01, -0.02, 0.03, 0.0, 0.015, -0.01])
    e = x - x.mean()
    assert autocorrelations(x, 1)[0] == pytest.approx(float(e[1:] @ e[:-1] / (e @ e)))


def test_a_sector_limit_named_in_another_case_is_refused(tmp_path, capsys):
    # "energy = 0.10" was applied to no holding (weight 0, "within") while Energy, at
    # 10.8%, was judged only under "*" = 15%: a breach shown as within, and check said ok
    pack = _pack(tmp_path)
    text = (pack / "pack.toml").read_text()
    (pack / "pack.toml").write_text(text.replace("Energy = 0.12", "energy = 0.10"))
    assert _refused(pack, tmp_path, capsys) == [
        "pack.toml:limits.max_sector_weight.energy: no holding's sector is 'energy', but "
        "'Energy' is (sector names must match exactly); write it as the holdings file does"]


def test_a_sector_limit_without_its_spaces_or_in_another_unicode_form_is_refused(tmp_path,
                                                                               capsys):
    # "HealthCare" for "Health Care", a full-width letter, and an empty name had been
    # warnings only, their limits then passing on a weight of 0
    pack = _pack(tmp_path)
    text = (pack / "pack.toml").read_text()
    (pack / "pack.toml").write_text(text.replace(
        "Energy = 0.12", 'Energy = 0.12, HealthCare = 0.1, "\uff26inancials" = 0.1, "" = 0.1'))
    lines = _refused(pack, tmp_path, capsys)
    assert lines == [
        "pack.toml:limits.max_sector_weight.'': a sector name that is empty or only spaces "
        "names no sector; write the sector as the holdings file does",
        "pack.toml:limits.max_sector_weight.HealthCare: no holding's sector is 'HealthCare', "
        "but 'Health Care' is (sector names must match exactly); write it as the holdings "
        "file does",
        "pack.toml:limits.max_sector_weight.\uff26inancials: no holding's sector is "
        "'\uff26inancials', but 'Financials' is (sector names must match exactly); write it "
        "as the holdings file does"]


def test_a_sector_limit_in_look_alike_letters_of_another_script_is_refused(tmp_path, capsys):
    # "Еnergy" with a Cyrillic "Е" (U+0415) is not folded to "Energy" by NFKC: it had been a
    # warning that no holding is in that sector, and the limit passed on a weight of 0. A
    # name wholly in one other script (a sector not held) stays a warning.
    pack = _pack(tmp_path)
    text = (pack / "pack.toml").read_text()
    greek = "\u0395\u03bd\u03ad\u03c1\u03b3\u03b5\u03b9\u03b1"
    (pack / "pack.toml").write_text(text.replace(
        "Energy = 0.12", f'"\u0415nergy" = 0.12, "{greek}" = 0.1'))
    assert _refused(pack, tmp_path, capsys) == [
        "pack.toml:limits.max_sector_weight.\u0415nergy: the sector name '\u0415nergy' mixes "
        "Cyrillic and Latin letters, as a look-alike letter does, and no holding's sector is "
        "written so; write it as the holdings file does",
        f"pack.toml:limits.max_sector_weight.{greek}: warning: no holding belongs to the "
        f"sector '{greek}', so its limit applies to a weight of 0; check the name against "
        "the holdings file's sectors"]


def test_market_values_beyond_exact_float_units_are_warned_of(tmp_path, capsys):
    # a portfolio in a currency of small units can sum past 2^53, where a float64 no longer
    # holds every whole number: the sums and money figures had been printed to the unit as
    # if exact, with no word
    pack = _pack(tmp_path)
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    mv = h["market_value"].astype(float)
    assert mv.sum() < 2**53 / 1e6                        # the demo itself is far below it
    h["market_value"] = (mv * 1e8).map(lambda v: f"{v:.0f}")
    h.to_csv(pack / "holdings.csv", index=False)
    assert main(["check", str(pack)]) == 0
    warned = [ln for ln in capsys.readouterr().err.splitlines() if "64-bit" in ln]
    assert len(warned) == 1 and warned[0].startswith(
        "holdings.csv:market_value: warning: market values sum to 24,8") and \
        "beyond 9,007,199,254,740,992" in warned[0], warned


def test_a_sector_limit_naming_no_held_sector_is_a_warning(tmp_path, capsys):
    pack = _pack(tmp_path)
    text = (pack / "pack.toml").read_text()
    (pack / "pack.toml").write_text(text.replace("Energy = 0.12", "Enrgy = 0.12"))
    assert main(["check", str(pack)]) == 0
    assert ("pack.toml:limits.max_sector_weight.Enrgy: warning: no holding belongs to the "
            "sector 'Enrgy', so its limit applies to a weight of 0; check the name against "
            "the holdings file's sectors") in capsys.readouterr().err.splitlines()


@pytest.mark.parametrize(("text", "line"), [
    # the short form's empty path was an internal error (pydantic's), exit 1
    ('holdings = ""', "pack.toml:inputs.holdings: the path is empty; name a file in the "
     "pack folder"),
    # a NUL byte was "internal error: ValueError: embedded null byte"
    ('holdings = "holdings.csv\\u0000"', "pack.toml:inputs.holdings: path "
     "'holdings.csv\\x00' holds a control character"),
])
def test_an_empty_or_nul_holding_input_path_is_one_line(tmp_path, capsys, text, line):
    pack = _pack(tmp_path)
    toml = pack / "pack.toml"
    toml.write_text(toml.read_text().replace('holdings = "holdings.csv"', text, 1))
    assert _refused(pack, tmp_path, capsys) == [line]


@pytest.mark.parametrize(("body", "line"), [
    # tomllib reads nesting by recursion: thousands deep was "internal error: RecursionError"
    ("a = " + "[" * 3000 + "]" * 3000, "pack.toml: not a pack's settings: its arrays or "
     "tables are nested too deeply to read"),
    ("a = " + "{x = " * 3000 + "1" + "}" * 3000, "pack.toml: not a pack's settings: its "
     "arrays or tables are nested too deeply to read"),
])
def test_a_pack_toml_nested_too_deeply_is_one_line(tmp_path, capsys, body, line):
    pack = _pack(tmp_path)
    (pack / "pack.toml").write_text(body + "\n")
    assert _refused(pack, tmp_path, capsys) == [line]


def test_a_byte_order_mark_in_pack_toml_is_named(tmp_path, capsys):
    pack = _pack(tmp_path)
    toml = pack / "pack.toml"
    toml.write_bytes(b"\xef\xbb\xbf" + toml.read_bytes())
    (line,) = _refused(pack, tmp_path, capsys)
    assert line.endswith("(the file starts with a byte-order mark: save it as UTF-8 without "
                         "one)")


def test_problems_naming_control_characters_stay_one_line(tmp_path, capsys):
    # a sector key holding a line break was printed raw in the problem's place, splitting
    # it over two lines; a tab and a terminal escape went out raw too
    pack = _pack(tmp_path)
    toml = pack / "pack.toml"
    toml.write_text(toml.read_text().replace(
        "Energy = 0.12", 'Energy = 0.12, "Fin\\nancials" = 0.1, "a\\u001b[31mb" = 0.1'))
    assert main(["check", str(pack)]) == 2        # "Fin\nancials" is Financials spaced out
    err = capsys.readouterr().err
    assert "\x1b" not in err
    lines = [ln for ln in err.splitlines() if "max_sector_weight" in ln]
    assert [ln.split(": ")[0] for ln in lines] == [
        "pack.toml:limits.max_sector_weight.Fin\\nancials",
        "pack.toml:limits.max_sector_weight.a\\x1b[31mb"]
    from reporter.errors import one_line

    assert one_line("ok as it is") == "ok as it is"
    assert one_line("a\tb\u202ec") == "a\\tb\\u202ec"


def test_the_summary_counts_the_problems_a_capped_line_stands_for(tmp_path, capsys):
    # ten lines and "... and 51 more empty values" had been summed up as "11 error(s)"
    pack = _pack(tmp_path)
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    h["security_id"] = ""
    h.to_csv(pack / "holdings.csv", index=False)
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err[-2] == ("holdings.csv: ... and 51 more empty values in column security_id")
    assert err[-1] == f"{SUMMARY}{len(h)} error(s) in the inputs; nothing was written"


def test_a_long_bad_value_is_quoted_cut_short(tmp_path, capsys):
    # a 5,000-character title was echoed whole in its one error line; so was a long text
    # in a number column
    pack = _pack(tmp_path)
    text = (pack / "pack.toml").read_text()
    start = text.index("\ntitle = ") + 1
    end = text.index("\n", start)
    (pack / "pack.toml").write_text(text[:start] + 'title = "' + "T" * 5000 + '"' + text[end:])
    assert _refused(pack, tmp_path, capsys) == [
        "pack.toml:pack.title: String should have at most 200 characters (got "
        f"'{'T' * 80}'... (5,000 characters))"]
    pack = _pack(tmp_path / "number")
    lines = (pack / "returns.csv").read_text().splitlines()
    lines[5] = lines[5].rsplit(",", 1)[0] + "," + "x" * 3000
    (pack / "returns.csv").write_text("\n".join(lines) + "\n")
    assert _refused(pack, tmp_path, capsys) == [
        f"returns.csv:6:return: not a number: '{'x' * 80}'... (3,000 characters)"]
