"""Tests of envsample.lights.plateau: the largest flat top of a map's values, its size, contrast and
shoulder (the signs of clipping).

Outside references: the exact solid angle of a lat-long pixel, (cos theta_i - cos theta_{i+1}) 2 pi / W
(textbook, tests/support/table_sampling.py); the sun's solid angle 2 pi (1 - cos(0.2665 deg)) for a
mean diameter of 0.533 deg (from memory; textbook cap formula).  A square block's 8-neighbour ring is
the square annulus around it (plane geometry), so the shoulder pixels are known without envsample.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.table_sampling import exact_row_solid_angles

from envsample.lights.plateau import find_plateau, plateau_is_clipped

H, W = 64, 128
SUN_SR = 2.0 * math.pi * (1.0 - math.cos(math.radians(0.533 / 2.0)))
TOP, BG = 50.0, 1.0


def _block(lum, r, c, half, value):
    """Set the square of side 2 half + 1 centred on (r, c)."""
    lum[r - half : r + half + 1, c - half : c + half + 1] = value


def _map(second_ring=BG):
    """Background BG; a 3x3 plateau at TOP (rows 20-22, columns 40-42) inside a ring at 20 and a second ring
    at ``second_ring``; a one-pixel spot at TOP elsewhere; and some texture so that no row is constant."""
    lum = np.full((H, W), BG) + 1e-3 * np.sin(np.arange(W))[None, :]
    _block(lum, 21, 41, 3, second_ring)
    _block(lum, 21, 41, 2, 20.0)
    _block(lum, 21, 41, 1, TOP)
    lum[40, 10] = TOP
    return lum


def _find(lum, **kw):
    return find_plateau(lum, lum, exact_row_solid_angles(H, W), median_luminance=BG, **kw)


def test_the_largest_plateau_is_found_with_its_solid_angle_and_contrast():
    p = _find(_map())
    omega = exact_row_solid_angles(H, W)
    assert p["level"] == TOP and p["pixels"] == 9 and p["rows"] == [20, 22]
    assert p["solid_angle_sr"] == pytest.approx(3.0 * omega[20:23].sum(), rel=1e-12)
    assert p["sun_multiple"] == pytest.approx(p["solid_angle_sr"] / SUN_SR, rel=1e-9)
    assert p["contrast"] == pytest.approx(TOP / BG)
    assert p["shoulder"] == 0.0  # a sharp edge: back at the background two pixels out


def test_the_shoulder_is_the_median_rise_two_pixels_out():
    """Second ring at BG + 0.3 (TOP - BG): the shoulder is 0.3 (the ring's texture is 1e-3 of BG)."""
    p = _find(_map(second_ring=BG + 0.3 * (TOP - BG)))
    assert p["shoulder"] == pytest.approx(0.3, abs=1e-4)


def test_a_region_and_the_tolerance_choose_what_is_at_the_top():
    lum = _map()
    region = np.zeros((H, W), bool)
    region[35:45, 5:15] = True
    spot = _find(lum, region=region)
    assert spot["pixels"] == 1 and spot["rows"] == [40, 40]
    lum[21, 41] = TOP * (1 + 1e-7)  # within the default relative tolerance 1e-6: still one plateau of 9
    assert _find(lum)["pixels"] == 9
    lum[21, 41] = TOP * (1 + 1e-4)  # now the top is that pixel alone
    assert _find(lum)["pixels"] == 1


def test_constant_rows_and_black_maps_have_no_plateau():
    lum = np.full((H, W), BG)
    lum[0] = TOP  # a constant row at the top (a pole row images one direction): not clipping
    assert _find(lum) is None
    assert _find(np.zeros((H, W))) is None


@pytest.mark.parametrize("p, shoulder, clipped", [
    ({"pixels": 9, "sun_multiple": 3.0, "contrast": 50.0, "shoulder": 0.2}, True, True),
    ({"pixels": 9, "sun_multiple": 3.0, "contrast": 50.0, "shoulder": 0.0}, True, False),
    ({"pixels": 9, "sun_multiple": 3.0, "contrast": 50.0, "shoulder": 0.0}, False, True),
    ({"pixels": 2, "sun_multiple": 3.0, "contrast": 50.0, "shoulder": 0.2}, True, False),
    ({"pixels": 9, "sun_multiple": 1.5, "contrast": 50.0, "shoulder": 0.2}, True, False),
    ({"pixels": 9, "sun_multiple": 3.0, "contrast": 3.0, "shoulder": 0.2}, True, False),
])
def test_a_plateau_is_clipped_when_large_bright_and_soft_shouldered(p, shoulder, clipped):
    assert plateau_is_clipped(p, shoulder=shoulder) is clipped
