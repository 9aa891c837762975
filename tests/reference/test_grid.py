"""Tests of envsample.reference.grid: the cell grid's exact trigonometry, the map frame and the input checks."""

from __future__ import annotations

import math

import numpy as np
import pytest

from envsample.core.latlong import reduce_power
from envsample.errors import MapValidationError
from envsample.reference.grid import Grid, map_frame, prepare_map, thread_count, unit_normals


@pytest.mark.parametrize("height,width", [(4, 8), (5, 6), (64, 128), (3, 2)])
def test_grid_edges_are_exact_where_the_degenerate_cases_need_it(height, width):
    """cos/sin of theta and phi at the edges (textbook values), exact at the equator, the poles and the quarter
    turns, mirror-symmetric in theta and antipodal in phi, so a horizon on such an edge is represented exactly."""
    g = Grid(height, width)
    k = np.arange(height + 1)
    np.testing.assert_allclose(g.mu, np.cos(np.pi * k / height), atol=1e-15)
    np.testing.assert_allclose(g.s, np.sin(np.pi * k / height), atol=1e-15)
    assert (g.mu[0], g.mu[-1], g.s[0], g.s[-1]) == (1.0, -1.0, 0.0, 0.0)
    np.testing.assert_array_equal(g.mu, -g.mu[::-1])
    if height % 2 == 0:
        assert g.mu[height // 2] == 0.0 and g.s[height // 2] == 1.0
    phi = -math.pi + 2 * math.pi * np.arange(width + 1) / width
    np.testing.assert_allclose(g.cph, np.cos(phi), atol=1e-15)
    np.testing.assert_allclose(g.sph, np.sin(phi), atol=1e-15)
    assert (g.cph[0], g.sph[0]) == (-1.0, 0.0) and (g.cph[-1], g.sph[-1]) == (g.cph[0], g.sph[0])
    if width % 2 == 0:
        half = width // 2
        np.testing.assert_array_equal(g.cph[half:width], -g.cph[:half])
        np.testing.assert_array_equal(g.sph[half:width], -g.sph[:half])


def test_map_frame_is_a_rotation_and_checks_the_up_axis():
    for up in ("y", "z"):
        for rot in (0.0, 90.0, 33.3):
            f = map_frame(up, rot)
            np.testing.assert_allclose(f @ f.T, np.eye(3), atol=1e-15)
            assert abs(np.linalg.det(f)) == pytest.approx(1.0)  # forward, right, up: handedness of the convention
    # A quarter turn is exact (no 6e-17 from cos(pi/2)).
    assert np.count_nonzero(map_frame("y", 90.0)) == 3
    with pytest.raises(ValueError, match="unknown up axis 'x'; valid: y, z"):
        map_frame("x", 0.0)


def test_prepare_map_reduces_with_the_table_filter_and_checks_once():
    img = np.random.default_rng(3).random((16, 32, 3)).astype(np.float32)
    np.testing.assert_array_equal(prepare_map(img, "16x8"), reduce_power(img, (16, 8)))
    assert prepare_map(img, None) is img or np.shares_memory(prepare_map(img, None), img)
    bad = img.copy()
    bad[1, 2, 0] = np.inf
    with pytest.raises(MapValidationError, match="NaN or Inf"):
        prepare_map(bad, None)
    with pytest.raises(ValueError, match="at least 2 columns"):
        prepare_map(img, (1, 1))


def test_unit_normals_and_thread_count_check_their_input():
    n, lead = unit_normals(np.array([[[0.0, 2.0, 0.0]]]) / 2.0)
    assert n.shape == (1, 3) and lead == (1, 1)
    with pytest.raises(ValueError, match="unit vectors"):
        unit_normals([0.0, 1.1, 0.0])
    assert thread_count(3) == 3 and thread_count(None) >= 1
    for bad in (0, -1, 1.5, True):
        with pytest.raises(ValueError, match="threads must be a whole number >= 1"):
            thread_count(bad)
