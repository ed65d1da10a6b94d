"""The whole read -> validate -> analyse path on real returns written as a pack folder.

Reference data: Ken French Data Library monthly industry portfolios (``linearmodels``
bundle). Reference library: statsmodels ``OLS``. The pack's window selection, period
alignment and excess returns must reproduce a direct statsmodels fit to 1e-8.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from reporter.analytics.pack import analyse
from reporter.config import load_settings
from reporter.validate import validate_pack

INDUSTRIES = ["NoDur", "Durbl", "Manuf", "Enrgy", "Chems", "BusEq", "Telcm", "Utils", "Shops",
              "Hlth", "Money", "Other"]


def write_french_pack(folder, french, window: int, drop: dict[str, slice]) -> pd.DataFrame:
    """Industries as holdings (equal weights); month-end dates; some holdings with gaps."""
    df = french.copy()
    df["date"] = (pd.to_datetime(df["dates"]) + pd.offsets.MonthEnd(0)).dt.strftime("%Y-%m-%d")
    pd.DataFrame({"date": df["date"], "return": df["MktRF"] + df["RF"]}).to_csv(
        folder / "market.csv", index=False)
    pd.DataFrame({"date": df["date"], "rate": df["RF"]}).to_csv(folder / "risk_free.csv",
                                                                 index=False)
    long = df.melt(id_vars="date", value_vars=INDUSTRIES, var_name="security_id",
                   value_name="return")
    for sid, rows in drop.items():
        idx = long.index[long["security_id"] == sid][rows]
        long = long.drop(idx)
    long.to_csv(folder / "returns.csv", index=False)
    pd.DataFrame({"security_id": INDUSTRIES, "name": INDUSTRIES, "sector": "Industry",
                  "weight": [1 / len(INDUSTRIES)] * len(INDUSTRIES)}).to_csv(
        folder / "holdings.csv", index=False)
    (folder / "pack.toml").write_text(f"""
[pack]
title = "French industries"
organisation = "Test"
period_end = {df['date'].iloc[-1]}
frequency = "monthly"
currency = "USD"
[inputs]
holdings = "holdings.csv"
returns = "returns.csv"
market = "market.csv"
risk_free = "risk_free.csv"
[analysis]
window = {window}
min_obs = 24
""")
    return df


@pytest.mark.parametrize("window", [60, 819], ids=["window60", "full"])
def test_pack_figures_match_statsmodels(tmp_path, french, window):
    n = len(french)
    drop = {"Durbl": slice(n - 30, n - 20), "Telcm": slice(0, n - 40), "Hlth": slice(0, n - 20)}
    df = write_french_pack(tmp_path, french, window, drop)
    settings = load_settings(tmp_path)
    res = analyse(validate_pack(settings), settings)
    sec = res.securities.set_index("security_id")
    win = df.tail(window)
    x = win["MktRF"].to_numpy()
    for sid in INDUSTRIES:
        y = (win[sid] - win["RF"]).to_numpy().copy()
        gone = drop.get(sid)
        if gone is not None:
            mask = np.ones(n, dtype=bool)
            mask[gone] = False
            y[~mask[-window:]] = np.nan
        ok = np.isfinite(y)
        row = sec.loc[sid]
        assert row["n_obs"] == ok.sum()
        if ok.sum() < 24:
            assert np.isnan(row["beta"]) and row["status"].startswith("not fitted")
            continue
        ref = sm.OLS(y[ok], sm.add_constant(x[ok])).fit()
        np.testing.assert_allclose(
            row[["alpha", "beta", "alpha_se", "beta_se", "r_squared"]].to_numpy(dtype=float),
            [ref.params[0], ref.params[1], ref.bse[0], ref.bse[1], ref.rsquared],
            rtol=1e-8, atol=1e-13, err_msg=sid)
    summary = res.portfolio_summary()
    assert summary["n_periods"] == window
    assert summary["window_end"] == df["date"].iloc[-1]
    np.testing.assert_allclose(summary["mean_risk_free"], win["RF"].mean(), rtol=1e-12)
    np.testing.assert_allclose(summary["mean_market_premium"], win["MktRF"].mean(), rtol=1e-12)
    # the Hlth holding has only 20 periods: it is reported, not fitted
    assert sec.loc["Hlth", "n_obs"] == 20 and np.isnan(sec.loc["Hlth", "beta"])
