"""Repeated timing for the benchmarks: one loop, the statistic chosen by the caller.

The machine is shared: ``best`` (the minimum) suits a kernel timed back to back, where load
only ever adds time; ``median`` suits a quantity timed around other work under the same load
(split_bench's unit)."""

from __future__ import annotations

import statistics
import time
from typing import Callable


def timings(fn: Callable[[], object], repeats: int, clock: Callable[[], float] = time.perf_counter) -> list[float]:
    """Seconds (by ``clock``) of each of ``repeats`` calls of ``fn``."""
    out = []
    for _ in range(repeats):
        t = clock()
        fn()
        out.append(clock() - t)
    return out


def best(fn: Callable[[], object], repeats: int, clock: Callable[[], float] = time.perf_counter) -> float:
    """The fastest of ``repeats`` calls of ``fn``, in seconds."""
    return min(timings(fn, repeats, clock))


def median(fn: Callable[[], object], repeats: int, clock: Callable[[], float] = time.perf_counter) -> float:
    """The median of ``repeats`` calls of ``fn``, in seconds."""
    return float(statistics.median(timings(fn, repeats, clock)))
