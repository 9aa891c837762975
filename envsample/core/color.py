"""Luminance of linear RGB images under a named set of primaries.

Methods: the Y row of the RGB-to-XYZ matrix (see :mod:`envsample.constants`,
SMPTE RP 177-1993), or the channel maximum / mean for renderers that weight
their tables that way (common practice).
"""

from __future__ import annotations

import numpy as np

from envsample.core.constants import PRIMARIES, PRIMARY_ALIASES, luminance_weights

__all__ = ["PRIMARY_NAMES", "canonical_primaries", "luminance"]

#: Every accepted ``primaries`` value (canonical names first).
PRIMARY_NAMES = tuple(PRIMARIES) + ("max", "mean")


def canonical_primaries(name: str) -> str:
    """Canonical name of a ``primaries`` choice (``srgb`` -> ``bt709``); ValueError lists the valid names."""
    key = str(name).lower()
    key = PRIMARY_ALIASES.get(key, key)
    if key not in PRIMARY_NAMES:
        valid = ", ".join(PRIMARY_NAMES + tuple(PRIMARY_ALIASES))
        raise ValueError(f"unknown primaries {name!r}; valid names: {valid}")
    return key


def luminance(rgb, primaries: str = "bt709", *, dtype=np.float32, out=None) -> np.ndarray:
    """Luminance of linear RGB ``(..., 3)`` as ``(...)``, clamped at zero; float32 unless ``dtype``.

    ``primaries``: ``bt709`` (default, alias ``srgb``), ``bt2020``, ``acescg``,
    ``aces2065-1``, ``max`` (largest channel) or ``mean`` (channel average).
    ``dtype=np.float64`` computes in float64 (for error metrics that must not round).
    ACES2065-1 has a negative blue weight, so saturated blue can give negative
    luminance; it is clamped to zero (a pixel with no luminance is never sampled
    by the luminance table, which is why tables can mix in uniform sampling).
    """
    rgb = np.asarray(rgb)
    if rgb.shape[-1:] != (3,):
        raise ValueError(f"rgb must have shape (..., 3), got {rgb.shape}")
    dtype = np.dtype(dtype)
    key = canonical_primaries(primaries)
    rgb = rgb.astype(dtype, copy=False)
    if key == "max":
        # Chained np.maximum on channel views: much faster than a reduction over a length-3 axis.
        y = np.maximum(np.maximum(rgb[..., 0], rgb[..., 1], out=out), rgb[..., 2], out=out)
    elif key == "mean":
        y = np.mean(rgb, axis=-1, dtype=dtype, out=out)
    else:
        y = np.matmul(rgb, luminance_weights(key).astype(dtype), out=out)
    y = np.asarray(y, dtype=dtype)
    np.maximum(y, 0.0, out=y)
    return y
