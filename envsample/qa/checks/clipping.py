"""The ``clipping`` check: values clamped at the half-float maximum, and plateaus at the top.

Half-float limit 65504: IEEE 754-2008 binary16.
"""

from __future__ import annotations

import numpy as np

from envsample.core.constants import HALF_FLOAT_MAX
from envsample.lights.plateau import find_plateau, plateau_is_clipped
from envsample.qa.context import CheckContext
from envsample.qa.emitters import emitter_mask
from envsample.qa.messages import fmt
from envsample.qa.results import CheckResult


def _plateau(ctx: CheckContext, region: np.ndarray | None, s: dict) -> dict | None:
    """The largest plateau at the maximum of ``region`` (whole map if None): :func:`find_plateau`."""
    return find_plateau(ctx.max_channel, ctx.luminance, ctx.row_solid_angles, median_luminance=ctx.median_luminance,
                        region=region, constant_rows=ctx.constant_rows, tolerance=s["plateau_relative_tolerance"])


def _plateau_is_clipped(p: dict, s: dict, *, shoulder: bool = True) -> bool:
    """:func:`plateau_is_clipped` with the ``[clipping]`` thresholds of the profile."""
    return plateau_is_clipped(p, min_pixels=s["plateau_min_pixels"], min_sun_multiple=s["plateau_min_sun_multiple"],
                              min_contrast=s["plateau_min_contrast"], min_shoulder=s["plateau_min_shoulder"],
                              shoulder=shoulder)


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
