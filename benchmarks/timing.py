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
