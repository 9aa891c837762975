"""Speed of the exact reference irradiance and of the glossy reference (envsample.reference), as ratios.

Usage:  python benchmarks/bench_reference.py [--quick] [--verify] [--skip-numpy]

* Map: an invented outdoor scene generated here (smooth sky gradient, a dim ground, a small
  very bright disk, a lat-long rectangle light) with a fixed-seed +-10 % texture, so no row is
  constant (as on a photographed sky), 8192x4096 float32 (``--quick``: 2048x1024).
* One luminance pass over it (``rgb @ weights``, float32): the unit of every ratio.
* :func:`reference_irradiance` for a 128x64 lat-long grid of normals (8192 normals): the
  compiled kernel on all CPUs and on one thread, the numpy fallback, the largest difference
  between the two (relative to pi x the mean radiance) and whether repeated runs and thread
  counts agree bit for bit; then the same scene without its texture (a constant ground: the
  constant-row shortcut) and :func:`reference_accuracy`.
* Glossy reference: :func:`reference_glossy` for the pairs of the verify glossy check
  (8x4 normals x 3 view angles, alpha 0.3 and 0.05) on the map reduced to 128x64 (the former
  limit; numpy and compiled), 256x128 and 512x256 (compiled).
* ``--verify``: ``verify_map`` end to end on that map (its 12 default estimators, pictures,
  convergence), against the sum of its estimators' own seconds.

Timings are the best of a few repeats (``time.perf_counter``) in one run; the machine may be
shared, so compare the ratios printed by one run.
"""

from __future__ import annotations

import argparse
import math
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from common import best_with_result

from envsample.core.latlong import reduce_power
from envsample.core.sphere import pixel_center_directions
from envsample.reference.glossy import reference_glossy
from envsample.reference.irradiance import KERNELS, reference_accuracy, reference_irradiance

GLOSSY_SIZES = ((128, 64), (256, 128), (512, 256))
GLOSSY_VIEWS = (0.0, 45.0, 75.0)


def analytic_map(width: int, height: int, *, texture: bool = True) -> np.ndarray:
    """An invented outdoor-like scene, float32 (H, W, 3), y up; ``texture`` adds a fixed +-10 % grain."""
    d = pixel_center_directions(height, width)
    up = d[..., 1]
    sky = np.where(up > 0, 0.6 + 0.8 * (1 - up) ** 3, 0.15)[..., None] * np.array([0.7, 0.85, 1.2])
    disk_dir = np.array([0.4, 0.6, -0.69])
    disk_dir /= np.linalg.norm(disk_dir)
    disk = (d @ disk_dir > math.cos(math.radians(1.5)))[..., None] * np.array([4.0e3, 3.6e3, 3.0e3])
    u = (np.arange(width) + 0.5) / width
    v = (np.arange(height) + 0.5) / height
    rect = ((u[None, :] > 0.70) & (u[None, :] < 0.78) & (v[:, None] > 0.30) & (v[:, None] < 0.40))
    light = rect[..., None] * np.array([25.0, 25.0, 22.0])
    img = (sky + disk + light).astype(np.float32)
    if texture:
        grain = np.random.default_rng(7).random((height, width, 1), dtype=np.float32)
        img *= 0.9 + 0.2 * grain
    return img



