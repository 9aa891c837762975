"""The ``clipping`` check: values clamped at the half-float maximum, and plateaus at the top.

Half-float limit 65504: IEEE 754-2008 binary16.
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.constants import HALF_FLOAT_MAX, SUN_SOLID_ANGLE_SR
from envsample.qa.context import CheckContext
from envsample.qa.emitters import emitter_mask, label_wrapped, ring
from envsample.qa.messages import fmt
from envsample.qa.results import CheckResult


def _plateau(ctx: CheckContext, region: np.ndarray | None, s: dict) -> dict | None:
    """The largest plateau at the maximum of ``region`` (whole map if None); its size, contrast and shoulder."""
    m = ctx.max_channel
    values = m if region is None else np.where(region, m, -np.inf)
    level = float(values.max())
    if not level > 0.0:
        return None
    mask = values >= level * (1.0 - s["plateau_relative_tolerance"])
    # Rows of identical pixels are an azimuth-independent sky (and pole rows image one
    # direction): equal values there are not clipping.
    mask &= ~ctx.constant_rows[:, None]
    if not mask.any():
        return None
    labels, n = label_wrapped(mask)
    # Work in the band of rows that holds the mask (plus the shoulder's margin): plateaus
    # are small, and full-size passes would dominate the check on big maps.
    hit = np.nonzero(mask.any(axis=1))[0]
    lo, hi = max(0, int(hit[0]) - 3), min(ctx.height, int(hit[-1]) + 4)
    lab = labels[lo:hi]
    rows, _ = np.nonzero(lab)
    omega = np.bincount(lab[lab > 0], weights=ctx.row_solid_angles[rows + lo], minlength=n + 1)[1:]
    k = int(np.argmax(omega)) + 1
    comp = lab == k
    # The shoulder: pixels two steps out from the plateau.  A clipped smooth source
    # (sun with glare, a blown-out sky) still rises towards the plateau there; a
    # sharp-edged uniform emitter (a synthetic area light) is back to its background.
    inner = comp | ring(comp)
    ring2 = ring(inner)
    lum = ctx.luminance[lo:hi]
    top = float(lum[comp].mean())
    bg = ctx.median_luminance
    if ring2.any() and top > bg:
        shoulder = float(np.median(np.clip((lum[ring2] - bg) / (top - bg), 0.0, 1.0)))
    else:
        shoulder = 0.0
    row_idx = np.nonzero(comp.any(axis=1))[0] + lo
    return {
        "level": level,
        "pixels": int(comp.sum()),
        "solid_angle_sr": float(omega[k - 1]),
        "sun_multiple": float(omega[k - 1] / SUN_SOLID_ANGLE_SR),
        "contrast": top / bg if bg > 0 else math.inf,
        "shoulder": shoulder,
        "rows": [int(row_idx.min()), int(row_idx.max())],
    }


def _plateau_is_clipped(p: dict, s: dict, *, shoulder: bool = True) -> bool:
    """Large, bright and (with ``shoulder``) still rising just outside: the signs of clipping."""
    big = (p["pixels"] >= s["plateau_min_pixels"] and p["sun_multiple"] >= s["plateau_min_sun_multiple"]
           and p["contrast"] >= s["plateau_min_contrast"])
    return big and (not shoulder or p["shoulder"] >= s["plateau_min_shoulder"])


def check_clipping(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("clipping")
    with np.errstate(invalid="ignore"):
        at_half = (ctx.raw == np.float32(HALF_FLOAT_MAX)).any(axis=2)
    n_half = int(at_half.sum())
    if n_half >= s["half_max_pixels"] and n_half > 0:
        return CheckResult(
            "clipping", "fail", value=n_half, threshold=s["half_max_pixels"],
            message=f"{n_half} pixels hold {HALF_FLOAT_MAX:g}, the largest half float: values were clamped when written",
            remedy="write float32, or scale the map down before writing half (and record the scale)",
            details={"half_max_pixels": n_half},
        )
    candidates = []
    whole = _plateau(ctx, None, s)
    if whole is not None:
        candidates.append(("maximum", whole))
    if ctx.emitters:
        region = emitter_mask(ctx, ctx.emitters[0])
        if region is not None:
            flat = _plateau(ctx, region, s)
            if flat is not None and (whole is None or flat["level"] != whole["level"]):
                candidates.append(("brightest emitter", flat))
    for where, p in candidates:
        if _plateau_is_clipped(p, s):
            shape = "flat-topped sun" if where == "brightest emitter" else "plateau at the maximum"
            return CheckResult(
                "clipping", "fail", value=p["pixels"], threshold=s["plateau_min_pixels"],
                message=(f"{shape}: {p['pixels']} pixels ({fmt(p['sun_multiple'])}x the sun's solid angle) "
                         f"equal {fmt(p['level'])}, {fmt(p['contrast'])}x the median"),
                remedy="recapture or re-merge the brightest source with shorter exposures; or replace it by an analytic light",
                details={"plateau": p, "where": where},
            )
    note = "no plateau at the maximum"
    details = {}
    for where, p in candidates:
        details["plateau"] = p
        note = (f"largest plateau at the maximum: {p['pixels']} px, {fmt(p['sun_multiple'])}x the sun's solid angle "
                "(not clipped)")
        if _plateau_is_clipped(p, s, shoulder=False):
            note = (f"{p['pixels']} pixels share the maximum inside a sharp-edged emitter "
                    "(a uniform area light; a capture would show noise)")
        break
    value = details.get("plateau", {}).get("pixels", 0)
    return CheckResult("clipping", "pass", value=value, threshold=s["plateau_min_pixels"], message=note,
                       details=details)
