"""Checks of the projection: ``aspect``, ``resolution``, ``seam``, ``poles``, ``orientation``, ``hemisphere``.

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
        return CheckResult("aspect", "pass", value=ratio, threshold=s["ratio"], unit="ratio", message=msg)
    remedy = "re-project to equirectangular (2:1); convert cube maps or mirror balls first"
    if hemisphere_evidence(ctx)["kind"] == "aspect":
        remedy = "it looks like the upper hemisphere only: pad the lower hemisphere (envsample fix --pad-hemisphere)"
    return CheckResult("aspect", "fail", value=ratio, threshold=s["ratio"], unit="ratio",
                       message=f"{msg}, not the {fmt(s['ratio'])}:1 of an equirectangular map", remedy=remedy)


def check_resolution(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("resolution")
    w = ctx.width
    step = 360.0 / w
    msg = f"{w}x{ctx.height}: one pixel spans {fmt(step)} deg (the sun {SUN_ANGULAR_DIAMETER_DEG:.3f} deg)"
    if w < s["fail_below_width"]:
        return CheckResult("resolution", "fail", value=w, threshold=s["fail_below_width"], unit="px",
                           message=f"{msg}; below {s['fail_below_width']} px wide",
                           remedy="supply a larger map")
    if w < s["warn_below_width"]:
        return CheckResult("resolution", "warn", value=w, threshold=s["warn_below_width"], unit="px",
                           message=f"{msg}; below {s['warn_below_width']} px wide, reflections will be blurry",
                           remedy="use this map for diffuse lighting only, or supply a larger one")
    return CheckResult("resolution", "pass", value=w, threshold=s["warn_below_width"], unit="px", message=msg)


def _seam_rows(ctx: CheckContext, s: dict) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per row: the clamped luminance step across the seam, the typical neighbouring step, the clamped row mean.

    Only the edge columns and at most 256 evenly spread column pairs are read (the median of
    those estimates a row's typical step as well as all of them); the clamped row means come
    from the scan's row sums, corrected only in rows that reach the clamp.
    """
    cap = np.float32(ctx.quantile(s["clamp_percentile"] / 100.0))
    lum = ctx.luminance
    edge = np.abs(np.minimum(lum[:, 0], cap) - np.minimum(lum[:, -1], cap)).astype(np.float64)
    if ctx.width > 1:
        cols = np.unique(np.linspace(0, ctx.width - 2, min(ctx.width - 1, 256)).astype(np.int64))
        a, b = np.minimum(lum[:, cols], cap), np.minimum(lum[:, cols + 1], cap)
        typical = np.median(np.abs(b - a), axis=1).astype(np.float64)
    else:
        typical = np.zeros(ctx.height)
    row_mean = ctx.scan.row_luminance_sum / ctx.width
    over = np.nonzero(ctx.scan.row_luminance_max > cap)[0]
    if over.size:
        row_mean = row_mean.copy()
        row_mean[over] = np.minimum(lum[over], cap).mean(axis=1, dtype=np.float64)
    return edge, typical, row_mean


