"""Timing helper shared by the benchmarks (run by hand, never by the tests)."""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any


def best_of(repeat: int, fn: Callable[[], Any]) -> tuple[float, Any]:
    """The shortest of ``repeat`` wall-clock runs of ``fn`` (seconds), and its last result."""
    times, out = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - start)
    return min(times), out
