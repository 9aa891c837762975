"""Tests of envsample.reference.sh9 (Ramamoorthi & Hanrahan 2001) against closed forms and the exact reference."""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.reference_maps import AXES, cap_map, frame_rows, random_normals, unit  # noqa: F401

from envsample.reference.irradiance import reference_irradiance
from envsample.reference.sh9 import SH9_BAND_FACTORS, sh9_irradiance, sh9_project

# ---------------------------------------------------------------------------
# spherical harmonics (Ramamoorthi & Hanrahan 2001)
# ---------------------------------------------------------------------------

def _zonal_map(H, a, b, c):
    """Exact row averages of L = a + b mu + c (3 mu^2 - 1) (antiderivative a mu + b mu^2/2 + c (mu^3 - mu))."""
    mu = np.cos(np.pi * np.arange(H + 1) / H)

    def F(m):
        return a * m + b * m * m / 2 + c * (m ** 3 - m)

    rows = (F(mu[:-1]) - F(mu[1:])) / (mu[:-1] - mu[1:])
    return np.repeat(rows[:, None, None], 2 * H, axis=1) * np.ones(3), mu


def _zonal_bound(mu, W, a, b, c):
    """Rigorous bound on |E(map) - E(smooth)| for a map of cell averages.

    Per cell, int (Lbar - L) = 0, so |int (Lbar - L) g| <= dOmega * osc(L) * osc(g) / 2 and
    osc(g) <= the cell's angular diameter for g = max(0, n.w) (1-Lipschitz in angle).
    """
    mu0, mu1 = mu[:-1], mu[1:]
    pts = [mu0, mu1]
    if c != 0:
        v = -b / (6 * c)
        pts.append(np.clip(v, mu1, mu0))
    vals = np.stack([a + b * m + c * (3 * m * m - 1) for m in pts])
    osc = vals.max(0) - vals.min(0)
    t = np.arccos(np.clip(mu, -1, 1))
    smax = np.where((mu0 > 0) & (mu1 < 0), 1.0, np.maximum(np.sin(t[:-1]), np.sin(t[1:])))
    diam = np.diff(t) + smax * 2 * math.pi / W
    return float(np.sum((mu0 - mu1) * 2 * math.pi * osc * diam / 2))


def test_band_limited_map_matches_ramamoorthi_hanrahan():
    """L = a + b z + c (3 z^2 - 1), z the up component: E(n) = pi a + 2pi/3 b n_z + pi/4 c (3 n_z^2 - 1).

    Ramamoorthi & Hanrahan (2001), eq. 7-9 (A_0 = pi, A_1 = 2 pi/3, A_2 = pi/4), exact for
    maps band-limited to order 2.  The map stores cell averages, so it is not exactly
    band-limited: we check (1) the rigorous discretisation bound of _zonal_bound, (2)
    second-order convergence: one Richardson step (4 E_h/2 - E_h)/3 removes the h^2 term
    and must leave < 1% of the raw error.
    """
    a, b, c = 1.0, 0.5, 0.2
    n = np.concatenate([random_normals(30, 21), AXES])
    results = {}
    for H in (64, 128):
        img, mu = _zonal_map(H, a, b, c)
        for up in ("y", "z"):
            nz = n @ frame_rows(up, 0.0)[2]
            expected = math.pi * a + 2 * math.pi / 3 * b * nz + math.pi / 4 * c * (3 * nz * nz - 1)
            E = reference_irradiance(img, n, up=up)[:, 1]
            assert np.max(np.abs(E - expected)) <= _zonal_bound(mu, 2 * H, a, b, c)
            results[H, up] = E - expected
    for up in ("y", "z"):
        extrapolated = (4 * results[128, up] - results[64, up]) / 3
        assert np.max(np.abs(extrapolated)) < 0.01 * np.max(np.abs(results[128, up]))


