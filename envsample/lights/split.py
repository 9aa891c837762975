"""Splitting a map into a sky map and an analytic sun: :func:`split_sun` returns a :class:`SunSplit`.

Public objects
--------------
:class:`SunSplit`   the sky map (sun and glare removed, the hole filled), the :class:`SunLight`,
                    what the finder measured, the energy moved and any restoration.
:func:`split_sun`   find the sun (:func:`envsample.lights.finder.find_sun`), take it out of the map,
                    and optionally restore a clipped sun (:mod:`envsample.lights.restore`).
:data:`SUN_SCHEMA`  the schema of the sun file (``envsample.sun`` version 1).

Energy: the sun light carries exactly the energy taken out of the map, so
``integral(original) = integral(sky) + sun power`` per channel (map units x sr, to float32
rounding of the sky map) when nothing is restored: the disk's radiance is the moved
power divided by the disk's measured solid angle.  A restored sun replaces that power
by the restored one (the clipped core had lost light).

Nothing here writes a file: :mod:`envsample.pipeline.split` writes the sky map, the sun
file and the sky's sampling table.  Values are estimates for asset preparation, not
certified lighting calculations.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from envsample.core.clearsky import DEFAULT_LINKE_TURBIDITY
from envsample.core.latlong import row_channel_sums
from envsample.core.schema import Schema
from envsample.core.sphere import convention, row_solid_angles
from envsample.core.text import caution
from envsample.errors import SunSplitError
from envsample.lights.fill import FILL_METHOD
from envsample.lights.finder import SunEstimate, find_sun
from envsample.lights.restore import Restoration, restore_sun
from envsample.sampling.sun import SunLight

__all__ = ["SUN_SCHEMA", "SunSplit", "split_sun", "map_integral"]

#: The sun file's schema.
SUN_SCHEMA = Schema("envsample.sun", 1)


def map_integral(rgb: np.ndarray) -> np.ndarray:
    """Per-channel integral of a lat-long map over the sphere, float64 (3,), map units x sr (exact per row)."""
    h, w = rgb.shape[:2]
    return row_solid_angles(h, w) @ row_channel_sums(rgb)


@dataclass
class SunSplit:
    """A map split into ``sky`` (float32 (H, W, 3)) and ``sun`` (:class:`SunLight`).

    ``found`` is the finder's :class:`SunEstimate`; ``moved_rgb`` the energy taken out of
    the map (map units x sr, per channel); ``restoration`` the :class:`Restoration` applied,
    or None.  ``primaries``, ``up`` and ``rotation_deg`` are the map's conventions.
    """

    sky: np.ndarray
    sun: SunLight
    found: SunEstimate
    moved_rgb: np.ndarray
    restoration: Restoration | None
    primaries: str = "bt709"
    up: str = "y"
    rotation_deg: float = 0.0

    @property
    def restored(self) -> bool:
        return self.restoration is not None

    def energy_balance(self, original: np.ndarray) -> dict:
        """``integral(original)``, ``integral(sky)``, the sun's power and the relative residual per channel."""
        total = map_integral(original)
        sky = map_integral(self.sky)
        sun = self.sun.power
        resid = (sky + sun - total) / np.where(total > 0, total, 1.0)
        return {"original_rgb": total.tolist(), "sky_rgb": sky.tolist(), "sun_rgb": sun.tolist(),
                "relative_residual_rgb": resid.tolist()}

    def document(self, *, files: dict | None = None, source: dict | None = None) -> dict:
        """The sun file's JSON document (schema ``envsample.sun`` v1); ``files`` and ``source`` name the others."""
        s = self.sun
        f = self.found
        method = {
            "finder": {"name": "envsample sun finder", "parameters": {k: v for k, v in f.parameters.items()
                                                                       if k != "power_luminance"}},
            "fill": {"name": FILL_METHOD, "hole_pixels": int(f.hole.sum()), "glare_radius_deg": f.glare_radius_deg},
            "restore": None if self.restoration is None else self.restoration.to_dict(),
        }
        doc = SUN_SCHEMA.header() | {
            "kind": "distant disk light of uniform radiance",
            "direction": s.direction.tolist(),
            "convention": convention(self.up, self.rotation_deg),
            "azimuth_deg": s.azimuth_deg,
            "elevation_deg": s.elevation_deg,
            "angular_diameter_deg": s.diameter_deg,
            "solid_angle_sr": s.solid_angle,
            "radiance_rgb": s.radiance.tolist(),
            "irradiance_normal_rgb": s.normal_irradiance.tolist(),
            "power_rgb": s.power.tolist(),
            "energy_moved_rgb": self.moved_rgb.tolist(),
            "energy_moved_share": f.share,
            "restored": self.restored,
            "primaries": self.primaries,
            "units": "radiance in map units; irradiance, power and energy in map units x sr",
            "found": f.to_dict(),
            "method": method,
            "caution": caution("the sun's values"),
        }
        if files:
            doc["files"] = dict(files)
        if source:
            doc["source"] = dict(source)
        return doc


