"""Timing and memory helpers shared by the benchmark scripts.

The scripts run as ``python tests/benchmarks/<script>``, so this folder is first on
``sys.path`` and they import it as ``timing``.
"""

from __future__ import annotations

import statistics
import time
from collections.abc import Callable
from typing import Any


def median_time(func: Callable[[], Any], repeats: int) -> tuple[float, Any]:
    """Median wall time in s of ``repeats`` calls of ``func`` and the last call's output."""
    times, out = [], None
    for _ in range(repeats):
        start = time.perf_counter()
        out = func()
        times.append(time.perf_counter() - start)
    return statistics.median(times), out


def median_seconds(func: Callable[[], Any], repeats: int) -> float:
    """Median wall time in s of ``repeats`` calls of ``func`` (its output dropped)."""
    return median_time(func, repeats)[0]


def peak_rss_mb() -> float:
    """Peak resident memory of this process in MB: VmHWM from /proc (fresh at exec, unlike
    getrusage's ru_maxrss, which a child started from a big parent may inherit)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return float(line.split()[1]) / 1024.0
    except OSError:
        pass
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
