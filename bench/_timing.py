"""Shared timing helper of the benchmarks (run as `python bench/NAME.py`)."""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from typing import Any


def best_of(fn: Callable[[], Any], n: int) -> tuple[float, Any]:
    """Shortest wall time of ``n`` calls of ``fn`` (s), and the last call's result.

    The minimum is the figure least disturbed by other work on a shared machine.
    """
    best, out = math.inf, None
    for _ in range(n):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out
