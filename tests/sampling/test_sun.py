"""Tests of envsample.sampling.sun: the disk light's sampling, pdf and exact irradiance.

Outside references: ``scipy.integrate.quad`` of the raw integrand max(0, n.w) over the cap
(azimuth split at the horizon crossing), the closed form pi L sin^2(alpha) cos(theta) of a
uniform disk wholly above the horizon (textbook), and a chi-square test of the samples.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from envsample.sampling.sun import SunLight, cap_irradiance_factor, cap_solid_angle


def _quad_factor(theta: float, alpha: float) -> float:
    """integral over a cap (axis +z, radius alpha) of max(0, n.w) dw, n at polar angle theta: scipy quad."""
    c, s = math.cos(theta), math.sin(theta)

    def ring(b):
        a, bb = c * math.cos(b), s * math.sin(b)
        if a >= bb:
            top = math.pi
        elif a <= -bb:
            return 0.0
        else:
            top = math.acos(-a / bb)
        v, _ = integrate.quad(lambda p: max(0.0, a + bb * math.cos(p)), 0.0, top, epsabs=1e-15, epsrel=1e-13)
        return 2.0 * v * math.sin(b)

    cut = min(abs(0.5 * math.pi - theta), alpha)
    return (integrate.quad(ring, 0.0, cut, epsabs=1e-16, epsrel=1e-13)[0]
            + integrate.quad(ring, cut, alpha, epsabs=1e-16, epsrel=1e-13, limit=200)[0])


@pytest.mark.parametrize("alpha", [math.radians(0.2665), 0.05, 0.3])
@pytest.mark.parametrize("theta_frac", [0.0, 0.5, 0.9, 0.999, 1.0, 1.001, 1.05, 1.2])
def test_cap_irradiance_matches_scipy_quadrature(alpha, theta_frac):
    """Closed form above the horizon, quadrature where the cap straddles it: scipy.integrate.quad."""
    theta = min(math.pi, theta_frac * (0.5 * math.pi - alpha) if theta_frac <= 1.0
                else 0.5 * math.pi - alpha + (theta_frac - 1.0) * 40.0 * alpha)
    n = np.array([math.sin(theta), 0.0, math.cos(theta)])
    ours = cap_irradiance_factor(n, [0.0, 0.0, 1.0], alpha)[0]
    ref = _quad_factor(theta, alpha)
    assert ours == pytest.approx(ref, rel=1e-10, abs=1e-18)


def test_irradiance_is_the_closed_form_while_wholly_above_the_horizon():
    """E = pi L sin^2(alpha) cos(theta) for a uniform disk wholly above the horizon (textbook)."""
    sun = SunLight([0.0, 1.0, 0.0], 0.01, [2.0, 1.0, 0.5])
    theta = np.array([0.0, 0.7, 1.5])
    n = np.column_stack([np.sin(theta), np.cos(theta), np.zeros(3)])
    e = sun.irradiance(n)
    expect = math.pi * math.sin(0.01) ** 2 * np.cos(theta)[:, None] * sun.radiance
    assert np.allclose(e, expect, rtol=1e-13)
    assert np.allclose(sun.normal_irradiance, math.pi * math.sin(0.01) ** 2 * sun.radiance)


def test_irradiance_is_zero_when_the_disk_is_below_the_horizon():
    sun = SunLight([0.0, 0.0, 1.0], 0.01, 1.0)
    assert np.all(sun.irradiance([[0.0, 0.0, -1.0], [1.0, 0.0, -0.1]]) == 0.0)


def test_samples_lie_in_the_disk_with_pdf_one_over_the_solid_angle():
    sun = SunLight.from_angles(azimuth_deg=179.9, elevation_deg=1.0, diameter_deg=0.533, radiance=1.0)
    u = np.random.default_rng(3).random((20000, 2))
    d, p = sun.sample(u)
    assert np.allclose(np.linalg.norm(d, axis=1), 1.0, atol=1e-12)
    assert sun.inside(d).all()
    assert np.allclose(p, 1.0 / sun.solid_angle) and np.allclose(sun.pdf(d), p)
    assert sun.solid_angle == pytest.approx(cap_solid_angle(math.radians(0.2665)), rel=1e-12)
    outside = sun.direction * -1.0
    assert sun.pdf(outside)[0] == 0.0 and np.all(sun.eval(outside) == 0.0)


def test_samples_are_uniform_in_solid_angle_chi_square():
    """Uniform over the cap: cos(beta) uniform on [cos alpha, 1] and psi uniform (Archimedes); chi-square, seed 5."""
    alpha = 0.2
    sun = SunLight([0.0, 0.0, 1.0], alpha, 1.0)
    d, _ = sun.sample(np.random.default_rng(5).random((40000, 2)))
    t = (1.0 - d[:, 2]) / (1.0 - math.cos(alpha))  # uniform in [0, 1]
    psi = (np.arctan2(d[:, 1], d[:, 0]) / (2.0 * math.pi)) % 1.0
    counts, _, _ = np.histogram2d(t, psi, bins=8, range=[[0, 1], [0, 1]])
    assert stats.chisquare(counts.ravel()).pvalue > 1e-4


def test_from_angles_round_trips_the_direction_convention():
    sun = SunLight.from_angles(azimuth_deg=-65.0, elevation_deg=12.0, normal_irradiance=2.5, up="z", rotation_deg=30.0)
    assert sun.angles_deg == pytest.approx((-65.0, 12.0))
    assert sun.normal_irradiance == pytest.approx(np.full(3, 2.5))
    assert sun.diameter_deg == pytest.approx(0.533)


def test_bad_parameters_raise_with_the_name():
    with pytest.raises(ValueError, match="half_angle"):
        SunLight([0, 0, 1], 0.0, 1.0)
    with pytest.raises(ValueError, match="radiance"):
        SunLight([0, 0, 1], 0.01, [-1.0, 0, 0])
    with pytest.raises(ValueError, match="direction"):
        SunLight([0, 0, 0], 0.01, 1.0)
    with pytest.raises(ValueError, match="exactly one"):
        SunLight.from_angles(azimuth_deg=0, elevation_deg=10)