def _sky_map(rgb: np.ndarray, found: SunEstimate) -> np.ndarray:
    sky = np.array(rgb, dtype=np.float32, copy=True)
    lo, hi = found.rows
    band = sky[lo:hi]
    band[found.hole] = found.sky_band[found.hole]
    return sky


def split_sun(rgb, *, primaries: str = "bt709", up: str = "y", rotation_deg: float = 0.0,
              restore: str | None = None, sun_illuminance: float | None = None,
              linke_turbidity: float = DEFAULT_LINKE_TURBIDITY, altitude_m: float = 0.0,
              diameter_deg: float | None = None, **finder_options) -> SunSplit:
    """Split an equirectangular map (H, 2H, 3) into a sky map and an analytic :class:`SunLight`.

    Parameters
    ----------
    rgb : array (H, 2H, 3)
        Linear radiance; row 0 at the zenith (:mod:`envsample.core.sphere`).
    primaries, up, rotation_deg
        Luminance primaries and the direction convention of the sun's unit vector.
    restore : {None, "illuminance", "clear-sky"}
        Restore the sun's power (a clipped sun lost light): from ``sun_illuminance`` (map
        units x sr at normal incidence) or from the Ineichen & Perez clear-sky ratio at the
        sun's elevation with ``linke_turbidity`` and ``altitude_m`` (metres).  Giving
        ``sun_illuminance`` alone means ``restore="illuminance"``.  None keeps the energy
        found in the map.
    diameter_deg : float, optional
        Diameter of the restored disk (degrees); default 0.533 for a clipped core.
    **finder_options
        :data:`envsample.lights.finder.FINDER_DEFAULTS`.

    Raises :class:`SunSplitError` when the map holds no sun-like emitter.
    """
    img = np.asarray(rgb)
    found = find_sun(img, primaries=primaries, up=up, rotation_deg=rotation_deg, **finder_options)
    if found is None:
        raise SunSplitError("no sun-like emitter found (a compact light holding at least "
                            f"{finder_options.get('min_share', 0.01):.0%} of the map's light): nothing to split; "
                            "build a table of the whole map instead")
    sky = _sky_map(img, found)
    moved = np.asarray(found.power_rgb, dtype=np.float64)
    half = 0.5 * math.radians(found.diameter_deg)
    restoration = None
    if restore is not None or sun_illuminance is not None:
        restoration = restore_sun(found, img, sky, sun_illuminance=sun_illuminance, method=restore,
                                  linke_turbidity=linke_turbidity, altitude_m=altitude_m,
                                  diameter_deg=diameter_deg, primaries=primaries)
        half = 0.5 * math.radians(restoration.diameter_deg)
        radiance = restoration.color * restoration.normal_irradiance / (math.pi * math.sin(half) ** 2)
    else:
        radiance = np.maximum(moved, 0.0) / (4.0 * math.pi * math.sin(0.5 * half) ** 2)
    sun = SunLight(found.direction, half, radiance, up=up, rotation_deg=rotation_deg)
    return SunSplit(sky=sky, sun=sun, found=found, moved_rgb=moved, restoration=restoration, primaries=primaries,
                    up=up, rotation_deg=float(rotation_deg))
