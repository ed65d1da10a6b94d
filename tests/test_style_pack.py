"""The demo pack's factor-model fields and attribution, recomputed from its input files.

The demo's data are invented; the reference values here are recomputed from those files
with statsmodels ``OLS`` (HAC with the lag rule and correction pinned), independently of
the tool's window and alignment code. Built once per session (``demo_build``).
"""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from tests.conftest import DEMO

WINDOW = 60


@pytest.fixture(scope="module")
def data():
    r = pd.read_csv(DEMO / "returns.csv").pivot(index="date", columns="security_id",
                                                 values="return")
    mkt = pd.read_csv(DEMO / "market.csv").set_index("date")["return"]
    rf = pd.read_csv(DEMO / "risk_free.csv").set_index("date")["rate"]
    fac = pd.read_csv(DEMO / "factors.csv").set_index("date")
    dates = mkt.index[mkt.index <= "2026-11-30"][-WINDOW:]
    hold = pd.read_csv(DEMO / "holdings.csv").set_index("security_id")
    # the demo gives market values (weights are their shares) and a cash line, which earns
    # the risk-free rate in every period (see README, cash)
    w = hold["market_value"] / hold["market_value"].sum()
    r = r.reindex(index=dates, columns=hold.index)
    for sid in hold.index[hold["asset_class"].str.lower() == "cash"]:
        r[sid] = rf[dates].to_numpy()
    return {"r": r, "x": (mkt - rf)[dates],
            "rf": rf[dates], "f": fac.loc[dates], "w": w, "dates": dates}


def _fit(y: np.ndarray, d) -> tuple:
    ok = np.isfinite(y)
    X = sm.add_constant(np.column_stack([d["x"].to_numpy(), d["f"].to_numpy()])[ok])
    L = int(np.floor(4 * (ok.sum() / 100) ** (2 / 9)))     # Newey-West (1994) lag rule
    return sm.OLS(y[ok], X).fit(cov_type="HAC", use_t=True,
                                cov_kwds={"maxlags": L, "use_correction": True})


def test_securities_gain_exactly_the_listed_fields(demo_build, data):
    sec = pd.read_csv(demo_build / "results/securities.csv")
    names = list(data["f"].columns)
    want = [f"{lab}{s}" for lab in ["beta_factor_model"] + [f"{n}_loading" for n in names]
            for s in ("", "_se", "_t", "_ci_low", "_ci_high")]
    want += ["alpha_factor", "alpha_factor_ann", "alpha_factor_se", "alpha_factor_t",
             "alpha_factor_p", "r_squared_factor", "sml_position_factor"]
    assert list(sec.columns[-len(want):]) == want
    port = json.loads((demo_build / "results/portfolio.json").read_text())
    assert {k for k in port if k in want or k.startswith("grs_factor")} == set(want) | {
        "grs_factor_f", "grs_factor_p", "grs_factor_applies", "grs_factor_reason"}


@pytest.mark.parametrize("sid", ["TVX001", "TVX006", "TVX042"],
                         ids=["complete", "late-start", "suspended"])
def test_holdings_match_statsmodels(demo_build, data, sid):
    sec = pd.read_csv(demo_build / "results/securities.csv").set_index("security_id")
    y = (data["r"][sid] - data["rf"]).to_numpy()
    ref = _fit(y, data)            # reference: statsmodels OLS, HAC, lag rule pinned
    row = sec.loc[sid]
    labels = ["alpha_factor", "beta_factor_model"] + [f"{n}_loading" for n in data["f"]]
    got = [row[c] for c in labels]
    np.testing.assert_allclose(got, ref.params, rtol=1e-7)       # CSV keeps 10 digits
    got_se = [row["alpha_factor_se"]] + [row[f"{c}_se"] for c in labels[1:]]
    np.testing.assert_allclose(got_se, ref.bse, rtol=1e-7)
    np.testing.assert_allclose(row["alpha_factor_p"], ref.pvalues[0], rtol=1e-7)
    np.testing.assert_allclose([row["beta_factor_model_ci_low"],
                                row["beta_factor_model_ci_high"]], ref.conf_int(0.05)[1],
                               rtol=1e-7)
    np.testing.assert_allclose(row["r_squared_factor"], ref.rsquared, rtol=1e-7)
    lo, hi = ref.conf_int(0.05)[0]
    want = "above the line" if lo > 0 else "below the line" if hi < 0 else \
        "within estimation error"
    assert row["sml_position_factor"] == want


def test_portfolio_matches_statsmodels_and_the_reading(demo_build, data):
    port = json.loads((demo_build / "results/portfolio.json").read_text())
    r, w = data["r"].to_numpy(), data["w"].to_numpy()
    have = np.isfinite(r)
    # today's weights spread over the holdings with a return each period
    rp = np.where(have, r, 0) @ w / (have * w).sum(axis=1)
    ref = _fit(rp - data["rf"].to_numpy(), data)
    np.testing.assert_allclose([port["alpha_factor"], port["beta_factor_model"],
                                port["size_loading"], port["value_loading"],
                                port["momentum_loading"]], ref.params, rtol=1e-8)
    np.testing.assert_allclose(port["alpha_factor_se"], ref.bse[0], rtol=1e-8)
    np.testing.assert_allclose(port["alpha_factor_ann"], 12 * ref.params[0], rtol=1e-8)
    # T = 60, N = 56 complete holdings and 4 factors: the test cannot apply, and says why
    assert port["grs_factor_applies"] is False and port["grs_factor_f"] is None
    assert port["grs_factor_reason"] == ("needs more periods than holdings plus factors "
                                         "(T = 60, N = 56, factors = 4)")
    html = (demo_build / "pack.html").read_text(encoding="utf-8")
    flat = re.sub(r"\s+", " ", html)
    share = (port["alpha"] - port["alpha_factor"]) / port["alpha"]
    assert 0.05 < share < 1.05           # the demo's tilts explain part of its alpha
    assert f"About {share * 100:.0f}% of the market-model alpha" in flat
    assert 'id="style"' in html and 'id="attribution"' in html


def test_attribution_sums_to_the_active_return(demo_build, data):
    att = pd.read_csv(demo_build / "results/attribution.csv")
    bs = pd.read_csv(DEMO / "benchmark_sectors.csv")
    bs = bs[bs["date"].isin(data["dates"])]
    B = (bs["weight"] * bs["return"]).groupby(bs["date"]).sum()
    r, w = data["r"].to_numpy(), data["w"].to_numpy()
    have = np.isfinite(r)
    R = np.where(have, r, 0) @ w / (have * w).sum(axis=1)
    active = np.prod(1 + R) - np.prod(1 + B.to_numpy())
    # Carino-linked effects add up exactly to the compounded active return
    np.testing.assert_allclose(att[["allocation", "selection", "interaction"]].to_numpy().sum(),
                               active, atol=1e-9)
    sides = dict(zip(att["sector"], att["side"], strict=True))
    assert sides["Real Estate"] == "benchmark only"
    assert sides["Telecommunications"] == "portfolio only"
    re_row = att.set_index("sector").loc["Real Estate"]
    assert re_row["selection"] == 0 and re_row["interaction"] == 0 and re_row["allocation"] < 0
