"""Shared by the benchmarks: the best of several timed runs."""

from __future__ import annotations

import time


def best_of(fn, repeats: int) -> float:
    """The shortest wall time of ``repeats`` calls of ``fn``, seconds."""
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best
