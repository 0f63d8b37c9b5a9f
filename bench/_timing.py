"""What the benchmarks share: the best of repeated timings (imported as ``_timing`` by the
scripts beside it, which run with their own folder on the path)."""

from __future__ import annotations

import time
from collections.abc import Callable


def best_of(repeats: int, fn: Callable[[], object]) -> float:
    """The shortest of ``repeats`` timings of ``fn()``, in seconds (the least disturbed by a
    noisy machine)."""
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)