def check_seam(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("seam")
    edge, typical, row_mean = _seam_rows(ctx, s)
    scale = np.maximum(typical, s["relative_floor"] * row_mean)
    steps = edge > s["step_ratio"] * scale
    power = row_mean * ctx.row_solid_angles
    total = float(power.sum())
    share = float(power[steps].sum() / total) if total > 0 else 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        ratios = np.where(scale > 0, edge / scale, 0.0)
    details = {"stepping_rows": int(steps.sum()), "max_row_ratio": float(ratios.max()) if ratios.size else 0.0,
               "step_ratio": s["step_ratio"], "fraction": share}
    msg = (f"the left and right edges step apart in rows holding {pct(share)} of the light "
           f"({int(steps.sum())} of {ctx.height} rows)")
    if share >= s["fail_share"]:
        sev = "fail"
    elif share >= s["warn_share"]:
        sev = "warn"
    else:
        return CheckResult("seam", "pass", value=100.0 * share, threshold=100.0 * s["warn_share"], unit="%",
                           message=msg, details=details)
    details["worst_row"] = int(np.argmax(np.where(steps, ratios * power, 0.0)))
    return CheckResult("seam", sev, value=100.0 * share, threshold=100.0 * s[f"{sev}_share"], unit="%",
                       message=msg + ": a visible seam",
                       remedy="re-stitch the wrap-around, or blend it (envsample fix --seam)",
                       details=details)


def check_poles(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("poles")
    k = min(s["rows"], max(1, ctx.height // 2))
    lum = ctx.luminance
    tiny = 1e-9 * max(ctx.total_power / (4.0 * np.pi), 1e-30)

    def cv(rows: np.ndarray) -> float:
        rows = rows.astype(np.float64)
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
        return CheckResult("poles", "pass", value=worst, threshold=s["warn_cv"], unit="ratio", message=msg,
                           details=details)
    return CheckResult("poles", sev, value=worst, threshold=s[f"{sev}_cv"], unit="ratio",
                       message=msg + f": the {which} row images one direction but is not constant",
                       remedy="make the pole rows constant (envsample fix --poles) or check the projection",
                       details=details)


def _upper_fraction_rows(height: int) -> np.ndarray:
    """Fraction of each row's solid angle above the horizon (exact in cos theta)."""
    c = row_cos_edges(height)
    hi, lo = c[:-1], c[1:]
    return (np.clip(hi, 0.0, None) - np.clip(lo, 0.0, None)) / (hi - lo)


def _pole_cv(lum_rows: np.ndarray) -> float:
    """Largest std / mean of luminance over the given rows (0 for black rows)."""
    rows = lum_rows.astype(np.float64)
    m = rows.mean(axis=1)
    sd = rows.std(axis=1)
    return float(np.max(np.where(m > 0, sd / np.where(m > 0, m, 1.0), 0.0)))


def hemisphere_evidence(ctx: CheckContext) -> dict:
    """Does the map hold the upper hemisphere only?  ``kind`` is "aspect", "stretched" or None (see the profile)."""
    s = ctx.settings("hemisphere")
    ratio = ctx.width / ctx.height
    top, bottom = _pole_cv(ctx.luminance[:1]), _pole_cv(ctx.luminance[-1:])
    out = {"ratio": ratio, "top_cv": top, "bottom_cv": bottom, "kind": None}
    if s["min_ratio"] <= ratio <= s["max_ratio"]:
        out["kind"] = "aspect"
    elif abs(ratio - 2.0) < 1e-9 and top <= s["top_max_cv"] and bottom >= s["bottom_min_cv"]:
        out["kind"] = "stretched"
    return out


def check_hemisphere(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("hemisphere")
    ev = hemisphere_evidence(ctx)
    remedy = ("pad the lower hemisphere (envsample fix --pad-hemisphere: the rows become the upper half of a 2:1 "
              "map over a uniform ground), or supply the full sphere")
    if ev["kind"] == "aspect":
        return CheckResult("hemisphere", "fail", value=ev["ratio"], threshold=[s["min_ratio"], s["max_ratio"]],
                           unit="ratio", remedy=remedy, details=ev,
                           message=(f"{ctx.width}x{ctx.height} is {fmt(ev['ratio'], 3)}:1, the shape of an upper "
                                    "hemisphere (4:1, or stretched), not of the full sphere (2:1)"))
    if ev["kind"] == "stretched":
        return CheckResult("hemisphere", "fail", value=ev["bottom_cv"], threshold=s["bottom_min_cv"], unit="ratio",
                           remedy=remedy, details=ev,
                           message=(f"the top row is constant (a zenith) but the bottom row varies by "
                                    f"{fmt(ev['bottom_cv'])} (std/mean) like a horizon: an upper hemisphere "
                                    "stretched over the whole frame"))
    return CheckResult("hemisphere", "pass", value=ev["bottom_cv"], threshold=s["bottom_min_cv"], unit="ratio",
                       details=ev, message="the map covers the full sphere (2:1, a nadir at the bottom)"
                       if abs(ev["ratio"] - 2.0) < 1e-9 else f"not an upper-hemisphere shape ({fmt(ev['ratio'], 3)}:1)",
                       cleared_by=("" if ev["bottom_cv"] < s["bottom_min_cv"] else
                                   f"the top row varies too (std/mean {fmt(ev['top_cv'])}): not a zenith over a horizon"))


def check_orientation(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("orientation")
    threshold = 100.0 * s["warn_below_upper_share"]
    total = ctx.total_power
    if not total > 0.0:
        return CheckResult("orientation", "pass", value=None, threshold=threshold, unit="%",
                           message="the map is black: no orientation to check")
    upper = float(ctx.row_power @ _upper_fraction_rows(ctx.height))
    share = upper / total
    row = int(np.argmax(ctx.scan.row_luminance_max))
    col = int(np.argmax(ctx.luminance[row]))
    _, el = pixel_center_angles(row, col, ctx.height, ctx.width)
    details = {"upper_share": share, "brightest_elevation_deg": el}
    msg = f"upper hemisphere holds {pct(share)} of the light (brightest pixel at elevation {deg(el)} deg)"
    # A relative margin keeps an exactly even split (a uniform map) on the passing side despite rounding.
    if share < s["warn_below_upper_share"] * (1.0 - 1e-9):
        if hemisphere_evidence(ctx)["kind"] is not None:
            return CheckResult("orientation", "pass", value=100.0 * share, threshold=threshold, unit="%",
                               message=msg, details=details,
                               cleared_by="the map holds an upper hemisphere only (see hemisphere): not upside down")
        return CheckResult("orientation", s["severity"], value=100.0 * share, threshold=threshold, unit="%",
                           message=msg + ": the map looks upside down",
                           remedy="flip it vertically (envsample fix --flip; row 0 must be the zenith) "
                                  "or check the up axis of the export",
                           details=details)
    return CheckResult("orientation", "pass", value=100.0 * share, threshold=threshold, unit="%", message=msg,
                       details=details)
