"""Connected regions of a lat-long map that wrap at the seam and around the poles, and their rings.

Public objects
--------------
:func:`label_wrapped`  connected components (8-connectivity) joined across the seam and the poles.
:func:`ring`           the pixels 8-adjacent to a mask (wrapping at the seam), not in it.
:func:`cap_diameter`   angular diameter (radians) of the spherical cap of a given solid angle.

Used by the sun finder (:mod:`envsample.lights.finder`) and by QA's emitter and clipping
checks, so that both see the same regions.  Connected components: ``scipy.ndimage.label``
joined with ``scipy.sparse.csgraph.connected_components``.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["cap_diameter", "label_wrapped", "ring"]


def cap_diameter(omega) -> np.ndarray:
    """Angular diameter (radians) of the spherical cap of solid angle ``omega`` (sr): 2 acos(1 - omega / 2 pi)."""
    return 2.0 * np.arccos(np.clip(1.0 - np.asarray(omega, dtype=np.float64) / (2.0 * math.pi), -1.0, 1.0))


def label_wrapped(mask: np.ndarray) -> tuple[np.ndarray, int]:
    """Connected components of a lat-long mask (8-connectivity) that wrap at the seam and the poles.

    Pixels in column 0 touch those in column W-1 (rows i-1..i+1), and all pixels of
    the first row (and of the last) meet at the pole.  Returns ``(labels, count)``
    like :func:`scipy.ndimage.label`: int32 labels 1..count, 0 for background.
    """
    from scipy import ndimage, sparse
    from scipy.sparse.csgraph import connected_components

    H, W = mask.shape
    rows = np.nonzero(mask.any(axis=1))[0]
    if rows.size == 0:
        return np.zeros(mask.shape, dtype=np.int32), 0
    # Label only the band of rows that holds the mask: emitters are small on big maps.
    lo, hi = int(rows[0]), int(rows[-1]) + 1
    band, n = ndimage.label(mask[lo:hi], structure=np.ones((3, 3), dtype=bool))
    labels = np.zeros(mask.shape, dtype=np.int32)
    labels[lo:hi] = band
    if n <= 1:
        return labels, int(n)
    a_parts, b_parts = [], []
    left, right = labels[:, 0], labels[:, W - 1]
    for shift in (-1, 0, 1):
        lo, hi = max(0, -shift), H - max(0, shift)
        a_parts.append(left[lo:hi])
        b_parts.append(right[lo + shift:hi + shift])
    for row in (labels[0], labels[H - 1]):
        present = np.unique(row[row > 0])
        if present.size > 1:
            a_parts.append(present[:-1])
            b_parts.append(present[1:])
    a = np.concatenate(a_parts)
    b = np.concatenate(b_parts)
    keep = (a > 0) & (b > 0) & (a != b)
    if not keep.any():
        return labels.astype(np.int32), int(n)
    graph = sparse.coo_matrix((np.ones(int(keep.sum())), (a[keep], b[keep])), shape=(n + 1, n + 1))
    count, comp = connected_components(graph, directed=False)
    # Renumber so that background stays 0 and components are 1..m in order of first label.
    _, first = np.unique(comp[1:], return_index=True)
    order = np.argsort(first)
    remap = np.zeros(count, dtype=np.int64)
    remap[np.unique(comp[1:])[order]] = np.arange(1, order.size + 1)
    table = np.concatenate([[0], remap[comp[1:]]]).astype(np.int32)
    return table[labels], int(order.size)


def ring(mask: np.ndarray) -> np.ndarray:
    """Pixels 8-adjacent to ``mask`` (wrapping at the seam), not in it."""
    from scipy import ndimage

    # A 3x3 maximum filter is the 8-neighbour dilation; columns wrap, rows end at the poles.
    grown = ndimage.maximum_filter(mask, size=3, mode=("constant", "wrap"), cval=False)
    return grown & ~mask
