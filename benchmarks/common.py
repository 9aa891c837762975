"""What every benchmark script shares: the best-of-N timer (each script imports it; run them as ``python benchmarks/X.py``)."""

from __future__ import annotations

import gc
import time


def best_with_result(fn, repeats: int = 3):
    """``(seconds, result)``: the fastest of ``repeats`` calls of ``fn()`` (garbage collected before each) and its last result."""
    times, out = [], None
    for _ in range(repeats):
        out = None
        gc.collect()
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def best(fn, repeats: int = 3) -> float:
    """The fastest of ``repeats`` calls of ``fn()``, seconds (the result is dropped)."""
    return best_with_result(lambda: (fn(), None)[1], repeats)[0]
