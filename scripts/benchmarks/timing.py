"""The one timer the benchmark suites share: the median wall time of repeated calls.

Benchmarks print figures as ratios against a reference timed the same way in the same run, so
the machine's speed cancels out; nothing here asserts a time.
"""

from __future__ import annotations

import statistics
import time
from collections.abc import Callable
from typing import Any

#: Where a suite's lines go: ``print`` by default, any callable taking one string otherwise.
Out = Callable[[str], Any]


def median_seconds(fn: Callable[[], Any], repeats: int, warm_up: bool = False,
                   setup: Callable[[], Any] | None = None) -> float:
    """Median seconds of ``repeats`` timed calls of ``fn``.

    ``warm_up`` makes one untimed call first (numba compiles, caches fill). ``setup``, if given,
    runs untimed before every call of ``fn``, warm-up included (e.g. resetting an env).
    """
    if repeats < 1:
        raise ValueError(f"repeats must be >= 1, got {repeats}")
    if warm_up:
        if setup is not None:
            setup()
        fn()
    times = []
    for _ in range(repeats):
        if setup is not None:
            setup()
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(statistics.median(times))
