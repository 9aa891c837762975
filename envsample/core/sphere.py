"""The direction convention of envsample, exact pixel solid angles and shading frames.

Convention (one for the whole package, stored in every table)
-------------------------------------------------------------
An equirectangular ("lat-long") map of H rows and W columns covers the sphere.

* ``v`` in [0, 1] runs from the **top** of the image (v = 0, row 0) to the bottom
  (v = 1).  The polar angle from the up axis is ``theta = pi * v`` (radians):
  row 0 touches the zenith, the last row the nadir.
* ``u`` in [0, 1) runs from the left edge to the right edge.  The azimuth is
  ``phi = 2*pi*(u - 0.5) + rotation`` (radians).
* Directions are unit vectors in a right-handed frame (forward ``f``, right ``r``,
  up ``a``) with ``r = f x a``::

      d = sin(theta) * (cos(phi) * f + sin(phi) * r) + cos(theta) * a

  ``up="y"``: a = +Y, f = -Z, r = +X (the usual y-up camera frame).
  ``up="z"``: a = +Z, f = +Y, r = +X.
  The centre of the image (u = 0.5, v = 0.5) therefore looks forward, and
  moving right in the image turns to the viewer's right, as seen from inside the
  sphere.  ``rotation_deg`` (degrees at the API boundary, radians inside) turns the
  environment about the up axis: with rotation R the image centre looks at azimuth R.

Pixel (i, j) covers theta in [pi*i/H, pi*(i+1)/H] and u in [j/W, (j+1)/W]; its
solid angle is exactly ``(cos theta_i - cos theta_{i+1}) * 2*pi / W`` steradians.

References
----------
- Duff, T., Burgess, J., Christensen, P., Hery, C., Kensler, A., Liani, M. and
  Villemin, R. (2017). Building an Orthonormal Basis, Revisited. JCGT 6(1).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.compat import renamed_keywords

__all__ = [
    "UP_AXES",
    "convention",
    "uv_to_direction",
    "direction_to_uv",
    "row_cos_edges",
    "row_solid_angles",
    "pixel_solid_angles",
    "direction_to_pixel",
    "pixel_center_directions",
    "pixel_center_angles",
    "uv_to_angles",
    "angles_to_uv",
    "direction_angles",
    "local_angles",
    "as_vectors",
    "UNIT_TOLERANCE",
    "orthonormal_basis",
    "to_local",
    "to_world",
]

#: Frames (forward, right, up) for each supported up axis.  right = forward x up.
UP_AXES: dict[str, tuple[tuple[float, float, float], ...]] = {
    "y": ((0.0, 0.0, -1.0), (1.0, 0.0, 0.0), (0.0, 1.0, 0.0)),
    "z": ((0.0, 1.0, 0.0), (1.0, 0.0, 0.0), (0.0, 0.0, 1.0)),
}


def _frame(up: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    try:
        f, r, a = UP_AXES[str(up).lower()]
    except KeyError:
        raise ValueError(f"unknown up axis {up!r}; valid: {', '.join(UP_AXES)}") from None
    return np.array(f), np.array(r), np.array(a)


@renamed_keywords(rotate_deg="rotation_deg")
def convention(up: str = "y", rotation_deg: float = 0.0) -> dict:
    """A JSON-ready description of the direction convention, stored in every table.

    ``up`` is the axis letter (``"y"`` or ``"z"``) wherever it appears; the frame's unit
    vectors are ``up_vector``, ``forward_vector`` and ``right_vector``.
    """
    f, r, a = _frame(up)
    return {
        "projection": "equirectangular",
        "up": str(up).lower(),
        "up_vector": a.tolist(),
        "forward_vector": f.tolist(),
        "right_vector": r.tolist(),
        "handedness": "right",
        "rotation_deg": float(rotation_deg),
        "u": "0 at the left edge, increasing to the right; phi = 2*pi*(u - 0.5) + rotation",
        "v": "0 at the top row (zenith), 1 at the bottom row (nadir); theta = pi * v",
        "direction": "d = sin(theta)*(cos(phi)*forward_vector + sin(phi)*right_vector) + cos(theta)*up_vector",
    }


@renamed_keywords(rotate_deg="rotation_deg")
def uv_to_direction(u, v, *, up: str = "y", rotation_deg: float = 0.0) -> np.ndarray:
    """Unit directions for image coordinates.

    Parameters
    ----------
    u, v : array_like
        Image coordinates in [0, 1] (broadcast together); see the module docstring.
    up : {"y", "z"}
        The world up axis.
    rotation_deg : float
        Rotation of the environment about the up axis, degrees.

    Returns
    -------
    ndarray, float64, shape ``broadcast(u, v).shape + (3,)``
    """
    u = np.asarray(u, dtype=np.float64)
    v = np.asarray(v, dtype=np.float64)
    f, r, a = _frame(up)
    phi = 2.0 * math.pi * (u - 0.5) + math.radians(rotation_deg)
    theta = math.pi * v
    st = np.sin(theta)
    return _combine(st * np.cos(phi), st * np.sin(phi), np.cos(theta), f, r, a)


def _combine(cf, cr, ca, f, r, a) -> np.ndarray:
    cf, cr, ca = np.broadcast_arrays(cf, cr, ca)
    out = np.empty(cf.shape + (3,), dtype=np.float64)
    for k in range(3):
        out[..., k] = cf * f[k] + cr * r[k] + ca * a[k]
    return out


@renamed_keywords(rotate_deg="rotation_deg")
def direction_to_uv(d, *, up: str = "y", rotation_deg: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Image coordinates ``(u, v)`` of directions; the inverse of :func:`uv_to_direction`.

    ``d`` is array_like of shape ``(..., 3)``; it need not be normalised (zero
    vectors map to u = 0.5, v = 0, the up axis).  ``u`` is wrapped into [0, 1), ``v`` lies in [0, 1].
    Returns two float64 arrays of shape ``d.shape[:-1]``.
    """
    d = np.asarray(d, dtype=np.float64)
    if d.shape[-1:] != (3,):
        raise ValueError(f"directions must have shape (..., 3), got {d.shape}")
    f, r, a = _frame(up)
    cf = d @ f
    cr = d @ r
    ca = d @ a
    horiz = np.hypot(cf, cr)
    theta = np.arctan2(horiz, ca)
    phi = np.arctan2(cr, cf) - math.radians(rotation_deg)
    u = phi / (2.0 * math.pi) + 0.5
    u -= np.floor(u)
    u = np.where(u >= 1.0, 0.0, u)
    v = theta / math.pi
    return u, v