def _cell_gauss_integrals(H, W, funcs, order=12):
    """int_cell f(w) dw for every cell, by numpy's Gauss-Legendre rule in (theta, phi), shape (H, W, k)."""
    x, w = np.polynomial.legendre.leggauss(order)
    t_edges = np.pi * np.arange(H + 1) / H
    p_edges = -np.pi + 2 * np.pi * np.arange(W + 1) / W
    t = 0.5 * (t_edges[:-1, None] + t_edges[1:, None]) + 0.5 * np.diff(t_edges)[:, None] * x
    p = 0.5 * (p_edges[:-1, None] + p_edges[1:, None]) + 0.5 * np.diff(p_edges)[:, None] * x
    T, P = t[:, None, :, None], p[None, :, None, :]
    d = np.stack(np.broadcast_arrays(np.sin(T) * np.cos(P), np.sin(T) * np.sin(P), np.cos(T)), axis=-1)
    wt = (0.5 * np.diff(t_edges)[:, None] * w)[:, None, :, None] * np.sin(T) * \
        (0.5 * np.diff(p_edges)[:, None] * w)[None, :, None, :]
    return np.stack([np.sum(f(d) * wt, axis=(2, 3)) for f in funcs], axis=-1)


def test_sh9_projection_is_exact_for_the_piecewise_constant_map():
    """sh9_project against numpy Gauss-Legendre quadrature of L_cell * Y_lm over every cell.

    Basis: Ramamoorthi & Hanrahan (2001), eq. 3, constants 0.282095, 0.488603, 1.092548,
    0.315392, 0.546274, written here from that table (world x, y, z).
    """
    H, W = 8, 16
    img = np.random.default_rng(9).random((H, W, 3))
    basis = [
        lambda d: 0.282095 + 0 * d[..., 0], lambda d: 0.488603 * d[..., 1], lambda d: 0.488603 * d[..., 2],
        lambda d: 0.488603 * d[..., 0], lambda d: 1.092548 * d[..., 0] * d[..., 1],
        lambda d: 1.092548 * d[..., 1] * d[..., 2], lambda d: 0.315392 * (3 * d[..., 2] ** 2 - 1),
        lambda d: 1.092548 * d[..., 0] * d[..., 2], lambda d: 0.546274 * (d[..., 0] ** 2 - d[..., 1] ** 2),
    ]
    for up, rot in (("y", 0.0), ("z", 30.0)):
        B = frame_rows(up, rot)
        world = [lambda d, f=f: f(d @ B) for f in basis]  # cell directions are in the map frame
        per_cell = _cell_gauss_integrals(H, W, world)
        expected = np.einsum("ijk,ijc->kc", per_cell, img)
        # The published constants are rounded to 6 digits: compare at that precision.
        np.testing.assert_allclose(sh9_project(img, up=up, rotation_deg=rot), expected, rtol=2e-6, atol=1e-6)


def test_sh9_irradiance_closed_forms():
    """Uniform map: E = pi L (Lambert).  L = w_x: int w_x max(0, n.w) dw = (2 pi/3) n_x (textbook)."""
    n = random_normals(10, 31)
    c = sh9_project(np.ones((16, 32, 3)))
    np.testing.assert_allclose(sh9_irradiance(c, n), np.pi, rtol=1e-12)
    coeffs = np.zeros(9)
    coeffs[3] = math.sqrt(4 * math.pi / 3)  # x = L11 Y11 with Y11 = sqrt(3 / (4 pi)) x
    np.testing.assert_allclose(sh9_irradiance(coeffs, n), 2 * math.pi / 3 * n[:, 0], rtol=1e-12)
    assert SH9_BAND_FACTORS == pytest.approx((math.pi, 2 * math.pi / 3, math.pi / 4))
    assert sh9_irradiance(c, n.reshape(2, 5, 3)).shape == (2, 5, 3)


def test_sh9_agrees_with_reference_on_band_limited_map_and_not_on_a_sharp_one():
    """SH9 is an approximation: near-exact for a (discretised) band-limited map, off for a small bright cap."""
    n = np.concatenate([random_normals(20, 41), AXES])
    img, _ = _zonal_map(128, 1.0, 0.5, 0.2)
    ref = reference_irradiance(img, n)
    assert np.max(np.abs(sh9_irradiance(sh9_project(img), n) - ref)) < 1e-6 * np.max(ref)
    cap = cap_map(64, 128, 4, 50.0)
    err = np.abs(sh9_irradiance(sh9_project(cap), n) - reference_irradiance(cap, n))
    assert np.max(err) > 0.01 * np.max(reference_irradiance(cap, n))


def test_bad_coefficients_message():
    with pytest.raises(ValueError, match="coeffs"):
        sh9_irradiance(np.zeros(4), [0, 1, 0])
