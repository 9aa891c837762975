"""Speed and memory of table building and sampling, reported as ratios measured in one run.

Usage:  python benchmarks/run.py [--quick]

* Build: CDF tables (and the alias table) of an 8192x4096 RGB float32 map,
  against one luminance pass (``rgb @ weights``) over the same array.  Peak extra
  memory (tracemalloc, which sees numpy's allocations) against the input's size.
* Sampling: directions + pdf from 2048x1024 and 8192x4096 tables, alias and
  inverse, in samples per second and as a ratio to numpy generating the same
  uniform pairs with ``default_rng().random``.

Timings are the best of a few repeats (``time.perf_counter``).  ``--quick``
uses a 2048x1024 map for the build, for a fast smoke run.
"""

from __future__ import annotations

import argparse
import gc
import tracemalloc

import numpy as np
from common import best

from envsample.core.color import luminance
from envsample.core.constants import luminance_weights
from envsample.core.sphere import row_solid_angles
from envsample.sampling.distribution import build_alias, build_row_cdfs, build_rows
from envsample.sampling.kernels import backend_name, kernels
from envsample.sampling.table import build_table


def synthetic_map(width, height, seed=7):
    """A peaky analytic-looking map: smooth sky, bright sun, random texture."""
    rng = np.random.default_rng(seed)
    rgb = rng.random((height, width, 3), dtype=np.float32)
    rgb **= 3
    cy, cx = height // 3, width // 5
    rgb[cy - 2 : cy + 2, cx - 2 : cx + 2] = 5.0e4
    return rgb


def peak_extra(fn):
    gc.collect()
    tracemalloc.start()
    tracemalloc.reset_peak()
    base = tracemalloc.get_traced_memory()[0]
    out = fn()
    peak = tracemalloc.get_traced_memory()[1] - base
    tracemalloc.stop()
    del out
    return peak


def backends():
    return ["compiled", "numpy"] if kernels("auto") is not None else ["numpy"]


def bench_build(width, height):
    rgb = synthetic_map(width, height)
    w = luminance_weights("bt709").astype(np.float32)
    t_lum = best(lambda: rgb @ w)
    sa = row_solid_angles(height, width)
    print(f"build {width}x{height} (input {rgb.nbytes / 2**20:.0f} MiB); luminance pass {t_lum:.3f} s = 1.00x")
    lum = luminance(rgb)
    for backend in backends():
        t_cdf = best(lambda: build_row_cdfs(luminance(rgb), row_scale=sa, backend=backend))
        t_alias = best(lambda: build_alias(lum, row_scale=sa, backend=backend), repeats=2)
        t_rows = best(lambda: build_rows(lum, row_scale=sa, backend=backend), repeats=2)
        print(f"  [{backend}] luminance + CDF tables  {t_cdf:7.3f} s  {t_cdf / t_lum:6.2f}x  (goal <= 3x)")
        print(f"  [{backend}] one-level alias (v1)    {t_alias:7.3f} s  {t_alias / t_lum:6.2f}x")
        print(f"  [{backend}] per-row CDFs + two-level alias rows (v2) {t_rows:7.3f} s  {t_rows / t_lum:6.2f}x")
    t_full = best(lambda: build_table(rgb), repeats=2)
    mem = peak_extra(lambda: build_table(rgb))
    print(f"  [{backend_name()}] build_table (CDF + alias, integrals, checks) {t_full:7.3f} s  "
          f"{t_full / t_lum:6.2f}x  (goal <= 6x)")
    print(f"  [{backend_name()}] peak extra memory {mem / 2**20:6.0f} MiB  {mem / rgb.nbytes:5.2f}x input (goal <= 2x)")


def bench_sampling(width, height, n=2_000_000):
    rgb = synthetic_map(width, height)
    table = build_table(rgb)
    rng = np.random.default_rng(1)
    t_u = best(lambda: rng.random((n, 2)))
    u = rng.random((n, 2))
    print(f"sampling {width}x{height} table, {n:,} samples (directions + pdf)")
    print(f"  numpy uniforms              {n / t_u / 1e6:8.1f} M/s  1.00x")
    for backend in backends():
        for method in ("alias", "inverse"):
            t = best(lambda: table.sample(u, method=method, backend=backend))
            print(f"  [{backend}] {method:<16} {n / t / 1e6:8.1f} M/s  {t / t_u:6.2f}x the uniforms' time"
                  f"{'  (goal <= 4x)' if method == 'alias' else ''}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller maps for a smoke run")
    args = ap.parse_args()
    if args.quick:
        bench_build(2048, 1024)
        bench_sampling(2048, 1024, n=500_000)
    else:
        bench_build(8192, 4096)
        bench_sampling(2048, 1024)
        bench_sampling(8192, 4096)


if __name__ == "__main__":
    main()