def row_cos_edges(height: int) -> np.ndarray:
    """cos(theta) at the H+1 row edges, float64, decreasing from 1 (zenith) to -1 (nadir)."""
    _check_size(height, 1)
    out = np.cos(np.pi * np.arange(height + 1) / height)
    out[0], out[-1] = 1.0, -1.0
    return out


def row_solid_angles(height: int, width: int) -> np.ndarray:
    """Exact solid angle of one pixel in each row, steradians, float64 shape (H,).

    ``(cos theta_i - cos theta_{i+1}) * 2*pi / W``, evaluated as
    ``2 sin(theta_mid) sin(dtheta/2) * 2*pi / W`` to avoid cancellation near the poles.
    ``row_solid_angles(H, W).sum() * W == 4*pi`` to rounding.
    """
    _check_size(height, width)
    dtheta = math.pi / height
    mid = (np.arange(height) + 0.5) * dtheta
    return 2.0 * np.sin(mid) * math.sin(dtheta / 2.0) * (2.0 * math.pi / width)


def pixel_solid_angles(height: int, width: int) -> np.ndarray:
    """Exact solid angle of every pixel, steradians: a read-only float64 (H, W) view.

    The array is a broadcast of :func:`row_solid_angles` and costs no memory per
    pixel; it sums to 4*pi.
    """
    return np.broadcast_to(row_solid_angles(height, width)[:, None], (height, width))


