"""Names, not file names: what pack.toml calls a benchmark, a market proxy or a mandate's
manager is what the pack shows, and no input file's name reaches a page."""

from __future__ import annotations

import re
from html import unescape
from pathlib import Path

import pytest

from reporter.build import assemble
from reporter.config import load_settings

REPO = Path(__file__).resolve().parent.parent
DEMO_FUND = REPO / "inputs" / "demo-fund"


def page_text(html: str) -> str:
    """The text a reader sees: tags, styles and scripts removed, entities decoded."""
    html = re.sub(r"<(style|script)\b.*?</\1>", " ", html, flags=re.S | re.I)
    return unescape(re.sub(r"<[^>]+>", " ", html))


@pytest.fixture(scope="module")
def demo_fund():
    settings = load_settings(DEMO_FUND)
    a = assemble(settings)
    return settings, a.html(), page_text(a.html())


def test_no_input_file_name_reaches_the_page(demo_fund):
    settings, html, text = demo_fund
    names = {s.display for s in settings.inputs.values()}
    # the stems too, where they are not plain words ("market", "returns" are)
    names |= {Path(n).name for n in names} | {Path(n).stem for n in names if "_" in n}
    assert {"benchmark_domestic.csv", "market.csv", "holdings.csv"} <= names
    for name in names:
        assert name not in text, name
        assert name not in html, name          # nor in an attribute or a chart's labels


def test_names_and_managers_are_shown(demo_fund):
    _, html, text = demo_fund
    text = " ".join(text.split())
    # the mandates table: each mandate's benchmark by its name; the bond-proxy mandate is
    # measured against the market proxy, named in pack.toml too
    for name in ("Domestic equity index", "Overseas equity index", "Minimum-volatility index",
                 "Broad market index"):
        assert name in text, name
    assert ("Domestic equity Managed by Harrowmere Asset Managers. 3" in text
            and "measured against its benchmark (Domestic equity index)" in text)
    assert "Bond-proxy equity Managed by Harrowmere Asset Managers. 1" in text
    assert re.search(r"<th scope=\"col\">Manager</th>", html)
    assert text.count("Tennick Lane Partners") >= 2      # the overview and the heading


def test_unnamed_series_get_plain_labels(tmp_path):
    """Without names, a mandate's benchmark is "Benchmark" and the market "Market proxy"."""
    for f in DEMO_FUND.iterdir():
        (tmp_path / f.name).write_bytes(f.read_bytes())
    toml = (tmp_path / "pack.toml").read_text()
    toml = re.sub(r'\{ path = "([^"]+)", name = "[^"]+" \}', r'"\1"', toml)
    toml = re.sub(r'manager = "[^"]+"\n', "", toml)
    (tmp_path / "pack.toml").write_text(toml)
    from reporter.fund_inputs import validate_fund
    from reporter.validate import read_inputs

    settings = load_settings(tmp_path)
    assert all(m.manager is None for m in settings.mandates)
    fin = validate_fund(settings, *read_inputs(settings))
    assert [m.benchmark_name for m in fin.mandates] == ["Benchmark"] * 3 + ["Market proxy"]
    assert [m.benchmark_phrase for m in fin.mandates] == ["its benchmark"] * 3 + [
        "its benchmark, the market proxy"]
