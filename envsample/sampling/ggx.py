"""GGX (Trowbridge-Reitz) microfacet reflection: D, Smith Lambda/G1/G2, and visible-normal sampling.

F = 1 (a white, lossless mirror material: the lobe shape is what is being measured); G2 is the
height-correlated Smith masking-shadowing function.  Local frame: the normal is +z.
Reflected directions that fall below the surface are returned with their pdf and contribute
nothing (``eval`` is 0 there); the pdf is *not* renormalised, so it integrates to 1 over the
whole sphere.

References
----------
- Walter, B., Marschner, S. R., Li, H. and Torrance, K. E. (2007). Microfacet Models
  for Refraction through Rough Surfaces. Eurographics Symposium on Rendering (EGSR).
- Heitz, E. (2014). Understanding the Masking-Shadowing Function in
  Microfacet-Based BRDFs. Journal of Computer Graphics Techniques (JCGT) 3(2).
- Heitz, E. (2018). Sampling the GGX Distribution of Visible Normals. JCGT 7(4).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.sphere import to_local, to_world
from envsample.sampling.frames import Frame, check_u

__all__ = ["ggx_d", "ggx_lambda", "ggx_g1", "ggx_g2", "GGXReflection"]

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
        u = check_u(u, frame)
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
