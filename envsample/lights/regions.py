"""Connected regions of a lat-long map that wrap at the seam and around the poles, and their rings.

Public objects
--------------
:func:`label_wrapped`  connected components (8-connectivity) joined across the seam and the poles.
:func:`ring`           the pixels 8-adjacent to a mask (wrapping at the seam), not in it.
:func:`cap_diameter`   angular diameter (radians) of the spherical cap of a given solid angle.

Used by the sun finder (:mod:`envsample.lights.finder`) and by QA's emitter and clipping
checks, so that both see the same regions.  Connected components: OpenCV's
``connectedComponents`` (8-connectivity) joined across the seam and the poles by a numpy
union-find; rings by OpenCV's ``dilate``.  OpenCV is a dependency already (maps) and imports in a
tenth of the time of ``scipy.ndimage`` and ``scipy.sparse.csgraph``, which `envsample check`
would otherwise load for these two functions alone (tested against both).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["cap_diameter", "label_wrapped", "ring"]


def cap_diameter(omega) -> np.ndarray:
    """Angular diameter (radians) of the spherical cap of solid angle ``omega`` (sr): 2 acos(1 - omega / 2 pi)."""
    return 2.0 * np.arccos(np.clip(1.0 - np.asarray(omega, dtype=np.float64) / (2.0 * math.pi), -1.0, 1.0))


def _cv2():
    """OpenCV, a dependency already (maps): its labelling and dilation import in a tenth of scipy.ndimage's time."""
    import cv2

    return cv2


def _join(pairs_a: np.ndarray, pairs_b: np.ndarray, n: int) -> np.ndarray:
    """Union-find over labels 1..n joined by the pairs: each label's smallest equivalent label (int64 (n + 1,))."""
    root = np.arange(n + 1)
    while True:
        ra, rb = root[pairs_a], root[pairs_b]
        low = np.minimum(ra, rb)
        if np.array_equal(ra, rb):
            return root
        np.minimum.at(root, ra, low)
        np.minimum.at(root, rb, low)
        while True:  # path compression: point every label at its root
            nxt = root[root]
            if np.array_equal(nxt, root):
                break
            root = nxt


def label_wrapped(mask: np.ndarray) -> tuple[np.ndarray, int]:
    """Connected components of a lat-long mask (8-connectivity) that wrap at the seam and the poles.

    Pixels in column 0 touch those in column W-1 (rows i-1..i+1), and all pixels of
    the first row (and of the last) meet at the pole.  Returns ``(labels, count)``:
    int32 labels 1..count numbered in order of their first pixel (row by row), 0 for
    background.  Components: OpenCV ``connectedComponents`` (8-connectivity) on the band of
    rows that holds the mask, then joined across the seam and the poles by union-find.
    """
    H, W = mask.shape
    rows = np.nonzero(mask.any(axis=1))[0]
    labels = np.zeros(mask.shape, dtype=np.int32)
    if rows.size == 0:
        return labels, 0
    # Label only the band of rows that holds the mask: emitters are small on big maps.
    lo, hi = int(rows[0]), int(rows[-1]) + 1
    count, band = _cv2().connectedComponents(np.ascontiguousarray(mask[lo:hi], dtype=np.uint8), connectivity=8,
                                             ltype=_cv2().CV_32S)
    n = int(count) - 1
    labels[lo:hi] = band
    if n <= 1:
        return labels, n
    a_parts, b_parts = [], []
    left, right = labels[:, 0], labels[:, W - 1]
    for shift in (-1, 0, 1):
        r0, r1 = max(0, -shift), H - max(0, shift)
        a_parts.append(left[r0:r1])
        b_parts.append(right[r0 + shift:r1 + shift])
    for row in (labels[0], labels[H - 1]):
        present = np.unique(row[row > 0])
        if present.size > 1:
            a_parts.append(present[:-1])
            b_parts.append(present[1:])
    a = np.concatenate(a_parts)
    b = np.concatenate(b_parts)
    keep = (a > 0) & (b > 0) & (a != b)
    if not keep.any():
        return labels, n
    root = _join(a[keep].astype(np.int64), b[keep].astype(np.int64), n)
    # Renumber the roots 1..m in order (a root is its group's smallest, i.e. first, label).
    roots = np.unique(root[1:])
    table = np.zeros(n + 1, dtype=np.int32)
    table[1:] = np.searchsorted(roots, root[1:]) + 1
    return table[labels], int(roots.size)


def ring(mask: np.ndarray) -> np.ndarray:
    """Pixels 8-adjacent to ``mask`` (wrapping at the seam), not in it."""
    cv2 = _cv2()
    # A 3x3 dilation is the 8-neighbour growth; columns wrap (one column copied from the other
    # side), rows end at the poles.
    m = np.ascontiguousarray(mask, dtype=np.uint8)
    padded = np.concatenate([m[:, -1:], m, m[:, :1]], axis=1)
    grown = cv2.dilate(padded, np.ones((3, 3), np.uint8), borderType=cv2.BORDER_CONSTANT, borderValue=0)
    return grown[:, 1:-1].astype(bool) & ~mask
