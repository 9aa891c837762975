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
from dataclasses import dataclass

import numpy as np

from envsample.core.sphere import to_local, to_world

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
    "ggx_d",
    "ggx_lambda",
    "ggx_g1",
    "ggx_g2",
]

INV_PI = 1.0 / math.pi
INV_2PI = 1.0 / (2.0 * math.pi)
INV_4PI = 1.0 / (4.0 * math.pi)

#: Smallest GGX alpha accepted: below it D overflows float64 near the peak.
MIN_ROUGHNESS = 1e-4


@dataclass(frozen=True)
class Frame:
    """Per-sample shading frames.

    Attributes
    ----------
    normals : float64 (N, 3)
        Unit surface normals, world space.
    wo : float64 (N, 3) or None
        Unit view directions pointing away from the surface (BSDF strategies only).
    roughness : float64 (N,) or None
        GGX alpha (Walter et al. 2007's alpha_g, the width of D; *not* squared
        "perceptual" roughness), in [1e-4, 1].
    """

    normals: np.ndarray
    wo: np.ndarray | None = None
    roughness: np.ndarray | None = None

    def __len__(self) -> int:
        return self.normals.shape[0]

    def take(self, index) -> "Frame":
        """The frames of a subset of samples (boolean mask or integer index)."""
        return Frame(
            self.normals[index],
            None if self.wo is None else self.wo[index],
            None if self.roughness is None else self.roughness[index],
        )

    def repeat(self, count: int) -> "Frame":
        """Each frame repeated ``count`` times in a row (frame i -> rows i*count .. i*count+count-1)."""
        return Frame(
            np.repeat(self.normals, count, axis=0),
            None if self.wo is None else np.repeat(self.wo, count, axis=0),
            None if self.roughness is None else np.repeat(self.roughness, count, axis=0),
        )


def _unit_vectors(x, name: str, n: int | None = None) -> np.ndarray:
    a = np.asarray(x, dtype=np.float64)
    if a.ndim == 1:
        a = a[None, :]
    if a.ndim != 2 or a.shape[1] != 3:
        raise ValueError(f"{name} must have shape (N, 3) or (3,), got {np.shape(x)}; pass unit vectors")
    if n is not None and a.shape[0] not in (1, n):
        raise ValueError(f"{name} has {a.shape[0]} rows but the normals have {n}; pass one per normal or one for all")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} contains NaN or Inf; pass finite unit vectors")
    norm = np.linalg.norm(a, axis=1)
    if np.any(norm < 1e-12):
        raise ValueError(f"{name} contains a zero vector; pass unit vectors")
    a = a / norm[:, None]
    if n is not None and a.shape[0] == 1 and n != 1:
        a = np.broadcast_to(a, (n, 3)).copy()
    return a


def make_frame(normals, wo=None, roughness=None) -> Frame:
    """Validate and normalise inputs into a :class:`Frame`.

    ``normals`` (N, 3) or (3,); ``wo`` (N, 3) or (3,) broadcast to every normal;
    ``roughness`` scalar or (N,) GGX alpha.  Vectors are normalised; zero, NaN or Inf
    vectors and roughness outside [1e-4, 1] raise ValueError.
    """
    n = _unit_vectors(normals, "normals")
    count = n.shape[0]
    w = None if wo is None else _unit_vectors(wo, "wo", count)
    r = None
    if roughness is not None:
        r = np.asarray(roughness, dtype=np.float64)
        if r.ndim == 0:
            r = np.full(count, float(r))
        if r.shape != (count,):
            raise ValueError(f"roughness must be a scalar or shape ({count},), got {r.shape}")
        if not np.all(np.isfinite(r)) or np.any(r < MIN_ROUGHNESS) or np.any(r > 1.0):
            raise ValueError(f"roughness (GGX alpha) must lie in [{MIN_ROUGHNESS}, 1]; got min {r.min()}, max {r.max()}")
    return Frame(n, w, r)


