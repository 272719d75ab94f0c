"""The benchmarks' timer: the median wall-clock time of repeated calls, after one warm-up call.

The median rather than the mean, so that a pause caused by another process on the shared machine
does not move the figure (common practice).
"""

from __future__ import annotations

import statistics
import time
from collections.abc import Callable


def median_seconds(fn: Callable[[], object], repeat: int) -> float:
    fn()  # warm up
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)
