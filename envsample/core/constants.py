"""Published constants used across envsample, each with its source and units.

Colour primaries are CIE 1931 xy chromaticities of the red, green and blue
primaries and of the white point.  The luminance weights of an RGB space are the
Y row of its RGB-to-XYZ matrix, derived from these chromaticities by the usual
normalised-primary-matrix construction (SMPTE RP 177-1993).

References
----------
- ITU-R BT.709-6 (2015), Parameter values for the HDTV standards, table item 1.
- ITU-R BT.2020-2 (2015), Parameter values for UHDTV systems, table 3.
- SMPTE ST 2065-1:2012 / Academy S-2014-004 (ACES2065-1, "AP0" primaries) and
  Academy S-2014-004 (ACEScg, "AP1" primaries).
- SMPTE RP 177-1993, Derivation of basic television color equations.
- IAU / astronomical almanac: mean apparent solar diameter about 0.533 degrees
  (from memory; it varies by about +-1.7 % over the year).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "PRIMARIES",
    "luminance_weights",
    "SUN_ANGULAR_DIAMETER_RAD",
    "SUN_ANGULAR_DIAMETER_DEG",
    "SUN_SOLID_ANGLE_SR",
    "FOUR_PI",
    "HALF_FLOAT_MAX",
]

FOUR_PI = 4.0 * math.pi

#: Largest finite IEEE 754 binary16 value (IEEE 754-2008): 65504.
HALF_FLOAT_MAX = 65504.0

#: Mean angular diameter of the solar disk seen from Earth, radians (0.533 deg, from memory).
SUN_ANGULAR_DIAMETER_RAD = math.radians(0.533)

#: The same diameter in degrees (0.533, from memory).
SUN_ANGULAR_DIAMETER_DEG = math.degrees(SUN_ANGULAR_DIAMETER_RAD)

#: Solid angle of that disk, steradians: 2*pi*(1 - cos(d/2)) ~= 6.8e-5 sr.
SUN_SOLID_ANGLE_SR = 2.0 * math.pi * (1.0 - math.cos(SUN_ANGULAR_DIAMETER_RAD / 2.0))

#: xy chromaticities (R, G, B, white) of the RGB spaces whose luminance envsample can use.
PRIMARIES: dict[str, dict[str, tuple[float, float]]] = {
    # ITU-R BT.709-6 primaries with the D65 white point; sRGB (IEC 61966-2-1) shares them.
    "bt709": {"r": (0.640, 0.330), "g": (0.300, 0.600), "b": (0.150, 0.060), "w": (0.3127, 0.3290)},
    # ITU-R BT.2020-2 primaries, D65.
    "bt2020": {"r": (0.708, 0.292), "g": (0.170, 0.797), "b": (0.131, 0.046), "w": (0.3127, 0.3290)},
    # ACES AP1 (ACEScg), ACES white point (Academy S-2014-004).
    "acescg": {"r": (0.713, 0.293), "g": (0.165, 0.830), "b": (0.128, 0.044), "w": (0.32168, 0.33767)},
    # ACES AP0 (ACES2065-1), ACES white point (SMPTE ST 2065-1).
    "aces2065-1": {"r": (0.7347, 0.2653), "g": (0.0, 1.0), "b": (0.0001, -0.0770), "w": (0.32168, 0.33767)},
}

#: Aliases accepted for the names above.
PRIMARY_ALIASES = {"srgb": "bt709", "rec709": "bt709", "rec2020": "bt2020", "ap1": "acescg", "ap0": "aces2065-1"}


def _xyz(xy: tuple[float, float]) -> np.ndarray:
    x, y = xy
    return np.array([x / y, 1.0, (1.0 - x - y) / y])


def rgb_to_xyz_matrix(name: str) -> np.ndarray:
    """Return the 3x3 RGB-to-XYZ matrix of a named RGB space (SMPTE RP 177 construction).

    The white point maps to Y = 1.  Columns are the XYZ of the scaled primaries.
    """
    p = PRIMARIES[name]
    prim = np.stack([_xyz(p["r"]), _xyz(p["g"]), _xyz(p["b"])], axis=1)
    scale = np.linalg.solve(prim, _xyz(p["w"]))
    return prim * scale


def luminance_weights(name: str) -> np.ndarray:
    """Luminance weights (Y row of the RGB-to-XYZ matrix) of a named RGB space, float64 (3,).

    ``name`` is one of ``bt709`` (alias ``srgb``), ``bt2020``, ``acescg``, ``aces2065-1``.
    We use the weights *derived* from the published chromaticities
    (BT.709: 0.212639, 0.715169, 0.072192), not the four-decimal rounding
    0.2126/0.7152/0.0722 printed in IEC 61966-2-1; the two differ in the fourth decimal.
    ACES2065-1 has a negative blue weight: callers clamp luminance at zero.
    """
    key = PRIMARY_ALIASES.get(name.lower(), name.lower())
    if key not in PRIMARIES:
        valid = ", ".join(sorted(list(PRIMARIES) + list(PRIMARY_ALIASES) + ["max", "mean"]))
        raise ValueError(f"unknown primaries {name!r}; valid names: {valid}")
    return rgb_to_xyz_matrix(key)[1].copy()
