"""Timing helpers shared by the benchmark scripts (run by hand; they print figures).

Each helper calls ``fn`` once to warm up (imports, caches), then ``repeats`` times.
"""

from __future__ import annotations

import time

import numpy as np


def median_seconds(fn, repeats: int = 7) -> float:
    """Median wall time of ``repeats`` calls [s]."""
    fn()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def best_cpu_seconds(fn, repeats: int = 9) -> float:
    """Smallest CPU time of ``repeats`` calls [s] (least disturbed by other processes)."""
    fn()
    best = float("inf")
    for _ in range(repeats):
        t0 = time.process_time()
        fn()
        best = min(best, time.process_time() - t0)
    return best
