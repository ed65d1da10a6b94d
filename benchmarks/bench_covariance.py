"""Benchmark: the risk model's covariance estimates (holdings and active) and the pairwise
covariance with the average correlation, for N holdings x T periods with a share of late
listings (5% unless ``--late``; invented data): wall time and the peak RSS above the start
of each call, sampled from /proc/self/statm every 10 ms by a thread. Linux only.
Run: ``python benchmarks/bench_covariance.py 3000 24 [--before]`` (``--before`` also times the
code the row-block estimators replaced, kept in tests/covariance_before.py).
"""

from __future__ import annotations

# the tool's process settings (numpy's huge-page advice, OpenBLAS's idle threads; see
# reporter/__init__.py), made before numpy is first imported, as in a build
import reporter  # noqa: F401  # isort: skip

import argparse
import os
import sys
import threading
import time
from pathlib import Path

import numpy as np

from reporter.analytics.covariance import holdings_and_active
from reporter.analytics.diversification import (
    equal_weight_curve,
    pairwise_covariance_and_average_correlation,
)

PAGE = os.sysconf("SC_PAGE_SIZE")


def rss() -> int:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * PAGE


def measured(fn):
    """(result, seconds, peak RSS above the start in MB)."""
    start, peak, done = rss(), [0], threading.Event()

    def sample():
        while not done.is_set():
            peak[0] = max(peak[0], rss())
            time.sleep(0.01)
    th = threading.Thread(target=sample, daemon=True)
    th.start()
    t0 = time.perf_counter()
    out = fn()
    dt = time.perf_counter() - t0
    done.set()
    th.join()
    return out, dt, (max(peak[0], rss()) - start) / 2**20


def panel(N: int, T: int, seed: int = 1, late_share: float = 0.05):
    rng = np.random.default_rng(seed)
    mkt = rng.normal(0.005, 0.042, T)
    sector = rng.integers(0, 10, N)
    r = (rng.uniform(0.3, 1.8, N) * mkt[:, None] + 0.8 * rng.normal(0, 0.018, (T, 10))[:, sector]
         + rng.normal(0, 1, (T, N)) * rng.uniform(0.02, 0.075, N))
    late = rng.random(N) < late_share
    start = rng.integers(0, T // 2, N)
    r[np.arange(T)[:, None] < np.where(late, start, 0)[None, :]] = np.nan
    return r, mkt


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("n", type=int)
    ap.add_argument("t", type=int)
    ap.add_argument("--before", action="store_true")
    ap.add_argument("--late", type=float, default=0.05, help="share of late listings")
    ap.add_argument("--only", choices=["model", "pairwise", "both"], default="both")
    a = ap.parse_args()
    r, mkt = panel(a.n, a.t, late_share=a.late)
    print(f"{a.n} holdings x {a.t} periods, {int(np.isnan(r).any(axis=0).sum())} with gaps")
    if a.only in ("model", "both"):
        (held, act), dt, mb = measured(lambda: holdings_and_active(r, mkt))
        print(f"holdings_and_active: {dt:7.2f} s, peak +{mb:6.0f} MB, shrinkage "
              f"{held.shrinkage:.6f}/{act.shrinkage:.6f}, clipped "
              f"{held.eigenvalues_clipped}/{act.eigenvalues_clipped}")
        del held, act
    if a.only in ("pairwise", "both"):
        ok = ~np.isnan(r).any(axis=0)
        (cov, avg), dt, mb = measured(
            lambda: pairwise_covariance_and_average_correlation(r[:, ok]))
        _, dt2, mb2 = measured(lambda: equal_weight_curve(cov))
        print(f"pairwise cov + average correlation: {dt:7.2f} s, peak +{mb:6.0f} MB "
              f"(avg {avg:.6f}); equal-weight curve {dt2:.2f} s, +{mb2:.0f} MB")
        del cov
    if a.before:
        sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
        from tests.covariance_before import estimate_before

        (h0, a0), dt, mb = measured(lambda: (estimate_before(r),
                                             estimate_before(r - mkt[:, None])))
        print(f"before, both estimates: {dt:7.2f} s, peak +{mb:6.0f} MB, shrinkage "
              f"{h0.shrinkage:.6f}/{a0.shrinkage:.6f}, clipped "
              f"{h0.eigenvalues_clipped}/{a0.eigenvalues_clipped}")


if __name__ == "__main__":
    main()
