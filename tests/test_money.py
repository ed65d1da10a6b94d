"""Money: the Modified Dietz return against published worked examples, the value change
split into flows and investment return, allocation, asset-class ranges and the watch rule
for two-sided bands, and the bad inputs that go with them."""

from __future__ import annotations

import datetime as dt
import json
import shutil

import numpy as np
import pandas as pd
import pytest

from reporter.analytics.allocation import allocation
from reporter.analytics.flows import modified_dietz, value_change
from reporter.build import assemble
from reporter.cli import main
from reporter.config import LimitsSection, load_settings
from reporter.limits import BREACH, WATCH, WITHIN, classify, evaluate_limits
from tests.conftest import DEMO


def test_modified_dietz_cfa_practice_question():
    # A CFA Level III style practice question on GIPS (Bloomberg Prep, "Performance
    # measurement ... GIPS verification", question bac110): October, CD = 31 days,
    # V0 = 585.60, V1 = 602.34, flows -15.05 (day 5), +19.82 (day 9), +16.42 (day 15),
    # -18.96 (day 24); denominator about 591.237 and return about 2.45%, as published there
    flows = np.array([-15.05, 19.82, 16.42, -18.96])
    days = np.array([5, 9, 15, 24])
    r = modified_dietz(585.60, 602.34, flows, days, 31)
    assert r == pytest.approx(0.0245, abs=5e-5)
    capital = 585.60 + ((31 - days) / 31) @ flows
    assert capital == pytest.approx(591.237, abs=5e-4)
    assert r == pytest.approx((602.34 - 585.60 - flows.sum()) / capital, rel=1e-12)


def test_modified_dietz_two_year_example():
    # Wikipedia, "Modified Dietz method", example: $100 at the start, an inflow of $50 at the
    # end of the first of two equal years, $300 at the end: gain 150 over average capital
    # 100 + 50 x 1/2 = 125, a return of 120% (the result recalled from memory; the inputs
    # as stored in the page's history)
    assert modified_dietz(100.0, 300.0, np.array([50.0]), np.array([365]), 730) == \
        pytest.approx(1.2, rel=1e-12)


def test_value_change_splits_the_change_into_flows_and_return():
    vc = value_change("GBP", dt.date(2026, 11, 30), 1_060_000.0, dt.date(2026, 10, 31),
                      1_000_000.0, np.array(["2026-11-10", "2026-11-20"], dtype="datetime64[D]"),
                      np.array([50_000.0, -20_000.0]))
    assert vc.change == pytest.approx(60_000.0)
    assert vc.net_flows == pytest.approx(30_000.0)
    assert vc.investment_return == pytest.approx(30_000.0)
    assert (vc.inflows, vc.outflows) == (50_000.0, -20_000.0)
    # weights (30 - 10) / 30 and (30 - 20) / 30
    capital = 1_000_000 + 50_000 * 20 / 30 - 20_000 * 10 / 30
    assert vc.dietz_return == pytest.approx(30_000 / capital, rel=1e-12)
    # without flows there is no split and no return
    bare = value_change("GBP", dt.date(2026, 11, 30), 1_060_000.0, dt.date(2026, 10, 31),
                        1_000_000.0, None, None)
    assert bare.net_flows is None and bare.dietz_return is None and bare.change == 60_000.0


def test_allocation_sums_weights_and_values_by_group():
    sec = pd.DataFrame({"weight": [0.5, 0.3, 0.2], "market_value": [50.0, 30.0, 20.0],
                        "asset_class": ["Equity", "Cash", "Equity"],
                        "currency": ["GBP", None, "USD"]})
    t = allocation(sec).set_index(["dimension", "group"])
    assert t.loc[("asset_class", "Equity"), "weight"] == pytest.approx(0.7)
    assert t.loc[("asset_class", "Equity"), "value"] == pytest.approx(70.0)
    assert t.loc[("asset_class", "Equity"), "n_holdings"] == 2
    assert t.loc[("currency", "(not given)"), "weight"] == pytest.approx(0.3)
    assert "country" not in t.index.get_level_values(0)


