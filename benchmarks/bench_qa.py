"""Cost of the QA checks on an 8192x4096 map: against building its sampling table, and end to end.

Usage:  python benchmarks/bench_qa.py [--width 8192]

Goals (issue 9), each a ratio measured in one run:
- every check on the map in memory (``check_map(array)``) costs at most 1x ``build_table`` on the
  same array;
- ``envsample check FILE`` end to end (a fresh process: start-up, decoding, hashing, every check,
  the table printed) costs at most 2x decoding the file (``read_map``) in a fresh process.

The map is an invented rooftop scene made in memory, textured with 3 % multiplicative noise (a captured
map's grain: without it the synthetic scene compresses to almost nothing and decodes in no time), and
written as a half-float EXR (ZIP).
Each check is also timed alone (it then pays for the shared scan of the map itself).
Best of two runs, ``time.perf_counter``.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
from common import best

from envsample.io.maps import write_map
from envsample.qa.checks import CHECKS
from envsample.qa.run import check_map
from envsample.sampling.table import build_table
from envsample.synth.skies import make_sky


def _process(code: str) -> None:
    subprocess.run([sys.executable, "-c", code], check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--width", type=int, default=8192)
    args = ap.parse_args()
    rgb = make_sky("rooftop", width=args.width)
    grain = np.random.default_rng(1).normal(1.0, 0.03, rgb.shape[:2]).astype(np.float32)
    rgb *= np.maximum(grain, 0.0)[..., None]
    t_table = best(lambda: build_table(rgb))
    t_checks = best(lambda: check_map(rgb))
    print(f"map {args.width}x{args.width // 2} in memory")
    print(f"  build_table            {t_table:7.3f} s   1.00x")
    print(f"  check_map (all checks) {t_checks:7.3f} s   {t_checks / t_table:5.2f}x the table build (goal <= 1x)")
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "rooftop.exr"
        write_map(path, rgb, pixel_type="half")
        t_decode = best(lambda: _process(f"from envsample.io.maps import read_map; read_map({str(path)!r})"))
        t_cli = best(lambda: _process(f"import sys; from envsample.cli import main; sys.argv = ['envsample', 'check', "
                                      f"{str(path)!r}]; main()"))
        print(f"file {path.name}, half EXR, {path.stat().st_size / 1e6:.0f} MB (fresh processes)")
        print(f"  decode (read_map)      {t_decode:7.3f} s   1.00x")
        print(f"  envsample check        {t_cli:7.3f} s   {t_cli / t_decode:5.2f}x decoding (goal <= 2x)")
    # Each check alone (checks share the scan and other lazily computed quantities, so alone they cost more).
    for cid in [c for c in CHECKS if c != "read"]:
        t = best(lambda cid=cid: check_map(rgb, checks=[cid]), repeats=1)
        print(f"  {cid:<16} alone {t:7.3f} s")


if __name__ == "__main__":
    np.seterr(all="ignore")
    main()
