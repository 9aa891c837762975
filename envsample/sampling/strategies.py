"""Sampling strategies for directions at many shading points at once.

Every strategy has one interface, vectorised over ``N`` samples, each with its own
shading frame:

* ``sample(u, frame) -> (directions, pdf)``: ``u`` is ``(N, 2)`` uniforms in [0, 1);
  ``directions`` are float64 ``(N, 3)`` world-space unit vectors and ``pdf`` is the
  float64 ``(N,)`` solid-angle density, **per steradian**, of each returned direction.
* ``pdf(directions, frame) -> (N,)``: the same density for arbitrary unit directions.
* BSDF strategies also have ``eval(directions, frame) -> (N,)``, the BSDF value
  f(wi, wo) in 1/sr (without the cosine factor).

A :class:`Frame` carries the per-sample unit normals ``(N, 3)`` and, for BSDFs, the
view direction ``wo`` (pointing away from the surface, ``(N, 3)``) and the GGX
roughness.  Local coordinates put the normal on +z with the tangent frame of
:func:`envsample.sphere.orthonormal_basis`; world directions follow the table's
convention (see :mod:`envsample.sphere`), so a strategy never needs to know the up axis.

Strategies (``STRATEGIES`` maps names to classes, :func:`make_strategy` dispatches)
------------------------------------------------------------------------------------
``cosine``
    Cosine-weighted hemisphere, pdf cos(theta)/pi: Malley's method, i.e. the
    concentric square-to-disk map of Shirley & Chiu (1997) projected up onto the
    hemisphere.
``uniform-hemisphere``, ``uniform-sphere``
    Uniform in solid angle, pdf 1/(2 pi) and 1/(4 pi).
``lambert``
    Lambertian BSDF f = albedo/pi, sampled with the cosine density.
``ggx``
    GGX / Trowbridge-Reitz microfacet reflection (Walter et al. 2007) sampled with
    the distribution of visible normals (Heitz 2018).  F = 1 (a white, lossless
    mirror material: the lobe shape is what is being measured); G2 is the
    **height-correlated** Smith masking-shadowing function (Heitz 2014).
    Reflected directions that fall below the surface are returned with their pdf and
    contribute nothing (``eval`` is 0 there); the pdf is *not* renormalised, so it
    integrates to 1 over the whole sphere.
``table``
    An environment sampling table (:class:`envsample.table.EnvTable`) as a strategy;
    it ignores the frame.  A *compensated* table (``table.compensated``) does not
    cover every direction where the map is non-zero; :mod:`envsample.mis` refuses to
    use one on its own.

References
----------
- Shirley, P. and Chiu, K. (1997). A Low Distortion Map Between Disk and Square.
  Journal of Graphics Tools 2(3), 45-52.
- Malley, T. (1988). A Shading Method for Computer Generated Images. Master's
  thesis, University of Utah (cosine-weighted hemisphere by projection of a disk).
- Walter, B., Marschner, S. R., Li, H. and Torrance, K. E. (2007). Microfacet Models
  for Refraction through Rough Surfaces. Eurographics Symposium on Rendering (EGSR).
- Heitz, E. (2014). Understanding the Masking-Shadowing Function in
  Microfacet-Based BRDFs. Journal of Computer Graphics Techniques (JCGT) 3(2).
- Heitz, E. (2018). Sampling the GGX Distribution of Visible Normals. JCGT 7(4).
- Duff, T. et al. (2017). Building an Orthonormal Basis, Revisited. JCGT 6(1).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.sphere import to_world
from envsample.sampling.frames import Frame, check_u, make_frame
from envsample.sampling.ggx import GGXReflection

__all__ = [
    "Frame",
    "make_frame",
    "CosineHemisphere",
    "UniformHemisphere",
    "UniformSphere",
    "LambertBSDF",
    "GGXReflection",
    "TableStrategy",
    "STRATEGIES",
    "make_strategy",
    "concentric_disk",
]

INV_PI = 1.0 / math.pi
INV_2PI = 1.0 / (2.0 * math.pi)
INV_4PI = 1.0 / (4.0 * math.pi)

def concentric_disk(u) -> np.ndarray:
    """Map uniforms (N, 2) in [0,1)^2 to points (N, 2) on the unit disk, uniformly in area.

    The concentric map of Shirley & Chiu (1997): square rings go to circles, so
    strata stay compact (low distortion).
    """
    u = np.asarray(u, dtype=np.float64)
    a = 2.0 * u[:, 0] - 1.0
    b = 2.0 * u[:, 1] - 1.0
    first = np.abs(a) > np.abs(b)
    r = np.where(first, a, b)
    with np.errstate(divide="ignore", invalid="ignore"):
        phi = np.where(first, (math.pi / 4.0) * (b / a), (math.pi / 2.0) - (math.pi / 4.0) * (a / b))
    phi = np.where((a == 0.0) & (b == 0.0), 0.0, phi)
    return np.stack([r * np.cos(phi), r * np.sin(phi)], axis=1)


class CosineHemisphere:
    """Cosine-weighted hemisphere about the normal: pdf = max(0, cos theta)/pi per sr.

    Malley's method: a uniform point on the unit disk (Shirley & Chiu 1997 concentric
    map) projected up to the hemisphere.
    """

    name = "cosine"
    compensated = False

    def sample(self, u, frame: Frame):
        u = check_u(u, frame)
        d = concentric_disk(u)
        z = np.sqrt(np.maximum(0.0, 1.0 - d[:, 0] ** 2 - d[:, 1] ** 2))
        local = np.column_stack([d, z])
        return to_world(local, frame.normals), z * INV_PI

    def pdf(self, directions, frame: Frame):
        c = np.sum(np.asarray(directions, dtype=np.float64) * frame.normals, axis=1)
        return np.maximum(c, 0.0) * INV_PI


class UniformHemisphere:
    """Uniform over the hemisphere about the normal: pdf = 1/(2 pi) per sr where cos theta > 0."""

    name = "uniform-hemisphere"
    compensated = False

    def sample(self, u, frame: Frame):
        u = check_u(u, frame)
        z = u[:, 0]  # cos theta uniform in [0, 1) gives uniform solid angle (Archimedes)
        s = np.sqrt(np.maximum(0.0, 1.0 - z * z))
        phi = 2.0 * math.pi * u[:, 1]
        local = np.column_stack([s * np.cos(phi), s * np.sin(phi), z])
        pdf = np.where(z > 0.0, INV_2PI, 0.0)
        return to_world(local, frame.normals), pdf

    def pdf(self, directions, frame: Frame):
        c = np.sum(np.asarray(directions, dtype=np.float64) * frame.normals, axis=1)
        return np.where(c > 0.0, INV_2PI, 0.0)


class UniformSphere:
    """Uniform over the whole sphere: pdf = 1/(4 pi) per sr (the frame only fixes orientation)."""

    name = "uniform-sphere"
    compensated = False

    def sample(self, u, frame: Frame):
        u = check_u(u, frame)
        z = 1.0 - 2.0 * u[:, 0]
        s = np.sqrt(np.maximum(0.0, 1.0 - z * z))
        phi = 2.0 * math.pi * u[:, 1]
        local = np.column_stack([s * np.cos(phi), s * np.sin(phi), z])
        return to_world(local, frame.normals), np.full(len(frame), INV_4PI)

    def pdf(self, directions, frame: Frame):
        return np.full(np.asarray(directions).shape[0], INV_4PI)


class LambertBSDF(CosineHemisphere):
    """Lambertian reflection f = albedo/pi (1/sr), sampled with the cosine density.

    ``eval`` is zero unless both ``wi`` and (when the frame has one) ``wo`` lie
    strictly above the surface.
    """

    name = "lambert"

    def __init__(self, albedo: float = 1.0):
        albedo = float(albedo)
        if not (0.0 <= albedo <= 1.0):
            raise ValueError(f"albedo must lie in [0, 1] (energy conservation), got {albedo}")
        self.albedo = albedo

    def eval(self, directions, frame: Frame):
        c = np.sum(np.asarray(directions, dtype=np.float64) * frame.normals, axis=1)
        ok = c > 0.0
        if frame.wo is not None:
            ok &= np.sum(frame.wo * frame.normals, axis=1) > 0.0
        return np.where(ok, self.albedo * INV_PI, 0.0)


# --- GGX (Trowbridge-Reitz) pieces, local frame (normal = +z) ------------------


class TableStrategy:
    """An environment sampling table as a strategy; the frame is ignored.

    ``table`` is an :class:`envsample.table.EnvTable` (or any object with the same
    ``sample(u, method=...)`` / ``pdf(directions)`` interface); ``method`` is the
    table's cell-selection method, ``"alias"`` or ``"inverse"``.
    ``compensated`` mirrors ``table.compensated``: such a table is valid only inside MIS.
    """

    name = "table"
    METHODS = ("alias", "inverse")

    def __init__(self, table, method: str = "alias"):
        if method not in self.METHODS:
            raise ValueError(f"unknown table sampling method {method!r}; valid names: {', '.join(self.METHODS)}")
        self.table = table
        self.method = method
        self.compensated = bool(getattr(table, "compensated", False))

    def sample(self, u, frame: Frame):
        u = check_u(u, frame)
        s = self.table.sample(u, method=self.method)
        return np.asarray(s.directions, dtype=np.float64), np.asarray(s.pdf, dtype=np.float64)

    def pdf(self, directions, frame: Frame):
        return np.asarray(self.table.pdf(np.asarray(directions, dtype=np.float64)), dtype=np.float64)


#: Strategy classes by name.
STRATEGIES: dict[str, type] = {
    "cosine": CosineHemisphere,
    "uniform-hemisphere": UniformHemisphere,
    "uniform-sphere": UniformSphere,
    "lambert": LambertBSDF,
    "ggx": GGXReflection,
    "table": TableStrategy,
}


def make_strategy(method: str, **params):
    """Build a strategy by name (see ``STRATEGIES``); ``params`` go to its constructor.

    ``make_strategy("table", table=t, method="inverse")`` takes the table's own
    ``method`` through ``table_method=`` to avoid the clash:
    ``make_strategy("table", table=t, table_method="inverse")``.
    """
    cls = STRATEGIES.get(method)
    if cls is None:
        raise ValueError(f"unknown strategy {method!r}; valid names: {', '.join(STRATEGIES)}")
    if cls is TableStrategy:
        if "table" not in params:
            raise ValueError("strategy 'table' needs table=<EnvTable>; build one with envsample.build_table")
        return TableStrategy(params["table"], method=params.get("table_method", "alias"))
    return cls(**params)