def test_the_middle_of_a_two_sided_band_is_not_on_watch():
    # the watch distance of a two-sided band is 10% of its width (0.02 for 0.85-1.05); the
    # old rule (10% of the limit, 0.105) put the band's midpoint 0.95 on watch
    band = 1.05 - 0.85
    assert classify(0.95, 1.05, "max", 0.10, band)[0] == WITHIN
    assert classify(0.95, 0.85, "min", 0.10, band)[0] == WITHIN
    assert classify(1.035, 1.05, "max", 0.10, band)[0] == WATCH
    assert classify(0.86, 0.85, "min", 0.10, band)[0] == WATCH
    assert classify(0.95, 1.05, "max", 0.10)[0] == WATCH     # one-sided: 10% of the limit


@pytest.fixture(scope="module")
def demo_assembled():
    return assemble(load_settings(DEMO))


def test_demo_beta_band_and_asset_class_ranges(demo_assembled):
    res = demo_assembled.results
    beta = res.portfolio_summary()["beta_regression"]
    limits = evaluate_limits(LimitsSection(beta_min=0.85, beta_max=1.05), res)
    lo, hi = limits.checks
    assert lo.watch_from == pytest.approx(0.87) and hi.watch_from == pytest.approx(1.03)
    assert hi.status == (BREACH if beta > 1.05 else WATCH if beta >= 1.03 else WITHIN)
    ranges = {"Equity": [0.90, 0.965], "cash": [0.02, 0.13]}
    checks = evaluate_limits(LimitsSection(asset_class_ranges=ranges), res).checks
    got = {(c.scope, c.kind): c for c in checks}
    # demo: 97% equity (above 96.5%: breach), 3% cash (watch from 0.02 + 0.1 x 0.11 = 0.031)
    assert got[("Equity", "max")].status == BREACH
    assert got[("Equity", "max")].value == pytest.approx(0.97, abs=1e-9)
    assert got[("cash", "min")].watch_from == pytest.approx(0.031)
    assert got[("cash", "min")].status == WATCH
    assert got[("cash", "max")].status == WITHIN


def test_demo_value_and_flows(demo_assembled):
    ctx = demo_assembled.context
    h = pd.read_csv(DEMO / "holdings.csv")
    flows = pd.read_csv(DEMO / "cash_flows.csv")
    vc = ctx.value_change
    assert vc.end_value == pytest.approx(h["market_value"].sum(), rel=1e-12)
    assert vc.net_flows == pytest.approx(flows["amount"].sum(), rel=1e-12)
    assert vc.start_value is None and vc.dietz_return is None     # no [compare] in the demo
    assert vc.flow_start == dt.date(2026, 10, 31)
    classes = {r["group"]: r for r in ctx.allocation if r["dimension"] == "asset_class"}
    assert classes["Cash"]["value"] == pytest.approx(0.03 * vc.end_value, rel=1e-9)


@pytest.fixture(scope="module")
def compared(tmp_path_factory):
    """The demo built for October (no flows), then the demo for November with market
    values 2% higher and the demo's flows, with [compare] against the October build."""
    base = tmp_path_factory.mktemp("compare")
    october = base / "october"
    shutil.copytree(DEMO, october)
    toml = (october / "pack.toml").read_text().replace("period_end = 2026-11-30",
                                                      "period_end = 2026-10-31")
    (october / "pack.toml").write_text(toml.replace('cash_flows = "cash_flows.csv"\n', ""))
    first = base / "first"
    assert main(["build", str(october), "--out", str(first), "--quiet"]) == 0
    pack = base / "next"
    shutil.copytree(DEMO, pack)
    h = pd.read_csv(pack / "holdings.csv")
    h["market_value"] = (h["market_value"] * 1.02).round(2)
    h.to_csv(pack / "holdings.csv", index=False)
    toml = (pack / "pack.toml").read_text()
    (pack / "pack.toml").write_text(toml + f'\n[compare]\nprevious = "{first}"\n')
    return first, pack


def test_change_since_last_pack_with_modified_dietz(compared):
    first, pack = compared
    a = assemble(load_settings(pack))
    vc = a.context.value_change
    v0 = json.loads((first / "results" / "portfolio.json").read_text())["total_value"]
    h = pd.read_csv(pack / "holdings.csv")
    flows = pd.read_csv(pack / "cash_flows.csv", parse_dates=["date"])
    assert vc.start_value == pytest.approx(v0) and vc.end_value == pytest.approx(
        h["market_value"].sum())
    assert vc.investment_return == pytest.approx(vc.end_value - v0 - flows["amount"].sum())
    days = (flows["date"] - pd.Timestamp("2026-10-31")).dt.days.to_numpy()
    capital = v0 + ((30 - days) / 30) @ flows["amount"].to_numpy()
    assert vc.dietz_return == pytest.approx(vc.investment_return / capital, rel=1e-12)
    html = a.html()
    assert "Modified Dietz" in html and "Investment return" in html


