"""Filling a hole in a lat-long map smoothly from its surroundings: a harmonic (membrane) fill.

Public objects
--------------
:func:`harmonic_fill`  solve Laplace's equation on the sphere inside a hole, with the pixels
                       around it as boundary values (per channel), float32.

The method is membrane interpolation (Perez, Gangnet & Blake 2003, the guidance-free case
of Poisson image editing): inside the hole the filled image ``F`` satisfies
``Laplace F = 0`` with ``F`` equal to the image on the hole's boundary.  We discretise the
Laplace-Beltrami operator of the sphere on the lat-long grid by finite volumes
(``1/sin(theta) d/dtheta (sin(theta) dF/dtheta) + 1/sin^2(theta) d^2F/dphi^2``), so the fill
does not depend on where the hole lies (near the horizon or the pole, across the seam):

    sum over the four neighbours k of w_k (F_k - F_i) = 0,
    w_up = sin(theta_{i-1/2}) / dtheta^2,  w_down = sin(theta_{i+1/2}) / dtheta^2,
    w_left = w_right = 1 / (sin(theta_i) dphi^2),

columns wrapping at the seam; at the poles the edge weight ``sin 0 = 0`` closes the
cell.  All weights are positive, so the discrete maximum principle holds: the fill stays
between the smallest and the largest boundary value and cannot make a bright ring.  The
sparse system (one unknown per hole pixel) is factorised once with SuperLU
(``scipy.sparse.linalg.splu``) and solved for the three channels.

References
----------
- Perez, P., Gangnet, M. and Blake, A. (2003). Poisson image editing. ACM Transactions on
  Graphics 22(3) (SIGGRAPH 2003), 313-318 (membrane interpolation).
- Li, X. Demmel, J. et al. (2005). SuperLU: a general purpose library for the direct
  solution of sparse linear systems (scipy's sparse LU).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["harmonic_fill", "FILL_METHOD"]

#: How the hole left by the sun is filled, for the sun file and reports.
FILL_METHOD = ("harmonic (membrane) fill: Laplace-Beltrami equation on the lat-long grid, "
               "boundary values from the surrounding sky (Perez, Gangnet & Blake 2003)")


def harmonic_fill(band: np.ndarray, hole: np.ndarray, *, first_row: int, height: int) -> np.ndarray:
    """Fill ``hole`` in ``band`` (rows ``first_row`` .. of a map of ``height`` rows) harmonically.

    Parameters
    ----------
    band : (h, W, C) float array
        The rows of the map that hold the hole, with at least one row of known pixels
        above and below it (unless it touches the top or bottom of the map).
    hole : (h, W) bool
        The pixels to replace.
    first_row, height : int
        The band's first row in the map, and the map's height (for the rows' polar angles).

    Returns a float32 copy of ``band`` with the hole filled.  Raises ValueError when the
    hole has no known pixel around it (nothing to fill from).
    """
    h, w = hole.shape
    if hole.all():
        raise ValueError("the hole covers the whole band: nothing to fill it from")
    out = np.array(band, dtype=np.float64)
    idx = np.flatnonzero(hole.ravel())
    if idx.size == 0:
        return out.astype(np.float32)
    number = np.full(h * w, -1, dtype=np.int64)
    number[idx] = np.arange(idx.size)
    r, c = np.divmod(idx, w)
    g = r + first_row  # rows in the map
    dth, dph = math.pi / height, 2.0 * math.pi / w
    theta = (g + 0.5) * dth
    w_side = 1.0 / (np.sin(theta) * dph * dph)
    w_up = np.sin(g * dth) / (dth * dth)
    w_down = np.sin((g + 1) * dth) / (dth * dth)
    rows_a, cols_a, vals = [], [], []
    rhs = np.zeros((idx.size, out.shape[2]))
    diag = np.zeros(idx.size)
    flat = out.reshape(h * w, -1)
    neighbours = (
        (r - 1, c, w_up, g > 0),
        (r + 1, c, w_down, g < height - 1),
        (r, (c - 1) % w, w_side, np.ones(idx.size, bool)),
        (r, (c + 1) % w, w_side, np.ones(idx.size, bool)),
    )
    for nr, nc, wk, exists in neighbours:
        if np.any(exists & ((nr < 0) | (nr >= h))):
            raise ValueError("the hole touches the edge of the band: pass one more row of known pixels around it")
        ok = exists & (nr >= 0) & (nr < h)
        k = np.where(ok, nr, 0) * w + nc
        diag += np.where(ok, wk, 0.0)
        unknown = ok & (number[k] >= 0)
        known = ok & ~unknown
        rows_a.append(np.flatnonzero(unknown))
        cols_a.append(number[k[unknown]])
        vals.append(-wk[unknown])
        rhs[known] += wk[known, None] * flat[k[known]]
    from scipy import sparse
    from scipy.sparse.linalg import splu

    ar = np.concatenate(rows_a + [np.arange(idx.size)])
    ac = np.concatenate(cols_a + [np.arange(idx.size)])
    av = np.concatenate(vals + [diag])
    A = sparse.csc_matrix((av, (ar, ac)), shape=(idx.size, idx.size))
    sol = splu(A).solve(rhs)
    flat[idx] = sol
    return out.astype(np.float32)

