"""Brinson-Fachler attribution by sector and Carino linking.

References: a worked Brinson-Fachler example from Bacon, *Practical Portfolio Performance
Measurement and Attribution* (Wiley), recalled from memory; Carino (1999) linking
coefficients worked by hand on three periods; the exact-sum property on 60 periods of
invented data; and facts of the trade.
"""

from __future__ import annotations

import math

import numpy as np

from reporter.analytics.attribution import (
    SectorBenchmark,
    attribute,
    brinson_fachler,
    carino_coefficients,
    sector_panel,
)
from reporter.analytics.returns import portfolio_returns


def test_worked_example_recalled_from_memory():
    # Bacon's three-market example (recalled from memory): portfolio weights 40/30/30% with
    # returns 20%, -5%, 6%; benchmark weights 40/20/40% with returns 10%, -4%, 8%.
    # Portfolio 8.3%, benchmark 6.4%. Brinson-Fachler allocation 0, -1.04%, -0.16%;
    # selection 4.0%, -0.2%, -0.8%; interaction 0, -0.1%, +0.2% (hand arithmetic agrees).
    wp = np.array([[0.4, 0.3, 0.3]])
    wb = np.array([[0.4, 0.2, 0.4]])
    rp = np.array([[0.20, -0.05, 0.06]])
    rb = np.array([[0.10, -0.04, 0.08]])
    a, s, i, _, _, R, B = brinson_fachler(wp, wb, rp, rb)
    np.testing.assert_allclose([R[0], B[0]], [0.083, 0.064], atol=1e-15)
    np.testing.assert_allclose(a[0], [0.0, -0.0104, -0.0016], atol=1e-15)
    np.testing.assert_allclose(s[0], [0.04, -0.002, -0.008], atol=1e-15)
    np.testing.assert_allclose(i[0], [0.0, -0.001, 0.002], atol=1e-15)
    np.testing.assert_allclose(a.sum() + s.sum() + i.sum(), 0.019, atol=1e-15)


def test_carino_coefficients_by_hand_on_three_periods():
    R = np.array([0.05, -0.02, 0.03])
    B = np.array([0.04, -0.01, 0.01])
    # by hand: k_1 = (ln 1.05 - ln 1.04)/0.01 = 0.95694510, k_2 = (ln 0.98 - ln 0.99)/-0.01
    # = 1.01523715, k_3 = (ln 1.03 - ln 1.01)/0.02 = 0.98042357; compounded R = 1.05 x 0.98
    # x 1.03 - 1 = 0.05987, B = 1.04 x 0.99 x 1.01 - 1 = 0.039896, k = (ln 1.05987 -
    # ln 1.039896)/0.019974 = 0.95251582; k_t / k = 1.00465009, 1.06584807, 1.02929899
    k = [(math.log(1 + r) - math.log(1 + b)) / (r - b) for r, b in zip(R, B, strict=True)]
    Rc, Bc = 1.05 * 0.98 * 1.03 - 1, 1.04 * 0.99 * 1.01 - 1
    K = (math.log(1 + Rc) - math.log(1 + Bc)) / (Rc - Bc)
    np.testing.assert_allclose(k, [0.95694510, 1.01523715, 0.98042357], atol=5e-9)
    np.testing.assert_allclose(K, 0.95251582, atol=5e-9)
    got = carino_coefficients(R, B)
    np.testing.assert_allclose(got, np.array(k) / K, rtol=1e-12)
    np.testing.assert_allclose(got, [1.00465009, 1.06584807, 1.02929899], atol=5e-9)
    # linked active returns add up to the compounded difference
    np.testing.assert_allclose(got @ (R - B), Rc - Bc, rtol=1e-12)
    # a period where the two returns are equal takes 1/(1 + R_t)
    same = carino_coefficients(np.array([0.02, 0.01]), np.array([0.02, 0.0]))
    Rc, Bc = 1.02 * 1.01 - 1, 1.02 - 1
    K = (math.log1p(Rc) - math.log1p(Bc)) / (Rc - Bc)
    np.testing.assert_allclose(same[0], (1 / 1.02) / K, rtol=1e-12)