def _check_u(u, frame: Frame) -> np.ndarray:
    u = np.asarray(u, dtype=np.float64)
    if u.ndim != 2 or u.shape[1] != 2 or u.shape[0] != len(frame):
        raise ValueError(f"u must have shape ({len(frame)}, 2) (one uniform pair per frame), got {u.shape}")
    return u


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
        u = _check_u(u, frame)
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
        u = _check_u(u, frame)
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
        u = _check_u(u, frame)
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


def ggx_d(h, alpha) -> np.ndarray:
    """GGX normal distribution D(h) per sr of microfacet normals, local unit h (N, 3).

    Walter et al. (2007), eq. 33 (from memory): D = alpha^2 / (pi cos^4 t (alpha^2 + tan^2 t)^2),
    written as alpha^2 / (pi (cos^2 t (alpha^2 - 1) + 1)^2); zero for h_z <= 0.
    Normalised so that integral of D(h) cos t_h over the hemisphere is 1.
    """
    h = np.asarray(h, dtype=np.float64)
    a2 = np.asarray(alpha, dtype=np.float64) ** 2
    c2 = h[:, 2] ** 2
    denom = c2 * (a2 - 1.0) + 1.0
    return np.where(h[:, 2] > 0.0, a2 / (math.pi * denom * denom), 0.0)


def ggx_lambda(v, alpha) -> np.ndarray:
    """Smith Lambda for GGX, local unit v (N, 3): (-1 + sqrt(1 + alpha^2 tan^2 t)) / 2.

    Heitz (2014), section 5; written with tan^2 = (1 - z^2)/z^2 and evaluated as
    (sqrt(z^2 + alpha^2 (1 - z^2)) / |z| - 1)/2 to stay finite at grazing angles.
    """
    v = np.asarray(v, dtype=np.float64)
    a2 = np.asarray(alpha, dtype=np.float64) ** 2
    z2 = v[:, 2] ** 2
    az = np.maximum(np.abs(v[:, 2]), 1e-300)
    return 0.5 * (np.sqrt(z2 + a2 * np.maximum(0.0, 1.0 - z2)) / az - 1.0)


def ggx_g1(v, alpha) -> np.ndarray:
    """Smith masking G1(v) = 1 / (1 + Lambda(v)) for v above the surface, else 0 (Heitz 2014)."""
    v = np.asarray(v, dtype=np.float64)
    return np.where(v[:, 2] > 0.0, 1.0 / (1.0 + ggx_lambda(v, alpha)), 0.0)


def ggx_g2(wi, wo, alpha) -> np.ndarray:
    """Height-correlated Smith masking-shadowing G2 = 1 / (1 + Lambda(wo) + Lambda(wi)) (Heitz 2014, eq. 99 from memory).

    Reflection only: zero unless both directions are above the surface.
    """
    wi = np.asarray(wi, dtype=np.float64)
    wo = np.asarray(wo, dtype=np.float64)
    g = 1.0 / (1.0 + ggx_lambda(wi, alpha) + ggx_lambda(wo, alpha))
    return np.where((wi[:, 2] > 0.0) & (wo[:, 2] > 0.0), g, 0.0)


def _ggx_sample_vndf(v, alpha, u) -> np.ndarray:
    """Visible-normal sample of Heitz (2018), listing 1, isotropic alpha; local v with v_z > 0."""
    vh = np.column_stack([alpha * v[:, 0], alpha * v[:, 1], v[:, 2]])
    vh /= np.linalg.norm(vh, axis=1)[:, None]
    lensq = vh[:, 0] ** 2 + vh[:, 1] ** 2
    inv = np.where(lensq > 0.0, 1.0 / np.sqrt(np.where(lensq > 0.0, lensq, 1.0)), 0.0)
    t1 = np.where(
        (lensq > 0.0)[:, None],
        np.column_stack([-vh[:, 1] * inv, vh[:, 0] * inv, np.zeros_like(inv)]),
        np.array([1.0, 0.0, 0.0]),
    )
    t2 = np.cross(vh, t1)
    r = np.sqrt(u[:, 0])
    phi = 2.0 * math.pi * u[:, 1]
    p1 = r * np.cos(phi)
    p2 = r * np.sin(phi)
    s = 0.5 * (1.0 + vh[:, 2])
    p2 = (1.0 - s) * np.sqrt(np.maximum(0.0, 1.0 - p1 * p1)) + s * p2
    p3 = np.sqrt(np.maximum(0.0, 1.0 - p1 * p1 - p2 * p2))
    nh = p1[:, None] * t1 + p2[:, None] * t2 + p3[:, None] * vh
    ne = np.column_stack([alpha * nh[:, 0], alpha * nh[:, 1], np.maximum(1e-300, nh[:, 2])])
    return ne / np.linalg.norm(ne, axis=1)[:, None]


