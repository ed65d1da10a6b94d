"""The [analysis] settings added for risk and performance: parsing, errors and their effect."""

from __future__ import annotations

import datetime as dt
import shutil

import numpy as np
import pandas as pd
import pytest

from reporter.analytics.performance import period_returns
from reporter.build import assemble
from reporter.config import load_settings
from reporter.errors import InputError
from tests.conftest import DEMO


def _pack(tmp_path, extra: str):
    folder = tmp_path / "pack"
    shutil.copytree(DEMO, folder)
    text = (folder / "pack.toml").read_text(encoding="utf-8")
    (folder / "pack.toml").write_text(text.replace("[analysis]\n", "[analysis]\n" + extra),
                                      encoding="utf-8")
    return folder


def test_bad_values_are_reported_together(tmp_path):
    folder = _pack(tmp_path, 'mar = "cash"\ncovariance = "shrunk"\nrandom_subsets = 1\n')
    with pytest.raises(InputError) as exc:
        load_settings(folder)
    where = sorted(p.where for p in exc.value.problems)
    assert where == ["pack.toml:analysis.covariance", "pack.toml:analysis.mar",
                     "pack.toml:analysis.random_subsets"]


def test_fixed_mar_and_sample_covariance(tmp_path):
    folder = _pack(tmp_path, 'mar = 0.06\ncovariance = "sample"\n')
    s = load_settings(folder)
    assert s.mar == 0.06 and s.covariance == "sample"
    a = assemble(s)
    p = a.results.portfolio_summary()
    assert p["covariance_method"] == "sample" and p["covariance_shrinkage"] == 0.0
    # 6% a year as a monthly rate that compounds to it: 1.06^(1/12) - 1 (by hand)
    monthly = 1.06 ** (1 / 12) - 1
    assert p["mar"] == pytest.approx(monthly, rel=1e-12) and p["mar_source"] == "fixed annual rate"
    assert p["mar_ann"] == pytest.approx(0.06, rel=1e-12)
    # the downside deviation below that monthly rate, from the portfolio series (by hand)
    port = a.results.portfolio_series
    assert p["downside_deviation"] == pytest.approx(
        np.sqrt(np.mean(np.minimum(port - monthly, 0) ** 2)), rel=1e-12)
    html = a.html()
    assert "sample covariance" in html and "6.0% a year" in html


def test_period_returns_daily_and_weekly():
    # daily business days of 2025-2026: the year to date starts on the first business day of
    # 2026; one year holds the days after 2025-11-28 (arithmetic by hand, 0.1% a day)
    d = pd.bdate_range("2025-01-01", "2026-11-27").to_numpy().astype("datetime64[D]")
    r = np.full(len(d), 0.001)
    t = period_returns(d, r, r, dt.date(2026, 11, 27), "daily", 252).set_index("period")
    ytd = int(np.sum(d >= np.datetime64("2026-01-01")))
    assert t.loc["ytd", "n_periods"] == ytd and t.loc["ytd", "start"] == "2026-01-01"
    assert t.loc["ytd", "portfolio"] == pytest.approx(1.001**ytd - 1, rel=1e-12)
    n1y = int(np.sum(d > np.datetime64("2025-11-27")))
    assert t.loc["1y", "n_periods"] == n1y and t.loc["1y", "basis"] == "annualised"
    assert t.loc["1y", "portfolio"] == pytest.approx(1.001 ** (252) - 1, rel=1e-12)
    assert "3y" not in t.index
    cal = t[t["kind"] == "calendar"]
    assert list(cal["label"]) == ["2025", "2026 (to date)"]
    # weekly Fridays
    w = pd.date_range("2024-01-05", "2026-11-27", freq="W-FRI").to_numpy().astype(
        "datetime64[D]")
    rw = np.full(len(w), 0.002)
    tw = period_returns(w, rw, rw, dt.date(2026, 11, 27), "weekly", 52).set_index("period")
    assert tw.loc["1y", "n_periods"] == 52
    assert tw.loc["1y", "portfolio"] == pytest.approx(1.002**52 - 1, rel=1e-12)
    assert list(tw[tw["kind"] == "calendar"]["label"]) == ["2024", "2025", "2026 (to date)"]


def test_two_holdings_skip_the_line_tests_and_say_why(tmp_path):
    # two holdings: no cross-section can test a line, GRS still applies (T = 60 > N + 1)
    folder = tmp_path / "small"
    shutil.copytree(DEMO, folder)
    h = pd.read_csv(DEMO / "holdings.csv").head(2).assign(weight=0.5)
    r = pd.read_csv(DEMO / "returns.csv")
    h.to_csv(folder / "holdings.csv", index=False)
    r[r["security_id"].isin(h["security_id"])].to_csv(folder / "returns.csv", index=False)
    a = assemble(load_settings(folder))
    p = a.results.portfolio_summary()
    assert p["sml_cs_n_assets"] == 2 and np.isnan(p["sml_cs_slope"])
    assert np.isnan(p["sml_fm_slope"])
    assert p["grs_holdings_applies"] and p["grs_holdings_df_num"] == 2
    assert "need at least three fitted holdings" in a.html()
    rc = a.results.risk
    assert abs(rc.vol_contribution.sum() - rc.volatility) <= 1e-15
