"""The validation render: irradiance over a grid of normals with every estimator, against the exact reference.

Public objects
--------------
:func:`render_validation`  render, compare and rank; returns a :class:`ValidationResult` (no files).
:func:`render_estimates`   the estimators on any normals against a given reference (shared with QA).
:class:`ValidationResult`  the arrays and figures of one render; ``metrics(...)`` is ``metrics.json``.
:data:`DEFAULT_ESTIMATORS`, :data:`CAUTION`, :data:`METRICS_SCHEMA`.

What is measured
----------------
Normals are the pixel centres of a ``W x H`` lat-long image in the table's direction
convention (:mod:`envsample.core.sphere`: up axis and rotation of the table).  Every
estimator of :func:`envsample.estimation.estimators.estimate_irradiance` renders ``E(n)``
at ``spp`` samples per normal; :func:`envsample.reference.irradiance.reference_irradiance`
gives the exact ``E(n)`` of the piecewise-constant map.  All error figures are on
**luminance** (the table's primaries, :func:`envsample.core.color.luminance` in float64)
of the float32 estimates, the values written to disk, so they can be recomputed from
the EXR files.  Averages over normals are weighted by the solid angle of each normal's
cell of the grid (a lat-long grid crowds its poles; this makes the averages independent
of the parameterisation).  With ``Ebar`` the weighted mean of the reference luminance:

* ``relative_rmse`` = sqrt(weighted mean of (Y - Y_ref)^2) / Ebar;
* ``mean_bias`` = weighted mean of (Y - Y_ref) / Ebar, with its standard error from
  the per-normal sample variances (normals are independent);
* ``variance_per_sample`` = weighted mean of the per-sample variance of one normal's
  luminance estimate / Ebar^2 (for multi-sample MIS the stratified variance times
  spp, see :meth:`envsample.estimation.estimators.EstimatorSamples.variance`), with a
  large-sample standard error from the fourth central moment, ``(m4 - m2^2) / spp``
  per normal (common practice; it understates the error when heavy tails were not sampled);
* ``firefly_index`` = the largest per-sample contribution f w / p over all normals and
  samples divided by the mean contribution (:func:`envsample.estimation.estimators.firefly_index`),
  with the normal and the strategy where that largest sample occurred;
* ``peak_sample_share`` = the largest single-sample term of one estimate (contribution /
  spp) over Ebar: above 1, one sample alone outshines a typical normal (QA grades this);
* ``time_per_sample_s`` = wall time of the estimate (including the per-sample
  bookkeeping) divided by normals x spp; ``efficiency`` = 1 / (variance_per_sample x
  time_per_sample_s), in 1/s (Veach 1997, section 2.2: efficiency is the inverse of
  variance times cost).

The recommended estimator is the most efficient one whose measured bias is consistent
with zero (:func:`envsample.validation.metrics.recommendation`).

When the table carries a tuned one-sample MIS setting (``metadata["recommendation"]``,
written by ``build --tune``, :func:`envsample.validation.tuning.recommend`), it is rendered
as one more estimator named :data:`TUNED` beside the others, so verify evaluates the very
setting the tuning chose and the two cannot give different advice unseen.

The numbers are Monte Carlo estimates for preparing assets, not certified lighting
calculations.

Reproducibility: every run of an estimator draws its uniforms from
``numpy.random.SeedSequence(seed, spawn_key=(purpose, crc32(estimator name), index))``,
so the same ``seed`` gives bit-identical estimates (timings excepted), and adding or
removing an estimator does not change the others.

References
----------
- Veach, E. (1997). Robust Monte Carlo Methods for Light Transport Simulation. PhD
  thesis, Stanford University: section 2.2 (efficiency), chapter 9 (multiple
  importance sampling, heuristics, Theorem 9.2).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from envsample._version import __version__
from envsample.core.color import luminance
from envsample.core.schema import Schema
from envsample.core.sphere import direction_angles
from envsample.core.text import caution
from envsample.estimation.estimators import estimate_irradiance, estimator_name
from envsample.estimation.estimators import estimators as valid_estimators
from envsample.reference.irradiance import reference_accuracy, reference_irradiance
from envsample.validation.glossy import glossy_check
from envsample.validation.grid import normal_grid, subgrid
from envsample.validation.metrics import (
    BIAS_SIGMAS,
    error_metrics,
    json_number,
    recommendation,
    sample_statistics,
)
from envsample.validation.streams import check_normals, check_seed, check_spp, stream

__all__ = [
    "CAUTION",
    "DEFAULT_ESTIMATORS",
    "METRICS_SCHEMA",
    "TUNED",
    "ValidationResult",
    "render_estimates",
    "render_validation",
]

#: Said wherever these numbers are shown.
CAUTION = caution("photometric values (Monte Carlo results)")

METRICS_SCHEMA = Schema("envsample.verify-metrics", 1)

#: Estimators rendered by default: every irradiance estimator except "bsdf", which for
#: irradiance is the cosine strategy again.
DEFAULT_ESTIMATORS = (
    "cosine", "uniform-hemisphere", "uniform-sphere", "table",
    "mis-balance", "mis-power", "mis-max", "mis-cutoff",
    "one-sample-balance", "one-sample-power", "one-sample-max", "one-sample-cutoff",
)

#: Name of the entry of the table's tuned setting (the estimator and table fraction of its recommendation).
TUNED = "tuned"

#: Largest normal grid of the convergence plot (a sub-grid of the render's normals).
CONVERGENCE_GRID = (32, 16)

#: Series drawn in the convergence plot (pictures has eight distinct colour/marker pairs).
MAX_PLOT_SERIES = 8

Progress = Callable[[str], None]


@dataclass
class EstimateResult:
    """One estimator on a set of normals: float32 (N, 3) irradiance and its JSON-ready figures."""

    name: str
    estimate: np.ndarray
    entry: dict


@dataclass
class ValidationResult:
    """Everything one validation render computed; nothing is written.

    ``normals`` float64 (N, 3) and ``weights`` (N,) sr, on a ``grid`` = (width, height)
    lat-long grid; ``reference`` float32 (N, 3) exact irradiance, map units x sr;
    ``estimates`` name -> float32 (N, 3); ``entries`` name -> figures (module docstring);
    ``recommended``, ``convergence``, ``glossy`` (or None) and ``notes`` as in ``metrics.json``.
    """

    table: object
    grid: tuple[int, int]
    normals: np.ndarray
    weights: np.ndarray
    spp: int
    seed: int
    reference: np.ndarray
    reference_facts: dict
    estimates: dict
    entries: dict
    recommended: dict
    convergence: dict
    glossy: dict | None = None
    notes: list = field(default_factory=list)

    @property
    def mean_reference(self) -> float:
        """Solid-angle-weighted mean reference luminance Ebar, map units x sr."""
        return float(self.reference_facts["mean_luminance"])

    def relative_error_image(self, name: str) -> np.ndarray:
        """|Y - Y_ref| / Ebar per normal of one estimator, float64 (height, width)."""
        p = self.table.primaries
        y = luminance(self.estimates[name], p, dtype=np.float64)
        yr = luminance(self.reference, p, dtype=np.float64)
        ebar = self.mean_reference
        rel = np.abs(y - yr) / ebar if ebar > 0 else np.zeros_like(y)
        return rel.reshape(self.grid[1], self.grid[0])

    def metrics(self, *, source: dict, files: dict) -> dict:
        """The ``metrics.json`` document (schema :data:`METRICS_SCHEMA`) of this render."""
        w, h = self.grid
        return {
            **METRICS_SCHEMA.header(),
            "caution": CAUTION,
            "tool_version": __version__,
            "source": source,
            "scale": (source or {}).get("scale"),
            "table": _table_info(self.table),
            "seed": self.seed,
            "random_streams": "numpy SeedSequence(seed, spawn_key=(purpose, crc32(estimator name), index))",
            "spp": self.spp,
            "normals": {"width": w, "height": h, "count": int(self.normals.shape[0]),
                        "placement": "pixel centres of a lat-long image in the table's convention",
                        "weighting": "averages over normals are weighted by the solid angle of each normal's cell"},
            "quantities": {
                "irradiance": "E(n) = integral of L(w) max(0, n.w) dw, map units x sr",
                "errors": "on luminance (table primaries) of the float32 images written; relative to the "
                          "solid-angle-weighted mean reference luminance Ebar",
                "variance_per_sample": "per-sample variance of a normal's luminance estimate / Ebar^2, weighted mean",
                "firefly_index": "largest per-sample contribution f w / p over all normals and samples / mean "
                                 "contribution",
                "peak_sample_share": "largest single-sample term of one estimate (contribution / spp) / Ebar",
                "efficiency": "1 / (variance_per_sample x time_per_sample_s), 1/s",
            },
            "reference": self.reference_facts,
            "estimators": self.entries,
            "recommended": self.recommended,
            "convergence": self.convergence,
            "glossy": self.glossy,
            "notes": list(self.notes),
            "files": files,
        }


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


def _largest_sample(samples, normals: np.ndarray, table) -> dict:
    c = samples.contributions
    normal, k = divmod(int(np.argmax(c)), c.shape[1])
    azimuth, elevation = direction_angles(normals[normal], up=table.up, rotation_deg=table.rotation_deg)
    strategy = samples.strategies[int(samples.strategy[normal, k])]
    return {"normal_azimuth_deg": round(float(azimuth), 3), "normal_elevation_deg": round(float(elevation), 3),
            "strategy": strategy}


def tuned_setting(table) -> dict | None:
    """The one-sample MIS setting a tuned table carries: ``{"estimator", "table_fraction"}``, or None."""
    rec = (getattr(table, "metadata", None) or {}).get("recommendation")
    if not isinstance(rec, dict):
        return None
    name, c = rec.get("estimator"), rec.get("table_fraction")
    if name not in valid_estimators("irradiance") or not isinstance(c, (int, float)) or not 0.0 < c < 1.0:
        return None
    return {"estimator": name, "table_fraction": float(c)}


def _run_spec(table, name: str) -> tuple[str, float | None]:
    """(estimator, table fraction or None) that the entry ``name`` runs."""
    if name == TUNED:
        t = tuned_setting(table)
        return t["estimator"], t["table_fraction"]
    return name, None


def _estimate_one(table, name: str, normals, weights, *, spp: int, seed, reference: np.ndarray, ebar: float,
                  reference_accuracy: float) -> EstimateResult:
    estimator, fraction = _run_spec(table, name)
    t0 = time.perf_counter()
    est, samples = estimate_irradiance(table, normals, estimator=estimator, spp=spp, seed=seed, return_samples=True,
                                       fractions=fraction)
    seconds = time.perf_counter() - t0
    est32 = est.astype(np.float32)
    err = error_metrics(est32, reference, weights, primaries=table.primaries)
    stats = sample_statistics(samples, weights, ebar)
    n_samples = normals.shape[0] * spp
    tps = seconds / n_samples
    var = stats["variance_per_sample"]
    bias, se = err["mean_bias"], stats["bias_se"]
    consistent = None
    if bias is not None and se is not None:
        consistent = bool(abs(bias) <= BIAS_SIGMAS * se + reference_accuracy)
    entry = {
        "kind": samples.kind,
        "strategies": list(samples.strategies),
        "heuristic": samples.heuristic,
        "fractions": None if samples.fractions is None else list(samples.fractions),
        "counts": None if samples.counts is None else list(samples.counts),
        "relative_rmse": json_number(err["relative_rmse"]),
        "relative_rmse_se": json_number(err["relative_rmse_se"]),
        "mean_bias": json_number(bias),
        "mean_bias_se": json_number(se),
        "bias_consistent_with_zero": consistent,
        "variance_per_sample": json_number(var),
        "variance_per_sample_se": json_number(stats["variance_per_sample_se"]),
        "firefly_index": json_number(samples.firefly_index()),
        "peak_sample_share": json_number(float(np.max(samples.contributions)) / spp / ebar) if ebar > 0 else None,
        "largest_sample": _largest_sample(samples, normals, table),
        "seconds": seconds,
        "time_per_sample_s": tps,
        "samples_per_second": n_samples / seconds if seconds > 0 else None,
        "efficiency": json_number(1.0 / (var * tps)) if var and var > 0 and tps > 0 else None,
    }
    if var == 0.0:
        entry["efficiency_note"] = "zero measured variance: efficiency unbounded (ranked first)"
    if name == TUNED:
        entry["tuned_from"] = {"estimator": estimator, "table_fraction": fraction,
                               "source": "the table's metadata['recommendation'] (build --tune)"}
    return EstimateResult(name, est32, entry)


def render_estimates(table, normals, weights, reference, names, *, spp: int, seed: int,
                     reference_accuracy: float = 0.0, purpose: str = "render",
                     progress: Progress | None = None) -> dict[str, EstimateResult]:
    """Run each named irradiance estimator on ``normals`` and compare it with ``reference``.

    ``normals`` float64 (N, 3) unit vectors (any placement), ``weights`` (N,) averaging
    weights (solid angles of a grid's cells, or ones), ``reference`` (N, 3) exact
    irradiance.  The random stream of each estimator depends on ``seed``, ``purpose``
    and its name only.  Returns name -> :class:`EstimateResult`.  Used by
    :func:`render_validation` and by the QA ``sampling`` check, so both grade the same code.
    """
    ref32 = np.asarray(reference, dtype=np.float32)
    ebar = error_metrics(ref32, ref32, weights, primaries=table.primaries)["reference_mean"]
    out = {}
    for name in names:
        if progress is not None:
            progress(f"estimate {name}")
        out[name] = _estimate_one(table, name, normals, weights, spp=spp, seed=stream(seed, purpose, name),
                                  reference=ref32, ebar=ebar, reference_accuracy=reference_accuracy)
    return out


def _convergence_ladder(spp: int) -> list[int]:
    """4, 16, 64, 256, ... up to 4 x spp (at least the first rung)."""
    ladder, v = [], 4
    while v <= 4 * spp:
        ladder.append(v)
        v *= 4
    return ladder or [4]


def _convergence(table, names, normals, weights, ref32, grid_wh, spp, seed) -> dict:
    idx, sub_wh = subgrid(*grid_wh, CONVERGENCE_GRID)
    ladder = _convergence_ladder(spp)
    series, errors = {}, {}
    for name in names:
        estimator, fraction = _run_spec(table, name)
        errs, ses = [], []
        for k, s in enumerate(ladder):
            est = estimate_irradiance(table, normals[idx], estimator=estimator, spp=s, fractions=fraction,
                                      seed=stream(seed, "convergence", name, k))
            m = error_metrics(est.astype(np.float32), ref32[idx], weights[idx], primaries=table.primaries)
            errs.append(json_number(m["relative_rmse"]))
            ses.append(json_number(m["relative_rmse_se"]))
        series[name], errors[name] = errs, ses
    same = tuple(sub_wh) == tuple(grid_wh)
    note = ("the render's own normals" if same else
            f"a strided {sub_wh[0]}x{sub_wh[1]} sub-grid of the render's {grid_wh[0]}x{grid_wh[1]} normals (the "
            "table beside the plot is on all of them: its figures are drawn as stars)")
    return {"spp": ladder, "normals": list(sub_wh), "grid": list(grid_wh), "relative_rmse": series,
            "relative_rmse_se": errors,
            "note": note + "; fresh samples at every count, so a jump means a rare bright sample was hit; "
                           "the band is +- one standard error over normals"}


def _plotted(series: dict, entries: dict, first_name: str | None) -> list[str]:
    """At most MAX_PLOT_SERIES names: single strategies first, then the MIS estimators of lowest final error.

    ``first`` (the least-variance estimator) is always drawn, first; the others stay in metrics.json.
    """
    names = list(series)
    first = [first_name] if first_name in names else []
    if len(names) <= MAX_PLOT_SERIES:
        # The N^-1/2 guide passes through the first series.
        return first + [n for n in names if n not in first]

    def final(name):
        v = [x for x in series[name] if x is not None]
        return v[-1] if v else float("inf")

    singles = [n for n in names if entries[n]["kind"] == "single"]
    mixed = sorted((n for n in names if entries[n]["kind"] != "single"), key=final)
    keep = list(first)
    for n in singles + mixed:
        if len(keep) < MAX_PLOT_SERIES and n not in keep:
            keep.append(n)
    return first + [n for n in names if n in keep and n not in first]


def estimator_list(estimators, table) -> tuple[list[str], list[str]]:
    """The estimator names to render (default :data:`DEFAULT_ESTIMATORS`) and notes on what was left out."""
    valid = valid_estimators("irradiance")
    notes = []
    if estimators is None:
        names = list(DEFAULT_ESTIMATORS)
        if table.compensated:
            names.remove("table")
            notes.append("the compensated table is valid only inside MIS: the lone 'table' estimator is left out")
        return names, notes
    names = [s.strip() for s in estimators.split(",")] if isinstance(estimators, str) else [str(s) for s in estimators]
    names = [estimator_name(n) for n in names if n]
    valid = valid + ((TUNED,) if tuned_setting(table) is not None else ())
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


def check_roughness(roughness) -> float | None:
    """GGX alpha in [1e-4, 1], or None."""
    if roughness is None:
        return None
    try:
        roughness = float(roughness)
    except (TypeError, ValueError):
        raise ValueError(f"roughness (GGX alpha) must be a number in [1e-4, 1], got {roughness!r}") from None
    if not (1e-4 <= roughness <= 1.0):
        raise ValueError(f"roughness (GGX alpha) must lie in [1e-4, 1], got {roughness}")
    return roughness


def render_validation(table, *, spp: int = 64, normals=(128, 64), estimators=None, roughness=None,
                      seed: int | None = 0, progress: Progress | None = None) -> ValidationResult:
    """Render irradiance over a grid of normals with each estimator and compare with the exact reference.

    Parameters
    ----------
    table : EnvTable
    spp : int >= 2
        Samples per normal.
    normals : (width, height) or "WxH"
        Lat-long grid of normals at pixel centres (default 128 x 64), in the table's convention.
    estimators : sequence or comma-separated str, optional
        Names from :func:`envsample.estimation.estimators.estimators`; default :data:`DEFAULT_ESTIMATORS`.
    roughness : float, optional
        GGX alpha in [1e-4, 1]: also compare glossy estimates with the quadrature reference
        (:func:`envsample.validation.glossy.glossy_check`).
    seed : int >= 0 or None
        Seed of every random stream (None: fresh entropy, recorded in the result).
    progress : callable(str), optional
        Called with a short label before each step.

    Returns
    -------
    ValidationResult
        Arrays and figures; :func:`envsample.reports.validation.write_validation` writes them.
    """
    def tick(label):
        if progress is not None:
            progress(label)

    spp = check_spp(spp)
    grid_wh = check_normals(normals)
    seed = check_seed(seed)
    roughness = check_roughness(roughness)
    names, notes = estimator_list(estimators, table)
    if tuned_setting(table) is not None and TUNED not in names:
        names.append(TUNED)
    n, weights = normal_grid(*grid_wh, up=table.up, rotation_deg=table.rotation_deg)
    tick("reference")
    t0 = time.perf_counter()
    ref = reference_irradiance(table.image, n, up=table.up, rotation_deg=table.rotation_deg)
    ref_seconds = time.perf_counter() - t0
    t0 = time.perf_counter()
    accuracy = reference_accuracy(table.image, n, up=table.up, rotation_deg=table.rotation_deg)
    accuracy_seconds = time.perf_counter() - t0
    ref32 = ref.astype(np.float32)
    ebar = error_metrics(ref32, ref32, weights, primaries=table.primaries)["reference_mean"]
    ref_acc = float(accuracy.get("relative_error_bound") or 0.0)
    results = render_estimates(table, n, weights, ref32, names, spp=spp, seed=seed, reference_accuracy=ref_acc,
                               progress=progress)
    entries = {name: r.entry for name, r in results.items()}
    recommended = recommendation(entries)
    tick("convergence")
    conv = _convergence(table, names, n, weights, ref32, grid_wh, spp, seed)
    # The series drawn first (the guide line's anchor) is the least-variance estimator: it depends on the
    # seed only, so the plot and metrics.json are the same in every run with this seed.
    conv["plotted"] = _plotted(conv["relative_rmse"], entries, recommended.get("lowest_variance"))
    conv["left_out"] = [name for name in names if name not in conv["plotted"]]
    glossy = None
    if roughness is not None:
        tick("glossy")
        glossy = glossy_check(table, roughness, spp, seed)
    return ValidationResult(
        table=table, grid=grid_wh, normals=n, weights=weights, spp=spp, seed=seed, reference=ref32,
        reference_facts={**accuracy, "seconds": ref_seconds, "accuracy_seconds": accuracy_seconds,
                         "mean_luminance": ebar},
        estimates={name: r.estimate for name, r in results.items()}, entries=entries, recommended=recommended,
        convergence=conv, glossy=glossy, notes=notes,
    )
