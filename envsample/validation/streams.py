"""Random streams and argument checks shared by the validation render, the glossy check and tuning.

Every run of an estimator draws its uniforms from
``numpy.random.SeedSequence(seed, spawn_key=(purpose, crc32(estimator name), index))``,
so the same ``seed`` gives bit-identical estimates and adding or removing an estimator
does not change the others.
"""

from __future__ import annotations

import zlib

import numpy as np

from envsample.core.latlong import parse_size
from envsample.core.limits import check_memory

__all__ = ["STREAM_PURPOSES", "stream", "check_seed", "check_spp", "check_normals",
           "render_bytes", "check_render_size"]

#: Purposes of the random streams (first word of the SeedSequence spawn key).
STREAM_PURPOSES = {"render": 1, "convergence": 2, "glossy": 3, "tune-pilot": 4, "tune-confirm": 5, "qa": 6, "split": 7}


def stream(seed: int, purpose: str, name: str, index: int = 0) -> np.random.SeedSequence:
    """An independent, reproducible random stream for one run of one estimator."""
    key = (STREAM_PURPOSES[purpose], zlib.crc32(name.encode("utf-8")), int(index))
    return np.random.SeedSequence(seed, spawn_key=key)


def check_seed(seed) -> int:
    """A non-negative int seed; None draws fresh entropy (returned, so the run can be repeated bit for bit)."""
    if seed is None:
        return int(np.random.SeedSequence().entropy)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer or None, got {seed!r}")
    return int(seed)


def check_spp(spp, name: str = "spp") -> int:
    """Samples per normal: an int >= 2 (variances need two samples per normal)."""
    if isinstance(spp, bool) or not isinstance(spp, (int, np.integer)) or spp < 2:
        raise ValueError(f"{name} must be an integer >= 2 (variances need two samples per normal), got {spp!r}")
    return int(spp)


def check_normals(normals, name: str = "normals") -> tuple[int, int]:
    """A normal grid ``(width, height)`` or ``"WxH"`` of at least 2 x 1."""
    try:
        wh = parse_size(normals)
    except (TypeError, ValueError, IndexError) as exc:
        raise ValueError(f"{name} must be (width, height) or 'WxH', e.g. 128x64 ({exc})") from None
    if wh is None or wh[0] < 2 or wh[1] < 1:
        raise ValueError(f"{name} must be at least 2x1 normals, got {normals!r}")
    return wh


def render_bytes(normals: tuple[int, int], spp: int, estimators: int) -> int:
    """Memory (bytes) a validation render of ``normals = (w, h)`` at ``spp`` needs, estimated from its arrays.

    Per normal: the direction and weight (32 B), the reference and one float32 RGB estimate per
    estimator (12 B each), and while one estimator runs its per-sample contributions and
    strategy indices (9 B per sample), counted twice for the temporaries of the estimate.
    """
    n = int(normals[0]) * int(normals[1])
    return n * (32 + 12 * (int(estimators) + 1)) + 2 * n * int(spp) * 9


def check_render_size(normals: tuple[int, int], spp: int, estimators: int, *, limit=None) -> int:
    """Refuse a render whose estimated memory (:func:`render_bytes`) exceeds the memory limit, before anything is allocated.

    The limit is :func:`envsample.core.limits.max_memory` (8 GiB unless ``limit``,
    ``--max-memory`` or ``ENVSAMPLE_MAX_MEMORY`` say otherwise); the refusal is one line
    (:class:`~envsample.errors.ResourceLimitError`) naming the estimate.  Returns the estimate.
    """
    need = render_bytes(normals, spp, estimators)
    check_memory(need, what=f"verify --normals {normals[0]}x{normals[1]} at {spp} spp with {estimators} estimators",
                 limit=limit, remedy="choose fewer normals, samples or estimators")
    return need
