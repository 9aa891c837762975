"""Restoring a clipped sun: its normal irradiance from a measurement or from a clear-sky model.

Public objects
--------------
:data:`RESTORE_METHODS`            ``illuminance`` (given by the user) and ``clear-sky`` (estimated).
:class:`Restoration`               what was assumed and the sun's normal irradiance and colour.
:func:`sky_horizontal_irradiance`  the sky map's own light on an up-facing surface.
:func:`restore_sun`                the restoration of a found sun.

A captured sun is very often clipped: its pixels hold the sensor's or the merge's
maximum, so the light it carried is missing from the map.  Two ways to put it back:

``illuminance``
    The user gives the sun's illuminance at normal incidence ``E`` (map units x sr, e.g.
    measured at capture and scaled like the map).  ``L = E / (pi sin^2 alpha)``.
``clear-sky``
    The ratio DNI / DHI of the Ineichen & Perez (2002) clear-sky model at the sun's
    elevation (Kasten & Young 1989 air mass, a stated Linke turbidity and altitude;
    :mod:`envsample.core.clearsky`) times the map's own diffuse light on a horizontal
    surface, ``E_h = integral over the upper hemisphere of L_sky cos(theta) dw`` of the sky
    map with the sun taken out.  It assumes a clear sky, and that the map's sky is
    exposed like its sun would have been.

The sun's colour comes from the unclipped glare around the core (the mean excess over
the sky in the hole outside the clipped plateau) or, when there is none, from the
clear-sky sun colour at that elevation (:func:`envsample.core.clearsky.sun_color`),
scaled to unit luminance.  A clipped disk's measured size is the plateau's, not the
sun's: the restored disk takes the mean solar diameter 0.533 deg (from memory) unless
told otherwise.  All of this is an estimate for asset preparation, not a certified
lighting calculation; the assumptions are listed in :attr:`Restoration.assumptions`.

References
----------
- Ineichen, P. and Perez, R. (2002). A new airmass independent formulation for the
  Linke turbidity coefficient. Solar Energy 73(3), 151-157.
- Kasten, F. and Young, A. T. (1989). Revised optical air mass tables and approximation
  formula. Applied Optics 28(22), 4735-4738.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from envsample.core.clearsky import DEFAULT_LINKE_TURBIDITY, clear_sky, sun_color
from envsample.core.color import luminance
from envsample.core.constants import SUN_ANGULAR_DIAMETER_DEG
from envsample.core.latlong import row_cosine_weights
from envsample.errors import SunSplitError
from envsample.lights.finder import SunEstimate

__all__ = ["RESTORE_METHODS", "Restoration", "sky_horizontal_irradiance", "restore_sun"]

#: Ways to restore a clipped sun (see the module docstring).
RESTORE_METHODS = ("illuminance", "clear-sky")


@dataclass
class Restoration:
    """A restored sun: ``normal_irradiance`` (luminance, map units x sr), ``color`` (RGB of unit
    luminance), the ``diameter_deg`` of its disk, the ``method`` and its ``parameters``, and the
    ``assumptions`` to print beside it."""

    method: str
    normal_irradiance: float
    color: np.ndarray
    color_source: str
    diameter_deg: float
    assumptions: list[str] = field(default_factory=list)
    parameters: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "irradiance_normal": self.normal_irradiance,
            "color_rgb": [float(x) for x in self.color],
            "color_source": self.color_source,
            "angular_diameter_deg": self.diameter_deg,
            "parameters": dict(self.parameters),
            "assumptions": list(self.assumptions),
        }


def sky_horizontal_irradiance(sky_rgb: np.ndarray, *, primaries: str = "bt709") -> float:
    """Luminance irradiance (map units x sr) of an up-facing surface under the map's upper hemisphere.

    Exact per row for the piecewise-constant map (:func:`envsample.core.latlong.row_cosine_weights`).
    """
    h, w = sky_rgb.shape[:2]
    rows = luminance(sky_rgb, primaries).sum(axis=1, dtype=np.float64)
    return float(rows @ row_cosine_weights(h, w))


def _unit_luminance(rgb, primaries: str) -> np.ndarray | None:
    rgb = np.maximum(np.asarray(rgb, dtype=np.float64), 0.0)
    y = float(luminance(rgb[None, :], primaries, dtype=np.float64)[0])
    return rgb / y if y > 0 else None


def _glare_color(found: SunEstimate, band: np.ndarray, primaries: str) -> np.ndarray | None:
    """Mean excess colour over the hole outside the clipped core (the unclipped glare), unit luminance."""
    outside = found.hole & ~found.core
    if not outside.any():
        return None
    excess = np.maximum(band[outside].astype(np.float64) - found.sky_band[outside], 0.0)
    if not excess.sum() > 0:
        return None
    return _unit_luminance(excess.mean(axis=0), primaries)


def _color(found: SunEstimate, band, primaries: str, elevation: float):
    c = _glare_color(found, band, primaries)
    if c is not None:
        return c, "the unclipped glare around the core"
    return (_unit_luminance(sun_color(max(elevation, 0.0)), primaries),
            "the clear-sky sun colour at this elevation (Rayleigh and aerosol extinction; illustrative)")


def restore_sun(found: SunEstimate, rgb: np.ndarray, sky_rgb: np.ndarray, *, sun_illuminance: float | None = None,
                method: str | None = None, linke_turbidity: float = DEFAULT_LINKE_TURBIDITY,
                altitude_m: float = 0.0, diameter_deg: float | None = None, primaries: str = "bt709") -> Restoration:
    """Restore the sun ``found`` in ``rgb`` (the map) whose sky, with the sun taken out, is ``sky_rgb``.

    ``method`` is ``"illuminance"`` (needs ``sun_illuminance``, map units x sr at normal
    incidence) or ``"clear-sky"``; it defaults to ``illuminance`` when ``sun_illuminance`` is
    given.  ``linke_turbidity`` and ``altitude_m`` (metres) feed the clear-sky model;
    ``diameter_deg`` the restored disk (default: 0.533 deg when the core is clipped, the
    measured diameter otherwise).  Raises :class:`SunSplitError` when the method cannot
    apply (unknown name, no illuminance, a sun at or below the horizon for ``clear-sky``).
    """
    if method is None:
        method = "illuminance" if sun_illuminance is not None else "clear-sky"
    if method not in RESTORE_METHODS:
        raise SunSplitError(f"unknown restore method {method!r}; valid names: {', '.join(RESTORE_METHODS)}")
    el = math.radians(found.elevation_deg)
    diam = diameter_deg if diameter_deg is not None else (SUN_ANGULAR_DIAMETER_DEG if found.clipped
                                                          else found.diameter_deg)
    assumptions = []
    if diameter_deg is None and found.clipped:
        assumptions.append(f"the clipped disk is replaced by one of the mean solar diameter "
                           f"{SUN_ANGULAR_DIAMETER_DEG:.3f} deg (from memory)")
    lo, hi = found.rows
    color, color_source = _color(found, rgb[lo:hi], primaries, el)
    assumptions.append(f"the sun's colour comes from {color_source}")
    params: dict = {"elevation_deg": found.elevation_deg}
    if method == "illuminance":
        if sun_illuminance is None or not (math.isfinite(float(sun_illuminance)) and float(sun_illuminance) > 0):
            raise SunSplitError(f"restoring by illuminance needs a positive sun illuminance (map units x sr), "
                                f"got {sun_illuminance!r}")
        e_n = float(sun_illuminance)
        assumptions.append("the given illuminance is the sun's at normal incidence, in the map's units x sr")
    else:
        if not el > 0.0:
            raise SunSplitError(f"the sun is {found.elevation_deg:.3g} deg above the horizon: the clear-sky model has "
                                "no direct sun there; give the sun's illuminance instead (--sun-illuminance)")
        cs = clear_sky(el, linke_turbidity=linke_turbidity, altitude_m=altitude_m)
        ratio = float(cs.dni / cs.dhi)
        e_h = sky_horizontal_irradiance(sky_rgb, primaries=primaries)
        e_n = ratio * e_h
        params |= {"linke_turbidity": float(linke_turbidity), "altitude_m": float(altitude_m),
                   "airmass": float(cs.airmass), "dni_over_dhi": ratio, "sky_horizontal_irradiance": e_h,
                   "model": "Ineichen & Perez (2002), Kasten & Young (1989) air mass"}
        assumptions += [
            "a clear sky: the Ineichen & Perez (2002) model's direct-normal to diffuse-horizontal ratio "
            f"{ratio:.4g} at {found.elevation_deg:.3g} deg elevation (Kasten & Young 1989 air mass, Linke turbidity "
            f"{float(linke_turbidity):.3g}, altitude {float(altitude_m):.4g} m)",
            f"the map's sky (sun removed) gives {e_h:.4g} on an up-facing surface and was exposed like its sun",
        ]
    params["irradiance_normal"] = e_n
    return Restoration(method=method, normal_irradiance=e_n, color=color, color_source=color_source,
                       diameter_deg=float(diam), assumptions=assumptions, parameters=params)
