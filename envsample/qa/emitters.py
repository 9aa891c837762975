"""Bright connected regions of a map (suns, lamps, windows): labelling that wraps at the seam and
the poles, and their power share, solid angle, direction and size.

Connected components: OpenCV's ``connectedComponents`` (8-connectivity), joined across the
left/right seam and around each pole by union-find.  The sun's mean angular diameter 0.533 deg is
:data:`envsample.core.constants.SUN_ANGULAR_DIAMETER_RAD` (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from envsample.core.constants import SUN_ANGULAR_DIAMETER_DEG

if TYPE_CHECKING:  # annotations only: the context holds the emitters
    from envsample.qa.context import CheckContext


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


def _cap_diameter(omega) -> np.ndarray:
    """Angular diameter (radians) of the spherical cap of solid angle ``omega`` (sr): 2 acos(1 - omega / 2 pi)."""
    return 2.0 * np.arccos(np.clip(1.0 - np.asarray(omega, dtype=np.float64) / (2.0 * math.pi), -1.0, 1.0))


def _cv2():
    """OpenCV, a dependency already (maps): its labelling and dilation import in a tenth of scipy.ndimage's time."""
    import cv2

    return cv2


def _join(pairs_a: np.ndarray, pairs_b: np.ndarray, n: int) -> np.ndarray:
    """Union-find over labels 1..n joined by the pairs: each label's smallest equivalent label (int64 (n + 1,))."""
    root = np.arange(n + 1)
    while True:
        ra, rb = root[pairs_a], root[pairs_b]
        low = np.minimum(ra, rb)
        if np.array_equal(ra, rb):
            return root
        np.minimum.at(root, ra, low)
        np.minimum.at(root, rb, low)
        while True:  # path compression: point every label at its root
            nxt = root[root]
            if np.array_equal(nxt, root):
                break
            root = nxt


def label_wrapped(mask: np.ndarray) -> tuple[np.ndarray, int]:
    """Connected components of a lat-long mask (8-connectivity) that wrap at the seam and the poles.

    Pixels in column 0 touch those in column W-1 (rows i-1..i+1), and all pixels of
    the first row (and of the last) meet at the pole.  Returns ``(labels, count)``:
    int32 labels 1..count numbered in order of their first pixel (row by row), 0 for
    background.  Components: OpenCV ``connectedComponents`` (8-connectivity) on the band of
    rows that holds the mask, then joined across the seam and the poles by union-find.
    """
    H, W = mask.shape
    rows = np.nonzero(mask.any(axis=1))[0]
    labels = np.zeros(mask.shape, dtype=np.int32)
    if rows.size == 0:
        return labels, 0
    # Label only the band of rows that holds the mask: emitters are small on big maps.
    lo, hi = int(rows[0]), int(rows[-1]) + 1
    count, band = _cv2().connectedComponents(np.ascontiguousarray(mask[lo:hi], dtype=np.uint8), connectivity=8,
                                             ltype=_cv2().CV_32S)
    n = int(count) - 1
    labels[lo:hi] = band
    if n <= 1:
        return labels, n
    a_parts, b_parts = [], []
    left, right = labels[:, 0], labels[:, W - 1]
    for shift in (-1, 0, 1):
        r0, r1 = max(0, -shift), H - max(0, shift)
        a_parts.append(left[r0:r1])
        b_parts.append(right[r0 + shift:r1 + shift])
    for row in (labels[0], labels[H - 1]):
        present = np.unique(row[row > 0])
        if present.size > 1:
            a_parts.append(present[:-1])
            b_parts.append(present[1:])
    a = np.concatenate(a_parts)
    b = np.concatenate(b_parts)
    keep = (a > 0) & (b > 0) & (a != b)
    if not keep.any():
        return labels, n
    root = _join(a[keep].astype(np.int64), b[keep].astype(np.int64), n)
    # Renumber the roots 1..m in order (a root is its group's smallest, i.e. first, label).
    roots = np.unique(root[1:])
    table = np.zeros(n + 1, dtype=np.int32)
    table[1:] = np.searchsorted(roots, root[1:]) + 1
    return table[labels], int(roots.size)


def emitter_level(ctx: CheckContext) -> float:
    """Luminance above which a pixel belongs to an emitter (``[sun]`` thresholds)."""
    s = ctx.settings("sun")
    peak = float(ctx.luminance.max()) if ctx.luminance.size else 0.0
    return max(s["threshold_median_multiple"] * ctx.median_luminance, s["threshold_max_fraction"] * peak)


def find_emitters(ctx: CheckContext) -> list[Emitter]:
    lum = ctx.luminance
    total = ctx.total_power
    if not total > 0.0 or not float(lum.max()) > 0.0:
        return []
    labels, n = ctx.emitter_labels
    if n == 0:
        return []
    band = ctx.emitter_rows  # labels are zero outside these rows
    local, cols = np.nonzero(labels[band])
    rows = band[local]
    lab = labels[rows, cols]
    y = lum[rows, cols].astype(np.float64)
    omega_px = ctx.row_solid_angles[rows]
    p = y * omega_px
    theta, phi = ctx.pixel_directions
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
        norm = math.sqrt(dx[k] ** 2 + dy[k] ** 2 + dz[k] ** 2)
        if norm > 0:
            elev = math.degrees(math.asin(max(-1.0, min(1.0, dz[k] / norm))))
            az = math.degrees(math.atan2(dy[k], dx[k]))
        else:
            elev, az = 0.0, 0.0
        row = int(min(ctx.height - 1, max(0, round(mean_row[k]))))
        out.append(Emitter(
            label=int(k + 1),
            pixels=int(count[k]),
            solid_angle_sr=float(omega[k]),
            share=float(power[k] / total),
            azimuth_deg=az,
            elevation_deg=elev,
            diameter_deg=math.degrees(float(_cap_diameter(omega[k]))),
            pixel_diameter_deg=math.degrees(float(_cap_diameter(ctx.row_solid_angles[row]))),
            peak=float(peaks[k + 1]),
        ))
    return out


def ring(mask: np.ndarray) -> np.ndarray:
    """Pixels 8-adjacent to ``mask`` (wrapping at the seam), not in it."""
    cv2 = _cv2()
    # A 3x3 dilation is the 8-neighbour growth; columns wrap (one column copied from the other
    # side), rows end at the poles.
    m = np.ascontiguousarray(mask, dtype=np.uint8)
    padded = np.concatenate([m[:, -1:], m, m[:, :1]], axis=1)
    grown = cv2.dilate(padded, np.ones((3, 3), np.uint8), borderType=cv2.BORDER_CONSTANT, borderValue=0)
    return grown[:, 1:-1].astype(bool) & ~mask


def emitter_mask(ctx: CheckContext, e: Emitter) -> tuple[np.ndarray, np.ndarray] | None:
    """``(rows, mask)``: the rows (int, ascending) that hold the emitter and its mask there (bool (n, W))."""
    labels = ctx.emitter_labels[0]
    rows = ctx.emitter_rows
    if rows.size == 0:
        return None
    band = labels[rows] == e.label
    keep = band.any(axis=1)
    return (rows[keep], band[keep]) if keep.any() else None
