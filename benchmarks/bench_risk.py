"""Benchmark: Ledoit-Wolf covariances and Euler risk contributions for 2,000 holdings x
2,520 daily periods (invented data).

Reports the stage's time as a ratio to a floor measured in the same run: one ``numpy.cov``
of the same returns matrix. The stage is what the pack computes: the shrunk covariance of the
holdings, the shrunk covariance of their returns relative to the market proxy (from the same
Gram matrix), and the contributions to volatility and tracking error.
Run: ``python benchmarks/bench_risk.py``.
"""

from __future__ import annotations

import platform

import numpy as np
from timing import best_of, paired_ratios

from reporter.analytics.covariance import holdings_and_active
from reporter.analytics.diversification import risk_contributions

N_HOLDINGS, N_PERIODS = 2000, 2520


def make_data(seed: int = 1):
    rng = np.random.default_rng(seed)
    x = rng.normal(0.0003, 0.011, N_PERIODS)
    beta = rng.uniform(0.3, 1.8, N_HOLDINGS)
    y = x[:, None] * beta + rng.normal(0, 0.015, (N_PERIODS, N_HOLDINGS))
    # 10% of holdings listed part-way through the window (gaps, as month-end data have)
    for j in rng.choice(N_HOLDINGS, N_HOLDINGS // 10, replace=False):
        y[: rng.integers(50, 2000), j] = np.nan
    w = rng.dirichlet(np.ones(N_HOLDINGS))
    return y, x, w


def risk_stage(y, x, w):
    cov, active = holdings_and_active(y, x, "ledoit_wolf")
    return risk_contributions(w, cov.matrix, active.matrix)


def main() -> None:
    y, x, w = make_data()
    y_full = np.nan_to_num(y)

    def floor():
        np.cov(y_full, rowvar=False)

    t_floor = best_of(floor)
    t_stage = best_of(lambda: risk_stage(y, x, w))
    print(f"machine: {platform.machine()} {platform.processor() or ''}, numpy {np.__version__}")
    print(f"{N_HOLDINGS} holdings x {N_PERIODS} periods, best of 5")
    print(f"floor (one numpy.cov):  {t_floor * 1e3:8.1f} ms")
    print(f"risk stage:             {t_stage * 1e3:8.1f} ms  {t_stage / t_floor:5.2f} x floor "
          "(best of each)")
    rc = risk_stage(y, x, w)
    gap_vol = abs(rc.vol_contribution.sum() - rc.volatility)
    gap_te = abs(rc.te_contribution.sum() - rc.tracking_error)
    print(f"  contributions sum to the total within {gap_vol:.1e} (volatility) and "
          f"{gap_te:.1e} (TE)")
    r = paired_ratios(lambda: risk_stage(y, x, w), floor)
    print(f"risk stage, {len(r)} alternating pairs: median {r[len(r) // 2]:.2f} x floor "
          f"(range {r[0]:.2f}-{r[-1]:.2f}; target <= 3)")


if __name__ == "__main__":
    main()
