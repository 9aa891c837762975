"""Tests of envsample.reference.sun: the exact irradiance of a split scene, sky map plus sun disk.

Outside references (closed forms, textbook): a uniform sphere of radiance L gives irradiance pi L on
every surface; the traditional overcast sky L = Lz (1 + 2 cos theta) / 3 over a black ground
(Moon & Spencer 1942; CIE S 003/E:1996) gives 7 pi Lz / 9 on an up-facing surface; a uniform disk of
radiance L and angular radius a wholly above a surface's horizon gives pi L sin^2(a) cos(theta).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from envsample.reference.irradiance import reference_irradiance
from envsample.reference.sun import reference_split_irradiance
from envsample.sampling.sun import SunLight

H, W = 256, 512
ALPHA = math.radians(0.2665)


def _overcast(lz=2.0):
    theta = (np.arange(H) + 0.5) * math.pi / H
    lum = np.where(theta < math.pi / 2, lz * (1.0 + 2.0 * np.cos(theta)) / 3.0, 0.0)
    return np.repeat(np.repeat(lum[:, None, None], W, axis=1), 3, axis=2).astype(np.float32)


def test_without_a_sun_it_is_the_skys_exact_irradiance():
    sky = _overcast()
    n = np.array([[0.0, 1.0, 0.0], [0.6, 0.0, 0.8]])
    np.testing.assert_array_equal(reference_split_irradiance(sky, None, n), reference_irradiance(sky, n))


def test_a_uniform_sky_and_a_sun_above_the_horizon_add_their_closed_forms():
    """Uniform sky 0.5 -> pi 0.5 everywhere; the disk adds pi L sin^2(a) cos(theta) for each normal (the
    normals' array shape is kept); normals that are not unit vectors are refused."""
    sky = np.full((64, 128, 3), 0.5, np.float32)
    sun = SunLight([0.0, 1.0, 0.0], ALPHA, [4e4, 3e4, 2e4])
    theta = np.array([[0.0, 0.4], [1.0, 1.5]])
    n = np.stack([np.sin(theta), np.cos(theta), np.zeros_like(theta)], axis=-1)
    e = reference_split_irradiance(sky, sun, n)
    assert e.shape == (2, 2, 3) and e.dtype == np.float64
    expect = math.pi * 0.5 + math.pi * math.sin(ALPHA) ** 2 * np.cos(theta)[..., None] * sun.radiance
    np.testing.assert_allclose(e, expect, rtol=1e-9)
    with pytest.raises(ValueError, match="normals must be unit vectors"):
        reference_split_irradiance(sky, sun, n * 3.0)


@pytest.mark.parametrize("up", ["y", "z"])
def test_the_overcast_sky_and_a_sun_follow_the_up_axis(up):
    """Up-facing surface: 7 pi Lz / 9 from the sky (to the midpoint rule's O(1/H^2) over the rows, 1e-4 at
    256 rows) plus pi L sin^2(a) sin(elevation) from a sun at 30 deg elevation; facing down, nothing."""
    lz, el = 2.0, 30.0
    sun = SunLight.from_angles(azimuth_deg=40.0, elevation_deg=el, radiance=1e3, up=up)
    axis = {"y": [0.0, 1.0, 0.0], "z": [0.0, 0.0, 1.0]}[up]
    e = reference_split_irradiance(_overcast(lz), sun, np.array([axis, [-a for a in axis]]), up=up)
    sun_part = math.pi * 1e3 * math.sin(ALPHA) ** 2 * math.sin(math.radians(el))
    np.testing.assert_allclose(e[0], 7.0 * math.pi * lz / 9.0 + sun_part, rtol=1e-4)
    np.testing.assert_allclose(e[1], 0.0, atol=1e-12)
