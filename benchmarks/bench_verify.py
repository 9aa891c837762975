"""Speed of the validation render and of the exact reference irradiance, reported as seconds and ratios.

Usage:  python benchmarks/bench_verify.py [--quick] [--full]

* Render: 128x64 normals x 64 samples per normal x 6 estimators (cosine, table,
  multi-sample balance and power, one-sample balance and power) on a 2048x1024 map
  (the invented rooftop demo scene), through ``envsample.mis.estimate_irradiance``
  with the per-sample bookkeeping the report uses (``return_samples=True``).
  Seconds, samples per second, and the ratio to numpy drawing the same number of
  uniform pairs (``default_rng().random``), the floor of any sampler.
* Reference: ``envsample.reference.reference_irradiance`` for the same normals and
  map; seconds, and the ratio to the render.
* ``--full``: the whole ``verify_map`` (reference, 12 default estimators, pictures,
  convergence, metrics) on the same map, seconds.
* ``--quick``: a 512x256 map, for a smoke run.
* ``--tune``: how stable the one-sample tuning pilot's choice is across seeds: for a sun
  sky and a studio map (256x128), :func:`envsample.validation.tuning.tune_one_sample` with
  6 seeds at 16 and at 64 samples per normal (the default, ``PILOT_SPP``); prints the
  (heuristic, fraction) chosen per seed, how many seeds disagree with the most common
  choice, the runner-up margin in standard errors and the seconds per tuning.

Timings are the best of a few repeats (``time.perf_counter``); run on an idle machine.
"""

from __future__ import annotations

import argparse
import tempfile
import time

import numpy as np
from common import best

from envsample.estimation.estimators import estimate_irradiance
from envsample.pipeline.verify import verify_map
from envsample.reference.irradiance import reference_irradiance
from envsample.sampling.table import build_table
from envsample.synth import skies
from envsample.validation.grid import normal_grid

ESTIMATORS = ("cosine", "table", "mis-balance", "mis-power", "one-sample-balance", "one-sample-power")
NORMALS = (128, 64)
SPP = 64



def tune_stability(seeds: int = 6) -> None:
    from collections import Counter

    from envsample.validation.tuning import tune_one_sample

    for kind in ("sun", "studio"):
        table = build_table(skies.make_sky(kind, width=256))
        for spp in (16, 64):
            picks, margins, ratios, rel_se = [], [], [], []
            t0 = time.perf_counter()
            for seed in range(seeds):
                r = tune_one_sample(table, spp=spp, seed=seed)
                picks.append((r["heuristic"], r["table_fraction"]))
                margins.append(r["margin_sigmas"])
                ratios.append(r["variance_ratio"])
                won = next(p for p in r["pilot"] if (p["heuristic"], p["table_fraction"]) == picks[-1])
                rel_se.append(won["variance_vs_default_se"] / won["variance_vs_default"])
            per = (time.perf_counter() - t0) / seeds
            common, count = Counter(picks).most_common(1)[0]
            print(f"{kind:7s} pilot {spp:3d} spp: {seeds - count} of {seeds} seeds differ from {common}; "
                  f"margins {', '.join(f'{m:.2g}' for m in margins)} SE; {per:.2f} s per tuning")
            print(f"        re-measured variance ratio {min(ratios):.3f}..{max(ratios):.3f} "
                  f"(spread {max(ratios) / min(ratios) - 1:.1%}); the winner's pilot standard error "
                  f"{np.mean(rel_se):.1%} of its value")
            print(f"        choices: {picks}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="512x256 map instead of 2048x1024")
    ap.add_argument("--full", action="store_true", help="also time the whole verify_map report")
    ap.add_argument("--tune", action="store_true", help="only measure the stability of the tuning pilot")
    args = ap.parse_args()
    if args.tune:
        tune_stability()
        return
    width = 512 if args.quick else 2048
    rgb = skies.make_sky("rooftop", width=width)
    table = build_table(rgb)
    normals, _ = normal_grid(*NORMALS, up=table.up, rotation_deg=table.rotation_deg)
    n_samples = normals.shape[0] * SPP
    print(f"map {width}x{width // 2}, normals {NORMALS[0]}x{NORMALS[1]}, {SPP} spp, {len(ESTIMATORS)} estimators")

    per = {}
    for name in ESTIMATORS:
        per[name] = best(lambda: estimate_irradiance(table, normals, estimator=name, spp=SPP, seed=0,
                                                     return_samples=True))
        print(f"  {name:20s} {per[name]:7.3f} s  {n_samples / per[name] / 1e6:6.2f} M samples/s")
    render = sum(per.values())
    total = n_samples * len(ESTIMATORS)
    rng_floor = best(lambda: np.random.default_rng(0).random((total, 2)))
    print(f"render: {render:.2f} s for {total / 1e6:.1f} M samples = {total / render / 1e6:.2f} M samples/s")
    print(f"  ratio to drawing the uniforms alone ({total / rng_floor / 1e6:.1f} M pairs/s): {render / rng_floor:.1f}x")
    print(f"  ratio to one minute: {render / 60.0:.3f}")

    ref = best(lambda: reference_irradiance(table.image, normals, up=table.up, rotation_deg=table.rotation_deg),
               repeats=1 if not args.quick else 3)
    cells = table.width * table.height
    print(f"reference irradiance: {ref:.2f} s ({normals.shape[0]} normals x {cells / 1e6:.2f} M cells)")
    print(f"  ratio reference / render: {ref / render:.2f}")
    print(f"  normals x (H + W) per second: {normals.shape[0] * (table.width + table.height) / ref / 1e6:.2f} M")

    if args.full:
        with tempfile.TemporaryDirectory() as out:
            t0 = time.perf_counter()
            verify_map(table, out, spp=SPP, normals=NORMALS, seed=0)
            full = time.perf_counter() - t0
        print(f"verify_map (12 estimators, pictures, convergence): {full:.2f} s; ratio to render + reference: "
              f"{full / (render + ref):.2f}")


if __name__ == "__main__":
    main()