def _bad(tmp_path, edit) -> tuple[int, str]:
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    edit(pack)
    out = tmp_path / "out"
    return main(["build", str(pack), "--out", str(out), "--quiet"]), out


def _edit_csv(name, fn):
    def edit(pack):
        df = pd.read_csv(pack / name)
        fn(df)
        df.to_csv(pack / name, index=False)
    return edit


@pytest.mark.parametrize(("edit", "line"), [
    (_edit_csv("holdings.csv", lambda d: d.__setitem__("market_value", d["market_value"].where(
        d.index != 2, 0.0))), "holdings.csv:4:market_value: market value 0 is not positive"),
    (_edit_csv("holdings.csv", lambda d: d.__setitem__("market_value", d["market_value"].where(
        d.index != 3, -5.0))), "holdings.csv:5:market_value: negative market_value -5"),
    (_edit_csv("cash_flows.csv", lambda d: d.__setitem__("date", d["date"].where(
        d.index != 1, "2026-10-31"))), "cash_flows.csv:3:date: cash flow dated 2026-10-31 "
     "is outside the period"),
    (lambda p: (p / "pack.toml").write_text((p / "pack.toml").read_text().replace(
        "Cash = [0.01, 0.05]", "Cash = [0.05, 0.01]")),
     "pack.toml:limits.asset_class_ranges.Cash: the range's low (0.05) is above its high"),
])
def test_bad_money_inputs_exit_2_and_write_nothing(tmp_path, capsys, edit, line):
    code, out = _bad(tmp_path, edit)
    err = capsys.readouterr().err
    assert code == 2, err
    assert line in err
    assert "Traceback" not in err and not out.exists()


DEMO_FUND = DEMO.parent / "demo-fund"


@pytest.fixture(scope="module")
def fund_assembled():
    return assemble(load_settings(DEMO_FUND))


def test_mandates_use_their_managers_own_returns(fund_assembled):
    # the demo fund's first three mandates report their own returns; the fourth is a
    # back-cast from today's weights
    parts = fund_assembled.parts
    assert [p.results.portfolio_source for p in parts] == [
        "portfolio returns file"] * 3 + ["current weights"]
    own = pd.read_csv(DEMO_FUND / "manager_domestic.csv")
    res = parts[0].results
    window = pd.DatetimeIndex(res.window.dates).strftime("%Y-%m-%d")
    np.testing.assert_allclose(res.portfolio_series,
                               own.set_index("date").loc[window, "return"], rtol=0, atol=0)
    fees = parts[0].context.fees
    g = own.set_index("date").loc[window, "gross_return"].to_numpy()
    n = own.set_index("date").loc[window, "return"].to_numpy()
    # cumulative return prod(1 + r) - 1, annualised geometrically (GIPS convention)
    assert fees["gross_return"] == pytest.approx(np.prod(1 + g) - 1, rel=1e-12)
    assert fees["net_return"] == pytest.approx(np.prod(1 + n) - 1, rel=1e-12)
    assert fees["fee_drag_mean"] == pytest.approx(0.0030 / 12, abs=1e-6)   # the demo's fee
    assert 0.0025 < fees["fee_drag_ann"] < 0.0035
    assert parts[3].context.fees is None
    html = fund_assembled.html()
    assert "back-cast" in html and "Fee drag" in html


def test_a_mandate_returns_file_short_of_the_window_is_refused(tmp_path, capsys):
    pack = tmp_path / "fund"
    shutil.copytree(DEMO_FUND, pack)
    own = pd.read_csv(pack / "manager_overseas.csv")
    own.iloc[:-2].to_csv(pack / "manager_overseas.csv", index=False)    # ends two months short
    out = tmp_path / "out"
    assert main(["build", str(pack), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert ("manager_overseas.csv:date: the portfolio returns series does not cover the "
            "window: 2 period(s) missing, first 2026-10-31") in err
    assert not out.exists()
