"""Checks of pixel values: ``nan``, ``inf``, ``negative``.
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
        return CheckResult(check_id, "pass", value=count, threshold=s["max_pixels"],
                           message=f"no {what} pixels" if count == 0 else f"{count} {what} pixels (allowed)")
    r, c = np.argwhere(bad)[0]
    frac = count / bad.size
    return CheckResult(
        check_id, "fail", value=count, threshold=s["max_pixels"],
        message=(f"{count} pixel{'s' if count > 1 else ''} ({pct(frac)}) "
                 f"{'have' if count > 1 else 'has'} a {what} channel, first at row {r}, column {c}"),
        remedy="fix them at the source, or repair them to 0 (envsample build --repair; validate_map(repair=True) in Python)",
        details={"first_row": int(r), "first_column": int(c), "fraction": frac},
    )


def _no_bad_pixels(ctx: CheckContext, check_id: str, what: str) -> CheckResult:
    s = ctx.settings(check_id)
    return CheckResult(check_id, "pass", value=0, threshold=s["max_pixels"], message=f"no {what} pixels")


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
    if ctx.clean:
        return CheckResult("negative", "pass", value=0.0, threshold=s["warn_above_fraction"],
                           message="no negative values")
    with np.errstate(invalid="ignore"):
        neg = (ctx.raw < 0).any(axis=2)
    frac = float((neg * ctx.solid_angles).sum() / (4.0 * math.pi))
    if not neg.any():
        return CheckResult("negative", "pass", value=0.0, threshold=s["warn_above_fraction"],
                           message="no negative values")
    low = float(np.min(np.where(ctx.finite, ctx.raw, 0.0)))
    details = {"pixels": int(neg.sum()), "most_negative": low}
    msg = f"negative values over {pct(frac)} of the sphere ({int(neg.sum())} pixels, down to {fmt(low)})"
    if frac > s["fail_above_fraction"]:
        return CheckResult("negative", "fail", value=frac, threshold=s["fail_above_fraction"], message=msg,
                           remedy="redo the colour conversion (negatives are out-of-gamut colours); clamp only a few",
                           details=details)
    if frac > s["warn_above_fraction"]:
        return CheckResult("negative", "warn", value=frac, threshold=s["warn_above_fraction"], message=msg,
                           remedy="clamp them to 0 (validate_map does) or convert to a wider gamut",
                           details=details)
    return CheckResult("negative", "pass", value=frac, threshold=s["warn_above_fraction"], message=msg,
                       details=details)
