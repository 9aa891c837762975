"""Tests of envsample.lights.emitters: bright connected regions measured as emitters (power share, solid
angle, direction, size).

Outside references: the exact solid angle of a lat-long pixel, (cos theta_i - cos theta_{i+1}) 2 pi / W
(textbook, written out in tests/support/table_sampling.py); the pixel-centre direction convention
(azimuth 360 (u - 0.5), elevation 90 - 180 v, documented in envsample.core.sphere); the cap of a
solid angle omega has diameter 2 acos(1 - omega / 2 pi) (textbook); the sun's mean diameter 0.533 deg
(from memory).  The maps are invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.table_sampling import exact_row_solid_angles

from envsample.lights.emitters import emitter_level, find_emitters
from envsample.lights.regions import label_wrapped

H, W = 64, 128


def _pixel_angles(row, col):
    """Azimuth and elevation (degrees) of a pixel centre: u = (col + 0.5) / W, v = (row + 0.5) / H."""
    return 360.0 * ((col + 0.5) / W - 0.5), 90.0 - 180.0 * (row + 0.5) / H


def _lamps():
    """A dim background (0.1) with a bright lamp (100, rows 20-21, columns 30-32) and a dimmer one
    across the seam (10, row 40, columns 127 and 0)."""
    lum = np.full((H, W), 0.1)
    lum[20:22, 30:33] = 100.0
    lum[40, [W - 1, 0]] = 10.0
    return lum


def test_emitters_have_the_power_share_and_solid_angle_of_their_pixels():
    lum = _lamps()
    omega = exact_row_solid_angles(H, W)
    labels, n = label_wrapped(lum > 1.0)
    found = find_emitters(lum, labels, n, omega)
    assert [e.pixels for e in found] == [6, 2]  # by decreasing power; the seam pair is one emitter
    total = float((lum * omega[:, None]).sum())
    bright, seam = found
    assert bright.solid_angle_sr == pytest.approx(3 * omega[20:22].sum(), rel=1e-12)
    assert bright.share == pytest.approx(100.0 * bright.solid_angle_sr / total, rel=1e-12)
    assert seam.share == pytest.approx(10.0 * 2 * omega[40] / total, rel=1e-12)
    assert bright.peak == 100.0 and seam.peak == 10.0
    # The map's integral may be given instead of computed: the same emitters, to rounding.
    given = find_emitters(lum, labels, n, omega, total_power=total)
    assert [e.share for e in given] == pytest.approx([e.share for e in found], rel=1e-12)
    assert [e.label for e in given] == [e.label for e in found]


def test_emitter_directions_are_power_weighted_means_also_across_the_seam():
    lum = np.full((H, W), 0.1)
    lum[12, 49:52] = 50.0  # one row, symmetric about column 50: the mean direction is column 50's centre
    lum[40, [W - 1, 0]] = 10.0  # symmetric about the seam: azimuth +-180
    omega = exact_row_solid_angles(H, W)
    labels, n = label_wrapped(lum > 1.0)
    row, seam = find_emitters(lum, labels, n, omega)
    dphi = 2.0 * math.pi / W
    # The mean of unit vectors at one polar angle theta and azimuths phi0 + k dphi: azimuth phi0, horizontal
    # length sin(theta) times the mean of cos(k dphi), vertical cos(theta) (vector algebra).
    az, el = _pixel_angles(12, 50)
    theta = math.radians(90.0 - el)
    horizontal = math.sin(theta) * (1.0 + 2.0 * math.cos(dphi)) / 3.0
    assert row.azimuth_deg == pytest.approx(az, abs=1e-9)
    assert row.elevation_deg == pytest.approx(math.degrees(math.atan2(math.cos(theta), horizontal)), abs=1e-9)
    assert abs(seam.azimuth_deg) == pytest.approx(180.0, abs=1e-9)  # columns W-1 and 0 sit at +-(180 - dphi/2)
    theta = math.radians(90.0 - _pixel_angles(40, 0)[1])
    horizontal = math.sin(theta) * math.cos(dphi / 2.0)
    assert seam.elevation_deg == pytest.approx(math.degrees(math.atan2(math.cos(theta), horizontal)), abs=1e-9)


def test_emitter_size_is_the_diameter_of_a_cap_of_its_solid_angle():
    lum = _lamps()
    omega = exact_row_solid_angles(H, W)
    labels, n = label_wrapped(lum > 1.0)
    bright = find_emitters(lum, labels, n, omega)[0]
    assert bright.diameter_deg == pytest.approx(math.degrees(2 * math.acos(1 - bright.solid_angle_sr / (2 * math.pi))))
    assert bright.pixel_diameter_deg == pytest.approx(math.degrees(2 * math.acos(1 - omega[20] / (2 * math.pi))),
                                                      rel=0.05)  # one pixel of its (mean) row
    assert bright.resolved is (bright.diameter_deg > 2 * bright.pixel_diameter_deg)
    d = bright.to_dict()
    assert d["sun_diameter_ratio"] == pytest.approx(bright.diameter_deg / 0.533, rel=1e-3)
    assert d["pixels"] == 6 and d["share"] == bright.share


def test_no_emitters_in_a_black_map_or_without_labels():
    omega = exact_row_solid_angles(H, W)
    labels, n = label_wrapped(np.zeros((H, W), bool))
    assert find_emitters(np.zeros((H, W)), labels, n, omega) == []
    assert find_emitters(_lamps(), labels, 0, omega) == []


def test_the_emitter_level_is_the_larger_of_a_median_multiple_and_a_peak_fraction():
    lum = _lamps()
    assert emitter_level(lum, 0.1) == pytest.approx(max(20 * 0.1, 0.05 * 100.0))  # the peak rule: 5
    assert emitter_level(lum, 1.0) == pytest.approx(20.0)  # the median rule
    assert emitter_level(lum, 0.1, median_multiple=100.0, max_fraction=0.01) == pytest.approx(10.0)
    assert emitter_level(np.zeros((0, 0)), 0.5) == pytest.approx(10.0)  # nothing to take a peak of
