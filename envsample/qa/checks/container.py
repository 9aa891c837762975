"""Checks of the file and its container: ``read``, ``pixel-type``, ``channels``, ``chromaticities``.

Chromaticities are compared with the named RGB spaces of :data:`envsample.core.constants.PRIMARIES`
(ITU-R BT.709, BT.2020, ACES AP0/AP1).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.constants import PRIMARIES
from envsample.qa.context import CheckContext
from envsample.qa.messages import fmt, pct
from envsample.qa.results import CheckResult


def check_read(ctx: CheckContext) -> CheckResult:
    im = ctx.image
    fmt = im.format
    extra = ", ".join(x for x in (im.pixel_type, im.compression) if x)
    return CheckResult("read", "pass", value=fmt, threshold=None,
                       message=f"read {ctx.width}x{ctx.height} {fmt}" + (f" ({extra})" if extra else ""))


def check_pixel_type(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("pixel-type")
    t = ctx.image.pixel_type
    if t in s["accept"]:
        return CheckResult("pixel-type", "pass", value=t, threshold=list(s["accept"]), message=f"{t} samples")
    if t in s["warn"]:
        levels = {"uint8": 256, "uint16": 65536}.get(t)
        what = f"{levels} levels per channel: gradients band" if levels else "quantised samples"
        return CheckResult("pixel-type", "warn", value=t, threshold=list(s["accept"]),
                           message=f"{t} integer samples, {what}",
                           remedy="store radiance as half or float (OpenEXR) or rgbe (.hdr)")
    return CheckResult("pixel-type", "fail", value=t, threshold=list(s["accept"]),
                       message=f"{t} samples do not hold radiance (accepted: {', '.join(s['accept'])})",
                       remedy="write the colour channels as half or float")


def _base_channel(name: str) -> str:
    return name.rsplit(".", 1)[-1].upper()


def check_channels(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("channels")
    names = list(ctx.image.channels or [])
    bases = [_base_channel(n) for n in names]
    details = {"channels": names}
    if {"R", "G", "B"} <= set(bases):
        colour = "RGB"
    elif "Y" in bases:
        return CheckResult("channels", "warn", value=",".join(names), threshold="R,G,B",
                           message="greyscale (Y only): the light has no colour",
                           remedy="export the R, G and B channels", details=details)
    else:
        return CheckResult("channels", "fail", value=",".join(names), threshold="R,G,B",
                           message=f"no R, G, B or Y channels among {', '.join(names) or 'none'}",
                           remedy="export the colour channels as R, G, B", details=details)
    alpha = ctx.image.alpha
    if alpha is not None and s["warn_on_alpha"]:
        a = alpha[np.isfinite(alpha)]
        transparent = float(np.mean(a < 1.0)) if a.size else 0.0
        details["alpha_below_one_fraction"] = transparent
        if transparent > 0:
            return CheckResult("channels", "warn", value=",".join(names), threshold="R,G,B",
                               message=f"{colour} with alpha below 1 in {pct(transparent)} of pixels; alpha is ignored",
                               remedy="remove alpha, or un-premultiply the colour if it was premultiplied",
                               details=details)
    return CheckResult("channels", "pass", value=",".join(names), threshold="R,G,B",
                       message=f"{colour}" + (" + alpha" if alpha is not None else ""), details=details)


_CHROMA_KEYS = (("red", "r"), ("green", "g"), ("blue", "b"), ("white", "w"))


def _chroma_distance(file_chroma: dict, name: str) -> float:
    p = PRIMARIES[name]
    return max(math.dist(tuple(file_chroma[a]), p[b]) for a, b in _CHROMA_KEYS)


def check_chromaticities(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("chromaticities")
    assumed = ctx.profile.primaries
    chroma = ctx.image.chromaticities
    if chroma is None:
        basis = "OpenEXR's default" if ctx.image.format == "exr" else "no primaries in the file"
        return CheckResult("chromaticities", "pass", value=None, threshold=s["tolerance"], unit="xy",
                           message=f"no chromaticities stored ({basis}); assuming {assumed}")
    named = {n: _chroma_distance(chroma, n) for n in PRIMARIES}
    best = min(named, key=named.get)
    match = best if named[best] <= s["tolerance"] else None
    details = {"file": {k: list(v) for k, v in chroma.items()}, "matches": match, "assumed": assumed}
    if assumed not in PRIMARIES:
        return CheckResult("chromaticities", "pass", value=match, threshold=s["tolerance"], unit="",
                           message=f"file primaries {match or 'unnamed'}; luminance uses the channel {assumed}",
                           details=details)
    d = named[assumed]
    if d <= s["tolerance"]:
        return CheckResult("chromaticities", "pass", value=d, threshold=s["tolerance"], unit="xy",
                           message=f"file primaries match the assumed {assumed}", details=details)
    said = match or "unnamed primaries"
    return CheckResult("chromaticities", "warn", value=d, threshold=s["tolerance"], unit="xy",
                       message=f"file says {said} but luminance assumes {assumed} (xy off by {fmt(d)})",
                       remedy=(f"set [profile] primaries = \"{match}\"" if match else
                               "convert the map to a known RGB space, or set [profile] primaries"),
                       details=details)
