"""The validation render: irradiance over a sphere of normals with every estimator, against the exact reference.

Public objects
--------------
:func:`verify_map`       render, compare, write EXR images, PNG pictures and ``metrics.json``.
:func:`load_source`      a map file, a table prefix, an array, a MapImage or an EnvTable -> EnvTable.
:func:`normal_grid`      the lat-long grid of normals (pixel centres) and the solid angle of each cell.
:func:`sphere_normals`   normals of a sphere as an orthographic camera sees it (for ``sphere.png``).
:func:`error_metrics`    relative RMSE and mean bias of an estimate against the reference (luminance).
:func:`tune_one_sample`  pilot search of one-sample MIS selection probabilities.
:func:`recommend`        the tuned choice as a JSON-ready dict for ``table.metadata["recommendation"]``.
:data:`DEFAULT_ESTIMATORS`, :data:`GLOSSY_ESTIMATORS`, :data:`CAUTION`.

What is measured
----------------
Normals are the pixel centres of a ``W x H`` lat-long image in the table's direction
convention (:mod:`envsample.sphere`: up axis and rotation of the table).  Every
estimator of :func:`envsample.mis.estimate_irradiance` renders ``E(n)`` at ``spp``
samples per normal; :func:`envsample.reference.reference_irradiance` gives the exact
``E(n)`` of the piecewise-constant map.  All error figures are on **luminance**
(the table's primaries, :func:`envsample.color.luminance` in float64) of the
float32 images that are written to disk, so they can be recomputed from the EXR files.  Averages over normals are weighted by the solid
angle of each normal's cell of the grid (a lat-long grid crowds its poles; this makes
the averages independent of the parameterisation).  With ``Ebar`` the weighted mean
of the reference luminance:

* ``relative_rmse`` = sqrt(weighted mean of (Y - Y_ref)^2) / Ebar;
* ``mean_bias`` = weighted mean of (Y - Y_ref) / Ebar, with its standard error from
  the per-normal sample variances (normals are independent);
* ``variance_per_sample`` = weighted mean of the per-sample variance of one normal's
  luminance estimate / Ebar^2 (for multi-sample MIS the stratified variance times
  spp, see :meth:`envsample.mis.EstimatorSamples.variance`), with a large-sample
  standard error from the fourth central moment, ``(m4 - m2^2) / spp`` per normal
  (common practice; it understates the error when heavy tails were not sampled);
* ``firefly_index`` = the largest per-sample contribution f w / p over all normals and
  samples divided by the mean contribution (:func:`envsample.mis.firefly_index`),
  with the normal and the strategy where that largest sample occurred;
* ``time_per_sample_s`` = wall time of the estimate (including the per-sample
  bookkeeping) divided by normals x spp; ``efficiency`` = 1 / (variance_per_sample x
  time_per_sample_s), in 1/s (Veach 1997, section 2.2: efficiency is the inverse of
  variance times cost).

The recommended estimator is the most efficient one whose measured bias is
consistent with zero (``|mean_bias| <= 4 standard errors + the reference's accuracy``).
All the estimators are unbiased in expectation; the measured bias fails that test
when a bright light was missed (the sample variance then understates the error), so
the rule discards estimators that were visibly unlucky at this sample count.
Efficiency includes wall time, so near ties can swap between runs: the metrics list
the estimators within 10% of the best (``close_to_best``) and, as a choice that
depends on the seed alone, the one of least variance per sample (``lowest_variance``).

The numbers are Monte Carlo estimates for preparing assets, not certified lighting
calculations.

Reproducibility: every run of an estimator draws its uniforms from
``numpy.random.SeedSequence(seed, spawn_key=(purpose, crc32(estimator name), index))``,
so the same ``seed`` gives bit-identical estimates (timings excepted), and adding or
removing an estimator does not change the others.

Tuned selection
---------------
One-sample MIS picks the table with probability ``c`` and the BSDF (cosine) strategy
with ``1 - c``.  The balance heuristic is optimal among heuristics for a given ``c``
only up to Veach's bound, and ``c = 0.5`` is an arbitrary default; the best budget
split depends on the map (Sbert, Havran & Szirmay-Kalos 2018).  :func:`tune_one_sample`
measures the per-sample variance for a set of ``c`` and heuristics on a pilot run,
then re-measures the winner and the default on fresh samples, so the reported
variance ratio is not biased by the selection.

References
----------
- Veach, E. (1997). Robust Monte Carlo Methods for Light Transport Simulation. PhD
  thesis, Stanford University: section 2.2 (efficiency), chapter 9 (multiple
  importance sampling, heuristics, Theorem 9.2).
- Sbert, M., Havran, V. and Szirmay-Kalos, L. (2018). Multiple importance sampling
  revisited: breaking the bounds. EURASIP Journal on Advances in Signal Processing
  2018:15 (unequal sample budgets for the techniques of MIS; citation from memory).
- Kendall, M. and Stuart, A. The Advanced Theory of Statistics, vol. 1 (the
  large-sample variance of a sample variance, (mu4 - mu2^2)/n; from memory).
"""

from __future__ import annotations

import hashlib
import json
import math
import time
import zlib
from collections.abc import Callable
from pathlib import Path

import numpy as np

from envsample.core.color import luminance
from envsample.core.schema import Schema
from envsample.core.sphere import (
    _frame,
    direction_to_pixel,
    orthonormal_basis,
    pixel_center_angles,
    pixel_center_directions,
    row_solid_angles,
)
from envsample.core.text import caution
from envsample.errors import EnvsampleError

__all__ = [
    "CAUTION",
    "DEFAULT_ESTIMATORS",
    "GLOSSY_ESTIMATORS",
    "DEFAULT_FRACTIONS",
    "METRICS_SCHEMA",
    "load_source",
    "normal_grid",
    "sphere_normals",
    "error_metrics",
    "verify_map",
    "tune_one_sample",
    "recommend",
]

#: Said wherever these numbers are shown.
CAUTION = caution("photometric values (Monte Carlo results)")

METRICS_SCHEMA = Schema("envsample.verify-metrics", 1)

