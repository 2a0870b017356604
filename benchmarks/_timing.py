"""Timing helper shared by the benchmark scripts (run as ``python benchmarks/NAME.py``)."""

from __future__ import annotations

import time
from typing import Any, Callable


def best_of(fn: Callable[[], Any], repeats: int) -> tuple[float, Any]:
    """The shortest of `repeats` wall-clock runs of `fn` (s), and the last run's result."""
    times, out = [], None
    for _ in range(max(1, int(repeats))):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out
