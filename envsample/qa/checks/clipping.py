"""The ``clipping`` check: values clamped at the half-float maximum, and pile-ups at the top of a channel.

A clip (a sensor's full well, an 8-bit export, a tone curve) flattens every value above some level to
that level, in each channel separately (white balance after a sensor clip puts each channel's plateau
at its own level).  The test, per channel: the pixels within float precision of the channel's maximum
(the top band) are compared with those just below it (the next ``pileup_reference_bands`` bands of the
same width).  A continuous distribution puts about as many pixels in each band near its maximum (a
smooth 2D maximum f = M - a r^2 covers an area proportional to the depth below M: textbook calculus),
so a top band holding many times the average of the bands below is a pile-up, at any level and any
extent.  A pile-up is then told apart from a uniform emitter by its shape: a clipped smooth source (a
sun with its glare, a blown-out sky) still rises towards the plateau two pixels outside it (a soft
shoulder); a synthetic area light is back at its background there (a sharp edge) and passes.

Precision of the containers: IEEE 754-2008 binary16 (2^-10 relative step below the top of a binade,
largest finite value 65504) and binary32 (2^-23); Radiance RGBE (8-bit mantissa, 2^-7; Ward, G. (1991).
Real pixels. Graphics Gems II, 80-83).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.constants import HALF_FLOAT_MAX
from envsample.qa.context import CheckContext
from envsample.qa.emitters import emitter_mask, label_wrapped, ring
from envsample.qa.messages import fmt, pct
from envsample.qa.results import CheckResult

#: Relative spacing of adjacent representable values near the top of a binade, per pixel type.
PRECISION = {"half": 2.0 ** -10, "float": 2.0 ** -23, "rgbe": 2.0 ** -7, "uint8": 1.0 / 255, "uint16": 1.0 / 65535}
_CHANNELS = "RGB"


def band_width(ctx: CheckContext, s: dict) -> float:
    """Relative width of the top band: two steps of the pixel type, or the profile's tolerance if wider."""
    step = PRECISION.get(ctx.image.pixel_type, PRECISION["half"])
    return max(2.0 * step, s["plateau_relative_tolerance"])


def _pileup(values: np.ndarray, valid: np.ndarray, level: float, eps: float, bands: int) -> dict:
    """Counts in the top band ``[level (1 - eps), level]`` and the ``bands`` bands below it."""
    top_edge = level * (1.0 - eps)
    low_edge = level * (1.0 - (bands + 1) * eps)
    top = valid & (values >= top_edge)
    n_top = int(top.sum())
    n_ref = int((valid & (values >= low_edge) & (values < top_edge)).sum())
    return {"level": level, "pixels": n_top, "below": n_ref, "expected": n_ref / bands, "mask": top}


def _is_excess(p: dict, s: dict) -> bool:
    """Many pixels, and many times (plus four Poisson sigmas) what the bands just below predict."""
    e = p["expected"]
    return p["pixels"] >= s["plateau_min_pixels"] and p["pixels"] > s["pileup_excess_ratio"] * e + 4.0 * math.sqrt(e)


def _shape(ctx: CheckContext, c: int | None, top: np.ndarray, values: np.ndarray, rows: np.ndarray,
           level: float, background: float) -> dict:
    """Largest connected part of the top band and its shoulder (two pixels outside it, see the module doc)."""
    mask = np.zeros((ctx.height, ctx.width), dtype=bool)
    mask[rows] = top
    labels, n = label_wrapped(mask)
    lo, hi = max(0, int(rows[0]) - 3), min(ctx.height, int(rows[-1]) + 4)
    lab = labels[lo:hi]
    r, _ = np.nonzero(lab)
    omega = np.bincount(lab[lab > 0], weights=ctx.row_solid_angles[r + lo], minlength=n + 1)[1:]
    k = int(np.argmax(omega)) + 1
    comp = lab == k
    ring2 = ring(comp | ring(comp))
    band = np.zeros((hi - lo, ctx.width), dtype=np.float32)
    inside = (rows >= lo) & (rows < hi)
    band[rows[inside] - lo] = values[inside]
    outside_rows = np.setdiff1d(np.arange(lo, hi), rows)
    if outside_rows.size:
        band[outside_rows - lo] = _channel_rows(ctx, outside_rows, c)
    shoulder = 0.0
    if ring2.any() and level > background:
        shoulder = float(np.median(np.clip((band[ring2] - background) / (level - background), 0.0, 1.0)))
    row_idx = np.nonzero(comp.any(axis=1))[0] + lo
    return {"largest_pixels": int(comp.sum()), "solid_angle_sr": float(omega[k - 1]), "shoulder": shoulder,
            "rows": [int(row_idx.min()), int(row_idx.max())]}


def _channel_rows(ctx: CheckContext, rows: np.ndarray, c: int | None) -> np.ndarray:
    """Cleaned values of channel ``c`` (luminance if None) in the given rows, float32 (len(rows), W)."""
    if c is None:
        return ctx.luminance[rows]
    v = ctx.rgb[rows, :, c]
    return np.ascontiguousarray(v, dtype=np.float32)


