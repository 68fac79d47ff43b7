"""Timing shared by the benchmark scripts: best wall time of a few runs, traced peak memory.

The scripts run as ``python benchmarks/bench_x.py``, so this module is importable as
``_timing`` from their folder.
"""

from __future__ import annotations

import time
import tracemalloc
from collections.abc import Callable
from typing import TypeVar, cast

_T = TypeVar("_T")


def measure(fn: Callable[[], _T], repeat: int = 2) -> tuple[_T, float, float]:
    """Return ``fn()``, the best time of ``repeat`` runs (s), and one run's traced peak (MiB).

    The best of several runs, because the machine may be shared; the peak from one more run
    under tracemalloc, kept apart so that tracing does not slow the timed runs.
    """
    best = float("inf")
    value: _T | None = None
    for _ in range(max(repeat, 1)):
        start = time.perf_counter()
        value = fn()
        best = min(best, time.perf_counter() - start)
    tracemalloc.start()
    fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return cast(_T, value), best, peak / 2**20
