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


class KernelClock:
    """Context manager summing the wall time spent inside the compiled transmission kernel.

    Wraps ``wellwright.physics.transmission._slices`` for the duration, so a benchmark can
    split a run into kernel time and everything else (Python and numpy).
    """

    def __init__(self) -> None:
        self.seconds = 0.0
        self.calls = 0

    def __enter__(self) -> KernelClock:
        import importlib

        tm = importlib.import_module(
            "wellwright.physics.transmission"
        )  # the module, not the function
        self._module = tm
        self._inner = tm._slices
        clock = self

        class _Timed:
            def transmission(self, *args):
                t0 = time.perf_counter()
                try:
                    return clock._inner.transmission(*args)
                finally:
                    clock.seconds += time.perf_counter() - t0
                    clock.calls += 1

        tm._slices = _Timed()
        return self

    def __exit__(self, *exc) -> None:
        self._module._slices = self._inner
