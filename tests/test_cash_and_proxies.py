"""Cash earns the risk-free rate and counts in every portfolio figure; a holding with no
return history takes its proxy's returns, or is excluded and said to be."""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from reporter.analytics.pack import analyse
from reporter.config import load_settings
from reporter.errors import InputError
from reporter.validate import validate_pack
from tests.conftest import DEMO, demo_holdings

# the demo holdings whose returns cover the whole 60-month window (demo_data.py gives
# TVX006, TVX018, TVX034 and TVX042 short or broken histories)
BROKEN = ("TVX006", "TVX018", "TVX034", "TVX042")


def _pack(folder, holdings: pd.DataFrame):
    folder.mkdir()
    for name in ("pack.toml", "returns.csv", "market.csv", "risk_free.csv", "cash_flows.csv",
                 "factors.csv", "benchmark_sectors.csv"):
        shutil.copy(DEMO / name, folder / name)
    holdings.to_csv(folder / "holdings.csv", index=False, float_format="%.17g")
    return folder


def _analysed(folder):
    settings = load_settings(folder)
    return analyse(validate_pack(settings), settings)


@pytest.fixture(scope="module")
def packs(tmp_path_factory):
    """Pack A: the demo's fully covered holdings, weights summing to 1. Pack B: the same
    with every weight scaled by 0.97 and a 3% cash line (no returns of its own)."""
    base = tmp_path_factory.mktemp("cash")
    h = demo_holdings()
    h = h[~h["security_id"].isin(BROKEN) & (h["asset_class"] != "Cash")].reset_index(drop=True)
    h["weight"] = h["weight"] / h["weight"].sum()
    with_cash = h.assign(weight=h["weight"] * 0.97)
    cash = pd.DataFrame([{"security_id": "CASH01", "name": "Sterling deposit",
                          "sector": "Cash", "weight": 0.03, "asset_class": "cash"}])
    with_cash = pd.concat([with_cash, cash], ignore_index=True)
    a = _analysed(_pack(base / "a", h))
    b = _analysed(_pack(base / "b", with_cash))
    return a, b


def test_three_percent_cash_scales_beta_and_alpha_by_097(packs):
    # the risk-free asset has zero beta and zero excess return, so a 3% cash share scales
    # the portfolio's excess return, hence its regression beta and alpha, by 0.97 exactly
    # (Tobin 1958 separation; the capital market line of Sharpe 1964)
    a, b = packs
    pa_, pb = a.portfolio_summary(), b.portfolio_summary()
    assert pb["beta_regression"] == pytest.approx(0.97 * pa_["beta_regression"], rel=1e-9)
    assert pb["alpha"] == pytest.approx(0.97 * pa_["alpha"], rel=1e-9)
    assert b.portfolio_fit.residual_vol == pytest.approx(0.97 * a.portfolio_fit.residual_vol,
                                                         rel=1e-9)
    # the weighted beta counts cash at beta 0 rather than rescaling it away
    assert b.beta_weighted == pytest.approx(0.97 * a.beta_weighted, rel=1e-9)
    assert b.fitted_weight == pytest.approx(1.0, abs=1e-12)
    assert b.coverage.summary()["cash_weight"] == pytest.approx(0.03)
    assert b.coverage.summary()["n_cash"] == 1


def test_cash_is_in_the_figures_but_not_on_the_line(packs):
    a, b = packs
    sec = b.securities.set_index("security_id")
    assert sec.loc["CASH01", "status"] == "cash: earns the risk-free rate"
    assert sec.loc["CASH01", "beta"] == 0.0 and sec.loc["CASH01", "residual_vol"] == 0.0
    assert sec.loc["CASH01", "sml_position"] == ""
    # the line and its tests are over the same holdings as without cash
    assert b.line_cross_section.n_assets == a.line_cross_section.n_assets
    assert b.line_cross_section.slope == pytest.approx(a.line_cross_section.slope, rel=1e-12)
    # risk: cash has the risk-free rate's tiny variance, so volatility falls by about 3%
    ratio = b.risk.volatility / a.risk.volatility
    assert 0.965 < ratio < 0.975
    # and the excess return's volatility by 0.97 exactly (the same scaling)
    ex_a, ex_b = (r.portfolio_series - r.window.risk_free for r in (a, b))
    assert np.std(ex_b, ddof=1) == pytest.approx(0.97 * np.std(ex_a, ddof=1), rel=1e-9)
    # the cash line's contribution to volatility is (nearly) nothing
    risk = b.risk_table.set_index("security_id")
    assert abs(risk.loc["CASH01", "vol_share"]) < 1e-3


def _with_extra(tmp_path, extra: dict, name: str):
    h = demo_holdings()
    h = h[h["asset_class"] != "Cash"]
    h["weight"] = h["weight"] / h["weight"].sum() * 0.98
    h["proxy"] = ""
    row = {"security_id": "NEW01", "name": "Newly listed plc", "sector": "Industrials",
           "weight": 0.02, **extra}
    return _pack(tmp_path / name, pd.concat([h, pd.DataFrame([row])], ignore_index=True))


