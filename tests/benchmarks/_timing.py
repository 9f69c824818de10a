"""Wall-clock timing shared by the benchmark scripts."""

import statistics
import time


def min_median(fn, runs):
    """Run ``fn()`` ``runs`` times; ``{"min": s, "median": s}`` of the wall-clock times, seconds."""
    out = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t0)
    return {"min": min(out), "median": statistics.median(out)}
