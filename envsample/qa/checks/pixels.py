"""Checks of pixel values: ``nan``, ``inf``, ``negative``, ``value-range``.

float32 limits: smallest normal 1.18e-38, largest finite 3.4e38 (IEEE 754-2008 binary32).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.qa.context import CheckContext
from envsample.qa.messages import fmt, pct
from envsample.qa.results import CheckResult


def _count_check(ctx: CheckContext, check_id: str, bad: np.ndarray, what: str) -> CheckResult:
    s = ctx.settings(check_id)
    count = int(bad.sum())
    if count <= s["max_pixels"]:
        return CheckResult(check_id, "pass", value=count, threshold=s["max_pixels"], unit="px",
                           message=f"no {what} pixels" if count == 0 else f"{count} {what} pixels (allowed)")
    r, c = np.argwhere(bad)[0]
    frac = count / bad.size
    return CheckResult(
        check_id, "fail", value=count, threshold=s["max_pixels"], unit="px",
        message=(f"{count} pixel{'s' if count > 1 else ''} ({pct(frac)}) "
                 f"{'have' if count > 1 else 'has'} a {what} channel, first at row {r}, column {c}"),
        remedy="fix them at the source, or fill them from their neighbours (envsample fix --fill-nonfinite)",
        details={"first_row": int(r), "first_column": int(c), "fraction": frac},
    )


def _no_bad_pixels(ctx: CheckContext, check_id: str, what: str) -> CheckResult:
    s = ctx.settings(check_id)
    return CheckResult(check_id, "pass", value=0, threshold=s["max_pixels"], unit="px", message=f"no {what} pixels")


def check_nan(ctx: CheckContext) -> CheckResult:
    if ctx.all_finite:  # the common case costs one pass instead of a full boolean image
        return _no_bad_pixels(ctx, "nan", "NaN")
    return _count_check(ctx, "nan", np.isnan(ctx.raw).any(axis=2), "NaN")


def check_inf(ctx: CheckContext) -> CheckResult:
    if ctx.all_finite:
        return _no_bad_pixels(ctx, "inf", "infinite")
    return _count_check(ctx, "inf", np.isinf(ctx.raw).any(axis=2), "infinite")


def check_negative(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("negative")
    warn, fail = 100.0 * s["warn_above_fraction"], 100.0 * s["fail_above_fraction"]
    if ctx.clean:
        return CheckResult("negative", "pass", value=0.0, threshold=warn, unit="%", message="no negative values")
    with np.errstate(invalid="ignore"):
        neg = (ctx.raw < 0).any(axis=2)
    if not neg.any():
        return CheckResult("negative", "pass", value=0.0, threshold=warn, unit="%", message="no negative values")
    frac = float((neg * ctx.solid_angles).sum() / (4.0 * math.pi))
    low = float(np.min(np.where(ctx.finite, ctx.raw, 0.0)))
    details = {"pixels": int(neg.sum()), "most_negative": low, "fraction": frac}
    n = int(neg.sum())
    msg = f"negative values over {pct(frac)} of the sphere ({n} pixel{'' if n == 1 else 's'}, down to {fmt(low)})"
    share = 100.0 * frac
    if frac > s["fail_above_fraction"]:
        return CheckResult("negative", "fail", value=share, threshold=fail, unit="%", message=msg,
                           remedy="redo the colour conversion (negatives are out-of-gamut colours); clamp only a few",
                           details=details)
    if frac > s["warn_above_fraction"]:
        return CheckResult("negative", "warn", value=share, threshold=warn, unit="%", message=msg,
                           remedy="clamp them to 0 (envsample fix --clamp-negative) or convert to a wider gamut",
                           details=details)
    return CheckResult("negative", "pass", value=share, threshold=warn, unit="%", message=msg, details=details)


def check_value_range(ctx: CheckContext) -> CheckResult:
    """Extreme but valid maps: all black, denormal only, or so bright that float32 sums overflow."""
    s = ctx.settings("value-range")
    top = ctx.scan.raw_max
    details = {"max": top, "fail_above": s["fail_above"], "fail_below_peak": s["fail_below_peak"]}
    if not top > 0.0:
        return CheckResult("value-range", "fail", value=top, threshold=s["fail_below_peak"], message=(
            "the map is black (no value above 0): no light to sample or to light a scene with"),
            remedy="re-export the map (a black render or a failed conversion); there is nothing to fix",
            details=details)
    if top < s["fail_below_peak"]:
        kind = "denormal" if top < float(np.finfo(np.float32).tiny) else "tiny"
        return CheckResult("value-range", "fail", value=top, threshold=s["fail_below_peak"], message=(
            f"no light: the brightest value is {fmt(top)}, {kind} in float32, below {fmt(s['fail_below_peak'])}; "
            "sums and pdfs lose all precision"),
            remedy="re-export with the right exposure, or rescale it (envsample fix --exposure 1)",
            details=details)
    if top > s["fail_above"]:
        return CheckResult("value-range", "fail", value=top, threshold=s["fail_above"], message=(
            f"values up to {fmt(top)}, above {fmt(s['fail_above'])}: float32 sums and products over the map overflow"),
            remedy="rescale the map (envsample fix --exposure 1) or re-export it with the right exposure",
            details=details)
    return CheckResult("value-range", "pass", value=top, threshold=s["fail_above"],
                       message=f"brightest value {fmt(top)}, within float32's working range", details=details)