class GGXReflection:
    """GGX microfacet reflection, visible-normal sampling (Heitz 2018), F = 1, height-correlated G2.

    ``frame.wo`` and ``frame.roughness`` (GGX alpha) are required.

    * ``eval`` = D(h) G2(wi, wo) F / (4 |n.wi| |n.wo|) with h = normalize(wi + wo),
      zero when wi or wo is below the surface (Walter et al. 2007, eq. 20 from memory).
    * ``pdf`` of the reflected direction = G1(wo) D(h) / (4 wo_z): the visible-normal
      density G1(wo) max(0, wo.h) D(h) / wo_z (Heitz 2018) times the reflection
      Jacobian 1/(4 wo.h) (Walter et al. 2007).  It is non-zero for reflected
      directions below the surface: they are sampled, contribute nothing, and are
      kept in the normalisation.  Zero when wo is below the surface.
    """

    name = "ggx"
    compensated = False

    @staticmethod
    def _require_view(frame: Frame) -> None:
        if frame.wo is None or frame.roughness is None:
            raise ValueError("the ggx strategy needs frame.wo and frame.roughness; build the frame with make_frame(normals, wo, roughness)")

    @staticmethod
    def _local(directions, frame: Frame):
        GGXReflection._require_view(frame)
        wi = to_local(np.asarray(directions, dtype=np.float64), frame.normals)
        wo = to_local(frame.wo, frame.normals)
        return wi, wo, frame.roughness

    @staticmethod
    def _half(wi, wo):
        h = wi + wo
        norm = np.linalg.norm(h, axis=1)
        ok = norm > 1e-12
        h = h / np.where(ok, norm, 1.0)[:, None]
        return h, ok

    def sample(self, u, frame: Frame):
        u = _check_u(u, frame)
        self._require_view(frame)
        wo = to_local(frame.wo, frame.normals)
        alpha = frame.roughness
        above = wo[:, 2] > 0.0
        # Views from below see no visible normals; sample something harmless with pdf 0.
        v = np.where(above[:, None], wo, np.array([0.0, 0.0, 1.0]))
        h = _ggx_sample_vndf(v, alpha, u)
        wi = 2.0 * np.sum(v * h, axis=1)[:, None] * h - v
        wi /= np.linalg.norm(wi, axis=1)[:, None]
        pdf = self._pdf_local(wi, v, alpha, h)
        pdf = np.where(above, pdf, 0.0)
        return to_world(wi, frame.normals), pdf

    @staticmethod
    def _pdf_local(wi, wo, alpha, h):
        vz = np.maximum(wo[:, 2], 1e-300)
        p = ggx_g1(wo, alpha) * ggx_d(h, alpha) / (4.0 * vz)
        return np.where(wo[:, 2] > 0.0, p, 0.0)

    def pdf(self, directions, frame: Frame):
        wi, wo, alpha = self._local(directions, frame)
        h, ok = self._half(wi, wo)
        return np.where(ok, self._pdf_local(wi, wo, alpha, h), 0.0)

    def eval(self, directions, frame: Frame):
        wi, wo, alpha = self._local(directions, frame)
        h, ok = self._half(wi, wo)
        up = ok & (wi[:, 2] > 0.0) & (wo[:, 2] > 0.0)
        denom = 4.0 * np.where(up, wi[:, 2] * wo[:, 2], 1.0)
        f = ggx_d(h, alpha) * ggx_g2(wi, wo, alpha) / denom  # F = 1
        return np.where(up, f, 0.0)


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
        u = _check_u(u, frame)
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
