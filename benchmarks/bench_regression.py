"""Benchmark: the regression stage on 2,000 holdings x 2,520 daily periods (invented data).

Reports the stage's time as a ratio to a floor measured in the same run: one
``numpy.linalg.lstsq`` of all holdings on [1, market].
Run: ``python benchmarks/bench_regression.py``.
"""

from __future__ import annotations

import platform

import numpy as np
from timing import best_of, paired_ratios

from reporter.analytics.regression import (
    Prepared,
    blume_beta,
    dimson_beta,
    fit_market_model,
    hac_standard_errors,
    rolling_betas,
    up_down_betas,
    vasicek_beta,
)

N_HOLDINGS, N_PERIODS, ROLLING = 2000, 2520, 36


def make_data(seed: int = 1):
    rng = np.random.default_rng(seed)
    x = rng.normal(0.0003, 0.011, N_PERIODS)
    beta = rng.uniform(0.3, 1.8, N_HOLDINGS)
    y = x[:, None] * beta + rng.normal(0, 0.015, (N_PERIODS, N_HOLDINGS))
    # gaps as month-end data have them: 10% of holdings listed part-way through, and 2%
    # suspended for a spell (a gap inside the history, which Newey-West must compact)
    late = rng.choice(N_HOLDINGS, N_HOLDINGS // 10, replace=False)
    for j in late:
        y[: rng.integers(50, 2000), j] = np.nan
    for j in rng.choice(N_HOLDINGS, N_HOLDINGS // 50, replace=False):
        start = rng.integers(100, 2300)
        y[start: start + rng.integers(5, 60), j] = np.nan
    return y, x


def regression_stage(y, x):
    prep = Prepared.of(y, x)
    fits = fit_market_model(y, x, min_obs=24, prep=prep)
    hac_standard_errors(y, x, fits, prep=prep)
    blume_beta(fits.beta)
    vasicek_beta(fits.beta, fits.beta_se)
    up_down_betas(y, x, 24, prep=prep)
    dimson_beta(y, x, 1, 24, prep=prep)
    rolling_betas(y, x, ROLLING, prep=prep)


def main() -> None:
    y, x = make_data()
    X = np.column_stack([np.ones_like(x), x])
    y_full = np.nan_to_num(y)

    def floor():
        np.linalg.lstsq(X, y_full, rcond=None)

    stages = {
        "OLS (masked)": lambda: fit_market_model(y, x, 24),
        "Newey-West": lambda: hac_standard_errors(y, x, fit_market_model(y, x, 24)),
        "up/down": lambda: up_down_betas(y, x, 24),
        "Dimson k=1": lambda: dimson_beta(y, x, 1, 24),
        f"rolling {ROLLING}": lambda: rolling_betas(y, x, ROLLING),
    }
    worst = y.copy()
    worst[np.random.default_rng(2).random(worst.shape) < 0.01] = np.nan
    stages["Newey-West, 1% gaps in every holding"] = lambda: hac_standard_errors(
        worst, x, fit_market_model(worst, x, 24))
    t_floor = best_of(floor)
    t_stage = best_of(lambda: regression_stage(y, x))
    print(f"machine: {platform.machine()} {platform.processor() or ''}, numpy {np.__version__}")
    print(f"{N_HOLDINGS} holdings x {N_PERIODS} periods, best of 5")
    print(f"floor (one lstsq):      {t_floor * 1e3:8.1f} ms")
    for name, fn in stages.items():
        t = best_of(fn, 3)
        print(f"  {name:<20} {t * 1e3:8.1f} ms  {t / t_floor:5.2f} x floor")
    print(f"full regression stage:  {t_stage * 1e3:8.1f} ms  {t_stage / t_floor:5.2f} x floor "
          "(best of each)")
    r = paired_ratios(lambda: regression_stage(y, x), floor)
    print(f"full regression stage, {len(r)} alternating pairs: median {r[len(r) // 2]:.2f} x floor "
          f"(range {r[0]:.2f}-{r[-1]:.2f}; target <= 5)")


if __name__ == "__main__":
    main()
