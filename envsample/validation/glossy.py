"""The glossy check of the validation render: GGX estimates against the quadrature reference.

A few view angles on a coarse grid of normals; estimates and reference see the same map,
reduced (power-preserving) to at most :data:`GLOSSY_MAP` because the quadrature reference
(:func:`envsample.reference.glossy.reference_glossy`) costs in proportion to the cells.
The BRDF is GGX with F = 1 and the height-correlated Smith G2 (Walter et al. 2007; Heitz 2014),
shared by reference and estimators.
"""

from __future__ import annotations

import time

import numpy as np

from envsample.core.color import luminance
from envsample.core.latlong import reduce_power
from envsample.estimation.estimators import estimate_glossy
from envsample.reference.glossy import reference_glossy, reference_glossy_accuracy
from envsample.sampling.table import build_table
from envsample.validation.grid import normal_grid, view_directions
from envsample.validation.metrics import BIAS_SIGMAS, error_metrics, json_number, sample_statistics
from envsample.validation.streams import stream

__all__ = ["GLOSSY_ESTIMATORS", "GLOSSY_VIEW_DEG", "GLOSSY_NORMALS", "GLOSSY_MAP", "glossy_table", "glossy_check"]


#: Estimators of the small glossy check ("bsdf" is GGX visible-normal sampling there).
GLOSSY_ESTIMATORS = ("bsdf", "table", "mis-balance", "mis-power", "one-sample-balance")


#: View angles (degrees from the normal) of the glossy check.
GLOSSY_VIEW_DEG = (0.0, 45.0, 75.0)


#: Normals of the glossy check (a coarse lat-long grid, width x height).
GLOSSY_NORMALS = (8, 4)


#: Largest map (width, height) of the glossy check; larger maps are reduced (power-preserving).
#: 256x128 (4x the cells of the former 128x64) now costs less than 128x64 did (benchmarks/bench_reference.py).
GLOSSY_MAP = (256, 128)


#: (normal, view) pairs per view angle on which the glossy reference's accuracy is measured.
GLOSSY_ACCURACY_PAIRS = 4


def glossy_table(table):
    """The table of the glossy check: the map reduced to at most GLOSSY_MAP (power-preserving), same options.

    The quadrature reference's cost grows with the number of cells (a compiled leaf rule, one
    (normal, view) pair at a time); estimates and reference then both see the same reduced map, which is enough to
    validate BSDF sampling and the MIS weights.
    """
    gw, gh = GLOSSY_MAP
    if table.width <= gw:
        return table, [table.width, table.height]
    image = reduce_power(table.image, (gw, gh))
    opts = table.metadata["options"]
    small = build_table(image, primaries=table.primaries, mapping=table.mapping, uniform_mix=table.uniform_mix,
                        up=table.up, rotation_deg=table.rotation_deg, compensate=bool(opts.get("compensate", False)))
    return small, [gw, gh]


def glossy_check(table, roughness: float, spp: int, seed: int) -> dict:
    """GGX glossy estimates against reference.reference_glossy: a few view angles on a coarse grid of normals."""
    gtable, map_wh = glossy_table(table)
    gw, gh = GLOSSY_NORMALS
    normals, weights = normal_grid(gw, gh, up=gtable.up, rotation_deg=gtable.rotation_deg)
    names = [e for e in GLOSSY_ESTIMATORS if not (e == "table" and gtable.compensated)]
    kw = {"up": gtable.up, "rotation_deg": gtable.rotation_deg}
    per = {n: {"relative_rmse": [], "mean_bias": [], "mean_bias_se": [], "variance_per_sample": [],
               "firefly_index": [], "bias_consistent_with_zero": []} for n in names}
    ref_seconds, accuracy = 0.0, 0.0
    for k, angle in enumerate(GLOSSY_VIEW_DEG):
        wo = view_directions(normals, angle)
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
                                           seed=stream(seed, "glossy", name, k), return_samples=True)
            m = error_metrics(est.astype(np.float32), ref32, weights, primaries=gtable.primaries)
            st = sample_statistics(samples, weights, ebar) if ebar > 0 else {}
            e = per[name]
            e["relative_rmse"].append(json_number(m["relative_rmse"]))
            e["mean_bias"].append(json_number(m["mean_bias"]))
            e["mean_bias_se"].append(json_number(st.get("bias_se")))
            e["variance_per_sample"].append(json_number(st.get("variance_per_sample")))
            e["firefly_index"].append(json_number(samples.firefly_index()))
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
