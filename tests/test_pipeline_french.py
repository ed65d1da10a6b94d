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
            row[["alpha", "beta", "alpha_se_ols", "beta_se_ols", "alpha_t_ols", "beta_t_ols",
                 "r_squared"]].to_numpy(dtype=float),
            [ref.params[0], ref.params[1], ref.bse[0], ref.bse[1], ref.tvalues[0],
             ref.tvalues[1], ref.rsquared],
            rtol=1e-8, atol=1e-13, err_msg=sid)
        # statsmodels OLS, HAC with the lag pinned to the pack's rule and the T/(T-2)
        # correction; use_t gives Student's t with n - 2 df for the p-value
        lags = int(np.floor(4 * (ok.sum() / 100) ** (2 / 9)))
        hac = sm.OLS(y[ok], sm.add_constant(x[ok])).fit(
            cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": True}, use_t=True)
        # the unqualified se, t and p are under the default errors, HAC
        np.testing.assert_allclose(
            row[["alpha_se_hac", "beta_se_hac", "alpha_t_hac", "beta_t_hac", "alpha_se",
                 "alpha_t", "beta_se", "beta_t", "alpha_p"]].to_numpy(dtype=float),
            [hac.bse[0], hac.bse[1], hac.tvalues[0], hac.tvalues[1], hac.bse[0],
             hac.tvalues[0], hac.bse[1], hac.tvalues[1], hac.pvalues[0]],
            rtol=1e-7, err_msg=sid)
    summary = res.portfolio_summary()
    assert summary["n_periods"] == window
    assert summary["window_end"] == df["date"].iloc[-1]
    np.testing.assert_allclose(summary["mean_risk_free"], win["RF"].mean(), rtol=1e-12)
    np.testing.assert_allclose(summary["mean_market_premium"], win["MktRF"].mean(), rtol=1e-12)
    # the Hlth holding has only 20 periods: it is reported, not fitted
    assert sec.loc["Hlth", "n_obs"] == 20 and np.isnan(sec.loc["Hlth", "beta"])


def test_portfolio_errors_specific_share_and_fdr_on_real_data(tmp_path, french):
    """On the real industry returns (window of 60 months, no gaps): the portfolio's own
    regression gives the specific share, its t-statistics match the errors beside them, and
    the false-discovery reading matches statsmodels ``multipletests``."""
    from statsmodels.stats.multitest import multipletests

    df = write_french_pack(tmp_path, french, 60, {})
    settings = load_settings(tmp_path)
    res = analyse(validate_pack(settings), settings)
    p = res.portfolio_summary()
    win = df.tail(60)
    y = res.portfolio_series - win["RF"].to_numpy()
    X = sm.add_constant(win["MktRF"].to_numpy())
    ols = sm.OLS(y, X).fit()                                     # statsmodels OLS
    hac = sm.OLS(y, X).fit(cov_type="HAC", cov_kwds={"maxlags": p["hac_lags"],
                                                     "use_correction": True}, use_t=True)
    np.testing.assert_allclose(
        [p["idiosyncratic_share"], p["systematic_share"], p["beta_se_ols"], p["beta_t_ols"],
         p["alpha_t_ols"], p["beta_se_hac"], p["beta_t_hac"], p["alpha_t_hac"], p["beta_se"],
         p["beta_t"], p["alpha_p"]],
        [1 - ols.rsquared, ols.rsquared, ols.bse[1], ols.tvalues[1], ols.tvalues[0],
         hac.bse[1], hac.tvalues[1], hac.tvalues[0], hac.bse[1], hac.tvalues[1],
         hac.pvalues[0]], rtol=1e-8)
    # with complete data the portfolio's residual is sum w_i e_i (OLS is linear in y), so
    # 1 - R^2 = w' E'E w / SST holds every covariance between the holdings' residuals, which
    # the diagonal model's sum_i w_i^2 sigma_e,i^2 leaves out (numpy, by hand)
    ex = win[INDUSTRIES].to_numpy() - win[["RF"]].to_numpy()
    E = ex - X @ np.linalg.lstsq(X, ex, rcond=None)[0]
    w = np.full(len(INDUSTRIES), 1 / len(INDUSTRIES))
    full = w @ E.T @ E @ w / np.sum((y - y.mean()) ** 2)
    assert p["idiosyncratic_share"] == pytest.approx(full, rel=1e-9)
    # Sharpe's (1963) diagonal model: beta_p^2 var(x) + sum_i w_i^2 SSR_i / (n - 2)
    diag = np.sum(w**2 * np.sum(E**2, axis=0) / (60 - 2))
    assert p["idiosyncratic_share_if_uncorrelated"] == pytest.approx(
        diag / (ols.params[1] ** 2 * np.var(X[:, 1], ddof=1) + diag), rel=1e-9)
    assert abs(p["idiosyncratic_share_if_uncorrelated"] - p["idiosyncratic_share"]) > 0.01
    sec = res.securities
    reject, *_ = multipletests(sec["alpha_p"].to_numpy(), alpha=0.05, method="fdr_bh")
    want = np.where(reject, np.where(sec["alpha"] > 0, "above the line", "below the line"),
                    "within estimation error")
    assert list(sec["sml_position_fdr"]) == list(want)
    assert p["sml_n_flagged_fdr"] == int(reject.sum())
    assert p["sml_n_flagged"] == int((sec["alpha_p"] < 0.05).sum())
