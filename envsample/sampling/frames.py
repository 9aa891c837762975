"""Shading frames for vectorised sampling: per-sample unit normals and, for BSDFs, the view and roughness.

Local coordinates put the normal on +z with the tangent frame of
:func:`envsample.core.sphere.orthonormal_basis` (Duff et al. 2017); world directions follow
the table's convention, so a strategy never needs to know the up axis.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from envsample.core.sphere import as_vectors

__all__ = ["MIN_ROUGHNESS", "Frame", "make_frame", "check_u"]

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
    if a.ndim not in (1, 2) or a.shape[-1] != 3:
        raise ValueError(f"{name} must have shape (N, 3) or (3,), got {np.shape(x)}; pass unit vectors")
    a, _ = as_vectors(a, name, unit="normalise")
    if n is not None and a.shape[0] not in (1, n):
        raise ValueError(f"{name} has {a.shape[0]} rows but the normals have {n}; pass one per normal or one for all")
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


def check_u(u, frame: Frame) -> np.ndarray:
    u = np.asarray(u, dtype=np.float64)
    if u.ndim != 2 or u.shape[1] != 2 or u.shape[0] != len(frame):
        raise ValueError(f"u must have shape ({len(frame)}, 2) (one uniform pair per frame), got {u.shape}")
    return u
