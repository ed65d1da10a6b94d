"""Odd but legal data gets a figure that says why it cannot be computed, or one line naming
the input: never an internal error."""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from reporter.analytics.sml import grs_test
from tests.conftest import DEMO, run_cli


def test_grs_with_an_asset_exactly_linear_in_the_market_does_not_apply():
    rng = np.random.default_rng(7)
    x = rng.normal(0.005, 0.04, 60)
    y = 0.9 * x[:, None] + rng.normal(0, 0.02, (60, 5))
    y[:, 2] = 0.0                    # excess return zero: a return equal to the risk-free rate
    g = grs_test(y, x)
    assert not g.applies and "singular" in g.reason
    assert np.isnan(g.f_stat) and np.isnan(g.p_value)
    y[:, 2] = 0.3 + 1.2 * x          # any exact line in the market
    assert not grs_test(y, x).applies
    y[:, 2] = rng.normal(0, 0.02, 60)
    assert grs_test(y, x).applies    # the same panel with noise is tested


def test_grs_with_a_constant_market_premium_does_not_apply():
    y = np.random.default_rng(1).normal(0, 0.02, (60, 4))
    g = grs_test(y, np.full(60, 0.004))
    assert not g.applies and "constant" in g.reason


def _copy_demo(tmp_path):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    return pack


@pytest.mark.filterwarnings("error::RuntimeWarning")     # 0/0 t-statistics are NaN, quietly
def test_a_holding_that_earns_the_risk_free_rate_builds_its_figures(tmp_path):
    from reporter.analytics.pack import analyse
    from reporter.config import load_settings
    from reporter.validate import validate_pack

    pack = _copy_demo(tmp_path)
    rf = pd.read_csv(pack / "risk_free.csv")
    r = pd.read_csv(pack / "returns.csv")
    rate = dict(zip(rf["date"], rf["rate"], strict=True))
    sel = r["security_id"] == "TVX005"
    r.loc[sel, "return"] = r.loc[sel, "date"].map(rate)
    r.to_csv(pack / "returns.csv", index=False)
    settings = load_settings(pack)
    res = analyse(validate_pack(settings), settings)
    row = res.securities.set_index("security_id").loc["TVX005"]
    assert row["beta"] == pytest.approx(0.0, abs=1e-12)
    assert row["alpha"] == pytest.approx(0.0, abs=1e-12)
    assert not res.grs_holdings.applies and "singular" in res.grs_holdings.reason
    # its standard errors are zero: every t-statistic is undefined, shown as missing
    for col in ("alpha_t", "beta_t", "alpha_t_hac", "beta_t_hac", "alpha_t_ols", "beta_t_ols"):
        assert np.isnan(row[col]), col


def test_a_constant_market_premium_is_bad_input_naming_the_file(tmp_path, capsys):
    pack = _copy_demo(tmp_path)
    for name, col, value in (("market.csv", "return", 0.01), ("risk_free.csv", "rate", 0.001)):
        df = pd.read_csv(pack / name)
        df[col] = value
        df.to_csv(pack / name, index=False)
    out = tmp_path / "out"
    code, _, err = run_cli(capsys, "build", pack, "--out", out, "--quiet")
    assert code == 2
    assert err.splitlines()[0].startswith("market.csv: the market proxy's return less the "
                                          "risk-free rate is the same in all 60 periods")
    assert "internal error" not in err and not out.exists()
    # check says the same, and only that: it had named the factors file's size factor as a
    # line in the market's premium, which is a consequence, not the cause
    code, _, checked = run_cli(capsys, "check", pack)
    assert code == 2
    assert checked.splitlines() == err.splitlines()
    assert "factors.csv" not in checked
