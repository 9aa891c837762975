"""Batch throughput on a folder of small maps, with 1 and 2 worker processes.

Usage:  python benchmarks/bench_batch.py [--maps 24] [--width 256] [--repeats 2] [--verify]

A folder of ``--maps`` analytic skies (``--width`` x ``--width/2``, sun skies with the
sun at different azimuths, written as half-float EXR) goes through
:func:`envsample.batch.run_batch` into a fresh output folder each time (``force``
is not needed: nothing is up to date), with ``workers=1`` and ``workers=2`` (spawned
processes) and, for reference, ``workers=0`` (in the calling process).  Reported:
wall seconds (best of ``--repeats``) with the CPU seconds of that run (this process
plus its workers, ``getrusage``), maps per second, the speed-up of 2 workers over 1,
and the fixed cost of starting the pool (one batch of a single map).  The CPU
figures do not depend on other load on the machine; the wall times do (the load
average is printed first).  A pass that
skips every map (the resume path: hashing plus reading the manifests) is timed too.

Timings are ``time.perf_counter`` wall times on this machine; they include
starting the spawned workers (each imports numpy, scipy and envsample), which is
paid once per batch and dominates tiny batches.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import tempfile
import time
from pathlib import Path

from envsample.io.maps import write_map
from envsample.pipeline.batch import run_batch
from envsample.synth.skies import make_sky


def make_folder(folder: Path, n: int, width: int) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(n):
        rgb = make_sky("sun", width=width, azimuth_deg=float(-170 + 340 * i / max(1, n - 1)),
                       elevation_deg=float(10 + 60 * (i % 5) / 4))
        write_map(folder / f"sky{i:03d}.exr", rgb)


def _cpu() -> float:
    """CPU seconds (user + system) of this process and of its finished children (the workers)."""
    total = 0.0
    for who in (resource.RUSAGE_SELF, resource.RUSAGE_CHILDREN):
        ru = resource.getrusage(who)
        total += ru.ru_utime + ru.ru_stime
    return total


def timed_batch(src: Path, work: Path, workers: int, verify: bool) -> tuple[float, float]:
    """(wall seconds, CPU seconds) of one batch into a fresh folder."""
    out = work / f"out-{workers}-{time.monotonic_ns()}"
    c0, t0 = _cpu(), time.perf_counter()
    result = run_batch([src], out, workers=workers, verify=verify)
    seconds, cpu = time.perf_counter() - t0, _cpu() - c0
    assert all(m.status == "done" for m in result.maps), [m.error for m in result.maps if m.error]
    shutil.rmtree(out)
    return seconds, cpu


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--maps", type=int, default=24)
    ap.add_argument("--width", type=int, default=256)
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--verify", action="store_true", help="also run the small validation render per map")
    args = ap.parse_args()

    with tempfile.TemporaryDirectory(prefix="envsample-bench-batch-") as tmp:
        work = Path(tmp)
        src = work / "maps"
        make_folder(src, args.maps, args.width)
        one = work / "one"
        make_folder(one, 1, args.width)
        print(f"{args.maps} maps of {args.width}x{args.width // 2}, verify={args.verify}, "
              f"{os.cpu_count()} cores visible")
        print(f"load average before: {' '.join(f'{x:.1f}' for x in os.getloadavg())}")
        rows, rows_cpu = {}, {}
        for workers in (0, 1, 2):
            best, cpu = min(timed_batch(src, work, workers, args.verify) for _ in range(args.repeats))
            rows[workers], rows_cpu[workers] = best, cpu
            label = "in-process (workers=0)" if workers == 0 else f"{workers} worker process{'es' if workers > 1 else ''}"
            print(f"  {label:<26} {best:7.2f} s   {args.maps / best:6.2f} maps/s   CPU {cpu:6.2f} s")
        print(f"  speed-up, 2 workers over 1: {rows[1] / rows[2]:.2f}x")
        # A batch never starts more workers than it has maps: this is one worker's start-up plus one map.
        start, cpu = min(timed_batch(one, work, 1, args.verify) for _ in range(args.repeats))
        print(f"  a batch of one map in a worker: {start:.2f} s, CPU {cpu:.2f} s (pool start-up plus one map)")
        per_map = (rows_cpu[1] - cpu) / max(1, args.maps - 1)
        print(f"  CPU per map (1-worker batch minus the one-map batch): {per_map:.3f} s; "
              f"start-up of a second worker: {rows_cpu[2] - rows_cpu[1]:.2f} s CPU")
        out = work / "resume"
        run_batch([src], out, workers=2, verify=args.verify)
        t0 = time.perf_counter()
        again = run_batch([src], out, workers=2, verify=args.verify)
        skip = time.perf_counter() - t0
        assert again.counts["skipped"] == args.maps
        print(f"  rerun with everything up to date: {skip:.3f} s ({args.maps / skip:.0f} maps/s)")
        print(f"load average after: {' '.join(f'{x:.1f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