def _invented(T=60, N=40, seed=5):
    """Invented holdings and a benchmark with a sector the portfolio lacks and the reverse."""
    rng = np.random.default_rng(seed)
    held = ["A", "B", "C", "D", "E"]
    sector_of = np.array([held[i % 5] for i in range(N)])
    r = rng.normal(0.006, 0.05, (T, N))
    r[rng.random((T, N)) < 0.05] = np.nan          # some missing returns
    w = rng.dirichlet(np.ones(N))
    bench_sectors = ("A", "B", "C", "D", "F")      # no E in the benchmark; F not held
    wb = rng.dirichlet(np.ones(5), size=T)
    rb = rng.normal(0.005, 0.04, (T, 5))
    return r, w, sector_of, SectorBenchmark(bench_sectors, wb, rb)


def test_linked_effects_sum_exactly_to_the_active_return_over_60_periods():
    r, w, sector_of, bench = _invented()
    att = attribute(r, w, sector_of, bench)
    total = (att.linked_allocation + att.linked_selection + att.linked_interaction).sum()
    want = np.prod(1 + att.portfolio_total) - np.prod(1 + att.benchmark_total)
    np.testing.assert_allclose(total, want, rtol=1e-12)
    np.testing.assert_allclose(total, att.active_return, rtol=1e-12)
    # per period the effects add up to R_t - B_t
    per = (att.allocation + att.selection + att.interaction).sum(axis=1)
    np.testing.assert_allclose(per, att.portfolio_total - att.benchmark_total, atol=1e-15)
    # the portfolio side is the pack's portfolio return (weights spread over what is held)
    np.testing.assert_allclose(att.portfolio_total, portfolio_returns(r, w), rtol=1e-12)
    # the benchmark side is sum_s w_b r_b
    np.testing.assert_allclose(att.benchmark_total, (bench.weights * bench.returns).sum(axis=1),
                               rtol=1e-12)
    sides = dict(zip(att.sectors, att.side, strict=True))
    assert sides["E"] == "portfolio only" and sides["F"] == "benchmark only"
    j_e, j_f = att.sectors.index("E"), att.sectors.index("F")
    # held but not in the benchmark: no allocation or selection; not held: allocation only
    assert np.all(att.allocation[:, j_e] == 0) and np.all(att.selection[:, j_e] == 0)
    assert np.all(att.selection[:, j_f] == 0) and np.all(att.interaction[:, j_f] == 0)
    table = att.table()
    np.testing.assert_allclose(table["total"].sum(), att.active_return, rtol=1e-12)


def test_portfolio_equal_to_benchmark_has_no_effects():
    # fact of the trade (common practice, no source): nothing to attribute without bets
    rng = np.random.default_rng(9)
    T, sectors = 24, ("A", "B", "C")
    r = rng.normal(0.005, 0.04, (T, 3))
    w = np.array([0.5, 0.3, 0.2])
    att = attribute(r, w, np.array(sectors), SectorBenchmark(sectors, np.tile(w, (T, 1)), r))
    for e in (att.allocation, att.selection, att.interaction):
        np.testing.assert_allclose(e, 0.0, atol=1e-16)
    assert att.active_return == 0.0


def test_benchmark_sector_weights_give_no_allocation_effect():
    # fact of the trade (common practice, no source): allocation measures sector bets only
    r, w, sector_of, _ = _invented(seed=3)
    sectors = ("A", "B", "C", "D", "E")
    wp, rp = sector_panel(r, w, sector_of, sectors)
    rng = np.random.default_rng(4)
    bench = SectorBenchmark(sectors, wp, rng.normal(0.005, 0.04, wp.shape))
    att = attribute(r, w, sector_of, bench)
    np.testing.assert_allclose(att.allocation, 0.0, atol=1e-16)
    np.testing.assert_allclose(att.interaction, 0.0, atol=1e-16)
    assert np.abs(att.selection).max() > 1e-4          # but selection is not zero
