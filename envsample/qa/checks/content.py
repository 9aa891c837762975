"""The ``hdr`` check: is the content scene-referred high dynamic range data, whatever its container?

A map that went through a display-referred or integer pipeline keeps the marks of it after being
saved as floats: its values sit on a coarse lattice (an 8-bit image has at most 256 levels per
channel, and one global scale applied afterwards does not add any), its maximum is often exactly
1.0 with many pixels there, and it spans few stops.  The levels are counted per channel on a regular
subsample; when they are few, a fit must say which lattice they sit on: ``s * k / 255`` (linear
8-bit) or ``s * EOTF(k / 255)`` (sRGB code values, IEC 61966-2-1:1999), for one scale ``s`` (an
analytic sky that does not vary with azimuth also has few levels, one per row, but on no lattice).

Radiance RGBE files (Ward, G. (1991). Real pixels. Graphics Gems II, 80-83) have 8-bit mantissas but
a shared exponent per pixel, so a real RGBE map has up to 128 levels in every octave it covers: the
count alone is not evidence there, only the fit (on the levels precise enough for it) is.
"""

from __future__ import annotations

import math

import numpy as np

from envsample.qa.context import CheckContext
from envsample.qa.messages import fmt, pct
from envsample.qa.results import CheckResult

#: The two 8-bit transfer curves a lattice is fitted with: code value in [0, 1] -> linear.
_CURVES = {
    "linear 8-bit (k/255)": lambda x: x,
    "sRGB 8-bit code values": lambda x: np.where(x <= 0.04045, x / 12.92, ((x + 0.055) / 1.055) ** 2.4),
}
#: Largest distance (in code values) of a level from its nearest code for the fit to hold.  With
#: 16 levels or more, random levels pass by chance with probability below 1e-6.
_FIT_TOLERANCE = 0.15
_MIN_FITTED = 16


def _levels(values: np.ndarray) -> np.ndarray:
    """Distinct finite positive values, ascending (float64)."""
    v = values[np.isfinite(values) & (values > 0)]
    return np.unique(v).astype(np.float64)


def _fit_lattice(levels: np.ndarray, *, max_code: int | None = None) -> dict | None:
    """The 8-bit lattice ``s * curve(k / 255)`` the levels sit on, or None.

    Every level maps to a code within :data:`_FIT_TOLERANCE` of an integer for one scale
    ``s``, tried with the brightest level at each code 1..255.  ``max_code`` fits only the
    levels whose codes are below it (RGBE keeps 8 significant bits, enough for small codes).
    """
    if levels.size < 2:
        return None
    top = levels[-1]
    codes = np.arange(1, 256, dtype=np.float64)
    for name, curve in _CURVES.items():
        table = curve(np.arange(256) / 255.0)
        for kmax in codes[::-1]:
            scale = top / float(curve(kmax / 255.0))
            x = levels / scale
            k = np.interp(x, table, np.arange(256))
            if max_code is not None:
                k = k[k < max_code]
            if k.size < min(_MIN_FITTED, levels.size):
                continue
            # Every level is its own positive code (code 0 is black, left out of the levels; levels
            # crowding into one code are no lattice).
            nearest = np.round(k)
            if (nearest.min() >= 1 and float(np.max(np.abs(k - nearest))) <= _FIT_TOLERANCE
                    and np.unique(nearest).size == nearest.size):
                return {"lattice": name, "scale": scale, "brightest_code": int(kmax), "fitted_levels": int(k.size)}
    return None


def _fit_linear_16(levels: np.ndarray) -> dict | None:
    """The linear lattice (step ``d``, at most 65536 steps up to the brightest level) the levels sit on, or None.

    Every gap between neighbouring levels must be a whole multiple of the smallest gap (within
    :data:`_FIT_TOLERANCE`).  Gaps are compared rather than the levels themselves because a
    gap of a few codes keeps its precision in float32 (24 significant bits) while the code of a
    level near 65535 does not.
    """
    gaps = np.diff(levels)
    step = float(np.min(gaps))
    if not step > 0 or levels[-1] / step > 65536.0 * 1.01:
        return None
    m = gaps / step
    if float(np.max(np.abs(m - np.round(m)))) > _FIT_TOLERANCE:
        return None
    return {"lattice": "linear 16-bit (k/65535)", "scale": step * 65535.0, "fitted_levels": int(levels.size)}


