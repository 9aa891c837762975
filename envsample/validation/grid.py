"""Where the validation render places its normals: a lat-long grid (with solid-angle weights), strided
sub-grids of it, the normals of a sphere seen by a camera, and view directions for the glossy check.

Conventions of :mod:`envsample.core.sphere` (row 0 at the zenith, the table's up axis and rotation).

References
----------
- Duff, T. et al. (2017). Building an Orthonormal Basis, Revisited. JCGT 6(1) (the tangent frame).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.sphere import _frame, orthonormal_basis, pixel_center_directions, row_solid_angles

__all__ = ["normal_grid", "subgrid", "sphere_normals", "view_directions"]


def normal_grid(width: int, height: int, *, up: str = "y", rotation_deg: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Normals at the pixel centres of a ``width x height`` lat-long image and their cells' solid angles.

    Returns float64 ``(height * width, 3)`` unit normals (row-major, row 0 at the
    zenith, convention of :mod:`envsample.sphere`) and float64 ``(height * width,)``
    exact solid angles in steradians (summing to 4 pi), used as averaging weights.
    """
    n = pixel_center_directions(height, width, up=up, rotation_deg=rotation_deg).reshape(-1, 3)
    w = np.repeat(row_solid_angles(height, width), width)
    return n, w


def subgrid(width: int, height: int, limit: tuple[int, int]) -> tuple[np.ndarray, tuple[int, int]]:
    """Flat indices of a strided sub-grid of at most ``limit = (width, height)`` normals, and its size."""
    sx = max(1, -(-width // limit[0]))
    sy = max(1, -(-height // limit[1]))
    rows = np.arange(sy // 2, height, sy)
    cols = np.arange(sx // 2, width, sx)
    return (rows[:, None] * width + cols[None, :]).reshape(-1), (cols.size, rows.size)


def sphere_normals(size: int, *, up: str = "y") -> tuple[np.ndarray, np.ndarray]:
    """Normals of a unit sphere seen by an orthographic camera, and the mask of pixels on it.

    The camera looks along the world forward axis of the convention (the image centre
    when the map is not rotated) with the up axis up, so screen right is the convention's right and the
    visible half of the sphere faces back towards the camera: it is lit by the half of
    the map behind the camera.  Returns float64 ``(size, size, 3)`` normals (zero off
    the sphere) and a bool ``(size, size)`` mask.
    """
    f, r, a = _frame(up)
    c = (np.arange(size) + 0.5) / size * 2.0 - 1.0
    x, y = np.meshgrid(c, -c)
    rr = x * x + y * y
    mask = rr < 1.0
    z = np.sqrt(np.maximum(0.0, 1.0 - rr))
    n = x[..., None] * r + y[..., None] * a - z[..., None] * f
    return np.where(mask[..., None], n, 0.0), mask


def view_directions(normals: np.ndarray, angle_deg: float) -> np.ndarray:
    """Unit view directions at ``angle_deg`` from each normal, tilted towards its tangent (Duff et al. 2017 frame)."""
    t, _ = orthonormal_basis(normals)
    a = math.radians(angle_deg)
    return math.cos(a) * normals + math.sin(a) * t
