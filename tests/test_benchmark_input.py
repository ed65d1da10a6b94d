"""The optional benchmark series: figures against it and its input errors."""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from reporter.build import assemble
from reporter.cli import main
from reporter.config import load_settings
from tests.conftest import DEMO, demo_holdings


def _pack_with_benchmark(tmp_path, bench: pd.DataFrame | None = None, name="benchmark.csv"):
    folder = tmp_path / "pack"
    shutil.copytree(DEMO, folder)
    text = (folder / "pack.toml").read_text(encoding="utf-8")
    (folder / "pack.toml").write_text(text.replace(
        'risk_free = "risk_free.csv"', f'risk_free = "risk_free.csv"\nbenchmark = "{name}"'),
        encoding="utf-8")
    if bench is None:
        mkt = pd.read_csv(DEMO / "market.csv")
        bench = pd.DataFrame({"date": mkt["date"],
                              "return": 0.8 * mkt["return"] + 0.001})
    bench.to_csv(folder / name, index=False)
    return folder


def _portfolio_returns_by_pandas() -> pd.Series:
    """The portfolio's return from returns.csv and today's weights, spread over the holdings
    present each period, computed with a pandas pivot (an independent path)."""
    r = pd.read_csv(DEMO / "returns.csv").pivot(index="date", columns="security_id",
                                                 values="return")
    h = demo_holdings()
    w = h.set_index("security_id")["weight"]
    rf = pd.read_csv(DEMO / "risk_free.csv").set_index("date")["rate"]
    for cash in h.loc[h["asset_class"].str.casefold() == "cash", "security_id"]:
        r[cash] = rf.reindex(r.index)        # cash earns the risk-free rate
    r = r[w.index]
    present = r.notna()
    return (r.fillna(0.0) @ w) / (present.astype(float) @ w)


def test_tracking_error_and_information_ratio_against_the_benchmark(tmp_path):
    folder = _pack_with_benchmark(tmp_path)
    a = assemble(load_settings(folder))
    p = a.results.portfolio_summary()
    port = _portfolio_returns_by_pandas()
    bench = pd.read_csv(folder / "benchmark.csv").set_index("date")["return"]
    window = port.index[-60:]
    active = port[window] - bench[window]
    # common practice, no source: TE = sd(r_p - r_b), IR = mean(r_p - r_b) / TE
    assert p["benchmark_tracking_error"] == pytest.approx(active.std(ddof=1), rel=1e-9)
    assert p["benchmark_information_ratio"] == pytest.approx(
        active.mean() / active.std(ddof=1), rel=1e-9)
    assert p["tracking_reference"] == "benchmark"
    t = a.results.period_table.set_index("period")
    b5 = bench[window]
    assert t.loc["5y", "benchmark"] == pytest.approx(np.prod(1 + b5) ** (12 / 60) - 1,
                                                     rel=1e-9)
    assert t.loc["1m", "benchmark_difference"] == pytest.approx(
        port.iloc[-1] - bench.iloc[-1], rel=1e-9)
    rc = a.results.risk
    assert abs(rc.te_contribution.sum() - rc.tracking_error) <= 1e-12
    html = a.html()
    # the benchmark is named in words, never by its file (it has no name in pack.toml)
    assert "Tracking error against the benchmark" in html and "benchmark.csv" not in html
    assert "benchmark" in a.hashes


def test_benchmark_equal_to_the_market_gives_the_market_figures(tmp_path):
    # a benchmark identical to the market proxy: every benchmark figure equals the proxy's
    folder = _pack_with_benchmark(tmp_path, pd.read_csv(DEMO / "market.csv"))
    p = assemble(load_settings(folder)).results.portfolio_summary()
    assert p["benchmark_tracking_error"] == pytest.approx(p["tracking_error"], rel=1e-12)
    assert p["benchmark_information_ratio"] == pytest.approx(p["information_ratio"],
                                                             rel=1e-12)


def test_benchmark_problems_are_reported_with_the_others(tmp_path, capsys):
    mkt = pd.read_csv(DEMO / "market.csv")
    bad = pd.DataFrame({"date": mkt["date"], "return": mkt["return"].astype(object)})
    bad = bad.drop(index=[110, 111])   # February and March 2026 missing
    bad.loc[5, "return"] = "n/a"
    folder = _pack_with_benchmark(tmp_path, bad)
    out = tmp_path / "out"
    assert main(["build", str(folder), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "benchmark.csv:7:return" in err
    assert "benchmark.csv:date: the benchmark series does not cover the window: 2 period(s) " \
           "missing, first 2026-02-28" in err
    assert not out.exists()


def test_portfolio_returns_file_replaces_the_weighted_series(tmp_path):
    # the scheme's own returns: every portfolio figure comes from them. Reference values:
    # statsmodels OLS of the file's excess returns on the market's, and compounding by hand
    import statsmodels.api as sm

    folder = tmp_path / "own"
    shutil.copytree(DEMO, folder)
    mkt = pd.read_csv(DEMO / "market.csv")
    rf = pd.read_csv(DEMO / "risk_free.csv")
    own = pd.DataFrame({"date": mkt["date"], "return": (1.1 * mkt["return"] + 0.0005
                                                        + 0.002 * np.sin(np.arange(120)))})
    own.to_csv(folder / "own.csv", index=False)
    text = (folder / "pack.toml").read_text(encoding="utf-8")
    (folder / "pack.toml").write_text(text.replace(
        'risk_free = "risk_free.csv"', 'risk_free = "risk_free.csv"\nportfolio_returns = '
        '"own.csv"'), encoding="utf-8")
    a = assemble(load_settings(folder))
    p = a.results.portfolio_summary()
    assert p["portfolio_source"] == "portfolio returns file"
    y = (own["return"] - rf["rate"]).to_numpy()[-60:]
    x = (mkt["return"] - rf["rate"]).to_numpy()[-60:]
    ref = sm.OLS(y, sm.add_constant(x)).fit()
    assert p["beta_regression"] == pytest.approx(ref.params[1], rel=1e-10)
    assert p["alpha"] == pytest.approx(ref.params[0], rel=1e-10)
    t = a.results.period_table.set_index("period")
    assert t.loc["ytd", "portfolio"] == pytest.approx(
        np.prod(1 + own["return"].to_numpy()[-11:]) - 1, rel=1e-10)
    assert "own.csv" not in a.html() and "portfolio_returns" in a.hashes
    assert "The portfolio returns are the reported ones, net of fees." in a.html()
