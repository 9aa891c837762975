"""Reference irradiance of a split scene: the sky map's exact irradiance plus the sun disk's.

Public objects
--------------
:func:`reference_split_irradiance`  ``E(n) = E_sky(n) + E_sun(n)``, float64 (..., 3).

The sky is the piecewise-constant map of :func:`envsample.reference.irradiance.reference_irradiance`
(Stokes' theorem on the sphere, Arvo 1995); the sun is the uniform disk of
:class:`envsample.sampling.sun.SunLight`, ``pi L sin^2(alpha) cos(theta)`` while it is wholly
above the surface's horizon and a converged quadrature where it straddles it (see
:mod:`envsample.sampling.sun`).  Both are exact to rounding (the straddling quadrature to
about 1e-15 relative).  Irradiance in map units x sr; an estimate for asset preparation,
not a certified lighting calculation.

References
----------
- Arvo, J. (1995). Applications of irradiance tensors to the simulation of non-Lambertian
  phenomena. SIGGRAPH 95.
"""

from __future__ import annotations

import numpy as np

from envsample.reference.grid import unit_normals
from envsample.reference.irradiance import reference_irradiance

__all__ = ["reference_split_irradiance"]


def reference_split_irradiance(sky_rgb, sun, normals, *, up: str = "y", rotation_deg: float = 0.0,
                               size=None) -> np.ndarray:
    """Exact irradiance of ``sky_rgb`` (H, W, 3) plus the analytic ``sun`` on unit ``normals`` (..., 3).

    ``sun`` is a :class:`envsample.sampling.sun.SunLight` (or None for the sky alone);
    ``up``, ``rotation_deg`` and ``size`` are those of :func:`reference_irradiance`.
    Returns float64 of shape ``normals.shape``, map units x sr.
    """
    e = reference_irradiance(sky_rgb, normals, up=up, rotation_deg=rotation_deg, size=size)
    if sun is None:
        return e
    flat, _ = unit_normals(normals)  # reference_irradiance has accepted them as unit vectors
    return e + sun.irradiance(flat).reshape(e.shape)
