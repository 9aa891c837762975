"""Tests of envsample.lights.finder on analytic suns whose direction, size and power are known.

The maps are the ``sky sun`` kind (envsample.synth.skies.sun_sky): every pixel is the
average of the analytic radiance over the pixel, so the disk's power is L * Omega (closed
form) to a fraction of a percent.  Accuracy asked by issue 11: direction within one pixel,
solid angle within one pixel's, power within 1 %.
"""

from __future__ import annotations

import numpy as np
import pytest
from support.sun_maps import analytic_sun, angle_between_deg, clipped_capture, pixel_solid_angle_at, true_sun_power

from envsample.lights.finder import find_sun
from envsample.synth import skies

CASES = [
    # width, azimuth, elevation, diameter: below 2 deg, on the seam, high, a wide disk.
    (1024, 20.0, 30.0, 0.533),
    (1024, 180.0, 45.0, 0.533),
    (2048, -60.0, 1.2, 0.533),
    (2048, 179.9, 1.5, 0.533),
    (4096, 10.0, 60.0, 2.0),
    (4096, -180.0, 20.0, 1.0),
    (8192, 100.0, 35.0, 0.533),
]


@pytest.mark.parametrize(("width", "az", "el", "diam"), CASES)
def test_finder_measures_analytic_suns(width, az, el, diam):
    sun = find_sun(analytic_sun(width, azimuth_deg=az, elevation_deg=el, diameter_deg=diam))
    pixel_deg = 180.0 / (width // 2)
    assert angle_between_deg(sun.azimuth_deg, sun.elevation_deg, az, el) < pixel_deg
    omega_true = skies.sun_solid_angle(diam)
    assert abs(sun.solid_angle_sr - omega_true) < pixel_solid_angle_at(width, el)
    assert sun.power == pytest.approx(true_sun_power(diam), rel=0.01)
    assert not sun.clipped and sun.confidence > 0.5
    assert np.linalg.norm(sun.direction) == pytest.approx(1.0)


def test_finder_reports_no_sun_on_a_diffuse_sky():
    assert find_sun(skies.cie_overcast_sky(256)) is None
    assert find_sun(np.zeros((64, 128, 3), np.float32)) is None


def test_finder_flags_a_clipped_core_and_lowers_its_confidence():
    clean = analytic_sun(1024, azimuth_deg=20.0, elevation_deg=30.0)
    sun = find_sun(clipped_capture(clean, azimuth_deg=20.0, elevation_deg=30.0))
    assert sun.clipped and sun.confidence <= 0.5
    assert any("clipped" in n for n in sun.notes)


def test_finder_follows_the_direction_convention():
    img = analytic_sun(1024, azimuth_deg=40.0, elevation_deg=25.0)
    sun = find_sun(img, up="z", rotation_deg=30.0)
    assert sun.azimuth_deg == pytest.approx(70.0, abs=0.2) and sun.elevation_deg == pytest.approx(25.0, abs=0.2)
    expect = skies.sun_direction(azimuth_deg=70.0, elevation_deg=25.0, up="z")
    assert float(sun.direction @ expect) > np.cos(np.radians(0.2))


def test_finder_rejects_a_map_that_is_not_equirectangular():
    with pytest.raises(ValueError, match="lat-long"):
        find_sun(np.ones((10, 20), np.float32))
    with pytest.raises(ValueError, match="unknown sun finder option"):
        find_sun(np.ones((8, 16, 3), np.float32), glare=1)
