"""Cost of the QA checks on a 4096x2048 map, against building its sampling table.

Usage:  python benchmarks/bench_qa.py [--width 4096]

The map is an invented rooftop scene made in memory, so decoding is not counted:
``check_map`` receives the array.  Each check is also timed alone (it then pays for the
shared luminance, solid angles and emitters itself; the ``sampling`` check works
on a reduced copy and costs about the same for any map size).
Best of two runs, ``time.perf_counter``.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from envsample.qa.checks import CHECKS
from envsample.qa.run import check_map
from envsample.sampling.table import build_table
from envsample.synth.skies import make_sky


def best(fn, repeats=2):
    out = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t0)
    return min(out)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--width", type=int, default=4096)
    args = ap.parse_args()
    rgb = make_sky("rooftop", width=args.width)
    t_table = best(lambda: build_table(rgb))
    t_checks = best(lambda: check_map(rgb))
    print(f"map {args.width}x{args.width // 2} in memory (decode not counted)")
    print(f"  build_table            {t_table:7.3f} s   1.00x")
    print(f"  check_map (all checks) {t_checks:7.3f} s   {t_checks / t_table:5.2f}x the table build (goal < 1x)")
    # Each check alone (checks share lazily computed quantities, so alone they cost more).
    for cid in [c for c in CHECKS if c != "read"]:
        t = best(lambda: check_map(rgb, checks=[cid]), repeats=1)
        print(f"  {cid:<16} alone {t:7.3f} s")

if __name__ == "__main__":
    np.seterr(all="ignore")
    main()
