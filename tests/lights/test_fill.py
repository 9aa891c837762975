"""Tests of envsample.lights.fill: the harmonic (membrane) fill of a hole in a lat-long map.

Outside references: the Laplace-Beltrami operator of the sphere in spherical coordinates (textbook),
whose solutions that depend on the polar angle alone are F = a + b ln tan(theta / 2); the fill's
finite-volume form of it (Perez, Gangnet & Blake 2003, membrane interpolation, discretised as the
module documents) must reproduce the discrete counterpart of that function exactly, and the discrete
maximum principle (positive weights: the fill lies between its boundary values).  Separation of
variables gives the harmonic functions A(theta) cos(m phi) (continuous: tan(theta / 2)^m cos(m phi), by
the conformal stereographic projection); their discrete counterpart, built row by row from the
documented equations, must be reproduced too, across the seam.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from envsample.lights.fill import harmonic_fill
from envsample.lights.regions import ring


def test_harmonic_fill_stays_within_its_boundary_values_and_keeps_a_constant():
    """Maximum principle (discrete, positive weights): the fill lies within the boundary values."""
    h, w = 40, 80
    band = np.random.default_rng(1).uniform(1.0, 2.0, (h, w, 3)).astype(np.float32)
    hole = np.zeros((h, w), bool)
    hole[10:30, 70:80] = hole[10:30, 0:6] = True  # across the seam
    out = harmonic_fill(band, hole, first_row=20, height=200)
    boundary = ring(hole)
    assert out[hole].min() >= band[boundary].min() - 1e-6 and out[hole].max() <= band[boundary].max() + 1e-6
    assert np.array_equal(out[~hole], band[~hole])
    const = np.full((h, w, 3), 0.75, np.float32)
    assert np.allclose(harmonic_fill(const, hole, first_row=20, height=200), 0.75, atol=1e-6)
    with pytest.raises(ValueError, match="whole band"):
        harmonic_fill(const, np.ones((h, w), bool), first_row=0, height=h)


HEIGHT, WIDTH = 64, 48
FIRST, ROWS = 2, 30  # the band: map rows 2..31, near the zenith where ln tan(theta / 2) bends most
DTH, DPH = math.pi / HEIGHT, 2.0 * math.pi / WIDTH


def _hole_across_the_seam() -> np.ndarray:
    hole = np.zeros((ROWS, WIDTH), bool)
    hole[1:ROWS - 2, WIDTH - 9:] = hole[1:ROWS - 2, :7] = True
    return hole


def _band(values_by_row: np.ndarray, cos_m_phi=None) -> np.ndarray:
    f = values_by_row[:, None] * (np.ones(WIDTH) if cos_m_phi is None else cos_m_phi)[None, :]
    return np.repeat((f + 5.0)[..., None], 3, axis=2)


def test_harmonic_fill_reproduces_a_function_of_the_polar_angle_that_is_harmonic_on_the_sphere():
    """F(theta) = ln tan(theta / 2) solves Laplace-Beltrami (1/sin d/dtheta (sin dF/dtheta) = 0, textbook).
    Its discrete form has steps dtheta / sin(theta_edge) between rows (the flux sin(theta_edge) dF/dtheta
    is the same through every edge): the fill must give it back exactly, and it is the sampled ln tan
    to the midpoint rule's error."""
    g = np.arange(FIRST, FIRST + ROWS)
    steps = DTH / np.sin(g[1:] * DTH)  # edge between map rows g-1 and g lies at theta = g dtheta
    discrete = np.concatenate([[0.0], np.cumsum(steps)])
    centres = (g + 0.5) * DTH
    continuous = np.log(np.tan(centres / 2.0))
    discrete += continuous[0]
    # Each step is the midpoint rule for int dtheta / sin(theta) over one row pitch: its error is at most
    # dtheta^3 / 24 max|f''| with f'' = (1 + cos^2) / sin^3, largest at the step's upper end (theta < pi/2).
    bound = np.cumsum(DTH**3 / 24.0 * (1.0 + np.cos((g[1:] - 0.5) * DTH) ** 2) / np.sin((g[1:] - 0.5) * DTH) ** 3)
    assert np.all(np.abs(discrete - continuous)[1:] <= bound)
    hole = _hole_across_the_seam()
    band = _band(discrete)
    known = band.copy()
    known[hole] = 0.0  # what the fill must not use
    out = harmonic_fill(known, hole, first_row=FIRST, height=HEIGHT)
    np.testing.assert_allclose(out, band, rtol=0, atol=2e-5)
    # A linear interpolation between the rows above and below the hole would be far off here.
    assert np.ptp(continuous[1:ROWS - 2]) > 1.0


def _separated_rows(m: int) -> np.ndarray:
    """A(theta) of the discrete harmonic A(theta) cos(m phi): the documented 5-point equation solved for the
    next row, started from tan(theta / 2)^m (the continuous solution) on the band's first two rows."""
    g = np.arange(FIRST, FIRST + ROWS)
    a = np.empty(ROWS)
    a[:2] = np.tan((g[:2] + 0.5) * DTH / 2.0) ** m
    for k in range(1, ROWS - 1):
        gk = g[k]
        w_up, w_down = math.sin(gk * DTH) / DTH**2, math.sin((gk + 1) * DTH) / DTH**2
        w_side = 1.0 / (math.sin((gk + 0.5) * DTH) * DPH**2)
        around = w_side * (2.0 * math.cos(m * DPH) - 2.0)  # cos(m (phi +- dphi)) summed, minus twice cos(m phi)
        a[k + 1] = a[k] + (w_up * (a[k] - a[k - 1]) - around * a[k]) / w_down
    return a


@pytest.mark.parametrize("m", [1, 2])
def test_harmonic_fill_reproduces_a_harmonic_function_that_varies_across_the_seam(m):
    phi = (np.arange(WIDTH) + 0.5) * DPH - math.pi
    band = _band(_separated_rows(m), np.cos(m * phi))
    hole = _hole_across_the_seam()
    known = band.copy()
    known[hole] = 0.0
    out = harmonic_fill(known, hole, first_row=FIRST, height=HEIGHT)
    np.testing.assert_allclose(out, band, rtol=0, atol=2e-5)
    assert np.ptp(band[hole]) > 0.05  # the hole's values do vary with the azimuth


def test_a_hole_without_a_known_row_around_it_is_refused():
    band = np.ones((6, 16, 3), np.float32)
    hole = np.zeros((6, 16), bool)
    hole[0:3, 4:8] = True  # touches the band's first row, which is not the map's
    with pytest.raises(ValueError, match="touches the edge of the band"):
        harmonic_fill(band, hole, first_row=10, height=64)
    assert np.array_equal(harmonic_fill(band, np.zeros((6, 16), bool), first_row=10, height=64), band)