def bench_irradiance(img, normals, lum: float, args) -> None:
    scale = math.pi * float(np.mean(img))
    print(f"reference_irradiance, {normals.shape[0]} normals (128x64 grid):")
    sec, e_all = best_with_result(lambda: reference_irradiance(img, normals), args.repeats)
    print(f"  compiled, all CPUs : {sec:7.2f} s = {sec / lum:6.1f}x one luminance pass "
          f"({sec / normals.shape[0] / sum(img.shape[:2]) * 1e9:.1f} ns per normal x (H + W))")
    sec1, e_one = best_with_result(lambda: reference_irradiance(img, normals, threads=1), 1)
    print(f"  compiled, 1 thread : {sec1:7.2f} s = {sec1 / lum:6.1f}x  (threads speed-up {sec1 / sec:.2f})")
    again = reference_irradiance(img, normals)
    print(f"  bit-identical: repeated run {np.array_equal(again, e_all)}, 1 thread vs all {np.array_equal(e_one, e_all)}")
    if not args.skip_numpy:
        secn, e_np = best_with_result(lambda: reference_irradiance(img, normals, backend="numpy"), 1)
        diff = float(np.max(np.abs(e_np - e_all))) / scale
        print(f"  numpy fallback     : {secn:7.2f} s = {secn / lum:6.1f}x  (compiled is {secn / sec:.0f}x faster); "
              f"largest difference {diff:.1e} x pi mean L")
    plain = analytic_map(img.shape[1], img.shape[0], texture=False)
    secp, _ = best_with_result(lambda: reference_irradiance(plain, normals), args.repeats)
    print(f"  untextured scene (constant ground rows), compiled: {secp:.2f} s = {secp / lum:.1f}x")
    seca, acc = best_with_result(lambda: reference_accuracy(img, normals), 1)
    print(f"reference_accuracy (64 normals, both signs): {seca:.2f} s = {seca / lum:.1f}x; relative error bound "
          f"{acc['relative_error_bound']:.1e} (identity residual {acc['identity_residual']:.1e}, "
          f"snap bound {acc['snap_bound']:.1e})")


def bench_glossy(img, args) -> None:
    from envsample.validation.grid import normal_grid, view_directions

    normals, _ = normal_grid(8, 4)
    print(f"glossy reference, {normals.shape[0]} normals x {len(GLOSSY_VIEWS)} views (the verify glossy check):")
    base = None
    for alpha in (0.3, 0.05):
        for wh in GLOSSY_SIZES:
            small = reduce_power(img, wh)
            backends = ("numpy", "compiled") if wh == GLOSSY_SIZES[0] else ("compiled",)
            for be in backends:
                def run(small=small, be=be):
                    return [reference_glossy(small, normals, view_directions(normals, a), alpha, backend=be)
                            for a in GLOSSY_VIEWS]
                sec, _ = best_with_result(run, 1)
                if base is None:
                    base = sec
                print(f"  alpha {alpha:4.2f} {wh[0]:4d}x{wh[1]:<4d} {be:8s} {sec:6.2f} s = {sec / base:5.2f}x "
                      "numpy at 128x64, alpha 0.3")


def bench_verify(img) -> None:
    from envsample.pipeline.verify import verify_map
    from envsample.sampling.table import build_table

    table = build_table(img)
    with tempfile.TemporaryDirectory() as out:
        t0 = time.perf_counter()
        doc = verify_map(table, Path(out), sphere=False)
        total = time.perf_counter() - t0
    est = sum(float(e.get("seconds") or 0.0) for e in doc["estimators"].values())
    ref = doc["reference"]
    print(f"verify_map end to end: {total:.1f} s = {total / est:.2f}x its estimators' own {est:.1f} s; reference "
          f"{ref['seconds']:.2f} s, bound {ref['relative_error_bound']:.1e}; peak memory "
          f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20:.2f} GiB (whole process)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="use a 2048x1024 map")
    parser.add_argument("--verify", action="store_true", help="also time verify_map end to end")
    parser.add_argument("--skip-numpy", action="store_true", help="do not time the numpy fallback (slow at 8k)")
    parser.add_argument("--repeats", type=int, default=2)
    args = parser.parse_args()
    if KERNELS.backend_name() != "compiled":
        sys.exit("the compiled kernel is not built here (or ENVSAMPLE_KERNELS=numpy): nothing to compare")
    width, height = (2048, 1024) if args.quick else (8192, 4096)
    img = analytic_map(width, height)
    weights = np.array([0.2126, 0.7152, 0.0722], dtype=np.float32)
    lum, _ = best_with_result(lambda: img @ weights, 3)
    print(f"map {width}x{height} float32, one luminance pass {lum:.3f} s")
    normals = pixel_center_directions(64, 128).reshape(-1, 3)
    bench_irradiance(img, normals, lum, args)
    bench_glossy(img, args)
    if args.verify:
        bench_verify(img)


if __name__ == "__main__":
    main()
