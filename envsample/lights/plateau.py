"""Plateaus at the top of a map's values: the signs of clipping, shared by QA's ``clipping`` check
and the sun finder.

Public objects
--------------
:func:`find_plateau`        the largest connected set of pixels at the maximum of a region.
:func:`plateau_is_clipped`  whether a plateau is large, bright and soft-shouldered (clipped).

A clipped smooth source (a sun with its glare, a blown-out sky) shows a flat top that
still rises towards it two pixels outside (a "shoulder"); a sharp-edged uniform emitter
(a synthetic area light or an unclipped analytic sun disk) is back at its background
there.  Thresholds are our choice, set on synthetic maps (see QA's default profile).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.constants import SUN_SOLID_ANGLE_SR
from envsample.lights.regions import label_wrapped, ring

__all__ = ["find_plateau", "plateau_is_clipped"]


def find_plateau(max_channel: np.ndarray, luminance: np.ndarray, row_solid_angles: np.ndarray, *,
                 median_luminance: float, region: np.ndarray | None = None, constant_rows: np.ndarray | None = None,
                 tolerance: float = 1e-6) -> dict | None:
    """The largest plateau at the maximum of ``region`` (whole map if None); its size, contrast and shoulder.

    ``max_channel`` (H, W) the largest channel per pixel (clipping happens per channel);
    ``luminance`` (H, W); ``row_solid_angles`` (H,) sr; ``median_luminance`` the map's
    solid-angle-weighted median; ``constant_rows`` (H,) bool rows whose pixels are all
    equal (default: computed); ``tolerance`` the relative tolerance to the maximum.
    Returns a dict (level, pixels, solid_angle_sr, sun_multiple, contrast, shoulder, rows)
    or None when the region holds no light.
    """
    m = max_channel
    height = m.shape[0]
    if constant_rows is None:
        constant_rows = m.max(axis=1) == m.min(axis=1)
    values = m if region is None else np.where(region, m, -np.inf)
    level = float(values.max())
    if not level > 0.0:
        return None
    mask = values >= level * (1.0 - tolerance)
    # Rows of identical pixels are an azimuth-independent sky (and pole rows image one
    # direction): equal values there are not clipping.
    mask &= ~constant_rows[:, None]
    if not mask.any():
        return None
    labels, n = label_wrapped(mask)
    # Work in the band of rows that holds the mask (plus the shoulder's margin): plateaus
    # are small, and full-size passes would dominate the check on big maps.
    hit = np.nonzero(mask.any(axis=1))[0]
    lo, hi = max(0, int(hit[0]) - 3), min(height, int(hit[-1]) + 4)
    lab = labels[lo:hi]
    rows, _ = np.nonzero(lab)
    omega = np.bincount(lab[lab > 0], weights=row_solid_angles[rows + lo], minlength=n + 1)[1:]
    k = int(np.argmax(omega)) + 1
    comp = lab == k
    # The shoulder: pixels two steps out from the plateau.  A clipped smooth source
    # (sun with glare, a blown-out sky) still rises towards the plateau there; a
    # sharp-edged uniform emitter (a synthetic area light) is back to its background.
    inner = comp | ring(comp)
    ring2 = ring(inner)
    lum = luminance[lo:hi]
    top = float(lum[comp].mean())
    bg = float(median_luminance)
    if ring2.any() and top > bg:
        shoulder = float(np.median(np.clip((lum[ring2] - bg) / (top - bg), 0.0, 1.0)))
    else:
        shoulder = 0.0
    row_idx = np.nonzero(comp.any(axis=1))[0] + lo
    return {
        "level": level,
        "pixels": int(comp.sum()),
        "solid_angle_sr": float(omega[k - 1]),
        "sun_multiple": float(omega[k - 1] / SUN_SOLID_ANGLE_SR),
        "contrast": top / bg if bg > 0 else math.inf,
        "shoulder": shoulder,
        "rows": [int(row_idx.min()), int(row_idx.max())],
    }


def plateau_is_clipped(p: dict, *, min_pixels: int = 3, min_sun_multiple: float = 2.0, min_contrast: float = 4.0,
                       min_shoulder: float = 0.01, shoulder: bool = True) -> bool:
    """Large, bright and (with ``shoulder``) still rising just outside: the signs of clipping.

    The defaults are QA's ``[clipping]`` defaults (our choice; see the profile).
    """
    big = (p["pixels"] >= min_pixels and p["sun_multiple"] >= min_sun_multiple and p["contrast"] >= min_contrast)
    return big and (not shoulder or p["shoulder"] >= min_shoulder)