def _channel_pileup(ctx: CheckContext, c: int | None, s: dict, eps: float, region=None):
    """The pile-up test on one channel (luminance if ``c`` is None, inside ``region = (rows, mask)`` if given)."""
    bands = s["pileup_reference_bands"]
    if region is None:
        row_max = ctx.scan.row_channel_max[:, c]
        level = float(row_max.max()) if row_max.size else 0.0
        if not level > 0.0:
            return None
        rows = np.nonzero(row_max >= level * (1.0 - (bands + 1) * eps))[0]
    else:
        rows, inside = region
    values = _channel_rows(ctx, rows, c)
    valid = np.ones(values.shape, dtype=bool) if region is None else inside
    if region is not None:
        level = float(values[valid].max())
        if not level > 0.0:
            return None
    # Rows of identical pixels are an azimuth-independent sky, and pole rows image one
    # direction: equal values there are not a pile-up.
    constant = values.max(axis=1) == values.min(axis=1)
    valid = valid & ~constant[:, None]
    p = _pileup(values, valid, level, eps, bands)
    p["channel"] = "luminance" if c is None else _CHANNELS[c]
    if _is_excess(p, s):
        background = ctx.median_luminance if c is None else float(ctx.channel_medians[c])
        p.update(_shape(ctx, c, p["mask"], values, rows, level, background))
    p.pop("mask")
    return p


def _half_max(ctx: CheckContext, s: dict) -> CheckResult | None:
    if ctx.scan.raw_max < HALF_FLOAT_MAX:
        return None
    rows = np.nonzero(ctx.scan.row_channel_max.max(axis=1) >= HALF_FLOAT_MAX)[0]
    with np.errstate(invalid="ignore"):
        n_half = int((ctx.raw[rows] == np.float32(HALF_FLOAT_MAX)).any(axis=2).sum())
    if n_half < max(1, s["half_max_pixels"]):
        return None
    return CheckResult(
        "clipping", "fail", value=n_half, threshold=s["half_max_pixels"], unit="px",
        message=f"{n_half} pixels hold {HALF_FLOAT_MAX:g}, the largest half float: values were clamped when written",
        remedy="write float32, or scale the map down before writing half (and record the scale)",
        details={"half_max_pixels": n_half},
    )


def check_clipping(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("clipping")
    clamped = _half_max(ctx, s)
    if clamped is not None:
        return clamped
    eps = band_width(ctx, s)
    found = [p for p in (_channel_pileup(ctx, c, s, eps) for c in range(3)) if p is not None]
    if ctx.emitters:
        region = emitter_mask(ctx, ctx.emitters[0])
        if region is not None:
            p = _channel_pileup(ctx, None, s, eps, region)
            if p is not None and p["level"] < ctx.peak_luminance:
                p["channel"] = "brightest emitter (luminance)"
                found.append(p)
    details = {"band_width": eps, "reference_bands": s["pileup_reference_bands"], "channels": found}
    piled = [p for p in found if "shoulder" in p]
    clipped = [p for p in piled if p["shoulder"] >= s["plateau_min_shoulder"]]
    if clipped:
        p = max(clipped, key=lambda q: q["pixels"])
        names = ", ".join(f"{q['channel']} at {fmt(q['level'])}" for q in clipped)
        share = p["solid_angle_sr"] / (4.0 * math.pi)
        return CheckResult(
            "clipping", "fail", value=p["pixels"], threshold=s["plateau_min_pixels"], unit="px",
            message=(f"highlights clipped ({names}): {p['pixels']} px within {fmt(eps)} of the {p['channel']} maximum, "
                     f"{fmt(p['pixels'] / max(p['expected'], 1.0))}x the pixels just below predict, and the values still "
                     f"rise towards it outside ({pct(share)} of the sphere in its largest patch)"),
            remedy=("recapture or re-merge the brightest sources with shorter exposures (clipped light is lost; "
                    "envsample fix cannot restore it), or replace them by analytic lights"),
            details=details,
        )
    if piled:
        p = max(piled, key=lambda q: q["pixels"])
        return CheckResult(
            "clipping", "pass", value=p["pixels"], threshold=s["plateau_min_pixels"], unit="px",
            message=(f"{p['pixels']} px share the {p['channel']} maximum {fmt(p['level'])} inside a sharp-edged "
                     "emitter (a uniform area light; a capture would show noise)"),
            cleared_by=(f"sharp edge: two pixels outside the plateau the values are back at the background "
                        f"(shoulder {fmt(p['shoulder'])} < {fmt(s['plateau_min_shoulder'])}), so it is the light's "
                        "real radiance"),
            details=details,
        )
    top = max(found, key=lambda q: q["pixels"], default=None)
    if top is None:
        return CheckResult("clipping", "pass", value=0, threshold=s["plateau_min_pixels"], unit="px",
                           message="the map is black: nothing to clip", details=details)
    msg = (f"no pile-up at the top of any channel (at most {top['pixels']} px at the {top['channel']} maximum, "
           f"{fmt(top['expected'])} expected from the values just below)")
    cleared = ""
    if top["pixels"] >= s["plateau_min_pixels"]:
        cleared = (f"no excess: the bands just below the maximum are as full ({top['pixels']} px at the top vs "
                   f"{fmt(top['expected'])} per band below, limit {fmt(s['pileup_excess_ratio'])}x)")
    return CheckResult("clipping", "pass", value=top["pixels"], threshold=s["plateau_min_pixels"], unit="px",
                       message=msg, cleared_by=cleared, details=details)
