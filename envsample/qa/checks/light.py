"""Checks of the light: ``dynamic-range``, ``sun``, ``light-level``, ``exposure``.

Horizontal irradiance ``E = integral of L cos(theta) d omega`` over the upper hemisphere,
exact per pixel row (cos-weighted solid angle of a latitude band,
``pi/W (sin^2 theta_1 - sin^2 theta_0)``; textbook calculus).  With luminance in cd/m2 this
is illuminance in lux (CIE S 017/E:2020, ILV, terms 17-21-060 and 17-21-050, from memory).
Photometric values are estimates for asset preparation, not certified lighting calculations.
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.constants import SUN_ANGULAR_DIAMETER_DEG
from envsample.core.latlong import row_cosine_weights as _cos_weights
from envsample.core.text import CAUTION, caution
from envsample.qa.context import CheckContext
from envsample.qa.messages import deg, fmt, pct
from envsample.qa.results import CheckResult, NotApplicable


def check_dynamic_range(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("dynamic-range")
    hi = ctx.quantile(s["high_percentile"] / 100.0, lit=True)
    lo = ctx.quantile(s["low_percentile"] / 100.0, lit=True)
    peak = ctx.peak_luminance
    hist = ctx.scan.histogram
    black = float(hist.weights[0] / hist.total) if hist.total > 0 else 1.0
    details = {"high": hi, "low": lo, "max": peak, "black_share": black,
               "high_percentile": s["high_percentile"], "low_percentile": s["low_percentile"]}
    names = f"p{fmt(s['high_percentile'], 4)}/p{fmt(s['low_percentile'], 4)}"
    if not (hi > 0.0 and lo > 0.0):
        return CheckResult("dynamic-range", "warn", value=None, threshold=s["warn_below_stops"], unit="stops",
                           message="no lit pixels: the map is black (see value-range)",
                           remedy="check the exposure of the export", details=details)
    stops = math.log2(hi / lo)
    details["max_stops"] = math.log2(peak / lo)
    ground = f"; {pct(black)} of the sphere is black and left out" if black > 0 else ""
    msg = (f"{fmt(stops)} stops between {names} of lit luminance ({fmt(details['max_stops'])} to the maximum)"
           f"{ground}")
    if stops < s["warn_below_stops"]:
        return CheckResult("dynamic-range", "warn", value=stops, threshold=s["warn_below_stops"], unit="stops",
                           message=msg + ": a flat map, its light has almost no direction",
                           remedy="check that this is the HDR capture and not a flat placeholder", details=details)
    return CheckResult("dynamic-range", "pass", value=stops, threshold=s["warn_below_stops"], unit="stops",
                       message=msg, details=details)


def check_sun(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("sun")
    listed = [e for e in ctx.emitters if e.share >= s["min_share"]][: s["max_listed"]]
    sunlike = [e for e in listed if e.diameter_deg <= s["compact_max_deg"]]
    details = {"emitters": [e.to_dict() | {"sun_like": e.diameter_deg <= s["compact_max_deg"]} for e in listed],
               "sun_diameter_deg": SUN_ANGULAR_DIAMETER_DEG}
    if sunlike and ctx.sun is not None:
        details["sun"] = ctx.sun.to_dict()  # the shared finder's measures (the same as envsample split)
    if not sunlike:
        if listed:
            e = listed[0]
            msg = (f"no sun-like emitter; brightest region at azimuth {deg(e.azimuth_deg)} deg, elevation "
                   f"{deg(e.elevation_deg)} deg is {deg(e.diameter_deg)} deg across with {pct(e.share)} of the light")
        else:
            msg = "no compact emitter stands out (diffuse light)"
        return CheckResult("sun", "pass", value=None, threshold=s["warn_diameter_deg"], unit="deg", message=msg,
                           details=details)
    e = sunlike[0]
    if e.resolved:
        size = (f"{deg(e.diameter_deg)} deg across, {fmt(e.diameter_deg / SUN_ANGULAR_DIAMETER_DEG)}x the sun's "
                f"{SUN_ANGULAR_DIAMETER_DEG:.3f} deg")
    else:
        size = (f"unresolved in {e.pixels} px (one pixel is {deg(e.pixel_diameter_deg)} deg, "
                f"the sun {SUN_ANGULAR_DIAMETER_DEG:.3f} deg)")
    msg = (f"sun-like emitter at azimuth {deg(e.azimuth_deg)} deg, elevation {deg(e.elevation_deg)} deg: "
           f"{pct(e.share)} of the light, {fmt(e.solid_angle_sr)} sr, {size}")
    if e.resolved and e.diameter_deg > s["warn_diameter_deg"]:
        return CheckResult("sun", "warn", value=e.diameter_deg, threshold=s["warn_diameter_deg"], unit="deg",
                           message=msg + ": glare, bloom or blur spread it",
                           remedy="expect soft shadows; separate the sun into an analytic light of 0.533 deg for sharp ones",
                           details=details)
    cleared = ""
    if e.diameter_deg > s["warn_diameter_deg"]:
        cleared = (f"unresolved: {e.pixels} px are too few to measure the sun's size "
                   f"(one pixel spans {deg(e.pixel_diameter_deg)} deg)")
    return CheckResult("sun", "pass", value=e.diameter_deg, threshold=s["warn_diameter_deg"], unit="deg",
                       message=msg, cleared_by=cleared, details=details)


def irradiance_up(ctx: CheckContext) -> tuple[float, np.ndarray]:
    """Irradiance on an up-facing surface (luminance and per channel), map units x sr, unscaled."""
    cw = _cos_weights(ctx.height, ctx.width)
    return float(ctx.scan.row_luminance_sum @ cw), ctx.scan.row_channel_sum.T @ cw


def check_light_level(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("light-level")
    e, e_rgb = irradiance_up(ctx)
    e *= s["scale"]
    e_rgb = e_rgb * s["scale"]
    details = {"irradiance_up": e, "irradiance_up_rgb": e_rgb.tolist(), "calibrated": s["calibrated"],
               "caution": caution("light levels")}
    unit = "lx" if s["calibrated"] else "map*sr"
    if not e > 0.0:
        return CheckResult("light-level", "warn", value=e, threshold=None, unit=unit,
                           message="no light reaches an up-facing surface: the upper hemisphere is black",
                           remedy="check the exposure and the orientation of the map", details=details)
    if not s["calibrated"]:
        return CheckResult("light-level", "pass", value=e, threshold=None, unit=unit,
                           message=(f"irradiance on an up-facing surface {fmt(e)} (map units x sr; "
                                    f"{CAUTION})"),
                           details=details)
    details["unit"] = "lx"
    msg = f"about {fmt(e)} lux on an up-facing surface ({CAUTION})"
    lo, hi = s["warn_below_lux"], s["warn_above_lux"]
    if e < lo or e > hi:
        return CheckResult("light-level", "warn", value=e, threshold=lo if e < lo else hi, unit=unit,
                           message=msg + f": outside {fmt(lo)}..{fmt(hi)} lux",
                           remedy="check the calibration scale (cd/m2 per map unit) in the profile",
                           details=details)
    return CheckResult("light-level", "pass", value=e, threshold=[lo, hi], unit=unit, message=msg, details=details)


def check_exposure(ctx: CheckContext) -> CheckResult:
    """log2(E / pi) of an up-facing white diffuse surface, in stops from display white (see the profile)."""
    s = ctx.settings("exposure")
    limits = [s["warn_below_stops"], s["warn_above_stops"]]
    if ctx.settings("light-level")["calibrated"]:
        raise NotApplicable("the map is calibrated: light-level checks its lux")
    e, _ = irradiance_up(ctx)
    if not e > 0.0:
        return CheckResult("exposure", "warn", value=None, threshold=limits, unit="stops",
                           message="no light on an up-facing surface: the exposure cannot be judged",
                           remedy="check the orientation (a flipped map) and the export", details={"irradiance_up": e})
    stops = math.log2(e / math.pi)
    details = {"irradiance_up": e, "white_radiance": e / math.pi}
    msg = (f"a white surface facing up would reflect {fmt(e / math.pi)} (E/pi), {fmt(stops)} stops from 1 "
           f"(display white)")
    lo, hi = limits
    if stops < lo or stops > hi:
        side = "dark" if stops < lo else "bright"
        return CheckResult("exposure", "warn", value=stops, threshold=lo if stops < lo else hi, unit="stops",
                           message=msg + f": implausibly {side} for an uncalibrated map",
                           remedy=("rescale it (envsample fix --exposure 1), or set [light-level] calibrated = true "
                                   "if its values are cd/m2"), details=details)
    return CheckResult("exposure", "pass", value=stops, threshold=limits, unit="stops", message=msg, details=details)
