"""Shared fixtures. The demo pack is built once per test session (PDF rendering is slow)."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "inputs" / "demo"
GOLDEN = Path(__file__).resolve().parent / "golden"
# 2026-11-30T00:00:00Z: the build date used for golden files and byte-identical checks.
FIXED_EPOCH = "1795996800"


def build_at_fixed_epoch(pack: Path, out: Path) -> int:
    """``reporter build PACK --out OUT --quiet`` in-process with SOURCE_DATE_EPOCH set to
    :data:`FIXED_EPOCH` for the call (for session and module fixtures, which cannot use
    monkeypatch); the variable is restored after. Returns the exit code."""
    from reporter.cli import main

    old = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ["SOURCE_DATE_EPOCH"] = FIXED_EPOCH
    try:
        return main(["build", str(pack), "--out", str(out), "--quiet"])
    finally:
        if old is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = old


def demo_holdings():
    """The demo's holdings with a ``weight`` column in place of ``market_value`` (the demo
    gives market values; weights are their shares of the total)."""
    import pandas as pd

    h = pd.read_csv(DEMO / "holdings.csv")
    h["weight"] = h["market_value"] / h["market_value"].sum()
    return h.drop(columns="market_value")


@pytest.fixture(scope="session")
def demo_build(tmp_path_factory) -> Path:
    """The demo pack built once with a fixed SOURCE_DATE_EPOCH; returns the output folder."""
    out = tmp_path_factory.mktemp("demo") / "pack"
    assert build_at_fixed_epoch(DEMO, out) == 0
    return out


@pytest.fixture(scope="session")
def french():
    """Ken French Data Library monthly factors and industry portfolios, as bundled in
    linearmodels (an open dataset of real returns; used in tests only)."""
    from linearmodels.datasets import french as ff

    return ff.load()


SIGNER = {"by": "Ruth Okafor", "role": "Chair of the investment committee",
          "minute_ref": "IC-2026-11/07", "note": "Approved subject to the minuted comments"}


@pytest.fixture(scope="session")
def signed_archive(demo_build, tmp_path_factory) -> Path:
    """An archive holding the demo pack signed off (entry 1) and signed again with
    --supersedes (entry 2). Tests that alter it must work on a copy."""
    from reporter.cli import main

    archive = tmp_path_factory.mktemp("archive") / "archive"
    assert main(["sign-off", str(demo_build), "--archive", str(archive), "--quiet",
                 "--by", SIGNER["by"], "--role", SIGNER["role"],
                 "--minute-ref", SIGNER["minute_ref"], "--note", SIGNER["note"]]) == 0
    assert main(["sign-off", str(demo_build), "--archive", str(archive), "--quiet",
                 "--by", "Tomas Lindqvist", "--supersedes",
                 "--reason", "Minute reference corrected"]) == 0
    return archive


# --- the trustees' site --------------------------------------------------------------------

SITE_PERIODS = ("2026-09-30", "2026-10-31", "2026-11-30")
# The policy limits of the two earlier periods (invented test values): fewer than the demo's,
# so the site meets limits that some periods did not report, and tighter in 2026-10-31, so
# the largest holding breaches there. The builds write their own results/limits.json from
# these (a limits file put into a build by hand is refused at sign-off: it is not what the
# inputs give).
SITE_LIMITS = {
    "2026-09-30": "[limits]\nbeta_max = 1.10\nmax_holding_weight = 0.08\n",
    "2026-10-31": "[limits]\nbeta_max = 1.10\nmax_holding_weight = 0.07\n",
}


def _pack_for_period(tmp: Path, period: str, limits: str | None = None) -> Path:
    """A copy of the demo pack folder whose pack.toml ends at ``period`` (and, with
    ``limits``, has that ``[limits]`` table instead of the demo's)."""
    import shutil

    dest = tmp / f"pack-{period}"
    shutil.copytree(DEMO, dest)
    toml = dest / "pack.toml"
    text = toml.read_text(encoding="utf-8")
    assert "period_end = 2026-11-30" in text
    text = text.replace("period_end = 2026-11-30", f"period_end = {period}")
    # the demo's cash flows are November's: outside an earlier period
    text = text.replace('cash_flows = "cash_flows.csv"\n', "")
    if limits is not None:
        assert text.count("[limits]") == 1
        start = text.index("[limits]")
        # the demo's table runs to the next table header (or the end)
        end = text.find("\n[", start + 1)
        end = len(text) if end < 0 else end + 1
        assert "max_idiosyncratic_share = 0.10" in text[start:end]
        text = text[:start] + limits + "\n" + text[end:]
    toml.write_text(text, encoding="utf-8")
    return dest


@pytest.fixture(scope="session")
def site_archive(signed_archive, tmp_path_factory) -> Path:
    """Three signed periods: a copy of ``signed_archive`` (2026-11-30 signed, then signed
    again with --supersedes: entries 1 and 2) with the demo pack re-dated to 2026-09-30 and
    2026-10-31 signed after it (entries 3 and 4, with the limits of :data:`SITE_LIMITS`).
    Ledger order is therefore not period order."""
    import shutil

    from reporter.cli import main

    tmp = tmp_path_factory.mktemp("site-inputs")
    archive = tmp_path_factory.mktemp("site-archive") / "archive"
    shutil.copytree(signed_archive, archive)
    for period in SITE_PERIODS[:2]:
        build = tmp / f"build-{period}"
        pack = _pack_for_period(tmp, period, SITE_LIMITS[period])
        assert main(["build", str(pack), "--out", str(build), "--quiet"]) == 0
        assert main(["sign-off", str(build), "--archive", str(archive), "--quiet",
                     "--by", SIGNER["by"], "--role", SIGNER["role"],
                     "--minute-ref", f"IC-{period[:7]}/01"]) == 0
    return archive


@pytest.fixture(scope="session")
def site_dir(site_archive, tmp_path_factory) -> Path:
    """The site built once from ``site_archive``."""
    from reporter.cli import main

    out = tmp_path_factory.mktemp("site") / "site"
    assert main(["site", "--archive", str(site_archive), "--out", str(out), "--quiet"]) == 0
    return out


def ledger_entries(archive: Path) -> list[dict]:
    """Every row of an archive's ledger, oldest first, read with plain sqlite3 (independent of
    the tool's own ledger code)."""
    import sqlite3

    con = sqlite3.connect(archive / "ledger.sqlite")
    con.row_factory = sqlite3.Row
    try:
        return [dict(r) for r in con.execute("SELECT * FROM entries ORDER BY seq")]
    finally:
        con.close()


def run_cli(capsys, *argv) -> tuple[int, str, str]:
    """``reporter`` called in-process: its exit code, stdout and stderr."""
    from reporter.cli import main

    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


# A4 with the pack's 16 mm side margins: the text block's right edge, in points
TEXT_BLOCK_RIGHT = 595.28 - 16 / 25.4 * 72


def words_past_the_text_block(pdf: Path, slack: float = 6.0) -> list[tuple[int, str, float]]:
    """(page, word, right edge) of every word whose box ends more than ``slack`` points past
    the text block's right edge (poppler's ``pdftotext -bbox`` word boxes). The pypdf check
    above sees where a piece of text starts; this one where each word ends, so it finds a
    long word or a wide table that runs into the right margin."""
    import re
    import subprocess

    html = subprocess.run(["pdftotext", "-bbox", str(pdf), "-"], capture_output=True,
                          text=True, check=True).stdout
    word = re.compile(r'<word xMin="[\d.]+" yMin="[\d.]+" xMax="([\d.]+)" yMax="[\d.]+">'
                      r"([^<]*)</word>")
    return [(number, text[:30], float(x))
            for number, page in enumerate(html.split("<page ")[1:], start=1)
            for x, text in word.findall(page) if float(x) > TEXT_BLOCK_RIGHT + slack]


def assert_check_refuses(capsys, pack: Path, line: str) -> None:
    """``reporter check PACK`` exits 2, one of its lines being ``line``, with no traceback."""
    code, _, err = run_cli(capsys, "check", pack)
    assert code == 2 and "Traceback" not in err
    assert line in err.splitlines(), err


def text_past_the_right_edge(pdf: Path) -> list[tuple[int, str]]:
    """(page, text) of every piece of text that starts beyond its page's right edge."""
    import pypdf

    out = []
    for number, page in enumerate(pypdf.PdfReader(pdf).pages, start=1):
        width = float(page.mediabox.width)

        def visit(text, cm, tm, font, size, number=number, width=width):
            x = tm[4] * cm[0] + tm[5] * cm[2] + cm[4]
            if text.strip() and x > width:
                out.append((number, text.strip()[:30]))
        page.extract_text(visitor_text=visit)
    return out
