"""Order-2 spherical harmonics of a map and the irradiance they give (an approximation, never the reference).

Public objects
--------------
:func:`sh9_project`     exact projection of a map onto the 9 real spherical harmonics of order <= 2.
:func:`sh9_irradiance`  irradiance from those 9 coefficients.
:data:`SH9_BAND_FACTORS` the clamped-cosine factors ``A_0, A_1, A_2``.

Ramamoorthi & Hanrahan (2001) approximate irradiance with the 9 spherical harmonics of
order <= 2: ``E(n) = sum_lm A_l L_lm Y_lm(n)`` with ``A_0 = pi``, ``A_1 = 2 pi/3``,
``A_2 = pi/4``.  It is exact only for maps band-limited to order 2; on real maps the
neglected even orders (A_4 = pi/24, ...) cause errors of a few per cent, and it can go
negative opposite a bright source.  It is used in tests and as a cheap cross-check; the
reference is :func:`envsample.reference.irradiance.reference_irradiance`.  The projection
itself is exact for the piecewise-constant map (closed-form moments per cell, conventions
of :mod:`envsample.reference.grid`).

References
----------
- Ramamoorthi, R. and Hanrahan, P. (2001). An Efficient Representation for
  Irradiance Environment Maps. SIGGRAPH 2001 (equations 3, 8 and 9: the real SH
  basis constants and the clamped-cosine coefficients pi, 2 pi/3, pi/4).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.compat import renamed_keywords
from envsample.reference.grid import Grid, map_frame, prepare_map, unit_normals

__all__ = ["sh9_project", "sh9_irradiance", "SH9_BAND_FACTORS"]

#: Clamped-cosine convolution factors A_l of Ramamoorthi & Hanrahan (2001), eq. 8-9, for l = 0, 1, 2.
SH9_BAND_FACTORS = (math.pi, 2.0 * math.pi / 3.0, math.pi / 4.0)

_Y00 = 0.5 / math.sqrt(math.pi)            # 0.282095
_Y1 = math.sqrt(3.0 / (4.0 * math.pi))     # 0.488603
_Y2 = math.sqrt(15.0 / (4.0 * math.pi))    # 1.092548
_Y20 = math.sqrt(5.0 / (16.0 * math.pi))   # 0.315392
_Y22 = math.sqrt(15.0 / (16.0 * math.pi))  # 0.546274


def _sh9_basis(d: np.ndarray) -> np.ndarray:
    """Real SH Y_lm at unit directions (N, 3) in the order of R&H 2001 eq. 3: (N, 9)."""
    x, y, z = d[:, 0], d[:, 1], d[:, 2]
    return np.stack([
        np.full_like(x, _Y00), _Y1 * y, _Y1 * z, _Y1 * x,
        _Y2 * x * y, _Y2 * y * z, _Y20 * (3.0 * z * z - 1.0), _Y2 * x * z, _Y22 * (x * x - y * y),
    ], axis=1)


@renamed_keywords(rotate_deg="rotation_deg")
def sh9_project(rgb, *, up: str = "y", rotation_deg: float = 0.0, size=None) -> np.ndarray:
    """Coefficients ``L_lm = integral of L(w) Y_lm(w) dw`` for l <= 2, float64 (9, 3).

    Exact for the piecewise-constant map: the moments ``int_cell w_a w_b dw`` have
    closed forms in ``(mu, phi)``.  The basis is the real SH of Ramamoorthi & Hanrahan
    (2001), eq. 3, in **world** coordinates ``(x, y, z)`` (whatever the up axis), in the
    order ``L00, L1-1, L10, L11, L2-2, L2-1, L20, L21, L22``.
    """
    L = prepare_map(rgb, size)
    g = Grid(L.shape[0], L.shape[1])
    mu0, mu1, s0, s1 = g.mu[:-1], g.mu[1:], g.s[:-1], g.s[1:]
    dmu = mu0 - mu1
    rows = {
        "1": dmu,
        "s": 0.5 * (np.diff(g.theta) - np.diff(g.s * g.mu)),  # int sqrt(1-mu^2) dmu
        "mu": 0.5 * (mu0 * mu0 - mu1 * mu1),
        "mu2": (mu0 ** 3 - mu1 ** 3) / 3.0,
        "s2": dmu - (mu0 ** 3 - mu1 ** 3) / 3.0,  # int (1 - mu^2) dmu
        "mus": (s1 ** 3 - s0 ** 3) / 3.0,  # int mu sqrt(1-mu^2) dmu
    }
    sin2 = 2.0 * g.sph * g.cph
    cols = {
        "1": np.full(g.W, g.dphi),
        "c": np.diff(g.sph),
        "s": -np.diff(g.cph),
        "cc": 0.5 * g.dphi + 0.25 * np.diff(sin2),
        "ss": 0.5 * g.dphi - 0.25 * np.diff(sin2),
        "cs": 0.5 * np.diff(g.sph * g.sph),
    }
    A = {k: np.einsum("ijc,j->ic", L, v) for k, v in cols.items()}

    def m(r, c):
        return rows[r] @ A[c]

    m0 = m("1", "1")
    m1 = np.stack([m("s", "c"), m("s", "s"), m("mu", "1")])
    m2 = np.empty((3, 3, 3))
    m2[0, 0], m2[1, 1], m2[2, 2] = m("s2", "cc"), m("s2", "ss"), m("mu2", "1")
    m2[0, 1] = m2[1, 0] = m("s2", "cs")
    m2[0, 2] = m2[2, 0] = m("mus", "c")
    m2[1, 2] = m2[2, 1] = m("mus", "s")
    B = map_frame(up, rotation_deg)  # w_map = B w_world
    w1 = B.T @ m1
    w2 = np.einsum("pa,qb,pqc->abc", B, B, m2)
    return np.stack([
        _Y00 * m0, _Y1 * w1[1], _Y1 * w1[2], _Y1 * w1[0],
        _Y2 * w2[0, 1], _Y2 * w2[1, 2], _Y20 * (3.0 * w2[2, 2] - m0), _Y2 * w2[0, 2], _Y22 * (w2[0, 0] - w2[1, 1]),
    ])


def sh9_irradiance(coeffs, normals) -> np.ndarray:
    """Irradiance from 9 SH coefficients: ``E(n) = sum A_l L_lm Y_lm(n)``, float64 ``normals.shape``.

    Ramamoorthi & Hanrahan (2001), eq. 7-9, with ``A_0 = pi``, ``A_1 = 2 pi/3``,
    ``A_2 = pi/4``.  ``coeffs`` is (9,) or (9, C) from :func:`sh9_project` (world
    coordinates); ``normals`` (..., 3) unit vectors.  Returns ``normals.shape[:-1]``
    (+ ``(C,)``).  **An approximation**: exact only for maps band-limited to order 2;
    errors of a few per cent on real maps, and negative values are possible opposite
    a bright source.
    """
    c = np.asarray(coeffs, dtype=np.float64)
    if c.shape[:1] != (9,) or c.ndim > 2:
        raise ValueError(f"coeffs must have shape (9,) or (9, C), got {c.shape}; use sh9_project()")
    n, lead = unit_normals(normals)
    a = np.repeat(np.array(SH9_BAND_FACTORS), (1, 3, 5))
    out = (_sh9_basis(n) * a) @ c
    return out.reshape(lead + c.shape[1:])
