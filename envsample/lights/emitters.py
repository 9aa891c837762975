"""Bright connected regions of a map (suns, lamps, windows): their power share, solid angle,
direction and size.

Public objects
--------------
:class:`Emitter`        one connected bright region.
:func:`emitter_level`   the luminance above which a pixel belongs to an emitter.
:func:`find_emitters`   the emitters of a labelled mask, by decreasing power.

Shared by QA's ``sun`` check (:mod:`envsample.qa.emitters`) and the sun finder
(:mod:`envsample.lights.finder`).  The sun's mean angular diameter 0.533 deg is
:data:`envsample.core.constants.SUN_ANGULAR_DIAMETER_RAD` (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from envsample.core.constants import SUN_ANGULAR_DIAMETER_DEG
from envsample.core.sphere import local_angles
from envsample.lights.regions import cap_diameter

__all__ = ["Emitter", "emitter_level", "find_emitters"]


@dataclass
class Emitter:
    """A connected bright region: power share, solid angle (sr), direction and size."""

    label: int
    pixels: int
    solid_angle_sr: float
    share: float
    azimuth_deg: float
    elevation_deg: float
    diameter_deg: float
    pixel_diameter_deg: float
    peak: float

    @property
    def resolved(self) -> bool:
        """Wider than two pixels: its measured size says something about the source."""
        return self.diameter_deg > 2.0 * self.pixel_diameter_deg

    def to_dict(self) -> dict:
        return {
            "azimuth_deg": round(self.azimuth_deg, 3),
            "elevation_deg": round(self.elevation_deg, 3),
            "solid_angle_sr": self.solid_angle_sr,
            "share": self.share,
            "pixels": self.pixels,
            "diameter_deg": round(self.diameter_deg, 4),
            "sun_diameter_ratio": self.diameter_deg / SUN_ANGULAR_DIAMETER_DEG,
            "resolved": self.resolved,
            "peak_luminance": self.peak,
        }


def emitter_level(luminance: np.ndarray, median_luminance: float, *, median_multiple: float = 20.0,
                  max_fraction: float = 0.05) -> float:
    """Luminance above which a pixel belongs to an emitter: the larger of ``median_multiple`` x the
    solid-angle-weighted median and ``max_fraction`` x the peak (QA's ``[sun]`` thresholds; our choice)."""
    peak = float(luminance.max()) if luminance.size else 0.0
    return max(float(median_multiple) * float(median_luminance), float(max_fraction) * peak)


def find_emitters(luminance: np.ndarray, labels: np.ndarray, count: int, row_solid_angles: np.ndarray, *,
                  total_power: float | None = None) -> list[Emitter]:
    """The labelled regions of ``labels`` (from :func:`label_wrapped`) as :class:`Emitter`, by decreasing power.

    ``luminance`` (H, W) non-negative; ``row_solid_angles`` (H,) sr of one pixel per row;
    ``total_power`` the map's integral of luminance (computed when None).  Directions are
    power-weighted means of the pixel centres' unit vectors (correct around a pole or
    across the seam), in the map's own frame (azimuth, elevation in degrees).
    """
    lum = luminance
    height, width = lum.shape
    total = (float(lum.sum(axis=1, dtype=np.float64) @ row_solid_angles) if total_power is None
             else float(total_power))
    n = count
    if not total > 0.0 or not float(lum.max()) > 0.0:
        return []
    if n == 0:
        return []
    rows, cols = np.nonzero(labels)
    lab = labels[rows, cols]
    y = lum[rows, cols].astype(np.float64)
    omega_px = row_solid_angles[rows]
    p = y * omega_px
    theta = (np.arange(height) + 0.5) * (math.pi / height)
    phi = (np.arange(width) + 0.5) * (2.0 * math.pi / width) - math.pi
    st = np.sin(theta[rows])

    def per_label(weights):
        return np.bincount(lab, weights=weights, minlength=n + 1)[1:]

    power = per_label(p)
    omega = per_label(omega_px)
    count = per_label(None)
    peaks = np.zeros(n + 1)
    np.maximum.at(peaks, lab, y)
    # Power-weighted mean direction; a component around a pole or across the seam averages correctly.
    dx = per_label(p * st * np.cos(phi[cols]))
    dy = per_label(p * st * np.sin(phi[cols]))
    dz = per_label(p * np.cos(theta[rows]))
    mean_row = per_label(p * rows) / np.maximum(power, 1e-300)
    out = []
    for k in np.argsort(-power, kind="stable"):
        if dx[k] or dy[k] or dz[k]:
            az, elev = local_angles(dx[k], dy[k], dz[k])
        else:
            elev, az = 0.0, 0.0
        row = int(min(height - 1, max(0, round(mean_row[k]))))
        out.append(Emitter(
            label=int(k + 1),
            pixels=int(count[k]),
            solid_angle_sr=float(omega[k]),
            share=float(power[k] / total),
            azimuth_deg=az,
            elevation_deg=elev,
            diameter_deg=math.degrees(float(cap_diameter(omega[k]))),
            pixel_diameter_deg=math.degrees(float(cap_diameter(row_solid_angles[row]))),
            peak=float(peaks[k + 1]),
        ))
    return out