def test_a_market_proxy_stands_in_with_beta_one(tmp_path):
    res = _analysed(_with_extra(tmp_path, {"proxy": "market"}, "proxy"))
    sec = res.securities.set_index("security_id")
    assert sec.loc["NEW01", "status"] == "proxy: market"
    # the market proxy's beta against itself is 1 (common practice, no source)
    assert sec.loc["NEW01", "beta"] == pytest.approx(1.0, abs=1e-12)
    assert sec.loc["NEW01", "sml_position"] == ""
    assert res.coverage.summary()["n_proxied"] == 1
    assert res.coverage.summary()["excluded_weight"] == 0.0


@pytest.mark.filterwarnings("error::RuntimeWarning")
def test_a_market_proxy_stand_in_keeps_the_active_risk_model(tmp_path):
    # a holding with the market proxy's returns has no return relative to it: its active
    # variance is zero. The active model's Gram matrix comes from the held one by a rank-two
    # update, whose rounding had left that variance slightly negative, and its square root
    # made every figure of the active model NaN. Reference: the same estimator on the
    # relative returns themselves (r - r_m, a direct product: that holding's column is zero)
    from reporter.analytics.covariance import estimate_covariance

    res = _analysed(_with_extra(tmp_path, {"proxy": "market"}, "proxy"))
    ids = list(res.window.security_ids)
    j = ids.index("NEW01")
    relative = res.window.returns - res.window.market[:, None]
    assert not relative[:, j].any()                           # the stand-in: exactly zero
    direct = estimate_covariance(relative, res.covariance_active.method)
    got = res.covariance_active
    assert np.isfinite(got.matrix).all() and 0.0 < got.shrinkage < 1.0
    assert got.shrinkage == pytest.approx(direct.shrinkage, rel=1e-9)
    np.testing.assert_allclose(got.matrix, direct.matrix, rtol=1e-8, atol=1e-18)
    assert not got.matrix[j].any() and not got.matrix[:, j].any()
    s = res.portfolio_summary()
    assert np.isfinite(s["model_tracking_error"])
    assert s["model_to_realised_tracking_error"] == pytest.approx(1.0, abs=0.1)
    assert np.isfinite(res.risk_table[["te_contribution", "te_share"]].to_numpy()).all()


def test_a_holding_proxy_copies_its_returns(tmp_path):
    res = _analysed(_with_extra(tmp_path, {"proxy": "TVX002"}, "byid"))
    ids = list(res.window.security_ids)
    np.testing.assert_array_equal(res.window.returns[:, ids.index("NEW01")],
                                  res.window.returns[:, ids.index("TVX002")])


def test_without_a_proxy_the_holding_is_excluded_and_counted(tmp_path):
    res = _analysed(_with_extra(tmp_path, {}, "none"))
    s = res.coverage.summary()
    assert s["n_excluded"] == 1 and s["excluded_weight"] == pytest.approx(0.02)
    assert res.securities.set_index("security_id").loc["NEW01", "status"] == \
        "no return history: excluded"
    assert res.portfolio_summary()["excluded_weight"] == pytest.approx(0.02)


@pytest.mark.parametrize(("proxy", "message"), [
    ("NOPE9", "proxy 'NOPE9' is not a security id in this file"),
    ("benchmark", "proxy 'benchmark' but the pack has no [inputs] benchmark"),
    ("NEW01", "holding 'NEW01' names itself as its proxy"),
])
def test_a_bad_proxy_is_named_by_row_and_column(tmp_path, proxy, message):
    folder = _with_extra(tmp_path, {"proxy": proxy}, "bad")
    with pytest.raises(InputError) as err:
        validate_pack(load_settings(folder))
    lines = [str(p) for p in err.value.problems]
    assert f"holdings.csv:62:proxy: {message}" in "\n".join(lines)


def test_the_warning_says_whether_the_proxy_can_stand_in(tmp_path):
    """Two new listings naming each other as proxy: neither has returns, and a proxy's proxy
    is not followed, so both are excluded; validation's warning says so (it once said "its
    proxy stands in for it"). A proxy with returns is said to stand in, and does."""
    h = demo_holdings()
    h = h[h["asset_class"] != "Cash"]
    h["weight"] = h["weight"] / h["weight"].sum() * 0.97
    h["proxy"] = ""
    rows = [{"security_id": "NEW01", "name": "Newly listed plc", "sector": "Industrials",
             "weight": 0.01, "proxy": "NEW02"},
            {"security_id": "NEW02", "name": "Newer listed plc", "sector": "Industrials",
             "weight": 0.01, "proxy": "NEW01"},
            {"security_id": "NEW03", "name": "Newest listed plc", "sector": "Industrials",
             "weight": 0.01, "proxy": "TVX002"}]
    folder = _pack(tmp_path / "mutual", pd.concat([h, pd.DataFrame(rows)], ignore_index=True))
    settings = load_settings(folder)
    inputs = validate_pack(settings)
    said = {p.message.split()[1]: p.message for p in inputs.warnings
            if "has no return history" in p.message}
    assert said["NEW01"].endswith("its proxy 'NEW02' has none either, so it is left out of "
                                  "every return figure; name a proxy with returns")
    assert said["NEW02"].endswith("its proxy 'NEW01' has none either, so it is left out of "
                                  "every return figure; name a proxy with returns")
    assert said["NEW03"].endswith("its proxy 'TVX002' stands in for it")
    status = analyse(inputs, settings).securities.set_index("security_id")["status"]
    assert status["NEW01"] == status["NEW02"] == "no return history: excluded"
    assert status["NEW03"] == "proxy: TVX002"
