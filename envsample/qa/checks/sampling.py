"""The ``sampling`` check: how noisy cosine-only, table-only and MIS irradiance estimates of the map are.

Estimates and their figures come from :func:`envsample.validation.render.render_estimates`,
the code ``envsample verify`` uses.  Test normals: the spherical Fibonacci lattice (Gonzalez, A.
(2010). Measurement of areas on a sphere using Fibonacci and latitude-longitude lattices.
Mathematical Geosciences 42(1), 49-64).  Estimators and the balance heuristic: Veach (1997),
chapter 9.
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.color import luminance
from envsample.core.constants import SUN_ANGULAR_DIAMETER_DEG, SUN_SOLID_ANGLE_SR
from envsample.core.latlong import reduce_power
from envsample.qa.context import CheckContext
from envsample.qa.emitters import Emitter
from envsample.qa.messages import fmt, pct
from envsample.qa.results import CheckResult, NotApplicable
from envsample.reference.irradiance import reference_irradiance
from envsample.sampling.table import build_table
from envsample.validation.render import render_estimates

#: The MIS estimator the sampling check always reports (multi-sample, balance heuristic; Veach 1997, ch. 9).
RECOMMENDED_ESTIMATOR = "mis-balance"


def _fibonacci_normals(n: int) -> np.ndarray:
    """``n`` unit vectors on the spherical Fibonacci lattice (Gonzalez 2010), float64 (n, 3), y up."""
    i = np.arange(n) + 0.5
    y = 1.0 - 2.0 * i / n
    r = np.sqrt(np.maximum(0.0, 1.0 - y * y))
    golden = math.pi * (3.0 - math.sqrt(5.0))
    phi = golden * i
    return np.column_stack([r * np.cos(phi), y, r * np.sin(phi)])


#: Figures of each estimator the check reports (those of the validation render that do not depend on timing).
_FIGURES = ("relative_rmse", "mean_bias", "mean_bias_se", "peak_sample_share", "firefly_index")


def _estimate_errors(table, normals, reference, names, *, spp: int, repeats: int, seed: int) -> dict:
    """Figures of each estimator over ``repeats`` independent estimates per normal, from the validation render.

    :func:`envsample.validation.render.render_estimates` runs the estimators (the code
    ``envsample verify`` uses) on every normal repeated ``repeats`` times with equal
    weights, so its figures pool normals and repeats and are scaled by the mean
    reference irradiance; a normal facing black ground (E ~ 0) does not make them
    meaningless:

    * relative RMSE = sqrt(mean over normals and repeats of (E_est - E_ref)^2) / mean(E_ref);
    * peak sample share = largest single-sample term of one estimate (contribution / spp)
      divided by mean(E_ref): above 1, one sample alone outshines a typical pixel;
    * firefly index = largest sample / mean sample, pooled (the figure ``envsample verify`` reports).
    """
    n = normals.shape[0]
    many = np.repeat(normals, repeats, axis=0)
    ref = np.repeat(np.asarray(reference, dtype=np.float32), repeats, axis=0)
    results = render_estimates(table, many, np.ones(n * repeats), ref, names, spp=spp, seed=seed, purpose="qa")
    y_ref = luminance(np.asarray(reference, dtype=np.float32), table.primaries, dtype=np.float64)
    out = {}
    for name, r in results.items():
        y = luminance(r.estimate, table.primaries, dtype=np.float64).reshape(n, repeats)
        figures = {k: r.entry[k] for k in _FIGURES}
        figures["worst_normal"] = int(np.argmax(np.mean((y - y_ref[:, None]) ** 2, axis=1)))
        out[name] = figures
    return out


def _min_table_width(e: Emitter) -> int:
    """Narrowest table (2:1) whose cell at the emitter's elevation is at most 4x the emitter's solid angle.

    A cell of a w x w/2 table spans about (2 pi / w)(2 pi / w) cos(el) sr; below this
    width the sun shares its cell with so much sky that table samples mostly miss it.
    """
    omega = max(e.solid_angle_sr, SUN_SOLID_ANGLE_SR)
    c = max(math.cos(math.radians(e.elevation_deg)), 1e-3)
    return int(math.ceil(2.0 * math.pi * math.sqrt(c / (4.0 * omega))))


def check_sampling(ctx: CheckContext) -> CheckResult:
    """Noise of cosine-only, table-only and MIS irradiance estimates on a reduced copy of the map.

    The map and its table are reduced together (power-preserving box filter of
    :func:`envsample.core.latlong.reduce_power`): the table then matches its map, as the
    default full-resolution table matches the full map, and the cost does not grow
    with the map.  References are exact (:func:`envsample.reference.irradiance.reference_irradiance`).
    """
    s = ctx.settings("sampling")
    prim = ctx.profile.primaries
    size = (min(s["table_width"], ctx.width), min(s["table_height"], ctx.height))
    top = ctx.scan.raw_max
    vr = ctx.settings("value-range")
    if not (ctx.total_power > 0.0 and vr["fail_below_peak"] <= top <= vr["fail_above"]):
        raise NotApplicable("the map has no usable light (see value-range)")
    if size == (ctx.width, ctx.height):
        small = ctx.rgb
    else:
        small = ctx.scan.reduced if ctx.scan.reduced is not None else reduce_power(ctx.rgb, size)
    table = build_table(small, primaries=prim)
    normals = _fibonacci_normals(s["normals"])
    ref = reference_irradiance(small, normals)
    graded = s["estimator"]
    names = list(dict.fromkeys(["cosine", "table", RECOMMENDED_ESTIMATOR, graded]))
    errors = _estimate_errors(table, normals, ref, names, spp=s["spp"], repeats=s["repeats"], seed=s["seed"])
    rec = errors[graded]
    advice = []
    mis = errors[RECOMMENDED_ESTIMATOR]
    if graded != RECOMMENDED_ESTIMATOR and mis["relative_rmse"] < 0.5 * rec["relative_rmse"]:
        advice.append(f"sample with MIS ({RECOMMENDED_ESTIMATOR}): its error is "
                      f"{fmt(rec['relative_rmse'] / max(mis['relative_rmse'], 1e-300))}x smaller than {graded}'s")
    sunlike = [e for e in ctx.emitters if e.diameter_deg <= ctx.settings("sun")["compact_max_deg"]]
    if sunlike and sunlike[0].share >= ctx.settings("sun")["min_share"]:
        e = sunlike[0]
        wmin = _min_table_width(e)
        if wmin < ctx.width:
            advice.append(f"keep the sampling table at least {wmin}x{max(1, wmin // 2)} "
                          f"(full size {ctx.width}x{ctx.height}): coarser cells blur the sun into the sky")
        if e.share >= s["analytic_light_share"]:
            advice.append(f"separate the sun ({pct(e.share)} of the light) into an analytic light "
                          f"of {SUN_ANGULAR_DIAMETER_DEG:.3f} deg and remove it from the map: envsample split")
    details = {"spp": s["spp"], "repeats": s["repeats"], "normals": s["normals"], "seed": s["seed"],
               "table_size": list(size), "estimator": graded,
               "mean_reference": float(luminance(ref.astype(np.float32), prim, dtype=np.float64).mean()),
               "estimators": errors, "advice": advice}
    summary = ", ".join(f"{k} {fmt(v['relative_rmse'])}" for k, v in errors.items())
    ff = ", ".join(f"{k} {fmt(v['firefly_index'])}" for k, v in errors.items())
    ps = ", ".join(f"{k} {fmt(v['peak_sample_share'])}" for k, v in errors.items())
    msg = (f"{s['spp']} spp on the map reduced to {size[0]}x{size[1]}: relative RMSE {summary}; "
           f"firefly index (largest / mean sample) {ff}; peak sample share (largest sample / mean E) {ps}")
    value = rec["relative_rmse"]
    if value > s["fail_rmse"]:
        sev, limit = "fail", s["fail_rmse"]
    elif value > s["warn_rmse"]:
        sev, limit = "warn", s["warn_rmse"]
    elif rec["peak_sample_share"] > s["warn_peak_share"]:
        sev, limit = "warn", s["warn_peak_share"]
        msg += f" ({graded} has fireflies)"
    else:
        sev, limit = "pass", s["warn_rmse"]
    remedy = "; ".join(advice) if sev != "pass" else ""
    return CheckResult("sampling", sev, value=value, threshold=limit, unit="ratio", message=msg, remedy=remedy,
                       details=details)