def lattice_evidence(ctx: CheckContext, s: dict) -> list[dict]:
    """Per channel with a coarse lattice: its level count, span in stops and the fitted lattice."""
    sub = ctx.subsample
    out = []
    rgbe = ctx.image.pixel_type == "rgbe"
    for c, name in enumerate("RGB"):
        levels = _levels(sub[:, c])
        n = int(levels.size)
        if n < s["min_levels"]:
            continue
        span = math.log2(levels[-1] / levels[0])
        if span < s["min_span_stops"]:
            continue
        entry = {"channel": name, "levels": n, "span_stops": span, "sampled": int(sub.shape[0])}
        if n <= s["max_levels"]:
            # Few levels alone can be an azimuth-independent analytic sky (one level per row):
            # the fit to an 8-bit lattice is the evidence.
            fit = _fit_lattice(levels, max_code=32 if rgbe else None)
            if fit is None:
                continue
            entry["bits"] = 8
            entry.update(fit)
            out.append(entry)
        elif ctx.image.pixel_type == "float" and n <= s["max_levels_16bit"]:
            fit = _fit_linear_16(levels)
            if fit is not None:
                entry.update(bits=16, **fit)
                out.append(entry)
    return out


def display_evidence(ctx: CheckContext, s: dict) -> dict:
    """Signs of display-referred data: the maximum, its share of the sphere, the stops of lit luminance."""
    top = ctx.scan.raw_max
    share = 0.0
    if top == 1.0:
        rows = np.nonzero(ctx.scan.row_channel_max.max(axis=1) >= 1.0)[0]
        at_max = (ctx.rgb[rows] >= 1.0).any(axis=2)
        share = float((at_max * ctx.row_solid_angles[rows, None]).sum() / (4.0 * math.pi))
    # The same percentiles as the dynamic-range check, so that the two messages agree.
    dr = ctx.settings("dynamic-range")
    hi = ctx.quantile(dr["high_percentile"] / 100.0, lit=True)
    lo = ctx.quantile(dr["low_percentile"] / 100.0, lit=True)
    stops = math.log2(hi / lo) if lo > 0 and hi > 0 else None
    # A map of a few flat regions (a furnace test, a synthetic studio) is not a picture.
    levels = max(int(np.unique(ctx.subsample[:, c]).size) for c in range(3)) if top == 1.0 else 0
    signs = (top == 1.0 and share >= s["display_max_share"] and levels >= s["min_levels"]
             and stops is not None and stops < s["display_max_stops"])
    names = f"p{fmt(dr['high_percentile'], 4)}/p{fmt(dr['low_percentile'], 4)}"
    return {"max": top, "share_at_max": share, "stops": stops, "percentiles": names, "display_referred": bool(signs)}


def check_hdr(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("hdr")
    im = ctx.image
    peak = ctx.scan.raw_max
    if not im.is_hdr:
        return CheckResult(
            "hdr", "fail", value=False, threshold=True,
            message=f"{im.pixel_type} {im.format} holds display-referred values that stop at 1.0: light sources are clipped",
            remedy="supply a linear HDR capture (.exr or .hdr); an LDR image cannot light a scene correctly",
            details={"max_code_value": peak},
        )
    lattice = lattice_evidence(ctx, s)
    display = display_evidence(ctx, s)
    details = {"lattice": lattice, **display}
    remedy = ("re-export the linear, scene-referred merge (the camera raw or bracket merge), not a picture "
              "made for display; envsample fix cannot restore lost levels")
    if lattice:
        e = max(lattice, key=lambda x: x["levels"] if x["bits"] == 8 else 0)
        what = e["lattice"] + (f" times {fmt(e['scale'])}" if "scale" in e else "")
        chans = ", ".join(f"{x['channel']} {x['levels']}" for x in lattice)
        extra = f"; maximum exactly 1.0 over {pct(display['share_at_max'])} of the sphere" if display["share_at_max"] else ""
        return CheckResult(
            "hdr", "fail", value=False, threshold=True,
            message=(f"{im.pixel_type} data from a {e['bits']}-bit pipeline: distinct levels per channel {chans} "
                     f"spanning {fmt(e['span_stops'])} stops, on the {what}{extra}"),
            remedy=remedy, details=details)
    if display["display_referred"]:
        return CheckResult(
            "hdr", "fail", value=False, threshold=True,
            message=(f"{im.pixel_type} data look display-referred: maximum exactly 1.0 over "
                     f"{pct(display['share_at_max'])} of the sphere and only {fmt(display['stops'])} stops "
                     f"between {display['percentiles']} of lit luminance (as dynamic-range measures)"),
            remedy=remedy, details=details)
    return CheckResult("hdr", "pass", value=True, threshold=True,
                       message=f"scene-referred high dynamic range data ({im.pixel_type}), brightest value {fmt(peak)}",
                       details=details)
