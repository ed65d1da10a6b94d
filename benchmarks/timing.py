"""Shared timing helper for the benchmarks."""

from __future__ import annotations

import time


def best_of(fn, repeat: int = 5) -> float:
    """The fastest of ``repeat`` timed calls of ``fn``, in seconds (least disturbed by noise)."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def paired_ratios(fn, floor, pairs: int = 9) -> list[float]:
    """Time ``fn`` and ``floor`` alternately ``pairs`` times and return each pair's ratio
    fn/floor, so that a drift in the machine's speed affects both sides of every ratio."""
    ratios = []
    for _ in range(pairs):
        t_floor = best_of(floor, 1)
        t_fn = best_of(fn, 1)
        ratios.append(t_fn / t_floor)
    return sorted(ratios)
