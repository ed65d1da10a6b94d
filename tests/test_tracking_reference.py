"""Tracking error, active return and the information ratio against the benchmark when a pack
has one; the market proxy's figures kept as ``market_*``; the limit uses the benchmark's."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from reporter.analytics.pack import analyse
from reporter.build import assemble
from reporter.config import LimitsSection, load_settings
from reporter.limits import BREACH, WITHIN, evaluate_limits
from reporter.validate import validate_pack
from tests.conftest import DEMO
from tests.test_benchmark_input import _pack_with_benchmark, _portfolio_returns_by_pandas


@pytest.fixture(scope="module")
def close_benchmark(tmp_path_factory):
    """The demo with a benchmark that the portfolio tracks closely: the portfolio's own
    return plus 0.1% noise a month (seeded), so tracking error against it is far below the
    one against the market proxy."""
    port = _portfolio_returns_by_pandas()
    mkt = pd.read_csv(DEMO / "market.csv")
    rng = np.random.default_rng(5)
    b = port.reindex(mkt["date"]).fillna(mkt.set_index("date")["return"]).to_numpy()
    bench = pd.DataFrame({"date": mkt["date"], "return": b + rng.normal(0, 0.001, len(b))})
    folder = _pack_with_benchmark(tmp_path_factory.mktemp("te"), bench)
    res = assemble(load_settings(folder)).results
    return folder, res, port, bench.set_index("date")["return"]


def test_headline_figures_use_the_benchmark_and_market_ones_stay(close_benchmark):
    folder, res, port, bench = close_benchmark
    p = res.portfolio_summary()
    mkt = pd.read_csv(DEMO / "market.csv").set_index("date")["return"]
    window = port.index[-60:]
    active_b, active_m = port[window] - bench[window], port[window] - mkt[window]
    # common practice, no source: TE = sd(active, ddof 1), IR = mean(active) / TE; x sqrt(12)
    assert p["tracking_reference"] == "benchmark"
    np.testing.assert_allclose(
        [p["tracking_error"], p["active_return"], p["information_ratio"],
         p["tracking_error_ann"], p["active_return_ann"]],
        [active_b.std(ddof=1), active_b.mean(), active_b.mean() / active_b.std(ddof=1),
         active_b.std(ddof=1) * np.sqrt(12), active_b.mean() * 12], rtol=1e-9)
    np.testing.assert_allclose(
        [p["market_tracking_error"], p["market_active_return"], p["market_information_ratio"],
         p["market_tracking_error_ann"], p["market_information_ratio_ann"]],
        [active_m.std(ddof=1), active_m.mean(), active_m.mean() / active_m.std(ddof=1),
         active_m.std(ddof=1) * np.sqrt(12),
         active_m.mean() / active_m.std(ddof=1) * np.sqrt(12)], rtol=1e-9)
    assert p["tracking_error"] == p["benchmark_tracking_error"]


def test_tracking_error_limit_is_tested_on_the_benchmark_figure(close_benchmark):
    # a limit between the two figures: the market proxy's would breach, the benchmark's is
    # within, and the limit reports the benchmark's
    _, res, *_ = close_benchmark
    p = res.portfolio_summary()
    te_b, te_m = p["tracking_error_ann"], p["market_tracking_error_ann"]
    assert te_b < 0.25 * te_m
    limit = 2 * te_b
    assert te_m > limit
    (check,) = evaluate_limits(LimitsSection(max_tracking_error_ann=limit), res).checks
    assert check.value == pytest.approx(te_b, rel=1e-12)
    assert check.status == WITHIN
    # without a benchmark the same limit is tested on the market proxy's figure: breach
    settings = load_settings(DEMO)
    plain = analyse(validate_pack(settings), settings)
    (check,) = evaluate_limits(LimitsSection(max_tracking_error_ann=limit), plain).checks
    assert check.value == pytest.approx(te_m, rel=1e-12) and check.status == BREACH
    q = plain.portfolio_summary()
    assert q["tracking_reference"] == "market proxy"
    assert q["tracking_error"] == q["market_tracking_error"]
    assert q["benchmark_tracking_error"] is None