#: Estimators rendered by default: every irradiance estimator of envsample.mis except
#: "bsdf", which for irradiance is the cosine strategy again.
DEFAULT_ESTIMATORS = (
    "cosine", "uniform", "sphere", "table",
    "mis-balance", "mis-power", "mis-max", "mis-cutoff",
    "one-sample-balance", "one-sample-power", "one-sample-max", "one-sample-cutoff",
)

#: Estimators of the small glossy check ("bsdf" is GGX visible-normal sampling there).
GLOSSY_ESTIMATORS = ("bsdf", "table", "mis-balance", "mis-power", "one-sample-balance")

#: View angles (degrees from the normal) of the glossy check.
GLOSSY_VIEW_DEG = (0.0, 45.0, 75.0)

#: Normals of the glossy check (a coarse lat-long grid, width x height).
GLOSSY_NORMALS = (8, 4)

#: Largest map (width, height) of the glossy check; larger maps are reduced (power-preserving).
GLOSSY_MAP = (128, 64)

#: (normal, view) pairs per view angle on which the glossy reference's accuracy is measured.
GLOSSY_ACCURACY_PAIRS = 4

#: Table-selection probabilities tried by :func:`tune_one_sample`.
DEFAULT_FRACTIONS = (0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9)

#: One-sample estimator for each heuristic name.
_ONE_SAMPLE = {"balance": "one-sample-balance", "power": "one-sample-power",
               "maximum": "one-sample-max", "cutoff": "one-sample-cutoff"}

#: Measured bias is "consistent with zero" within this many standard errors (plus the reference's accuracy).
BIAS_SIGMAS = 4.0

#: Estimators with at least this fraction of the best efficiency are listed as close to it.
CLOSE_EFFICIENCY = 0.9

#: Largest normal grid of the convergence plot (a sub-grid of the render's normals).
CONVERGENCE_GRID = (32, 16)

#: Series drawn in the convergence plot (pictures has eight distinct colour/marker pairs).
MAX_PLOT_SERIES = 8

#: Error heat maps per PNG (they share one colour scale across files).
PANELS_PER_PICTURE = 4

#: Purposes of the random streams (first word of the SeedSequence spawn key).
_STREAM = {"render": 1, "convergence": 2, "glossy": 3, "tune-pilot": 4, "tune-confirm": 5}

Progress = Callable[[str], None]


# --------------------------------------------------------------------------- inputs


def _stream(seed: int, purpose: str, name: str, index: int = 0) -> np.random.SeedSequence:
    """An independent, reproducible random stream for one run of one estimator."""
    return np.random.SeedSequence(seed, spawn_key=(_STREAM[purpose], zlib.crc32(name.encode("utf-8")), int(index)))


def _check_seed(seed) -> int:
    if seed is None:
        # Fresh entropy, recorded so the run can be repeated bit for bit.
        return int(np.random.SeedSequence().entropy)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer or None, got {seed!r}")
    return int(seed)


def _check_spp(spp, name: str = "spp") -> int:
    if isinstance(spp, bool) or not isinstance(spp, (int, np.integer)) or spp < 2:
        raise ValueError(f"{name} must be an integer >= 2 (variances need two samples per normal), got {spp!r}")
    return int(spp)


def _check_normals(normals, name: str = "normals") -> tuple[int, int]:
    from envsample.core.latlong import parse_size

    try:
        wh = parse_size(normals)
    except (TypeError, ValueError, IndexError) as exc:
        raise ValueError(f"{name} must be (width, height) or 'WxH', e.g. 128x64 ({exc})") from None
    if wh is None or wh[0] < 2 or wh[1] < 1:
        raise ValueError(f"{name} must be at least 2x1 normals, got {normals!r}")
    return wh


def _map_extensions() -> tuple[str, ...]:
    from envsample.io.maps import supported_extensions

    return supported_extensions()


def load_source(source, *, table_size=None) -> tuple:
    """Turn what the user gave into ``(EnvTable, info)``; ``info`` is a JSON-ready description.

    ``source`` is an :class:`~envsample.table.EnvTable`; a MapImage or an ``(H, W, 3)``
    array (validated, then built with ``size=table_size``); or a path.  A path with a
    map extension (``.exr``, ``.hdr``, and the LDR ones, which validation refuses with
    a clear message) is read as a map, anything else as a table prefix or table file
    (``.json``/``.npz``/``.bin``).  ``table_size`` applies to maps only.
    """
    from envsample.io.maps import MapImage, read_map, validate_map
    from envsample.sampling.table import EnvTable, build_table, load_table

    if isinstance(source, EnvTable):
        if table_size is not None:
            raise ValueError("table_size applies to maps; a table is verified at its own size (rebuild it to change that)")
        return source, {"kind": "table", "path": None, "table_source": source.metadata.get("source")}
    if isinstance(source, (str, Path)):
        p = Path(source)
        if p.suffix.lower() in _map_extensions():
            image, notes = validate_map(read_map(p))
            table = build_table(image, size=table_size)
            return table, {"kind": "map", "path": str(p), "sha256": image.sha256, "format": image.format,
                           "width": image.width, "height": image.height, "validation_notes": notes}
        if table_size is not None:
            raise ValueError(f"{p}: table_size applies to maps; a table is verified at its own size")
        table = load_table(p)
        return table, {"kind": "table", "path": str(p), "table_source": table.metadata.get("source")}
    if isinstance(source, MapImage):
        image = source
    else:
        image = MapImage.from_array(source)
    image, notes = validate_map(image)
    table = build_table(image, size=table_size)
    info = {"kind": "map", "path": None if image.path is None else str(image.path), "sha256": image.sha256,
            "format": image.format, "width": image.width, "height": image.height, "validation_notes": notes}
    if image.sha256 is None:
        info["array_sha256"] = hashlib.sha256(np.ascontiguousarray(image.rgb, dtype="<f4").tobytes()).hexdigest()
    return table, info


def _table_info(table) -> dict:
    return {
        "image": [table.width, table.height],
        "cells": [table.table_width, table.table_height],
        "mapping": table.mapping,
        "primaries": table.primaries,
        "uniform_mix": table.uniform_mix,
        "compensated": table.compensated,
        "up": table.up,
        "rotation_deg": table.rotation_deg,
    }


