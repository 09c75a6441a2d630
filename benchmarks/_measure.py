"""Shared measuring tools for the benchmarks: best-of timing and peak memory."""

from __future__ import annotations

import time
import tracemalloc

import numpy as np

__all__ = ["best_time", "peak_bytes", "centred_difference_baseline"]


def best_time(fn, repeat: int = 3) -> float:
    """Best wall time [s] of ``repeat`` calls (the least noisy estimate on a shared machine)."""
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def peak_bytes(fn) -> int:
    """Peak bytes allocated during ``fn()`` (numpy reports its buffers to tracemalloc)."""
    tracemalloc.start()
    tracemalloc.reset_peak()
    base = tracemalloc.get_traced_memory()[0]
    try:
        fn()
        return tracemalloc.get_traced_memory()[1] - base
    finally:
        tracemalloc.stop()


def centred_difference_baseline(a: np.ndarray, repeat: int = 3) -> float:
    """Time of the plain numpy centred difference a[..., 2:] − a[..., :-2] into a preallocated array."""
    out = np.empty_like(a)

    def run():
        np.subtract(a[..., 2:], a[..., :-2], out=out[..., 1:-1])

    run()
    return best_time(run, repeat)