@renamed_keywords(rotate_deg="rotation_deg")
def direction_to_pixel(d, height: int, width: int, *, up: str = "y", rotation_deg: float = 0.0):
    """Row and column (int64 arrays) of the pixel that contains each direction."""
    u, v = direction_to_uv(d, up=up, rotation_deg=rotation_deg)
    col = np.minimum((u * width).astype(np.int64), width - 1)
    row = np.minimum((v * height).astype(np.int64), height - 1)
    return row, col


def uv_to_angles(u, v, *, rotation_deg: float = 0.0):
    """Azimuth and elevation, **degrees**, of image coordinates (for reports, messages and the CLI).

    Azimuth is the convention's phi wrapped to (-180, 180] (0 = image centre, positive
    to the right, plus the rotation); elevation is 90 deg minus the polar angle from
    the up axis.  Arrays in, float64 arrays out (floats for scalars).
    """
    az = 360.0 * (np.asarray(u, dtype=np.float64) - 0.5) + float(rotation_deg)
    az = (az + 180.0) % 360.0 - 180.0
    az = np.where(az == -180.0, 180.0, az)
    el = 90.0 - 180.0 * np.asarray(v, dtype=np.float64)
    return (float(az), float(el)) if np.ndim(az) == 0 and np.ndim(el) == 0 else (az, el)


def angles_to_uv(azimuth_deg, elevation_deg, *, rotation_deg: float = 0.0):
    """Image coordinates (u in [0, 1), v in [0, 1]) of an azimuth and elevation in degrees; inverse of :func:`uv_to_angles`."""
    u = ((np.asarray(azimuth_deg, dtype=np.float64) - float(rotation_deg)) / 360.0 + 0.5) % 1.0
    v = (90.0 - np.asarray(elevation_deg, dtype=np.float64)) / 180.0
    return (float(u), float(v)) if np.ndim(u) == 0 and np.ndim(v) == 0 else (u, v)


def local_angles(cf, cr, ca, *, rotation_deg: float = 0.0):
    """Azimuth and elevation, **degrees**, of a vector given by its (forward, right, up) components.

    For vectors already in the map's own frame (a power-weighted mean direction of an
    emitter, say): ``phi = atan2(right, forward)``, ``theta = atan2(|horizontal|, up)``,
    then :func:`uv_to_angles`.  Need not be normalised; the zero vector gives (0, 90).
    """
    cf, cr, ca = (np.asarray(c, dtype=np.float64) for c in (cf, cr, ca))
    phi = np.arctan2(cr, cf)
    theta = np.arctan2(np.hypot(cf, cr), ca)
    return uv_to_angles(phi / (2.0 * math.pi) + 0.5, theta / math.pi, rotation_deg=rotation_deg)


@renamed_keywords(rotate_deg="rotation_deg")
def direction_angles(directions, *, up: str = "y", rotation_deg: float = 0.0):
    """Azimuth and elevation in **degrees** of directions ``(..., 3)``: :func:`direction_to_uv` then :func:`uv_to_angles`."""
    u, v = direction_to_uv(directions, up=up, rotation_deg=rotation_deg)
    return uv_to_angles(u, v, rotation_deg=rotation_deg)


@renamed_keywords(rotate_deg="rotation_deg")
def pixel_center_angles(row, col, height: int, width: int, *, rotation_deg: float = 0.0):
    """Azimuth and elevation, **degrees**, of pixel centres; ``row`` and ``col`` may be arrays (see :func:`uv_to_angles`)."""
    return uv_to_angles((np.asarray(col) + 0.5) / width, (np.asarray(row) + 0.5) / height, rotation_deg=rotation_deg)


