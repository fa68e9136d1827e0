"""Timing helper shared by the benchmark scripts (run them as ``python benchmarks/NAME.py``)."""

from __future__ import annotations

import time

import numpy as np


def median_time(fn, repeats: int, *, warmup: bool = False) -> float:
    """Median wall time of ``repeats`` calls of ``fn``, seconds; optionally one untimed call first."""
    if warmup:
        fn()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))
