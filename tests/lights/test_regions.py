"""Tests of envsample.lights.regions: regions that wrap across the seam and around the poles are one
region, their rings, and the angular size of a cap.

Outside references: scipy.sparse.csgraph.connected_components and scipy.ndimage.maximum_filter
(reference libraries) for the labels and rings; the solid angle of a spherical cap of half-angle a,
2 pi (1 - cos a) (textbook), for cap_diameter.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from envsample.lights.regions import cap_diameter, label_wrapped, ring


def test_label_wrapped_joins_across_the_seam_and_around_the_poles():
    mask = np.zeros((8, 16), bool)
    mask[3, 0] = mask[4, 15] = True  # diagonal neighbours across the seam
    mask[0, 2] = mask[0, 9] = True  # both touch the zenith
    mask[6, 7] = True  # alone
    labels, n = label_wrapped(mask)
    assert n == 3
    assert labels[3, 0] == labels[4, 15] != 0
    assert labels[0, 2] == labels[0, 9] != 0
    assert len({labels[3, 0], labels[0, 2], labels[6, 7]}) == 3


def _reference_components(mask: np.ndarray) -> np.ndarray:
    """Components of the pixel graph (8-neighbours, columns wrapping, each pole row one vertex set) by
    scipy.sparse.csgraph.connected_components, an outside reference library; -1 off the mask."""
    from scipy import sparse
    from scipy.sparse.csgraph import connected_components

    h, w = mask.shape
    idx = np.arange(h * w).reshape(h, w)
    a, b = [], []
    for dy in (-1, 0, 1):
        for dx in (-1, 0, 1):
            if dy == dx == 0:
                continue
            ys, xs = np.nonzero(mask)
            ny, nx = ys + dy, (xs + dx) % w
            ok = (ny >= 0) & (ny < h)
            ok[ok] &= mask[ny[ok], nx[ok]]
            a.append(idx[ys[ok], xs[ok]])
            b.append(idx[ny[ok], nx[ok]])
    for row in (0, h - 1):
        cols = np.nonzero(mask[row])[0]
        a.append(idx[row, cols[:-1]])
        b.append(idx[row, cols[1:]])
    a, b = np.concatenate(a), np.concatenate(b)
    g = sparse.coo_matrix((np.ones(a.size), (a, b)), shape=(h * w, h * w))
    _, comp = connected_components(g, directed=False)
    return np.where(mask, comp.reshape(h, w), -1)


def test_label_wrapped_and_ring_match_scipy(rng):
    """Against outside reference libraries: the components of the wrapped pixel graph by
    scipy.sparse.csgraph, and the ring by scipy.ndimage.maximum_filter (columns wrapping)."""
    from scipy import ndimage

    for _ in range(30):
        h, w = int(rng.integers(2, 20)), int(rng.integers(3, 40))
        mask = rng.random((h, w)) < rng.choice([0.05, 0.2, 0.45])
        labels, n = label_wrapped(mask)
        ref = _reference_components(mask)
        on = mask.ravel()
        mine, theirs = labels.ravel()[on], ref.ravel()[on]
        assert np.array_equal(mine[:, None] == mine[None, :], theirs[:, None] == theirs[None, :])
        assert n == len(np.unique(theirs)) and sorted(np.unique(mine)) == list(range(1, n + 1))
        grown = ndimage.maximum_filter(mask, size=3, mode=("constant", "wrap"), cval=False)
        assert np.array_equal(ring(mask), grown & ~mask)


def test_cap_diameter_inverts_the_solid_angle_of_a_cap():
    """A cap of half-angle a subtends 2 pi (1 - cos a) sr (textbook): its diameter is 2 a, element-wise."""
    half = np.array([[1e-3, 0.0046513], [0.3, math.pi / 2]])
    omega = 2.0 * math.pi * (1.0 - np.cos(half))
    np.testing.assert_allclose(cap_diameter(omega), 2.0 * half, rtol=1e-9)
    assert cap_diameter(2.0 * math.pi) == pytest.approx(math.pi)  # a hemisphere
    assert cap_diameter(4.0 * math.pi) == pytest.approx(2.0 * math.pi)  # the whole sphere
    assert cap_diameter(5.0 * math.pi) == pytest.approx(2.0 * math.pi)  # more than the sphere: clipped, not NaN
    assert cap_diameter(0.0) == 0.0


def test_ring_wraps_at_the_seam_but_not_over_the_poles():
    mask = np.zeros((6, 10), bool)
    mask[0, 0] = True
    r = ring(mask)
    want = np.zeros((6, 10), bool)
    want[0, [1, 9]] = want[1, [9, 0, 1]] = True  # 8-neighbours, column -1 is column 9; no row above row 0
    assert np.array_equal(r, want)