@renamed_keywords(rotate_deg="rotation_deg")
def pixel_center_directions(height: int, width: int, *, up: str = "y", rotation_deg: float = 0.0) -> np.ndarray:
    """Directions through the centre (in u and v) of every pixel, float64 (H, W, 3)."""
    _check_size(height, width)
    u = (np.arange(width) + 0.5) / width
    v = (np.arange(height) + 0.5) / height
    return uv_to_direction(u[None, :], v[:, None], up=up, rotation_deg=rotation_deg)


def orthonormal_basis(n) -> tuple[np.ndarray, np.ndarray]:
    """Tangent and bitangent ``(t, b)`` completing unit normals ``n`` (..., 3) to a right-handed frame.

    ``t x b = n``.  Branch-free construction of Duff et al. (2017), JCGT 6(1), listing 3.
    """
    n = np.asarray(n, dtype=np.float64)
    x, y, z = n[..., 0], n[..., 1], n[..., 2]
    sign = np.where(z >= 0.0, 1.0, -1.0)
    a = -1.0 / (sign + z)
    b = x * y * a
    t = np.stack([1.0 + sign * x * x * a, sign * b, -sign * x], axis=-1)
    bt = np.stack([b, sign + y * y * a, -y], axis=-1)
    return t, bt


def to_local(d, n) -> np.ndarray:
    """Express world directions ``d`` (..., 3) in the frame (t, b, n) of normals ``n``; z is along n."""
    d = np.asarray(d, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    t, b = orthonormal_basis(n)
    return np.stack([np.sum(d * t, -1), np.sum(d * b, -1), np.sum(d * n, -1)], axis=-1)


def to_world(local, n) -> np.ndarray:
    """Map local directions (x along t, y along b, z along n) back to world space."""
    local = np.asarray(local, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    t, b = orthonormal_basis(n)
    return local[..., 0:1] * t + local[..., 1:2] * b + local[..., 2:3] * n


def _check_size(height, width) -> None:
    if int(height) != height or int(width) != width or height < 1 or width < 1:
        raise ValueError(f"height and width must be positive integers, got {height}x{width}")


#: Largest deviation from length 1 accepted where unit vectors are required (float64 rounding of callers' normals).
UNIT_TOLERANCE = 1e-6

_UNIT_RULES = ("any", "normalise", "require")


def as_vectors(x, name: str = "directions", *, unit: str = "any", flat: bool = True):
    """The one boundary check of direction arrays: ``(..., 3)`` finite float64, as ``(N, 3)`` and the leading shape.

    ``unit`` says what length they must have: ``"any"`` (any finite vector), ``"normalise"``
    (any non-zero vector, returned divided by its length) or ``"require"`` (length 1 within
    :data:`UNIT_TOLERANCE`, returned exactly normalised).  Messages name ``name`` and the remedy.
    Returns ``(vectors (N, 3), lead)`` where ``lead`` is the input's leading shape.
    """
    if unit not in _UNIT_RULES:
        raise ValueError(f"unknown unit rule {unit!r}; valid: {', '.join(_UNIT_RULES)}")
    a = np.asarray(x, dtype=np.float64)
    if a.ndim == 0 or a.shape[-1] != 3:
        raise ValueError(f"{name} must have shape (..., 3), got {a.shape}; pass 3-vectors")
    lead = a.shape[:-1]
    a = a.reshape(-1, 3) if flat else a
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} contains NaN or Inf; pass finite vectors")
    if unit == "any":
        return a, lead
    norm = np.linalg.norm(a, axis=-1)
    if unit == "normalise" and np.any(norm < 1e-12):
        raise ValueError(f"{name} contains a zero vector; pass unit vectors")
    if unit == "require" and norm.size and np.max(np.abs(norm - 1.0)) > UNIT_TOLERANCE:
        worst = float(norm.reshape(-1)[np.argmax(np.abs(norm - 1.0))])
        raise ValueError(f"{name} must be unit vectors (one has length {worst:.6g}); normalise them first")
    return a / norm[..., None], lead