def normal_grid(width: int, height: int, *, up: str = "y", rotation_deg: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Normals at the pixel centres of a ``width x height`` lat-long image and their cells' solid angles.

    Returns float64 ``(height * width, 3)`` unit normals (row-major, row 0 at the
    zenith, convention of :mod:`envsample.sphere`) and float64 ``(height * width,)``
    exact solid angles in steradians (summing to 4 pi), used as averaging weights.
    """
    n = pixel_center_directions(height, width, up=up, rotation_deg=rotation_deg).reshape(-1, 3)
    w = np.repeat(row_solid_angles(height, width), width)
    return n, w


def error_metrics(estimate, reference, weights, *, primaries: str = "bt709") -> dict:
    """Relative RMSE and mean bias of an estimate against the reference, on luminance.

    ``estimate`` and ``reference`` are RGB irradiance ``(N, 3)`` (or ``(H, W, 3)``),
    ``weights`` the solid angle of each normal's cell ``(N,)``.  Returns
    ``{"relative_rmse", "mean_bias", "reference_mean"}``: RMSE and bias divided by
    the weighted mean reference luminance ``Ebar`` (see the module docstring), and
    ``Ebar`` itself in map units x sr.
    """
    y = luminance(np.asarray(estimate).reshape(-1, 3), primaries, dtype=np.float64)
    yr = luminance(np.asarray(reference).reshape(-1, 3), primaries, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64).reshape(-1)
    if not (y.shape == yr.shape == w.shape):
        raise ValueError(f"estimate, reference and weights must describe the same normals, got {y.shape}, {yr.shape}, {w.shape}")
    wsum = w.sum()
    ebar = float(np.dot(w, yr) / wsum)
    d = y - yr
    if not ebar > 0.0:
        return {"relative_rmse": None, "mean_bias": None, "reference_mean": ebar}
    return {
        "relative_rmse": float(math.sqrt(np.dot(w, d * d) / wsum) / ebar),
        "mean_bias": float(np.dot(w, d) / wsum / ebar),
        "reference_mean": ebar,
    }


def _num(x):
    """JSON-safe float: non-finite values become None."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


# --------------------------------------------------------------------------- one estimator


def _sample_statistics(samples, weights: np.ndarray, ebar: float) -> dict:
    """Variance per sample (relative to Ebar^2) with its standard error, and the bias's standard error."""
    spp = samples.spp
    var_mean = np.asarray(samples.variance(), dtype=np.float64)  # variance of each normal's estimate
    c = samples.contributions
    d = c - c.mean(axis=1, keepdims=True)
    m2 = np.mean(d * d, axis=1)
    m4 = np.mean(d ** 4, axis=1)
    var_of_var = np.maximum(m4 - m2 * m2, 0.0) / spp  # per-sample variance's own variance (large-sample)
    wsum = weights.sum()
    scale = ebar * ebar if ebar > 0 else float("nan")
    return {
        "bias_se": float(math.sqrt(np.dot(weights ** 2, var_mean)) / wsum / ebar) if ebar > 0 else None,
        "variance_per_sample": float(np.dot(weights, var_mean * spp) / wsum / scale),
        "variance_per_sample_se": float(math.sqrt(np.dot(weights ** 2, var_of_var)) / wsum / scale),
    }


def _largest_sample(samples, height: int, width: int, rotation_deg: float) -> dict:
    c = samples.contributions
    flat = int(np.argmax(c))
    normal, k = divmod(flat, c.shape[1])
    row, col = divmod(normal, width)
    azimuth, elevation = pixel_center_angles(row, col, height, width, rotation_deg=rotation_deg)
    strategy = samples.strategies[int(samples.strategy[normal, k])]
    return {"normal_azimuth_deg": round(azimuth, 3), "normal_elevation_deg": round(elevation, 3),
            "strategy": strategy}


def _render_one(table, name, normals, weights, grid_wh, spp, seed, ref32, ebar, ref_accuracy):
    from envsample.estimation.estimators import estimate_irradiance

    t0 = time.perf_counter()
    est, samples = estimate_irradiance(table, normals, estimator=name, spp=spp, seed=_stream(seed, "render", name),
                                       return_samples=True)
    seconds = time.perf_counter() - t0
    est32 = est.astype(np.float32)
    err = error_metrics(est32, ref32, weights, primaries=table.primaries)
    stats = _sample_statistics(samples, weights, ebar)
    n_samples = normals.shape[0] * spp
    tps = seconds / n_samples
    var = stats["variance_per_sample"]
    bias, se = err["mean_bias"], stats["bias_se"]
    consistent = None
    if bias is not None and se is not None:
        consistent = bool(abs(bias) <= BIAS_SIGMAS * se + ref_accuracy)
    entry = {
        "kind": samples.kind,
        "strategies": list(samples.strategies),
        "heuristic": samples.heuristic,
        "fractions": None if samples.fractions is None else list(samples.fractions),
        "counts": None if samples.counts is None else list(samples.counts),
        "relative_rmse": _num(err["relative_rmse"]),
        "mean_bias": _num(bias),
        "mean_bias_se": _num(se),
        "bias_consistent_with_zero": consistent,
        "variance_per_sample": _num(var),
        "variance_per_sample_se": _num(stats["variance_per_sample_se"]),
        "firefly_index": _num(samples.firefly_index()),
        "largest_sample": _largest_sample(samples, grid_wh[1], grid_wh[0], table.rotation_deg),
        "seconds": seconds,
        "time_per_sample_s": tps,
        "samples_per_second": n_samples / seconds if seconds > 0 else None,
        "efficiency": _num(1.0 / (var * tps)) if var and var > 0 and tps > 0 else None,
    }
    if var == 0.0:
        entry["efficiency_note"] = "zero measured variance: efficiency unbounded (ranked first)"
    return est32, entry


def _recommendation(entries: dict) -> dict:
    """The most efficient estimator whose measured bias is consistent with zero."""
    def score(item):
        name, e = item
        if e.get("variance_per_sample") == 0.0:
            return (1, math.inf)
        return (1, e["efficiency"]) if e.get("efficiency") is not None else (0, 0.0)

    if all(e.get("relative_rmse") is None for e in entries.values()):
        return {"estimator": None, "rule": "the reference irradiance is zero everywhere (a black map): nothing to rank",
                "ranking": [], "close_to_best": [], "lowest_variance": None, "excluded_for_bias": []}
    candidates = [(n, e) for n, e in entries.items() if e.get("bias_consistent_with_zero")]
    fallback = not candidates
    pool = candidates if candidates else list(entries.items())
    ranked = sorted(pool, key=score, reverse=True)
    best = ranked[0][0] if ranked else None
    rule = (f"highest efficiency 1/(variance per sample x time per sample) among the estimators whose "
            f"measured mean bias is within {BIAS_SIGMAS:g} standard errors (plus the reference accuracy) of zero")
    if fallback:
        rule += "; no estimator passed the bias check, so all were ranked (increase spp)"
    with_var = [(n, e) for n, e in pool if e.get("variance_per_sample") is not None]
    lowest = min(with_var, key=lambda item: item[1]["variance_per_sample"])[0] if with_var else None
    top = score(ranked[0])[1] if ranked else 0.0
    close = [n for n, e in ranked[1:] if score((n, e))[1] >= CLOSE_EFFICIENCY * top]
    return {"estimator": best, "rule": rule, "ranking": [n for n, _ in ranked],
            "close_to_best": close,
            "lowest_variance": lowest,
            "lowest_variance_means": "least variance per sample among the same estimators; unlike the "
                                     "efficiency ranking it depends on the seed only, not on timings",
            "close_to_best_means": f"efficiency within {1 - CLOSE_EFFICIENCY:.0%} of the best: timing noise can swap them",
            "excluded_for_bias": sorted(n for n, e in entries.items() if e.get("bias_consistent_with_zero") is False)}


# --------------------------------------------------------------------------- convergence, sphere, glossy


def _convergence_ladder(spp: int) -> list[int]:
    """4, 16, 64, 256, ... up to 4 x spp (at least the first rung)."""
    ladder, v = [], 4
    while v <= 4 * spp:
        ladder.append(v)
        v *= 4
    return ladder or [4]


def _subgrid(width: int, height: int) -> tuple[np.ndarray, tuple[int, int]]:
    """Flat indices of a strided sub-grid of at most CONVERGENCE_GRID normals, and its size."""
    sx = max(1, -(-width // CONVERGENCE_GRID[0]))
    sy = max(1, -(-height // CONVERGENCE_GRID[1]))
    rows = np.arange(sy // 2, height, sy)
    cols = np.arange(sx // 2, width, sx)
    return (rows[:, None] * width + cols[None, :]).reshape(-1), (cols.size, rows.size)


def _convergence(table, names, normals, weights, ref32, grid_wh, spp, seed):
    from envsample.estimation.estimators import estimate_irradiance

    idx, sub_wh = _subgrid(*grid_wh)
    ladder = _convergence_ladder(spp)
    series = {}
    for name in names:
        errs = []
        for k, s in enumerate(ladder):
            est = estimate_irradiance(table, normals[idx], estimator=name, spp=s,
                                      seed=_stream(seed, "convergence", name, k))
            errs.append(_num(error_metrics(est.astype(np.float32), ref32[idx], weights[idx],
                                           primaries=table.primaries)["relative_rmse"]))
        series[name] = errs
    return {"spp": ladder, "normals": list(sub_wh), "relative_rmse": series,
            "note": "strided sub-grid of the render's normals; fresh samples at every count"}


def _plotted(series: dict, entries: dict, recommended: str | None) -> list[str]:
    """At most MAX_PLOT_SERIES names: single strategies first, then the MIS estimators of lowest final error.

    The recommended estimator is always drawn; the others stay in metrics.json.
    """
    names = list(series)
    first = [recommended] if recommended in names else []
    if len(names) <= MAX_PLOT_SERIES:
        # The N^-1/2 guide passes through the first series: make that the recommended one.
        return first + [n for n in names if n not in first]

    def final(name):
        v = [x for x in series[name] if x is not None]
        return v[-1] if v else math.inf

    singles = [n for n in names if entries[n]["kind"] == "single"]
    mixed = sorted((n for n in names if entries[n]["kind"] != "single"), key=final)
    keep = [recommended] if recommended in names else []
    for n in singles + mixed:
        if len(keep) < MAX_PLOT_SERIES and n not in keep:
            keep.append(n)
    return first + [n for n in names if n in keep and n not in first]


def sphere_normals(size: int, *, up: str = "y") -> tuple[np.ndarray, np.ndarray]:
    """Normals of a unit sphere seen by an orthographic camera, and the mask of pixels on it.

    The camera looks along the world forward axis of the convention (the image centre
    when the map is not rotated) with the up axis up, so screen right is the convention's right and the
    visible half of the sphere faces back towards the camera: it is lit by the half of
    the map behind the camera.  Returns float64 ``(size, size, 3)`` normals (zero off
    the sphere) and a bool ``(size, size)`` mask.
    """
    f, r, a = _frame(up)
    c = (np.arange(size) + 0.5) / size * 2.0 - 1.0
    x, y = np.meshgrid(c, -c)
    rr = x * x + y * y
    mask = rr < 1.0
    z = np.sqrt(np.maximum(0.0, 1.0 - rr))
    n = x[..., None] * r + y[..., None] * a - z[..., None] * f
    return np.where(mask[..., None], n, 0.0), mask


def _sphere_picture(ref_grid, est_grid, grid_wh, table, size: int = 256) -> list[np.ndarray]:
    """Reference and estimate on a white Lambertian sphere (radiance E/pi): two uint8 pictures, one exposure."""
    from envsample.reports.pictures import log_average_luminance, tonemap

    n, mask = sphere_normals(size, up=table.up)
    w, h = grid_wh
    row, col = direction_to_pixel(n[mask], h, w, up=table.up, rotation_deg=table.rotation_deg)
    panels = []
    for grid in (ref_grid, est_grid):
        img = np.zeros((size, size, 3), dtype=np.float32)
        img[mask] = grid.reshape(h, w, 3)[row, col] / np.float32(math.pi)
        panels.append(img)
    avg = log_average_luminance(panels[0])
    exposure = math.log2(0.18 / avg) if avg > 0 else 0.0
    return [tonemap(panels[0], exposure=exposure), tonemap(panels[1], exposure=exposure)]


def _view_directions(normals: np.ndarray, angle_deg: float) -> np.ndarray:
    """Unit view directions at ``angle_deg`` from each normal, tilted towards its tangent (Duff et al. 2017 frame)."""
    t, _ = orthonormal_basis(normals)
    a = math.radians(angle_deg)
    return math.cos(a) * normals + math.sin(a) * t


def _glossy_table(table):
    """The table of the glossy check: the map reduced to at most GLOSSY_MAP (power-preserving), same options.

    The quadrature reference runs a Python loop per (normal, view) pair and its cost grows with
    the map; estimates and reference then both see the same reduced map, which is enough to
    validate BSDF sampling and the MIS weights.
    """
    from envsample.core.latlong import reduce_power
    from envsample.sampling.table import build_table

    gw, gh = GLOSSY_MAP
    if table.width <= gw:
        return table, [table.width, table.height]
    image = reduce_power(table.image, (gw, gh))
    opts = table.metadata["options"]
    small = build_table(image, primaries=table.primaries, mapping=table.mapping, uniform_mix=table.uniform_mix,
                        up=table.up, rotation_deg=table.rotation_deg, compensate=bool(opts.get("compensate", False)))
    return small, [gw, gh]


def _glossy(table, roughness: float, spp: int, seed: int) -> dict:
    """GGX glossy estimates against reference.reference_glossy: a few view angles on a coarse grid of normals."""
    from envsample.estimation.estimators import estimate_glossy
    from envsample.reference.irradiance import reference_glossy, reference_glossy_accuracy

    gtable, map_wh = _glossy_table(table)
    gw, gh = GLOSSY_NORMALS
    normals, weights = normal_grid(gw, gh, up=gtable.up, rotation_deg=gtable.rotation_deg)
    names = [e for e in GLOSSY_ESTIMATORS if not (e == "table" and gtable.compensated)]
    kw = {"up": gtable.up, "rotation_deg": gtable.rotation_deg}
    per = {n: {"relative_rmse": [], "mean_bias": [], "mean_bias_se": [], "variance_per_sample": [],
               "firefly_index": [], "bias_consistent_with_zero": []} for n in names}
    ref_seconds, accuracy = 0.0, 0.0
    for k, angle in enumerate(GLOSSY_VIEW_DEG):
        wo = _view_directions(normals, angle)
        t0 = time.perf_counter()
        ref = np.asarray(reference_glossy(gtable.image, normals, wo, roughness, **kw), dtype=np.float64)
        ref_seconds += time.perf_counter() - t0
        pick = np.linspace(0, normals.shape[0] - 1, GLOSSY_ACCURACY_PAIRS).round().astype(np.int64)
        acc = reference_glossy_accuracy(gtable.image, normals[pick], wo[pick], roughness, **kw)
        ref32 = ref.astype(np.float32)
        ebar = error_metrics(ref32, ref32, weights, primaries=gtable.primaries)["reference_mean"]
        top = float(luminance(ref32, gtable.primaries, dtype=np.float64).max())
        # The accuracy statement is relative to the largest value; restate it relative to Ebar.
        rel_acc = acc["relative_change"] * top / ebar if ebar > 0 else 0.0
        accuracy = max(accuracy, rel_acc)
        for name in names:
            est, samples = estimate_glossy(gtable, normals, wo, roughness, estimator=name, spp=spp,
                                           seed=_stream(seed, "glossy", name, k), return_samples=True)
            m = error_metrics(est.astype(np.float32), ref32, weights, primaries=gtable.primaries)
            st = _sample_statistics(samples, weights, ebar) if ebar > 0 else {}
            e = per[name]
            e["relative_rmse"].append(_num(m["relative_rmse"]))
            e["mean_bias"].append(_num(m["mean_bias"]))
            e["mean_bias_se"].append(_num(st.get("bias_se")))
            e["variance_per_sample"].append(_num(st.get("variance_per_sample")))
            e["firefly_index"].append(_num(samples.firefly_index()))
            ok = None
            if m["mean_bias"] is not None and st.get("bias_se") is not None:
                ok = bool(abs(m["mean_bias"]) <= BIAS_SIGMAS * st["bias_se"] + rel_acc)
            e["bias_consistent_with_zero"].append(ok)
    return {
        "roughness": float(roughness),
        "integrand": "outgoing radiance L_o = integral of L f_GGX (F = 1) max(0, n.w) dw, map units",
        "normals": [gw, gh],
        "view_angles_deg": list(GLOSSY_VIEW_DEG),
        "view": "wo at the given angle from each normal, tilted towards the tangent of its orthonormal basis",
        "map": map_wh,
        "spp": spp,
        "reference_seconds": ref_seconds,
        "reference_relative_accuracy": accuracy,
        "estimators": per,
    }


# --------------------------------------------------------------------------- files


def _write_json(path: Path, doc: dict) -> None:
    """Write JSON atomically (temporary file beside it, then rename)."""
    from envsample.core.files import atomic_write_text

    atomic_write_text(path, json.dumps(doc, indent=2, allow_nan=False) + "\n")


def _error_pictures(outdir: Path, panels: list, rotation_deg: float) -> list[str]:
    from envsample.reports.pictures import heatmap_figure

    values = np.concatenate([p[1].ravel() for p in panels])
    values = values[np.isfinite(values)]
    vmax = float(np.percentile(values, 99.0)) if values.size else 1.0
    if not vmax > 0.0:
        vmax = float(values.max()) if values.size and values.max() > 0 else 1.0
    label = "relative error |E - E_ref| / mean(E_ref)"
    files = []
    count = -(-len(panels) // PANELS_PER_PICTURE)
    for k in range(count):
        chunk = panels[k * PANELS_PER_PICTURE:(k + 1) * PANELS_PER_PICTURE]
        name = f"errors_{k + 1}.png"
        title = (f"irradiance error per normal (luminance); colour scale clipped at the 99th percentile, {vmax:.3g}"
                 + (f"; picture {k + 1} of {count}, one scale" if count > 1 else ""))
        heatmap_figure(chunk, path=outdir / name, label=label, vmin=0.0, vmax=vmax, latlong=True,
                       rotation_deg=rotation_deg, title=title)
        files.append(name)
    return files


def _estimator_list(estimators, table) -> tuple[list[str], list[str]]:
    from envsample.estimation.estimators import estimators as valid_estimators

    valid = valid_estimators("irradiance")
    notes = []
    if estimators is None:
        names = list(DEFAULT_ESTIMATORS)
        if table.compensated:
            names.remove("table")
            notes.append("the compensated table is valid only inside MIS: the lone 'table' estimator is left out")
    else:
        names = [s.strip() for s in estimators.split(",")] if isinstance(estimators, str) else [str(s) for s in estimators]
        names = [n for n in names if n]
        if not names:
            raise ValueError(f"estimators is empty; give one or more of: {', '.join(valid)}")
        unknown = [n for n in names if n not in valid]
        if unknown:
            raise ValueError(f"unknown estimator(s) {', '.join(unknown)}; valid names: {', '.join(valid)}")
        if len(set(names)) != len(names):
            raise ValueError(f"estimators lists a name twice: {', '.join(names)}")
        if table.compensated and "table" in names:
            raise ValueError("estimator 'table' cannot use a compensated table (valid only inside MIS); "
                             "drop it or use a table built without compensate")
    return names, notes


# --------------------------------------------------------------------------- the render


def verify_map(source, outdir, *, spp: int = 64, normals=(128, 64), estimators=None, roughness=None,
               seed: int | None = 0, table_size=None, sphere: bool = True,
               progress: Progress | None = None) -> dict:
    """Render irradiance over a grid of normals with each estimator, compare with the exact reference, write a report.

    Parameters
    ----------
    source : path, MapImage, array (H, W, 3) or EnvTable
        A map file (``.exr``/``.hdr``; read, validated and built with ``table_size``),
        a table prefix or file, or objects in memory (see :func:`load_source`).
    outdir : path
        Output folder, created if missing; every file is written atomically (temporary
        file + rename), ``metrics.json`` last.
    spp : int >= 2
        Samples per normal.
    normals : (width, height) or "WxH"
        Lat-long grid of normals at pixel centres (default 128 x 64), in the table's convention.
    estimators : sequence or comma-separated str, optional
        Names from :func:`envsample.mis.estimators`; default :data:`DEFAULT_ESTIMATORS`.
    roughness : float, optional
        GGX alpha in [1e-4, 1]: also compare glossy estimates with
        :func:`envsample.reference.reference_glossy` (:data:`GLOSSY_NORMALS` normals,
        :data:`GLOSSY_VIEW_DEG` view angles, the map reduced to at most :data:`GLOSSY_MAP`
        for estimates and reference alike, because the quadrature reference is slow).
    seed : int >= 0 or None
        Seed of every random stream (None: fresh entropy, recorded in the metrics).
    table_size : (width, height) or "WxH", optional
        Table grid when ``source`` is a map.
    sphere : bool
        Also write ``sphere.png`` (reference and recommended estimate on a white sphere).
    progress : callable(str), optional
        Called with a short label before each step.

    Returns
    -------
    dict
        The content of ``metrics.json`` (module docstring), with ``"outdir"`` added.

    Files: ``map.png``; ``reference.exr`` and ``estimate_<name>.exr`` (float32
    ``(H, W, 3)`` irradiance per normal, map units x sr); ``errors_<k>.png`` (heat maps,
    one colour scale); ``convergence.png``; ``sphere.png``; ``metrics.json``.
    """
    from envsample.io.maps import write_map
    from envsample.reference.irradiance import reference_accuracy, reference_irradiance
    from envsample.reports.pictures import convergence_plot, image_panels, thumbnail, write_png

    def tick(label):
        if progress is not None:
            progress(label)

    spp = _check_spp(spp)
    grid_wh = _check_normals(normals)
    seed = _check_seed(seed)
    if roughness is not None:
        try:
            roughness = float(roughness)
        except (TypeError, ValueError):
            raise ValueError(f"roughness (GGX alpha) must be a number in [1e-4, 1], got {roughness!r}") from None
        if not (1e-4 <= roughness <= 1.0):
            raise ValueError(f"roughness (GGX alpha) must lie in [1e-4, 1], got {roughness}")
    tick("load")
    table, source_info = load_source(source, table_size=table_size)
    names, notes = _estimator_list(estimators, table)
    outdir = Path(outdir)
    try:
        outdir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise EnvsampleError(f"{outdir}: cannot create the output folder ({exc.strerror or exc}); choose another -o") from None

    n, weights = normal_grid(*grid_wh, up=table.up, rotation_deg=table.rotation_deg)
    w, h = grid_wh
    tick("reference")
    t0 = time.perf_counter()
    ref = reference_irradiance(table.image, n, up=table.up, rotation_deg=table.rotation_deg)
    ref_seconds = time.perf_counter() - t0
    accuracy = reference_accuracy(table.image, n, up=table.up, rotation_deg=table.rotation_deg)
    ref32 = ref.astype(np.float32)
    ebar = error_metrics(ref32, ref32, weights, primaries=table.primaries)["reference_mean"]
    files = {"map": "map.png", "reference": "reference.exr", "estimates": {}}
    write_png(outdir / "map.png", thumbnail(table.image, width=min(1024, table.width)))
    write_map(outdir / "reference.exr", ref32.reshape(h, w, 3), pixel_type="float")

    entries, panels, grids = {}, [], {}
    ref_acc = float(accuracy.get("relative_error_bound") or 0.0)
    yr = luminance(ref32, table.primaries, dtype=np.float64)
    for name in names:
        tick(f"estimate {name}")
        est32, entry = _render_one(table, name, n, weights, grid_wh, spp, seed, ref32, ebar, ref_acc)
        fname = f"estimate_{name}.exr"
        write_map(outdir / fname, est32.reshape(h, w, 3), pixel_type="float")
        entry["file"] = fname
        files["estimates"][name] = fname
        entries[name] = entry
        grids[name] = est32
        y = luminance(est32, table.primaries, dtype=np.float64)
        rel = np.abs(y - yr) / ebar if ebar > 0 else np.zeros_like(y)
        panels.append((name, rel.reshape(h, w)))
    recommended = _recommendation(entries)

    tick("pictures")
    files["errors"] = _error_pictures(outdir, panels, table.rotation_deg)
    tick("convergence")
    conv = _convergence(table, names, n, weights, ref32, grid_wh, spp, seed)
    conv["plotted"] = _plotted(conv["relative_rmse"], entries, recommended["estimator"])
    shown = {k: conv["relative_rmse"][k] for k in conv["plotted"]}
    if any(v is not None and v > 0 for vals in shown.values() for v in vals):
        convergence_plot(conv["spp"], shown, path=outdir / "convergence.png",
                         xlabel="samples per normal", ylabel="relative RMSE of irradiance (luminance)",
                         title=f"convergence on {conv['normals'][0]}x{conv['normals'][1]} normals")
        files["convergence"] = "convergence.png"
    else:
        # A black map (or exact estimates everywhere) leaves nothing to draw on log axes.
        notes.append("no positive relative error to plot: convergence.png not written")
    if sphere and recommended["estimator"] is not None:
        ref_pic, est_pic = _sphere_picture(ref32, grids[recommended["estimator"]], grid_wh, table)
        image_panels([("exact reference", ref_pic), (f"{recommended['estimator']}, {spp} spp", est_pic)],
                     path=outdir / "sphere.png", title="white diffuse sphere lit by the map (one exposure)")
        files["sphere"] = "sphere.png"

    glossy = None
    if roughness is not None:
        tick("glossy")
        glossy = _glossy(table, roughness, spp, seed)

    from envsample._version import __version__

    doc = {
        **METRICS_SCHEMA.header(),
        "caution": CAUTION,
        "tool_version": __version__,
        "source": source_info,
        "table": _table_info(table),
        "seed": seed,
        "random_streams": "numpy SeedSequence(seed, spawn_key=(purpose, crc32(estimator name), index))",
        "spp": spp,
        "normals": {"width": w, "height": h, "count": int(n.shape[0]),
                    "placement": "pixel centres of a lat-long image in the table's convention",
                    "weighting": "averages over normals are weighted by the solid angle of each normal's cell"},
        "quantities": {
            "irradiance": "E(n) = integral of L(w) max(0, n.w) dw, map units x sr",
            "errors": "on luminance (table primaries) of the float32 images written; relative to the "
                      "solid-angle-weighted mean reference luminance Ebar",
            "variance_per_sample": "per-sample variance of a normal's luminance estimate / Ebar^2, weighted mean",
            "firefly_index": "largest per-sample contribution f w / p over all normals and samples / mean contribution",
            "efficiency": "1 / (variance_per_sample x time_per_sample_s), 1/s",
        },
        "reference": {**accuracy, "seconds": ref_seconds, "mean_luminance": ebar},
        "estimators": entries,
        "recommended": recommended,
        "convergence": conv,
        "glossy": glossy,
        "notes": notes,
        "files": files,
    }
    tick("metrics")
    _write_json(outdir / "metrics.json", doc)
    _remove_stale_outputs(outdir, files)
    doc["outdir"] = str(outdir)
    return doc


def _remove_stale_outputs(outdir: Path, files: dict) -> None:
    """Remove our own images from an earlier run in the same folder that this run did not write.

    Only names this module writes (``estimate_*.exr``, ``errors_*.png``, and the
    optional ``convergence.png``/``sphere.png``) are touched, after the new
    ``metrics.json`` is in place, so the folder always matches its metrics.
    """
    keep = set()
    for v in files.values():
        if isinstance(v, str):
            keep.add(v)
        elif isinstance(v, dict):
            keep.update(x for x in v.values() if isinstance(x, str))
        elif isinstance(v, (list, tuple)):
            keep.update(x for x in v if isinstance(x, str))
    for pattern in ("estimate_*.exr", "errors_*.png", "convergence.png", "sphere.png"):
        for p in outdir.glob(pattern):
            if p.name not in keep:
                p.unlink(missing_ok=True)


# --------------------------------------------------------------------------- tuned selection


def _weighted_variance(samples, weights: np.ndarray) -> tuple[float, float]:
    """Weighted mean per-sample luminance variance (absolute units) and its large-sample standard error."""
    spp = samples.spp
    v = np.asarray(samples.variance(), dtype=np.float64) * spp
    c = samples.contributions
    d = c - c.mean(axis=1, keepdims=True)
    m2 = np.mean(d * d, axis=1)
    m4 = np.mean(d ** 4, axis=1)
    wsum = weights.sum()
    return float(np.dot(weights, v) / wsum), float(math.sqrt(np.dot(weights ** 2, np.maximum(m4 - m2 * m2, 0.0) / spp)) / wsum)


def _check_fractions(fractions) -> tuple[float, ...]:
    try:
        f = tuple(float(x) for x in fractions)
    except TypeError:
        raise ValueError(f"fractions must be a sequence of table-selection probabilities, got {fractions!r}") from None
    if not f or not all(0.0 < x < 1.0 for x in f):
        raise ValueError(f"fractions must be one or more probabilities strictly between 0 and 1, got {fractions!r}")
    return f


def tune_one_sample(table, *, fractions=DEFAULT_FRACTIONS, heuristics=("balance", "power"), spp: int = 16,
                    normals=(32, 16), seed: int | None = 0, confirm_spp: int | None = None) -> dict:
    """Pilot search for the one-sample MIS selection probability of the table (vs the cosine strategy).

    For each heuristic and each table fraction ``c`` (the probability of drawing a
    sample from the table; ``1 - c`` goes to cosine sampling), the irradiance over a
    ``normals`` grid is estimated with ``spp`` samples and its per-sample luminance
    variance (solid-angle-weighted mean over normals) is measured.  The configuration
    of least variance is then re-measured, together with the default (balance
    heuristic, c = 0.5), on fresh samples (``confirm_spp`` per normal, default 4 x
    spp), so that the reported ``variance_ratio`` = V(best) / V(default) is not
    biased low by having picked the best of noisy pilot values.  Its standard error
    comes from the delta method on the two variances' large-sample errors.

    Choosing unequal sample budgets for the techniques of MIS can beat the balance
    heuristic's equal split (Sbert, Havran & Szirmay-Kalos 2018, EURASIP J. Adv.
    Signal Process., citation from memory); this is the simple measured version of
    that idea for a renderer that can set one probability per map.

    Returns a JSON-ready dict: ``estimator``, ``heuristic``, ``table_fraction``,
    ``fractions`` ([table, cosine]), ``variance_ratio``, ``variance_ratio_se``,
    ``pilot`` (every configuration's variance relative to the default's pilot value),
    ``spp``, ``confirm_spp``, ``normals``, ``seed``.
    """
    from envsample.estimation.estimators import _heuristic_name, estimate_irradiance

    fr = _check_fractions(fractions)
    spp = _check_spp(spp)
    confirm_spp = _check_spp(4 * spp if confirm_spp is None else confirm_spp, "confirm_spp")
    wh = _check_normals(normals)
    seed = _check_seed(seed)
    if isinstance(heuristics, str):
        heuristics = (heuristics,)
    hs = []
    for hname in heuristics:
        key = _heuristic_name(hname)
        if key not in hs:
            hs.append(key)
    if not hs:
        raise ValueError(f"heuristics is empty; give one or more of: {', '.join(_ONE_SAMPLE)}")
    n, weights = normal_grid(*wh, up=table.up, rotation_deg=table.rotation_deg)

    def measure(hname, c, purpose, count, index):
        name = _ONE_SAMPLE[hname]
        _, s = estimate_irradiance(table, n, estimator=name, spp=count, fractions=c, return_samples=True,
                                   seed=_stream(seed, purpose, name, index))
        return _weighted_variance(s, weights)

    configs = [(hname, c) for hname in hs for c in fr]
    if ("balance", 0.5) not in configs:
        configs.append(("balance", 0.5))
    pilot = {cfg: measure(cfg[0], cfg[1], "tune-pilot", spp, int(round(cfg[1] * 1000)))[0] for cfg in configs}
    best = min(configs, key=lambda cfg: (pilot[cfg], cfg != ("balance", 0.5)))
    base_v = pilot[("balance", 0.5)]
    if best == ("balance", 0.5):
        ratio, ratio_se = 1.0, 0.0
    else:
        vb, sb = measure(best[0], best[1], "tune-confirm", confirm_spp, 1)
        v0, s0 = measure("balance", 0.5, "tune-confirm", confirm_spp, 2)
        ratio = vb / v0 if v0 > 0 else (1.0 if vb == 0 else math.inf)
        ratio_se = ratio * math.hypot(sb / vb if vb > 0 else 0.0, s0 / v0 if v0 > 0 else 0.0)
    return {
        "estimator": _ONE_SAMPLE[best[0]],
        "heuristic": best[0],
        "table_fraction": best[1],
        "fractions": [best[1], 1.0 - best[1]],
        "strategies": ["table", "cosine"],
        "variance_ratio": _num(ratio),
        "variance_ratio_se": _num(ratio_se),
        "baseline": {"estimator": "one-sample-balance", "table_fraction": 0.5},
        "pilot": [{"heuristic": hname, "table_fraction": c,
                   "variance_vs_default": _num(pilot[(hname, c)] / base_v) if base_v > 0 else None}
                  for hname, c in configs],
        "spp": spp,
        "confirm_spp": confirm_spp,
        "normals": list(wh),
        "seed": seed,
    }


def recommend(table, *, fractions=DEFAULT_FRACTIONS, heuristics=("balance", "power"), spp: int = 16,
              normals=(32, 16), seed: int | None = 0) -> dict:
    """The sampling recommendation ``envsample build --tune`` stores as ``table.metadata["recommendation"]``.

    Runs :func:`tune_one_sample` and packages its result for a renderer: per
    sample, draw from the table with probability ``table_fraction`` and from the
    cosine (BSDF) density otherwise, and weight with ``heuristic``
    (:mod:`envsample.mis`; Veach 1997, section 9.2.4).  Unequal budgets follow Sbert,
    Havran & Szirmay-Kalos (2018), "Multiple importance sampling revisited: breaking
    the bounds", EURASIP J. Adv. Signal Process. (citation from memory).

    ``variance_ratio`` < 1 means the tuned choice leaves less noise than the default
    (balance, 0.5) for irradiance on this map; ``variance_ratio_se`` is its standard
    error.  JSON-ready; the measured values are estimates for asset preparation.
    """
    t = tune_one_sample(table, fractions=fractions, heuristics=heuristics, spp=spp, normals=normals, seed=seed)
    from envsample._version import __version__

    return {
        "model": "one-sample MIS",
        "estimator": t["estimator"],
        "heuristic": t["heuristic"],
        "heuristic_params": {"beta": 2.0} if t["heuristic"] == "power" else ({"cutoff": 0.1} if t["heuristic"] == "cutoff" else {}),
        "strategies": t["strategies"],
        "fractions": t["fractions"],
        "table_fraction": t["table_fraction"],
        "variance_ratio": t["variance_ratio"],
        "variance_ratio_se": t["variance_ratio_se"],
        "baseline": t["baseline"],
        "integrand": "irradiance (clamped cosine)",
        "how": (f"pilot of {t['spp']} samples per normal on {t['normals'][0]}x{t['normals'][1]} normals for every "
                f"heuristic and table fraction, least per-sample luminance variance wins; the ratio to the "
                f"default is re-measured on fresh samples ({t['confirm_spp']} per normal)"),
        "pilot": t["pilot"],
        "seed": t["seed"],
        "cite": "Sbert, Havran & Szirmay-Kalos 2018, EURASIP J. Adv. Signal Process. (from memory)",
        "caution": CAUTION,
        "tool_version": __version__,
    }
