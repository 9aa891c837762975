"""Tests of envsample.validation.grid: where the validation render puts its normals.

Outside references: the solid angle of the whole sphere is 4 pi sr and of a lat-long row
2 pi (cos theta_top - cos theta_bottom) / W per pixel (textbook calculus); an orthographic view of a
unit sphere covers pi/4 of its square (area of a disk over its bounding square).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from envsample.validation.grid import normal_grid, sphere_normals, subgrid, view_directions


@pytest.mark.parametrize("up, axis", [("y", 1), ("z", 2)])
def test_normal_grid_is_unit_vectors_with_weights_summing_to_4_pi(up, axis):
    n, w = normal_grid(16, 8, up=up)
    assert n.shape == (128, 3) and w.shape == (128,)
    assert np.allclose(np.linalg.norm(n, axis=1), 1.0)
    assert w.sum() == pytest.approx(4.0 * math.pi, rel=1e-12)
    # Row 0 is the band next to the zenith: its centre is at theta = pi / 16 from the up axis.
    assert n[0, axis] == pytest.approx(math.cos(math.pi / 16.0), rel=1e-12)
    assert w[0] == pytest.approx(2.0 * math.pi * (1.0 - math.cos(math.pi / 8.0)) / 16.0, rel=1e-12)


def test_subgrid_takes_a_strided_grid_within_the_limit():
    idx, (w, h) = subgrid(128, 64, (32, 16))
    assert (w, h) == (32, 16) and idx.size == 512 and len(set(idx.tolist())) == 512
    rows, cols = np.divmod(idx, 128)
    assert set(np.diff(np.unique(cols))) == {4} and set(np.diff(np.unique(rows))) == {4}
    idx, size = subgrid(16, 8, (32, 16))
    assert size == (16, 8) and np.array_equal(idx, np.arange(128))


def test_sphere_normals_cover_a_disk_and_face_the_camera():
    n, mask = sphere_normals(200, up="y")
    assert mask.mean() == pytest.approx(math.pi / 4.0, abs=0.01)
    assert np.allclose(np.linalg.norm(n[mask], axis=1), 1.0)
    # The camera looks along the forward axis (-Z for up=y): the centre normal points back at it (+Z).
    assert n[100, 100] @ np.array([0.0, 0.0, 1.0]) > 0.99
    assert n[0, 100] @ np.array([0.0, 1.0, 0.0]) > 0.9  # the top of the picture is up


def test_view_directions_make_the_given_angle_with_the_normal():
    n, _ = normal_grid(8, 4)
    for angle in (0.0, 45.0, 75.0):
        wo = view_directions(n, angle)
        assert np.allclose(np.linalg.norm(wo, axis=1), 1.0)
        assert np.allclose(np.sum(wo * n, axis=1), math.cos(math.radians(angle)))
