"""Maps with a known sun for the tests of the sun finder, the split and the restoration."""

from __future__ import annotations

import math

import numpy as np

from envsample.core.sphere import pixel_center_directions, row_solid_angles
from envsample.synth import skies


def analytic_sun(width: int, *, azimuth_deg: float, elevation_deg: float, diameter_deg: float = 0.533,
                 sun_illuminance: float = 4.0) -> np.ndarray:
    """The ``sky sun`` kind with a disk of known size and normal illuminance (old clear-sky gradient)."""
    return skies.sun_sky(width, azimuth_deg=azimuth_deg, elevation_deg=elevation_deg, sun_diameter_deg=diameter_deg,
                         sun_illuminance=sun_illuminance, zenith_luminance=1.0)


def true_sun_power(diameter_deg: float = 0.533, sun_illuminance: float = 4.0) -> float:
    """Luminance integral of a uniform disk of that size and normal illuminance: L * Omega (closed form)."""
    return skies.sun_radiance(sun_illuminance, diameter_deg) * skies.sun_solid_angle(diameter_deg)


def pixel_solid_angle_at(width: int, elevation_deg: float) -> float:
    """Solid angle (sr) of one pixel in the row that holds an elevation."""
    h = width // 2
    row = min(h - 1, int((90.0 - elevation_deg) / 180.0 * h))
    return float(row_solid_angles(h, width)[row])


def clipped_capture(clean: np.ndarray, *, azimuth_deg: float, elevation_deg: float, glare: float = 200.0,
                    glare_deg: float = 1.0, clip: float = 150.0) -> np.ndarray:
    """A capture of ``clean``: a Gaussian glare of peak ``glare`` and width ``glare_deg`` around the sun,
    then every channel clipped at ``clip`` (how a sensor or an exposure merge loses the sun)."""
    h, w = clean.shape[:2]
    d = pixel_center_directions(h, w)
    s = skies.sun_direction(azimuth_deg=azimuth_deg, elevation_deg=elevation_deg)
    rho = np.arccos(np.clip(d @ s, -1.0, 1.0))
    halo = glare * np.exp(-(rho / math.radians(glare_deg)) ** 2)
    return np.minimum(clean + halo[..., None] * np.array([1.0, 0.95, 0.85]), clip).astype(np.float32)


def angle_between_deg(az1, el1, az2, el2) -> float:
    a1, e1, a2, e2 = map(math.radians, (az1, el1, az2, el2))
    c = math.sin(e1) * math.sin(e2) + math.cos(e1) * math.cos(e2) * math.cos(a1 - a2)
    return math.degrees(math.acos(max(-1.0, min(1.0, c))))


def write_sun_map(folder):
    """A clear map with a sun 1.5 deg above the horizon, on the seam (azimuth 179.9 deg), 512 px, as a float EXR."""
    from envsample.io.maps import write_map

    path = folder / "clear.exr"
    write_map(path, analytic_sun(512, azimuth_deg=179.9, elevation_deg=1.5), pixel_type="float")
    return path
