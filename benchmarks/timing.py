"""Timing and memory helpers shared by the benchmark scripts (run them from any folder)."""

import resource
import time


def best_of(fn, repeat):
    """``(fastest wall time in s, last value)`` of ``repeat`` calls of ``fn``."""
    times, value = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        value = fn()
        times.append(time.perf_counter() - t0)
    return min(times), value


def max_rss_mb():
    """Peak resident set size of this process so far (MiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
