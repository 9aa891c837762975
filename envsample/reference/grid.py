"""The cell grid of a lat-long map, the input checks and the compiled-kernel switch shared by the reference methods.

Public objects (for :mod:`envsample.reference` only)
-----------------------------------------------------
:class:`Grid`          row and column edges of an H x W map, with exact symmetric trigonometry.
:func:`map_frame`      world -> map-frame rotation for an up axis and a rotation in degrees.
:func:`map_array`      a finite (H, W, 3) float32/float64 map from an array or a MapImage.
:func:`prepare_map`    the same, reduced with the table's power-preserving box filter.
:func:`unit_normals`   (..., 3) unit vectors flattened to (N, 3) float64.
:func:`thread_count`   the threads a computation may use.
:data:`KERNELS`        the switch of ``envsample.reference._kernels`` (:mod:`envsample.core.kernels`).

Conventions (those of :mod:`envsample.core.sphere`): pixel ``(i, j)`` covers ``theta`` in
``[pi i/H, pi (i+1)/H]`` (row 0 at the zenith) and ``phi`` in ``[2 pi j/W - pi,
2 pi (j+1)/W - pi]`` plus the map rotation.  The map frame has axes
``(x, y, z) = (forward_R, right_R, up)`` with ``forward_R = cos R forward + sin R right``,
so a direction is ``(sin theta cos phi, sin theta sin phi, cos theta)`` with the unrotated
``phi``.  Angles in radians; the rotation alone is given in degrees (``rotation_deg``).
"""

from __future__ import annotations

import math
import os

import numpy as np

from envsample.core.kernels import KernelSwitch
from envsample.core.latlong import parse_size, reduce_power
from envsample.core.sphere import UP_AXES, as_vectors
from envsample.errors import MapValidationError
from envsample.io.maps import map_pixels

__all__ = ["Grid", "map_frame", "map_array", "prepare_map", "unit_normals", "cos_sin_deg", "thread_count",
           "KERNELS", "TWO_PI"]

TWO_PI = 2.0 * math.pi

#: The compiled kernels of the reference (``ENVSAMPLE_KERNELS=numpy`` disables them).
KERNELS = KernelSwitch("envsample.reference._kernels")


def map_array(rgb, name: str = "rgb") -> np.ndarray:
    """(H, W, 3) float32/float64 radiance from an array or a MapImage (:func:`envsample.io.map_pixels`).

    float32 and float64 maps are kept as they are (not copied): every sum is accumulated
    in float64.  The map must be finite and have at least 2 columns.
    """
    arr = np.ascontiguousarray(map_pixels(rgb, name=name, keep_float64=True))
    if arr.shape[1] < 2:
        raise MapValidationError(f"{name} must have at least 1 row and 2 columns, got shape {arr.shape}")
    bad = ~np.isfinite(arr)
    if bad.any():
        raise MapValidationError(
            f"{name} has {int(bad.any(axis=2).sum())} pixels with NaN or Inf; repair the map first "
            "(envsample.io.validate_map(..., repair=True))"
        )
    return arr


def prepare_map(rgb, size, *, checked: bool = False) -> np.ndarray:
    """:func:`map_array` (skipped when ``checked``: ``rgb`` is already its result), then reduced to
    ``size`` ((width, height), "WxH" or None) with the table's power-preserving box filter."""
    arr = rgb if checked else map_array(rgb)
    wh = parse_size(size)
    if wh is not None and wh != (arr.shape[1], arr.shape[0]):
        if wh[0] < 2:
            raise ValueError(f"size must have at least 2 columns, got {wh[0]}x{wh[1]}")
        # The table's power-preserving box filter, so reference and table see the same map.
        arr = reduce_power(arr, wh)
    return arr


def unit_normals(normals, name: str = "normals") -> tuple[np.ndarray, tuple[int, ...]]:
    """Flatten (..., 3) unit vectors to (N, 3) float64; returns them and the leading shape."""
    return as_vectors(normals, name, unit="require")


def cos_sin_deg(deg: float) -> tuple[float, float]:
    """cos and sin of an angle in degrees, exact at multiples of 90 degrees."""
    q, r = divmod(float(deg), 90.0)
    c, s = math.cos(math.radians(r)), math.sin(math.radians(r))
    if r == 0.0:
        c, s = 1.0, 0.0
    for _ in range(int(q) % 4):
        c, s = -s, c
    return c, s


def map_frame(up: str, rotation_deg: float) -> np.ndarray:
    """Rows forward_R, right_R, up: world -> map-frame coordinates (internal x, y, z)."""
    try:
        f, r, a = (np.array(v, dtype=np.float64) for v in UP_AXES[str(up).lower()])
    except KeyError:
        raise ValueError(f"unknown up axis {up!r}; valid: {', '.join(UP_AXES)}") from None
    c, s = cos_sin_deg(rotation_deg)
    return np.stack([c * f + s * r, -s * f + c * r, a])


class Grid:
    """Row and column edges of an H x W map in the map frame.

    ``mu``/``s``: cos and sin of theta at the H+1 row edges, with exact 0 and 1 at the
    equator and exact mirror symmetry, so a horizon on the equator is represented
    exactly.  ``cph``/``sph``: cos and sin of phi at the W+1 column edges, exact at the
    quarter turns.
    """

    def __init__(self, height: int, width: int):
        self.H, self.W = height, width
        k = np.arange(height + 1)
        half = k <= height // 2
        t = np.pi * np.minimum(k, height - k) / height
        mu = np.cos(t)
        s = np.sin(t)
        mu = np.where(half, mu, -mu)
        mu[2 * k == height] = 0.0
        s[2 * k == height] = 1.0
        mu[0], mu[-1], s[0], s[-1] = 1.0, -1.0, 0.0, 0.0
        self.mu, self.s = mu, s
        self.theta = np.pi * k / height
        m = np.arange(width + 1)
        ang = TWO_PI * (m % width) / width
        c, sn = np.cos(ang), np.sin(ang)
        quarter = (4 * (m % width)) % width == 0
        qi = (4 * (m % width)) // width
        c = np.where(quarter, np.array([1.0, 0.0, -1.0, 0.0, 1.0])[np.minimum(qi, 4)], c)
        sn = np.where(quarter, np.array([0.0, 1.0, 0.0, -1.0, 0.0])[np.minimum(qi, 4)], sn)
        if width % 2 == 0:  # exact antipodes: the two halves of one meridian plane
            hw = width // 2
            c[hw:width], sn[hw:width] = -c[:hw], -sn[:hw]
            c[width], sn[width] = c[0], sn[0]
        # phi = -pi + 2 pi m / W, so cos(phi) = -cos(ang), sin(phi) = -sin(ang).
        self.cph, self.sph = -c, -sn
        self.phi = -math.pi + TWO_PI * m / width
        self.dphi = TWO_PI / width


def thread_count(threads) -> int:
    """Threads to use: ``threads`` checked, or the CPUs this process may use when None."""
    if threads is None:
        try:
            return max(1, len(os.sched_getaffinity(0)))
        except AttributeError:  # not on every platform
            return max(1, os.cpu_count() or 1)
    if isinstance(threads, bool) or not isinstance(threads, (int, np.integer)) or threads < 1:
        raise ValueError(f"threads must be a whole number >= 1, got {threads!r}")
    return int(threads)
