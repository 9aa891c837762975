"""The sun as an analytic light: a distant disk of uniform radiance, its sampling, pdf and irradiance.

Public objects
--------------
:class:`SunLight`       a uniform disk (spherical cap) of angular radius ``alpha`` around a
                        unit direction ``a``, with RGB radiance ``L``: ``eval``, ``sample``,
                        ``pdf`` (the strategy interface of :mod:`envsample.sampling.strategies`),
                        ``irradiance`` (exact) and ``normal_irradiance``.
:func:`cap_irradiance_factor`  ``integral over the cap of max(0, n.w) dw`` for unit normals, sr.

Conventions: directions are float64 world-space unit vectors in the table's convention
(:mod:`envsample.core.sphere`); angles are radians inside (degrees only in the
``*_deg`` constructor arguments and properties); solid angles in steradians, pdfs per
steradian; radiance in map units, irradiance in map units x sr.

Sampling: uniform in solid angle over the cap, ``pdf = 1 / Omega`` inside, ``Omega =
2 pi (1 - cos alpha)``: ``cos beta = 1 - u0 (1 - cos alpha)``, ``psi = 2 pi u1``
(Archimedes' hat-box theorem: the height along the axis is uniform in solid angle;
Shirley & Wang 1992 for cone sampling in rendering).  ``1 - cos alpha`` is computed as
``2 sin^2(alpha / 2)`` so a cap of 6.8e-5 sr loses no digits.

Irradiance ``E(n) = L * integral_cap max(0, n.w) dw``.  With ``c = n.a`` (cos of the angle
theta between the normal and the disk's centre), ``s = sqrt(1 - c^2)`` and the cap
parametrised by the angle beta from its axis and the azimuth psi about it,
``n.w = c cos beta + s sin beta cos psi``.  The azimuthal integral is closed form:

    g(beta) = 2 pi c cos beta                          if c cos beta >= s sin beta
            = 0                                        if c cos beta <= -s sin beta
            = 2 (c cos beta psi_c + s sin beta sin psi_c),  psi_c = acos(-c cos beta / (s sin beta)),

so ``E = L integral_0^alpha g(beta) sin beta d beta``.  While the cap lies wholly above the
surface's horizon (``alpha <= pi/2 - theta``) this is the closed form
``E = pi L sin^2(alpha) cos(theta)`` (the irradiance of a uniform disk source, e.g.
Moon 1936, from memory); wholly below it is 0.  Where the cap straddles the horizon, the
part ``beta < beta* = |pi/2 - theta|`` is closed form again and the rest is a
Gauss-Legendre quadrature after the substitution ``beta = beta* + (alpha - beta*) t^2``,
which removes the square-root behaviour of g at ``beta*``; 48 nodes converge to about
1e-15 relative (checked against ``scipy.integrate.dblquad`` in the tests).

References
----------
- Shirley, P. and Wang, C. (1992). Distribution ray tracing: theory and practice.
  Third Eurographics Workshop on Rendering, 33-43 (sampling a spherical light's cone).
- Moon, P. (1936). The Scientific Basis of Illuminating Engineering. McGraw-Hill
  (the irradiance of a uniform disk source, from memory).
- Abramowitz, M. and Stegun, I. A. (1964). Handbook of Mathematical Functions,
  section 25.4.29 (Gauss-Legendre quadrature).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.constants import SUN_ANGULAR_DIAMETER_RAD
from envsample.core.sphere import angles_to_uv, direction_angles, to_world, uv_to_direction

__all__ = ["SunLight", "cap_irradiance_factor", "cap_solid_angle"]

#: Gauss-Legendre nodes of the straddling part of the cap integral (see the module docstring).
_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(48)

#: Largest angular radius of a disk light, radians (a hemisphere; a "sun" is far smaller).
_MAX_HALF_ANGLE = 0.5 * math.pi - 1e-9


def cap_solid_angle(half_angle: float) -> float:
    """Solid angle (sr) of a spherical cap of angular radius ``half_angle`` (radians): 4 pi sin^2(alpha/2)."""
    return 4.0 * math.pi * math.sin(0.5 * float(half_angle)) ** 2


def _unit(direction, name: str = "direction") -> np.ndarray:
    d = np.asarray(direction, dtype=np.float64).reshape(-1)
    if d.shape != (3,) or not np.all(np.isfinite(d)) or not np.linalg.norm(d) > 1e-12:
        raise ValueError(f"{name} must be a finite non-zero 3-vector, got {direction!r}")
    return d / np.linalg.norm(d)


def _directions(d) -> np.ndarray:
    d = np.asarray(d, dtype=np.float64)
    if d.ndim == 1:
        d = d[None, :]
    if d.ndim != 2 or d.shape[1] != 3:
        raise ValueError(f"directions must have shape (N, 3) or (3,), got {np.shape(d)}")
    return d


def _straddle_part(c: np.ndarray, s: np.ndarray, lo: np.ndarray, alpha: float) -> np.ndarray:
    """integral_lo^alpha g(beta) sin(beta) d beta for normals whose horizon cuts the cap (lo = beta*)."""
    t = 0.5 * (_GL_NODES + 1.0)  # nodes on [0, 1]
    w = 0.5 * _GL_WEIGHTS
    span = (alpha - lo)[:, None]
    beta = lo[:, None] + span * t * t
    jac = 2.0 * span * t
    cb, sb = np.cos(beta), np.sin(beta)
    a = c[:, None] * cb
    b = s[:, None] * sb
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.clip(-a / b, -1.0, 1.0)
    g = 2.0 * (a * np.arccos(x) + b * np.sqrt(np.maximum(0.0, 1.0 - x * x)))
    return np.sum(g * sb * jac * w, axis=1)


def cap_irradiance_factor(normals, axis, half_angle: float) -> np.ndarray:
    """``integral over the cap of max(0, n.w) dw`` (sr) for unit normals (N, 3) or (3,), float64 (N,).

    The cap has unit ``axis`` and angular radius ``half_angle`` (radians, < pi/2).  Closed
    form where the cap is wholly above or below the horizon of n, converged quadrature
    where it straddles it (see the module docstring).
    """
    n = _directions(normals)
    a = _unit(axis, "axis")
    alpha = float(half_angle)
    if not (0.0 < alpha <= _MAX_HALF_ANGLE):
        raise ValueError(f"half_angle must lie in (0, pi/2) radians, got {half_angle!r}")
    norm = np.linalg.norm(n, axis=1)
    c = np.clip((n @ a) / np.where(norm > 0, norm, 1.0), -1.0, 1.0)
    s = np.sqrt(np.maximum(0.0, 1.0 - c * c))
    theta = np.arccos(c)
    beta_star = np.abs(0.5 * math.pi - theta)
    sin2a = math.sin(alpha) ** 2
    out = np.where(theta <= 0.5 * math.pi - alpha, math.pi * sin2a * c, 0.0)
    cut = beta_star < alpha
    if np.any(cut):
        cc, ss, lo = c[cut], s[cut], beta_star[cut]
        # beta < beta*: the whole ring is lit (c > 0) or dark (c < 0).
        inner = np.where(cc > 0.0, math.pi * cc * np.sin(lo) ** 2, 0.0)
        out[cut] = inner + _straddle_part(cc, ss, lo, alpha)
    return out


class SunLight:
    """A distant disk light of uniform RGB radiance: the sun taken out of a map.

    Parameters
    ----------
    direction : (3,) array_like
        Unit vector towards the disk's centre, world space in the table's convention.
    half_angle : float
        Angular radius of the disk, radians (the mean sun: 0.2665 deg, from memory).
    radiance : float or (3,)
        Linear RGB radiance inside the disk, map units (float64).
    up, rotation_deg
        The direction convention the direction is expressed in (for angles in reports).

    Attributes: ``solid_angle`` (sr), ``power`` (RGB, ``L Omega``, map units x sr),
    ``normal_irradiance`` (RGB, ``pi L sin^2 alpha``, map units x sr: the irradiance of a
    surface facing the sun), ``azimuth_deg``/``elevation_deg``/``diameter_deg``.
    As a strategy (``name = "sun"``) the frame is ignored.
    """

    name = "sun"
    compensated = False

    def __init__(self, direction, half_angle: float, radiance, *, up: str = "y", rotation_deg: float = 0.0):
        self.direction = _unit(direction)
        alpha = float(half_angle)
        if not (math.isfinite(alpha) and 0.0 < alpha <= _MAX_HALF_ANGLE):
            raise ValueError(f"half_angle must lie in (0, pi/2) radians, got {half_angle!r}")
        self.half_angle = alpha
        rad = np.broadcast_to(np.asarray(radiance, dtype=np.float64), (3,)).copy()
        if not np.all(np.isfinite(rad)) or np.any(rad < 0.0):
            raise ValueError(f"radiance must be finite and non-negative (RGB), got {radiance!r}")
        self.radiance = rad
        self.up = str(up)
        self.rotation_deg = float(rotation_deg)
        self._one_minus_cos = 2.0 * math.sin(0.5 * alpha) ** 2
        self.solid_angle = 2.0 * math.pi * self._one_minus_cos

    @classmethod
    def from_angles(cls, *, azimuth_deg: float, elevation_deg: float, diameter_deg: float | None = None,
                    radiance=None, normal_irradiance=None, up: str = "y", rotation_deg: float = 0.0) -> SunLight:
        """A sun at an azimuth and elevation (degrees) of a given diameter (degrees, default 0.533).

        Give either ``radiance`` (RGB or grey) or ``normal_irradiance`` (RGB or grey, map
        units x sr on a surface facing the sun; ``L = E / (pi sin^2 alpha)``).
        """
        diam = math.degrees(SUN_ANGULAR_DIAMETER_RAD) if diameter_deg is None else float(diameter_deg)
        alpha = 0.5 * math.radians(diam)
        if (radiance is None) == (normal_irradiance is None):
            raise ValueError("give exactly one of radiance= and normal_irradiance=")
        if radiance is None:
            radiance = np.asarray(normal_irradiance, dtype=np.float64) / (math.pi * math.sin(alpha) ** 2)
        u, v = angles_to_uv(azimuth_deg, elevation_deg, rotation_deg=rotation_deg)
        d = uv_to_direction(u, v, up=up, rotation_deg=rotation_deg)
        return cls(d, alpha, radiance, up=up, rotation_deg=rotation_deg)

    # --- description ----------------------------------------------------------------
    @property
    def diameter_deg(self) -> float:
        return math.degrees(2.0 * self.half_angle)

    @property
    def angles_deg(self) -> tuple[float, float]:
        """(azimuth, elevation) of the disk's centre, degrees."""
        az, el = direction_angles(self.direction, up=self.up, rotation_deg=self.rotation_deg)
        return float(az), float(el)

    @property
    def azimuth_deg(self) -> float:
        return self.angles_deg[0]

    @property
    def elevation_deg(self) -> float:
        return self.angles_deg[1]

    @property
    def power(self) -> np.ndarray:
        """RGB ``integral of L over the disk = L Omega`` (map units x sr), float64 (3,)."""
        return self.radiance * self.solid_angle

    @property
    def normal_irradiance(self) -> np.ndarray:
        """RGB irradiance of a surface facing the disk's centre, ``pi L sin^2 alpha`` (map units x sr)."""
        return self.radiance * (math.pi * math.sin(self.half_angle) ** 2)

    def __repr__(self) -> str:
        az, el = self.angles_deg
        return (f"SunLight(azimuth_deg={az:.4g}, elevation_deg={el:.4g}, diameter_deg={self.diameter_deg:.4g}, "
                f"radiance={self.radiance.round(6).tolist()})")

    # --- the light ------------------------------------------------------------------
    def inside(self, directions) -> np.ndarray:
        """bool (N,): unit directions within the disk (its edge included)."""
        d = _directions(directions)
        gap = 1.0 - d @ self.direction
        return gap <= self._one_minus_cos * (1.0 + 1e-12)

    def eval(self, directions) -> np.ndarray:
        """RGB radiance (N, 3) float64 of the light in unit directions: ``L`` inside the disk, 0 outside."""
        return np.where(self.inside(directions)[:, None], self.radiance[None, :], 0.0)

    def sample(self, u, frame=None):
        """Directions uniform over the disk from uniforms ``u`` (N, 2): ``(directions (N, 3), pdf (N,))``.

        ``frame`` is ignored (a light does not depend on the shading point); pdf is
        ``1 / Omega`` per steradian.
        """
        u = np.asarray(u, dtype=np.float64)
        if u.ndim != 2 or u.shape[1] != 2 or (frame is not None and u.shape[0] != len(frame)):
            raise ValueError(f"u must have shape (N, 2) (one uniform pair per sample), got {u.shape}")
        gap = u[:, 0] * self._one_minus_cos  # 1 - cos(beta), uniform in [0, 1 - cos alpha)
        cos_b = 1.0 - gap
        sin_b = np.sqrt(np.maximum(0.0, gap * (2.0 - gap)))
        psi = 2.0 * math.pi * u[:, 1]
        local = np.column_stack([sin_b * np.cos(psi), sin_b * np.sin(psi), cos_b])
        axis = np.broadcast_to(self.direction, local.shape)
        return to_world(local, axis), np.full(u.shape[0], 1.0 / self.solid_angle)

    def pdf(self, directions, frame=None) -> np.ndarray:
        """Solid-angle density (N,) of :meth:`sample`: ``1 / Omega`` inside the disk, 0 outside."""
        return np.where(self.inside(directions), 1.0 / self.solid_angle, 0.0)

    def irradiance(self, normals) -> np.ndarray:
        """Exact RGB irradiance (N, 3) float64 of the disk on surfaces with unit normals (N, 3) or (3,).

        ``pi L sin^2(alpha) cos(theta)`` while the disk is wholly above the surface's
        horizon, 0 below it, converged quadrature where it straddles it.
        """
        f = cap_irradiance_factor(normals, self.direction, self.half_angle)
        return f[:, None] * self.radiance[None, :]

    def to_dict(self) -> dict:
        """The light's parameters for JSON (see :mod:`envsample.lights.files` for the sun file)."""
        az, el = self.angles_deg
        return {
            "direction": self.direction.tolist(),
            "azimuth_deg": az,
            "elevation_deg": el,
            "angular_diameter_deg": self.diameter_deg,
            "solid_angle_sr": self.solid_angle,
            "radiance_rgb": self.radiance.tolist(),
            "irradiance_normal_rgb": self.normal_irradiance.tolist(),
            "power_rgb": self.power.tolist(),
        }
