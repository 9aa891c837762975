"""Verify a split: the sky's table plus the analytic sun against the original map, at equal samples.

Public objects
--------------
:data:`UNSPLIT_ESTIMATORS`, :data:`SPLIT_ESTIMATORS`  the estimators compared by default.
:class:`SplitComparison`  the figures, JSON-ready (:meth:`SplitComparison.to_dict`).
:func:`compare_split`     render both scenes over a grid of normals and compare them.

Both scenes are judged against the **original map's** exact irradiance (Arvo 1995; the map
piecewise constant per cell, :func:`envsample.reference.irradiance.reference_irradiance`):
the split must light the scene the same.  ``reference_difference`` is the exact difference
between the split's own reference (sky map plus the disk, :mod:`envsample.reference.sun`)
and the original's, relative to the mean reference: what the fill and the disk's shape
change, with no Monte Carlo noise.  Each estimator's ``mean_bias`` against the original
must then lie within 4 standard errors plus that difference (``consistent``).  The error
figures (relative RMSE, firefly index) are those of :mod:`envsample.validation.metrics`,
at the same samples per normal for every estimator.  Estimates for asset preparation, not
certified lighting calculations.

References
----------
- Veach, E. (1997). Robust Monte Carlo Methods for Light Transport Simulation. PhD thesis,
  Stanford University, chapter 9 (multiple importance sampling).
- Arvo, J. (1995). Applications of irradiance tensors to the simulation of non-Lambertian
  phenomena. SIGGRAPH 95.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from envsample.core.text import CAUTION
from envsample.estimation.estimators import estimate_irradiance
from envsample.reference.irradiance import reference_irradiance
from envsample.reference.sun import reference_split_irradiance
from envsample.validation.grid import normal_grid
from envsample.validation.metrics import error_metrics, json_number, sample_statistics
from envsample.validation.streams import check_normals, check_seed, check_spp, stream

__all__ = ["UNSPLIT_ESTIMATORS", "SPLIT_ESTIMATORS", "SplitComparison", "compare_split"]

#: Estimators run on the unsplit map's table.
UNSPLIT_ESTIMATORS = ("table", "mis-balance")
#: Estimators run on the split (sky table + sun).
SPLIT_ESTIMATORS = ("sun-mis-balance", "sun-one-sample-balance")

#: Standard errors allowed between an unbiased estimate and the reference.
BIAS_SIGMAS = 4.0


@dataclass
class SplitComparison:
    """Figures of :func:`compare_split`: one entry per estimator and scene, and the references' difference."""

    spp: int
    seed: int
    grid: tuple[int, int]
    reference_difference: float
    entries: dict = field(default_factory=dict)

    @property
    def consistent(self) -> bool:
        """Every split estimate agrees with the original map's irradiance within its Monte Carlo error."""
        return all(e["consistent"] for e in self.entries.values() if e["scene"] == "split")

    def to_dict(self) -> dict:
        return {"spp": self.spp, "seed": self.seed, "normals": list(self.grid),
                "reference": "exact irradiance of the original map (Arvo 1995)",
                "reference_difference": self.reference_difference, "consistent": self.consistent,
                "estimators": self.entries, "caution": CAUTION}


def _entry(scene, table, normals, weights, name, spp, seed, ref32, ebar, ref_diff, sun=None) -> dict:
    est, samples = estimate_irradiance(table, normals, estimator=name, spp=spp, sun=sun,
                                       seed=stream(seed, "split", f"{scene}:{name}"), return_samples=True)
    err = error_metrics(est.astype(np.float32), ref32, weights, primaries=table.primaries)
    stats = sample_statistics(samples, weights, ebar)
    bias, se = err["mean_bias"], stats["bias_se"]
    consistent = bool(bias is not None and se is not None and abs(bias) <= BIAS_SIGMAS * se + abs(ref_diff))
    return {"scene": scene, "estimator": name, "relative_rmse": json_number(err["relative_rmse"]),
            "firefly_index": json_number(samples.firefly_index()), "mean_bias": json_number(bias),
            "mean_bias_se": json_number(se), "variance_per_sample": json_number(stats["variance_per_sample"]),
            "consistent": consistent}


def compare_split(original_table, sky_table, sun, *, spp: int = 64, normals=(64, 32), seed: int = 0,
                  unsplit=UNSPLIT_ESTIMATORS, split=SPLIT_ESTIMATORS) -> SplitComparison:
    """Render the unsplit map's table and the split (``sky_table`` + ``sun``) at equal ``spp``; compare.

    ``original_table`` and ``sky_table`` are :class:`envsample.sampling.table.EnvTable` of the
    same convention; ``sun`` a :class:`envsample.sampling.sun.SunLight`.  ``normals`` is the
    lat-long grid of normals (width, height); ``unsplit`` and ``split`` the estimator names.
    """
    spp, grid, seed = check_spp(spp), check_normals(normals), check_seed(seed)
    t = original_table
    n, weights = normal_grid(*grid, up=t.up, rotation_deg=t.rotation_deg)
    ref = reference_irradiance(t.image, n, up=t.up, rotation_deg=t.rotation_deg).astype(np.float32)
    ebar = error_metrics(ref, ref, weights, primaries=t.primaries)["reference_mean"]
    ref_split = reference_split_irradiance(sky_table.image, sun, n, up=t.up, rotation_deg=t.rotation_deg)
    diff = error_metrics(ref_split.astype(np.float32), ref, weights, primaries=t.primaries)["mean_bias"] or 0.0
    out = SplitComparison(spp=spp, seed=seed, grid=grid, reference_difference=float(diff))
    for name in unsplit:
        out.entries[f"unsplit:{name}"] = _entry("unsplit", t, n, weights, name, spp, seed, ref, ebar, 0.0)
    for name in split:
        out.entries[f"split:{name}"] = _entry("split", sky_table, n, weights, name, spp, seed, ref, ebar, diff,
                                              sun=sun)
    return out
