"""Checks of the projection: ``aspect``, ``resolution``, ``seam``, ``poles``, ``orientation``.

The map follows :mod:`envsample.core.sphere`: row 0 is the zenith; the seam joins the left
and right edges; each pole row images one direction.
"""

from __future__ import annotations

import numpy as np

from envsample.core.constants import SUN_ANGULAR_DIAMETER_DEG
from envsample.core.sphere import pixel_center_angles, row_cos_edges
from envsample.qa.context import CheckContext
from envsample.qa.messages import deg, fmt, pct
from envsample.qa.results import CheckResult


def check_aspect(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("aspect")
    ratio = ctx.width / ctx.height
    ok = abs(ratio / s["ratio"] - 1.0) <= s["tolerance"] + 1e-12
    msg = f"{ctx.width}x{ctx.height} is {fmt(ratio, 4)}:1"
    if ok:
        return CheckResult("aspect", "pass", value=ratio, threshold=s["ratio"], message=msg)
    return CheckResult("aspect", "fail", value=ratio, threshold=s["ratio"],
                       message=f"{msg}, not the {fmt(s['ratio'])}:1 of an equirectangular map",
                       remedy="re-project to equirectangular (2:1); convert cube maps or mirror balls first")


def check_resolution(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("resolution")
    w = ctx.width
    step = 360.0 / w
    msg = f"{w}x{ctx.height}: one pixel spans {fmt(step)} deg (the sun {SUN_ANGULAR_DIAMETER_DEG:.3f} deg)"
    if w < s["fail_below_width"]:
        return CheckResult("resolution", "fail", value=w, threshold=s["fail_below_width"],
                           message=f"{msg}; below {s['fail_below_width']} px wide",
                           remedy="supply a larger map")
    if w < s["warn_below_width"]:
        return CheckResult("resolution", "warn", value=w, threshold=s["warn_below_width"],
                           message=f"{msg}; below {s['warn_below_width']} px wide, reflections will be blurry",
                           remedy="use this map for diffuse lighting only, or supply a larger one")
    return CheckResult("resolution", "pass", value=w, threshold=s["warn_below_width"], message=msg)


def check_seam(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("seam")
    cap = ctx.quantile(s["clamp_percentile"] / 100.0)
    lc = np.minimum(ctx.luminance, np.float32(cap))
    edge = np.abs(lc[:, 0] - lc[:, -1]).astype(np.float64)
    if ctx.width > 1:
        # The typical neighbouring-column step of a row: the median over at most 1024
        # evenly spread column pairs estimates it as well as all of them, at a fraction of the cost.
        cols = np.unique(np.linspace(0, ctx.width - 2, min(ctx.width - 1, 1024)).astype(np.int64))
        typical = np.median(np.abs(lc[:, cols + 1] - lc[:, cols]), axis=1).astype(np.float64)
    else:
        typical = np.zeros(ctx.height)
    row_mean = lc.mean(axis=1, dtype=np.float64)
    scale = np.maximum(typical, s["relative_floor"] * row_mean)
    steps = edge > s["step_ratio"] * scale
    power = row_mean * ctx.row_solid_angles
    total = float(power.sum())
    share = float(power[steps].sum() / total) if total > 0 else 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        ratios = np.where(scale > 0, edge / scale, 0.0)
    details = {"stepping_rows": int(steps.sum()), "max_row_ratio": float(ratios.max()) if ratios.size else 0.0,
               "step_ratio": s["step_ratio"]}
    msg = (f"the left and right edges step apart in rows holding {pct(share)} of the light "
           f"({int(steps.sum())} of {ctx.height} rows)")
    if share >= s["fail_share"]:
        sev = "fail"
    elif share >= s["warn_share"]:
        sev = "warn"
    else:
        return CheckResult("seam", "pass", value=share, threshold=s["warn_share"], message=msg, details=details)
    details["worst_row"] = int(np.argmax(np.where(steps, ratios * power, 0.0)))
    return CheckResult("seam", sev, value=share, threshold=s[f"{sev}_share"],
                       message=msg + ": a visible seam",
                       remedy="re-stitch or blend the wrap-around (the left edge must continue the right edge)",
                       details=details)


def check_poles(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("poles")
    lum = ctx.luminance.astype(np.float64)
    k = min(s["rows"], max(1, ctx.height // 2))
    tiny = 1e-9 * max(float(lum.mean()), 1e-30)

    def cv(rows: np.ndarray) -> float:
        m = rows.mean(axis=1)
        sd = rows.std(axis=1)
        return float(np.max(np.where(m > tiny, sd / np.maximum(m, tiny), 0.0)))

    top, bottom = cv(lum[:k]), cv(lum[-k:])
    worst = max(top, bottom)
    which = "top (zenith)" if top >= bottom else "bottom (nadir)"
    details = {"top_cv": top, "bottom_cv": bottom, "rows": k}
    msg = f"pole rows vary by {fmt(top)} (top) and {fmt(bottom)} (bottom), std/mean of luminance"
    if worst >= s["fail_cv"]:
        sev = "fail"
    elif worst >= s["warn_cv"]:
        sev = "warn"
    else:
        return CheckResult("poles", "pass", value=worst, threshold=s["warn_cv"], message=msg, details=details)
    return CheckResult("poles", sev, value=worst, threshold=s[f"{sev}_cv"],
                       message=msg + f": the {which} row images one direction but is not constant",
                       remedy="patch the pole (fill the first/last rows with their mean) or check the projection",
                       details=details)


def _upper_fraction_rows(height: int) -> np.ndarray:
    """Fraction of each row's solid angle above the horizon (exact in cos theta)."""
    c = row_cos_edges(height)
    hi, lo = c[:-1], c[1:]
    return (np.clip(hi, 0.0, None) - np.clip(lo, 0.0, None)) / (hi - lo)


def check_orientation(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("orientation")
    total = ctx.total_power
    if not total > 0.0:
        return CheckResult("orientation", "pass", value=None, threshold=s["warn_below_upper_share"],
                           message="the map is black: no orientation to check")
    upper = float(ctx.row_power @ _upper_fraction_rows(ctx.height))
    share = upper / total
    brightest_row, brightest_col = np.unravel_index(np.argmax(ctx.luminance), ctx.luminance.shape)
    _, el = pixel_center_angles(int(brightest_row), int(brightest_col), ctx.height, ctx.width)
    details = {"upper_share": share, "brightest_elevation_deg": el}
    msg = f"upper hemisphere holds {pct(share)} of the light (brightest pixel at elevation {deg(el)} deg)"
    # A relative margin keeps an exactly even split (a uniform map) on the passing side despite rounding.
    if share < s["warn_below_upper_share"] * (1.0 - 1e-9):
        return CheckResult("orientation", "warn", value=share, threshold=s["warn_below_upper_share"],
                           message=msg + ": the map looks upside down",
                           remedy="flip it vertically (row 0 must be the zenith) or check the up axis of the export",
                           details=details)
    return CheckResult("orientation", "pass", value=share, threshold=s["warn_below_upper_share"], message=msg,
                       details=details)
