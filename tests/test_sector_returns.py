"""Sector excess returns: each period's weighted mean of the returns of the sector's holdings
that have one (weights renormalised over them), less the risk-free rate, checked against the
same arithmetic written out with pandas; from the analysis' shared prepared matrices or not."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from reporter.analytics.market_model import Prepared
from reporter.analytics.returns import sector_excess_returns

SECTORS = ["Alpha", "Beta", "Gamma"]


@pytest.fixture(scope="module")
def panel():
    rng = np.random.default_rng(3)
    T, N = 120, 9
    r = rng.normal(0.005, 0.04, (T, N))
    r[10:20, 0] = np.nan                      # a suspension
    r[:50, 4] = np.nan                        # a late listing
    r[30, [6, 7, 8]] = np.nan                 # a period where sector Gamma has no return
    rf = rng.uniform(0.0001, 0.0003, T)
    market = rng.normal(0.004, 0.03, T)
    w = rng.uniform(0.5, 2.0, N)
    w /= w.sum()
    sector_of = np.array(["Alpha"] * 3 + ["Beta"] * 3 + ["Gamma"] * 3)
    return r, rf, market, w, sector_of


def by_pandas(r, rf, w, sector_of):
    long = pd.DataFrame(r).stack().dropna().rename("r").reset_index()   # present only
    long.columns = ["t", "i", "r"]
    long["w"] = w[long["i"]]
    long["sector"] = sector_of[long["i"]]
    long["wr"] = long["w"] * long["r"]
    g = long.groupby(["t", "sector"])[["wr", "w"]].sum()
    out = (g["wr"] / g["w"]).unstack("sector").reindex(index=range(len(rf)), columns=SECTORS)
    return out.to_numpy() - rf[:, None]


def test_sector_excess_returns_match_pandas_with_and_without_shared_matrices(panel):
    r, rf, market, w, sector_of = panel
    want = by_pandas(r, rf, w, sector_of)
    prep = Prepared.of(r - rf[:, None], market - rf)
    plain = sector_excess_returns(r, rf, w, sector_of, SECTORS)
    shared = sector_excess_returns(r, rf, w, sector_of, SECTORS, prep)
    for got in (plain, shared):
        assert np.isnan(got[30, 2]) and np.isnan(want[30, 2])      # no Gamma return then
        np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-16)
    # the suspension renormalises Alpha's weights over its two other holdings
    t = 15
    a = w[1:3] / w[1:3].sum()
    assert shared[t, 0] == pytest.approx(a @ r[t, 1:3] - rf[t], rel=1e-12)


def test_sector_excess_returns_form_their_own_mask_when_the_market_has_a_gap(panel):
    # the prepared mask drops every holding in a period the market misses; the sector
    # returns of that period must not be dropped, so the plain path is taken, exactly
    r, rf, market, w, sector_of = panel
    gap = market.copy()
    gap[40] = np.nan
    prep = Prepared.of(r - rf[:, None], gap - rf)
    got = sector_excess_returns(r, rf, w, sector_of, SECTORS, prep)
    np.testing.assert_array_equal(got, sector_excess_returns(r, rf, w, sector_of, SECTORS))
    assert np.isfinite(got[40]).all()
