"""Helpers shared by the benchmark scripts (scripts/bench_*.py)."""

from __future__ import annotations

import time

import numpy as np

__all__ = ["best_time"]


def best_time(fn, repeat):
    """Best wall time [s] of ``repeat`` calls of ``fn()`` (the least disturbed one, common
    practice on a shared machine), and the last result."""
    best = np.inf
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out
