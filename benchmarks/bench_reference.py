"""Speed of the exact reference irradiance (envsample.reference).

Usage:  python benchmarks/bench_reference.py [--quick] [--repeats N]

Times :func:`envsample.reference.reference_irradiance` for a 128x64 grid of normals
(8192 normals) on a 2048x1024 analytic map generated here (an invented scene: a smooth
sky gradient, a dim ground, a small very bright disk and a lat-long rectangle light),
and prints the wall time and the throughput in cells x normals per second, the
measure a brute-force per-cell sum would be judged by.  The method costs
O((H + W) log(H + W)) per normal, so that throughput is far above what touching every
cell could reach.  Also times :func:`reference_accuracy` (64 normals, both signs) and the
same render on the map reduced to 512x256.

Timings are the best of ``--repeats`` runs (``time.perf_counter``); the machine may be
shared, so treat them as upper bounds.  ``--quick`` uses a 512x256 map.
"""

from __future__ import annotations

import argparse
import gc
import math
import time

import numpy as np

from envsample.core.sphere import pixel_center_directions
from envsample.reference.irradiance import reference_accuracy, reference_irradiance


def analytic_map(width: int, height: int) -> np.ndarray:
    """An invented outdoor-like scene, float32 (H, W, 3), y up."""
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
    return (sky + disk + light).astype(np.float32)


def best(fn, repeats: int):
    times, out = [], None
    for _ in range(repeats):
        gc.collect()
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="use a 512x256 map")
    parser.add_argument("--repeats", type=int, default=2)
    args = parser.parse_args()

    width, height = (512, 256) if args.quick else (2048, 1024)
    img = analytic_map(width, height)
    normals = pixel_center_directions(64, 128).reshape(-1, 3)
    cells = width * height
    print(f"map {width}x{height} ({cells} cells), {normals.shape[0]} normals (128x64 grid)")

    sec, E = best(lambda: reference_irradiance(img, normals), args.repeats)
    print(f"reference_irradiance: {sec:.2f} s, {cells * normals.shape[0] / sec:.3g} cells x normals per second, "
          f"{sec / normals.shape[0] * 1e3:.2f} ms per normal")
    print(f"  irradiance range {E[:, 1].min():.4g} .. {E[:, 1].max():.4g} (green channel, map units x sr)")

    sec, acc = best(lambda: reference_accuracy(img, normals), 1)
    print(f"reference_accuracy (64 normals, both signs): {sec:.2f} s, identity residual "
          f"{acc['identity_residual']:.2e} (relative)")

    if not args.quick:
        sec, _ = best(lambda: reference_irradiance(img, normals, size=(512, 256)), args.repeats)
        print(f"reference_irradiance with size=512x256: {sec:.2f} s")
        sec, acc = best(lambda: reference_accuracy(img, normals, size=(512, 256)), 1)
        print(f"  change against the full map: {acc['resolution_change']:.2e} relative ({sec:.2f} s)")


if __name__ == "__main__":
    main()
