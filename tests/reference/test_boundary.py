"""Tests of envsample.reference.boundary, the numpy fallback of the exact irradiance, called directly."""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.reference_maps import AXES, random_normals

from envsample.reference.boundary import chunk_size, irradiance_numpy


def test_uniform_map_gives_pi_in_the_map_frame():
    """Lambert's cosine law (textbook): E = pi L for every unit normal, axis-aligned ones included."""
    img = np.full((7, 12, 3), 2.0)
    n = np.concatenate([random_normals(20, 1), AXES])
    np.testing.assert_allclose(irradiance_numpy(img, n), 2.0 * math.pi, rtol=1e-12)


def test_batches_do_not_change_the_bits():
    img = np.random.default_rng(2).random((9, 16, 3))
    n = random_normals(23, 3)
    base = irradiance_numpy(img, n)
    for chunk in (1, 4, 100):
        np.testing.assert_array_equal(irradiance_numpy(img, n, chunk), base)


def test_chunk_size_default_and_checks():
    assert chunk_size(None, 1024, 2048) == 1_000_000 // (2 * 1024 + 2048 + 2)
    assert chunk_size(7, 4, 8) == 7
    with pytest.raises(ValueError, match="chunk must be a positive number of normals"):
        chunk_size(0, 4, 8)
