"""Tests of envsample.reference against closed forms, published formulas and scipy quadrature.

Every external check names its source in its docstring.  Maps are small (at most
256x128) so the file runs in well under 20 s.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from envsample.core.latlong import reduce_power
from envsample.core.sphere import UP_AXES, pixel_center_directions, row_solid_angles, uv_to_direction
from envsample.errors import MapValidationError
from envsample.reference.irradiance import (
    SH9_BAND_FACTORS,
    cell_cosine_integrals,
    first_moment,
    reference_accuracy,
    reference_glossy,
    reference_glossy_accuracy,
    reference_irradiance,
    sh9_irradiance,
    sh9_project,
)

#: Relative tolerance of results that are exact up to floating-point rounding.
EXACT_RTOL = 1e-12

#: Absolute tolerance on a GGX directional albedo (a number <= 1) from two quadratures.
ALBEDO_ATOL = 2e-6


def _unit(v):
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def _random_normals(count, seed):
    return _unit(np.random.default_rng(seed).normal(size=(count, 3)))


AXES = np.concatenate([np.eye(3), -np.eye(3)])


def _map_frame(up, rotation_deg):
    """Rows forward_R, right_R, up of the sphere convention, computed independently here."""
    f, r, a = (np.array(v, dtype=np.float64) for v in UP_AXES[up])
    c, s = math.cos(math.radians(rotation_deg)), math.sin(math.radians(rotation_deg))
    return np.stack([c * f + s * r, -s * f + c * r, a])


def _cap_map(height, width, rows, inside, outside=(0.0, 0.0, 0.0)):
    """A polar cap made of the top ``rows`` rows: exactly the cap theta < pi*rows/height."""
    img = np.empty((height, width, 3))
    img[:rows] = inside
    img[rows:] = outside
    return img


# ---------------------------------------------------------------------------
# irradiance: closed forms
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("up", ["y", "z"])
@pytest.mark.parametrize("rotation_deg", [0.0, 90.0, 33.3])
@pytest.mark.parametrize("shape", [(1, 2), (3, 6), (16, 32), (33, 64)])
def test_uniform_map_gives_pi_times_radiance(up, rotation_deg, shape):
    """Lambert's cosine law: integral of max(0, n.w) over the sphere is pi, so E = pi L.

    Includes axis-aligned normals, whose horizon runs along the equator or along a
    meridian edge (the degenerate cases), and odd heights.
    """
    color = np.array([0.25, 1.0, 3.5])
    img = np.broadcast_to(color, shape + (3,))
    normals = np.concatenate([_random_normals(40, 1), AXES])
    E = reference_irradiance(img, normals, up=up, rotation_deg=rotation_deg)
    np.testing.assert_allclose(E, np.pi * np.broadcast_to(color, E.shape), rtol=EXACT_RTOL)


def test_normals_of_several_shapes():
    """Output shape is normals.shape (scalar normal, (N, 3), (H, W, 3)); values agree."""
    img = np.random.default_rng(2).random((8, 16, 3))
    grid = _random_normals(12, 3).reshape(3, 4, 3)
    flat = reference_irradiance(img, grid.reshape(-1, 3))
    assert reference_irradiance(img, grid).shape == (3, 4, 3)
    np.testing.assert_array_equal(reference_irradiance(img, grid).reshape(-1, 3), flat)
    assert reference_irradiance(img, grid[0, 0]).shape == (3,)
    np.testing.assert_array_equal(reference_irradiance(img, grid[0, 0]), flat[0])
    assert reference_irradiance(img, np.zeros((0, 3))).shape == (0, 3)


@pytest.mark.parametrize("up,rotation_deg", [("y", 0.0), ("z", 90.0), ("y", -47.0)])
def test_polar_cap_closed_form(up, rotation_deg):
    """Cap of half-angle a about the up axis, radiance L (textbook closed forms).

    About its axis: E = int_0^a cos t sin t dt * 2 pi * L = pi L sin^2 a.  For a normal
    tilted by tau <= pi/2 - a the whole cap is above the horizon, so E = n . (pi L sin^2 a
    * axis), the cap's first moment.  The cap is the top rows of the map, so the
    piecewise-constant map *is* the cap and the result must be exact.
    """
    H, W, rows = 64, 128, 12
    a = math.pi * rows / H
    L = np.array([2.0, 1.0, 0.5])
    img = _cap_map(H, W, rows, L)
    frame = _map_frame(up, rotation_deg)
    axis = frame[2]
    taus = np.array([0.0, 0.3, math.pi / 2 - a])
    azim = np.array([0.4, 2.0, -2.5])
    local = np.stack([np.sin(taus) * np.cos(azim), np.sin(taus) * np.sin(azim), np.cos(taus)], axis=1)
    normals = local @ frame
    E = reference_irradiance(img, normals, up=up, rotation_deg=rotation_deg)
    expected = np.pi * math.sin(a) ** 2 * np.cos(taus)[:, None] * L
    np.testing.assert_allclose(E, expected, rtol=EXACT_RTOL)
    np.testing.assert_allclose(normals @ axis, np.cos(taus), rtol=1e-14)


def test_disk_at_the_normal_is_bracketed_by_inner_and_outer_pixel_sets():
    """A disk of half-angle a centred at the normal: E = pi L sin^2 a (closed form).

    The map cannot represent an off-pole disk exactly, so we bracket it: the pixels
    certainly inside (centre distance + pixel radius <= a) and those possibly touching it
    (centre distance - pixel radius < a).  E is monotone in L (the kernel is >= 0), so
    E(inner) <= pi L sin^2 a <= E(outer).  Pixel radius: from the centre go along its
    latitude (<= sin(theta_c) dphi/2) then along the meridian (<= dtheta/2).
    """
    H, W = 256, 512
    a, L = 0.5, 4.0
    centre = _unit([0.3, 0.5, -0.8])
    d = pixel_center_directions(H, W)
    dist = np.arccos(np.clip(d @ centre, -1.0, 1.0))
    theta_c = (np.arange(H) + 0.5) * math.pi / H
    radius = (0.5 * math.pi / H + np.sin(theta_c) * math.pi / W)[:, None]
    inner = np.where(dist + radius <= a, L, 0.0)[..., None] * np.ones(3)
    outer = np.where(dist - radius < a, L, 0.0)[..., None] * np.ones(3)
    e_in = reference_irradiance(inner, centre)[0]
    e_out = reference_irradiance(outer, centre)[0]
    exact = math.pi * L * math.sin(a) ** 2
    assert e_in <= exact <= e_out
    assert e_out - e_in < 0.15 * exact  # the bracket is tight enough to mean something


def test_overcast_sky_horizontal_irradiance():
    """Traditional overcast sky L = Lz (1 + 2 cos t)/3 (Moon & Spencer 1942; CIE standard overcast sky).

    Closed form of the horizontal irradiance: 2 pi Lz int_0^1 (1 + 2 mu) mu / 3 dmu = 7 pi/9 Lz.
    The map holds exact row averages (envsample.skies); a row-constant map misses
    sum over sky rows of int (L - Lbar)(mu - mubar) d omega = (2 Lz / 3) * 2 pi * sum dmu^3 / 12
    = pi/9 Lz sum dmu^3 (L is linear in mu), derived here; float32 storage adds ~1e-7.
    """
    from envsample.synth.skies import cie_overcast_sky

    H, lz = 64, 1.7
    img = cie_overcast_sky(2 * H, H, zenith_luminance=lz)
    mu = np.cos(np.pi * np.arange(H // 2 + 1) / H)
    shortfall = math.pi / 9.0 * lz * np.sum(-np.diff(mu) ** 3)
    for up in ("y", "z"):
        E = reference_irradiance(img, _map_frame(up, 0.0)[2], up=up)
        assert abs(E[0] - (7.0 * math.pi / 9.0 * lz - shortfall)) < 1e-6 * lz
        assert 0.0 < 7.0 * math.pi / 9.0 * lz - E[0] <= shortfall + 1e-6 * lz


# ---------------------------------------------------------------------------
# irradiance: independent quadrature
# ---------------------------------------------------------------------------

def _lit_theta_range(c, nz, t0, t1):
    """Part of [t0, t1] where c sin t + nz cos t > 0 (the horizon crossing, solved by hand)."""
    if nz > 0:
        return t0, max(t0, min(t1, math.atan2(nz, -c)))
    if nz < 0:
        return min(t1, max(t0, math.atan2(-nz, c))), t1
    return (t0, t1) if c > 0 else (t0, t0)


def _dblquad_irradiance(img, normal, up, rotation_deg):
    """Sum over cells of L_cell * int_cell max(0, n.w) dw with scipy.integrate.dblquad.

    Per cell the outer variable is phi and the inner theta, limited to the lit part so
    the integrand is smooth (d omega = sin t dt dphi).
    """
    H, W = img.shape[:2]
    nx, ny, nz = _map_frame(up, rotation_deg) @ normal
    total = np.zeros(3)
    for i in range(H):
        t0, t1 = math.pi * i / H, math.pi * (i + 1) / H
        for j in range(W):
            p0, p1 = -math.pi + 2 * math.pi * j / W, -math.pi + 2 * math.pi * (j + 1) / W

            def f(t, p):
                return (math.sin(t) * (nx * math.cos(p) + ny * math.sin(p)) + nz * math.cos(t)) * math.sin(t)

            def lo(p):
                return _lit_theta_range(nx * math.cos(p) + ny * math.sin(p), nz, t0, t1)[0]

            def hi(p):
                return _lit_theta_range(nx * math.cos(p) + ny * math.sin(p), nz, t0, t1)[1]

            val, _ = integrate.dblquad(f, p0, p1, lo, hi, epsabs=1e-14, epsrel=1e-13)
            total += img[i, j] * val
    return total


@pytest.mark.parametrize("up,rotation_deg", [("y", 0.0), ("z", 90.0), ("y", 21.0)])
def test_random_piecewise_constant_map_matches_scipy_dblquad(up, rotation_deg):
    """An arbitrary piecewise-constant map against scipy.integrate.dblquad, cell by cell.

    The map is the analytic function (constant per cell); normals include random ones
    and axis-aligned ones (degenerate horizons).  Agreement to ~1e-12 shows the method
    is exact, not approximate.
    """
    img = np.random.default_rng(5).random((6, 12, 3))
    normals = np.concatenate([_random_normals(2, 7), AXES[[0, 2, 4]]])
    E = reference_irradiance(img, normals, up=up, rotation_deg=rotation_deg)
    for n, e in zip(normals, E):
        np.testing.assert_allclose(e, _dblquad_irradiance(img, n, up, rotation_deg), rtol=1e-11, atol=1e-12)


def _nested_quad_irradiance(img, normal, up, rotation_deg):
    """Sum over cells of L_cell * int_cell max(0, n.w) dw by nested scipy.integrate.quad.

    Inner integral over phi with the zero crossings of n.w passed as break points, outer
    over theta.  More robust than dblquad when the horizon runs nearly along a cell edge
    (dblquad's outer integrand then jumps).
    """
    H, W = img.shape[:2]
    nx, ny, nz = _map_frame(up, rotation_deg) @ normal
    pn, nh = math.atan2(ny, nx), math.hypot(nx, ny)
    total = np.zeros(3)
    for i in range(H):
        for j in range(W):
            p0, p1 = -math.pi + 2 * math.pi * j / W, -math.pi + 2 * math.pi * (j + 1) / W

            def inner(t):
                a, b = math.sin(t) * nh, nz * math.cos(t)
                pts = []
                if a > abs(b):
                    half = math.acos(-b / a)
                    pts = [q + 2 * math.pi * k for q in (pn - half, pn + half) for k in (-1, 0, 1)
                           if p0 < q + 2 * math.pi * k < p1]
                val = integrate.quad(lambda p: max(0.0, math.sin(t) * (nx * math.cos(p) + ny * math.sin(p)) + b),
                                     p0, p1, points=pts or None, epsabs=1e-15, epsrel=1e-14, limit=200)[0]
                return val * math.sin(t)

            total += img[i, j] * integrate.quad(inner, math.pi * i / H, math.pi * (i + 1) / H,
                                                epsabs=1e-14, epsrel=1e-13, limit=200)[0]
    return total


# The outer quad meets a kink where the horizon crosses a row near the equator and may warn
# that it stopped subdividing; the comparison below is what decides.
@pytest.mark.filterwarnings("ignore::scipy.integrate.IntegrationWarning")
def test_near_degenerate_normals_match_quadrature():
    """Horizons within 1e-17..1e-6 rad of the equator or of a meridian edge (30-degree columns).

    Normals within SNAP_RADIANS of such a direction are moved onto it, which changes E by at
    most SNAP_RADIANS x int L dw; beyond that the general path must stay consistent.
    Reference: nested scipy.integrate.quad with the kinks as break points.
    """
    from envsample.reference.irradiance import SNAP_RADIANS

    img = np.random.default_rng(23).random((6, 12, 3))
    power = float(np.sum(img.max(axis=2) * row_solid_angles(6, 12)[:, None]))  # >= int L dw per channel
    rng = np.random.default_rng(24)
    for up, rot in (("y", 90.0), ("z", 30.0)):
        F = _map_frame(up, rot)
        phi4 = -math.pi + 2 * math.pi * 4 / 12
        for base in (F[2], np.array([-math.sin(phi4), math.cos(phi4), 0.0]) @ F):
            for eps in (0.0, 1e-17, 1e-12, 3e-9, 1e-6):
                pert = rng.normal(size=3)
                pert = _unit(pert - (pert @ base) * base)
                n = _unit(base * math.cos(eps) + pert * math.sin(eps))
                E = reference_irradiance(img, n, up=up, rotation_deg=rot)
                np.testing.assert_allclose(E, _nested_quad_irradiance(img, n, up, rot),
                                           atol=2 * SNAP_RADIANS * power + 1e-11)


def test_horizon_tangent_to_a_latitude_edge():
    """Normals whose horizon just touches a row edge (n_h = |mu_k|, and 1e-16 either side).

    A grid of normals at pixel-centre polar angles hits this whenever the map height is a
    multiple of twice the grid height.  Reference: scipy.integrate.dblquad cell by cell.
    """
    H, W = 6, 12
    img = np.random.default_rng(27).random((H, W, 3))
    F = _map_frame("y", 0.0)
    for k, d, phi in ((1, 0.0, 0.0), (1, 0.0, -1.5), (2, 1e-16, -2.0), (5, 0.0, 2.5), (4, -1e-16, 2.9)):
        mu_k = math.cos(math.pi * k / H)
        nh = abs(mu_k) + d
        nz = math.copysign(math.sqrt(1.0 - nh * nh), mu_k)
        n = np.array([nh * math.cos(phi), nh * math.sin(phi), nz]) @ F
        np.testing.assert_allclose(reference_irradiance(img, n), _dblquad_irradiance(img, n, "y", 0.0),
                                   rtol=1e-11, atol=1e-12)


def test_cell_cosine_integrals_closed_form():
    """Unclamped int_cell n.w dw against scipy.integrate.dblquad; sums over the sphere are exact.

    Whole sphere: int w dw = 0.  Upper hemisphere of n = up: int cos t dw = pi (textbook).
    """
    H, W = 8, 12
    n = _unit([0.3, -0.7, 0.2])
    for up, rot in (("y", 0.0), ("z", 57.0)):
        cells = cell_cosine_integrals(H, W, n, up=up, rotation_deg=rot)
        nx, ny, nz = _map_frame(up, rot) @ n
        for i, j in ((0, 0), (3, 5), (7, 11), (4, 2)):
            p0, p1 = -math.pi + 2 * math.pi * j / W, -math.pi + 2 * math.pi * (j + 1) / W
            val, _ = integrate.dblquad(
                lambda t, p: (math.sin(t) * (nx * math.cos(p) + ny * math.sin(p)) + nz * math.cos(t)) * math.sin(t),
                p0, p1, math.pi * i / H, math.pi * (i + 1) / H, epsabs=1e-14, epsrel=1e-13)
            assert cells[i, j] == pytest.approx(val, rel=1e-11, abs=1e-14)
        assert abs(cells.sum()) < 1e-14
    up_cells = cell_cosine_integrals(H, W, [0.0, 1.0, 0.0])
    assert up_cells[: H // 2].sum() == pytest.approx(math.pi, rel=EXACT_RTOL)


def test_irradiance_difference_equals_first_moment():
    """max(0, t) - max(0, -t) = t, so E(n) - E(-n) = n . int L w dw (an exact identity).

    The right-hand side comes from the unclamped closed form (first_moment), the left
    from the clipping machinery, so the identity checks one against the other.
    """
    img = np.random.default_rng(11).random((32, 64, 3)) ** 3
    n = _random_normals(100, 12)
    for up, rot in (("y", 0.0), ("z", 123.0)):
        diff = reference_irradiance(img, n, up=up, rotation_deg=rot) - reference_irradiance(img, -n, up=up,
                                                                                            rotation_deg=rot)
        np.testing.assert_allclose(diff, n @ first_moment(img, up=up, rotation_deg=rot), atol=1e-13)


def test_rotating_map_and_normal_together_changes_nothing():
    """Rotating the map by R about the up axis equals rotating the normal by -R (convention of envsample.sphere)."""
    img = np.random.default_rng(4).random((16, 32, 3))
    n = _random_normals(20, 8)
    for up in ("y", "z"):
        for rot in (90.0, 37.0):
            moved = n @ _map_frame(up, rot).T @ _map_frame(up, 0.0)
            np.testing.assert_allclose(reference_irradiance(img, n, up=up, rotation_deg=rot),
                                       reference_irradiance(img, moved, up=up), rtol=1e-12)


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
    n = np.concatenate([_random_normals(30, 21), AXES])
    results = {}
    for H in (64, 128):
        img, mu = _zonal_map(H, a, b, c)
        for up in ("y", "z"):
            nz = n @ _map_frame(up, 0.0)[2]
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
        B = _map_frame(up, rot)
        world = [lambda d, f=f: f(d @ B) for f in basis]  # cell directions are in the map frame
        per_cell = _cell_gauss_integrals(H, W, world)
        expected = np.einsum("ijk,ijc->kc", per_cell, img)
        # The published constants are rounded to 6 digits: compare at that precision.
        np.testing.assert_allclose(sh9_project(img, up=up, rotation_deg=rot), expected, rtol=2e-6, atol=1e-6)


def test_sh9_irradiance_closed_forms():
    """Uniform map: E = pi L (Lambert).  L = w_x: int w_x max(0, n.w) dw = (2 pi/3) n_x (textbook)."""
    n = _random_normals(10, 31)
    c = sh9_project(np.ones((16, 32, 3)))
    np.testing.assert_allclose(sh9_irradiance(c, n), np.pi, rtol=1e-12)
    coeffs = np.zeros(9)
    coeffs[3] = math.sqrt(4 * math.pi / 3)  # x = L11 Y11 with Y11 = sqrt(3 / (4 pi)) x
    np.testing.assert_allclose(sh9_irradiance(coeffs, n), 2 * math.pi / 3 * n[:, 0], rtol=1e-12)
    assert SH9_BAND_FACTORS == pytest.approx((math.pi, 2 * math.pi / 3, math.pi / 4))
    assert sh9_irradiance(c, n.reshape(2, 5, 3)).shape == (2, 5, 3)


def test_sh9_agrees_with_reference_on_band_limited_map_and_not_on_a_sharp_one():
    """SH9 is an approximation: near-exact for a (discretised) band-limited map, off for a small bright cap."""
    n = np.concatenate([_random_normals(20, 41), AXES])
    img, _ = _zonal_map(128, 1.0, 0.5, 0.2)
    ref = reference_irradiance(img, n)
    assert np.max(np.abs(sh9_irradiance(sh9_project(img), n) - ref)) < 1e-6 * np.max(ref)
    cap = _cap_map(64, 128, 4, 50.0)
    err = np.abs(sh9_irradiance(sh9_project(cap), n) - reference_irradiance(cap, n))
    assert np.max(err) > 0.01 * np.max(reference_irradiance(cap, n))


# ---------------------------------------------------------------------------
# reduced resolution and the accuracy statement
# ---------------------------------------------------------------------------

def test_size_reduces_with_the_table_filter_and_accuracy_reports_it():
    """``size`` uses envsample.table.reduce_power (power preserving); uniform stays pi L exactly."""
    rng = np.random.default_rng(13)
    img = rng.random((64, 128, 3))
    n = _random_normals(16, 14)
    np.testing.assert_allclose(reference_irradiance(img, n, size="32x16"),
                               reference_irradiance(reduce_power(img, (32, 16)), n), rtol=1e-12)
    np.testing.assert_allclose(reference_irradiance(np.ones((64, 128, 3)), n, size=(40, 20)), np.pi, rtol=1e-6)
    acc = reference_accuracy(img, n, size=(32, 16))
    assert acc["resolution"] == [32, 16]
    assert acc["identity_residual"] < 1e-12
    assert 1e-6 < acc["resolution_change"] < 0.2
    assert acc["relative_error_bound"] == max(acc["identity_residual"], acc["resolution_change"], acc["snap_bound"])
    full = reference_accuracy(img, n)
    assert full["resolution_change"] is None and full["identity_residual"] < 1e-12
    assert 0 < full["snap_bound"] < 1e-7 and full["relative_error_bound"] == full["snap_bound"]


def test_chunking_and_repetition_do_not_change_results():
    """Deterministic: any chunk size gives bit-identical output."""
    img = np.random.default_rng(15).random((16, 32, 3))
    n = _random_normals(37, 16)
    base = reference_irradiance(img, n)
    np.testing.assert_array_equal(reference_irradiance(img, n, chunk=5), base)
    np.testing.assert_array_equal(reference_irradiance(img, n), base)


# ---------------------------------------------------------------------------
# glossy reference
# ---------------------------------------------------------------------------

def _ggx_lambda(c, alpha):
    """Smith Lambda of GGX, Heitz (2014) eq. 72: (-1 + sqrt(1 + alpha^2 tan^2 t)) / 2."""
    return 0.5 * (-1.0 + math.sqrt(1.0 + alpha * alpha * (1.0 - c * c) / (c * c)))


def _ggx_kernel_local(wi, wo, alpha):
    """f(wi, wo) cos t_i for GGX, F = 1: D G2 / (4 cos t_o), written independently of envsample.

    D: Walter et al. (2007) eq. 33, alpha^2 / (pi cos^4 t (alpha^2 + tan^2 t)^2).
    G2: height-correlated Smith, Heitz (2014) eq. 99, 1 / (1 + Lambda(wo) + Lambda(wi)).
    """
    if wi[2] <= 0:
        return 0.0
    h = wi + wo
    h = h / np.linalg.norm(h)
    ct = h[2]
    tan2 = (1 - ct * ct) / (ct * ct)
    D = alpha * alpha / (math.pi * ct ** 4 * (alpha * alpha + tan2) ** 2)
    G2 = 1.0 / (1.0 + _ggx_lambda(wo[2], alpha) + _ggx_lambda(wi[2], alpha))
    return D * G2 / (4.0 * wo[2])


def _scipy_albedo(alpha, theta_o):
    """Directional albedo int f cos dwi over the hemisphere by scipy.integrate.dblquad.

    Local frame, wo in the xz-plane, so the integrand is symmetric in phi and we integrate
    phi over [0, pi] and double; theta_i in [0, pi/2] puts the kink at the horizon on the
    boundary of the domain.
    """
    wo = np.array([math.sin(theta_o), 0.0, math.cos(theta_o)])

    def f(th, ph):
        wi = np.array([math.sin(th) * math.cos(ph), math.sin(th) * math.sin(ph), math.cos(th)])
        return _ggx_kernel_local(wi, wo, alpha) * math.sin(th)

    val, _ = integrate.dblquad(f, 0, math.pi, 0, math.pi / 2, epsabs=1e-11, epsrel=1e-10)
    return 2.0 * val


def _frame_for(normal):
    """Two unit tangents completing ``normal``."""
    t = np.cross(normal, [0.3, 0.1, 0.9])
    t /= np.linalg.norm(t)
    return t, np.cross(normal, t)


@pytest.mark.parametrize("alpha", [0.5, 0.1])
def test_glossy_white_map_gives_ggx_albedo(alpha):
    """Uniform white map: L_o(wo) = the GGX directional albedo (F = 1), against scipy quadrature.

    The scipy side uses the formulas of Walter et al. (2007) and Heitz (2014) written
    out in this file, so it also checks the BRDF of envsample.strategies that the
    reference integrates.
    """
    img = np.ones((32, 64, 3))
    n = _unit([0.2, 0.9, -0.3])
    t, _ = _frame_for(n)
    for theta_o in (0.0, 0.8, 1.3):
        wo = math.cos(theta_o) * n + math.sin(theta_o) * t
        value = reference_glossy(img, n, wo, alpha)
        assert value.shape == (3,)
        assert value[0] == pytest.approx(_scipy_albedo(alpha, theta_o), abs=ALBEDO_ATOL)
        assert 0.0 < value[0] <= 1.0 + ALBEDO_ATOL  # energy conservation with F = 1


def test_glossy_follows_the_map_convention():
    """Up axis and rotation move the glossy reference like the map (convention of envsample.sphere)."""
    img = np.random.default_rng(29).random((16, 32, 3))
    n = _unit([0.2, 0.7, -0.4])
    wo = _unit(n + np.array([0.5, 0.0, 0.3]))
    base = reference_glossy(img, n, wo, 0.3)
    for up, rot in (("z", 0.0), ("z", 70.0), ("y", -120.0)):
        move = _map_frame(up, rot).T @ _map_frame("y", 0.0)  # world(y, 0) -> world(up, rot)
        np.testing.assert_allclose(reference_glossy(img, move @ n, move @ wo, 0.3, up=up, rotation_deg=rot),
                                   base, rtol=1e-6)


def test_glossy_view_below_surface_gives_zero():
    """A view direction below the surface receives no reflection (common practice)."""
    img = np.ones((16, 32, 3))
    assert np.all(reference_glossy(img, [0, 1, 0], _unit([0.3, -0.5, 0.1]), 0.3) == 0.0)


def test_glossy_small_roughness_approaches_radiance_in_the_mirror_direction():
    """As alpha -> 0 the GGX lobe becomes a mirror: L_o -> albedo * L(mirror direction).

    Smooth map sampled at pixel centres; the mirror direction r sits at a pixel centre.
    Rigorous bound: L_o - rho L(r) = int (L - L(r)) k, nonzero only outside r's pixel;
    leaving it needs theta_h > rho_in / 2 (reflection doubles angles), and with G2 <= 1,
    wo.h <= 1 and dwi = 4 (wo.h) dwh (Walter et al. 2007, eq. 14) the kernel mass there is
    <= 2 pi int_{rho_in/2}^{pi/2} D sin t dt / cos t_o (scipy.integrate.quad).
    """
    H, W = 32, 64
    g = np.array([0.5, -0.3, 0.2])
    img = (1.0 + pixel_center_directions(H, W) @ g)[..., None] * np.array([1.0, 0.5, 0.25])
    i, j = 9, 40
    r = uv_to_direction((j + 0.5) / W, (i + 0.5) / H)
    n = _unit(r + np.array([0.3, 0.4, 0.0]))
    wo = 2 * (n @ r) * n - r
    cos_o = float(n @ wo)
    theta_c = (i + 0.5) * math.pi / H
    rho_in = min(0.5 * math.pi / H, math.asin(math.sin(theta_c) * math.sin(math.pi / W)))
    osc = img[..., 0].max() - img[..., 0].min()
    errors = []
    for alpha in (0.05, 0.002):
        L_o = reference_glossy(img, n, wo, alpha)
        albedo = reference_glossy(np.ones_like(img), n, wo, alpha)[0]

        def D(t):
            return alpha ** 2 / (math.pi * math.cos(t) ** 4 * (alpha ** 2 + math.tan(t) ** 2) ** 2) * math.sin(t)

        tail = 2 * math.pi * integrate.quad(D, rho_in / 2, math.pi / 2, epsabs=1e-14, limit=200)[0] / cos_o
        err = np.abs(L_o - albedo * img[i, j])
        assert np.all(err <= tail * osc * np.array([1.0, 0.5, 0.25]) + 1e-6)
        errors.append(err[0])
        if alpha == 0.002:
            assert albedo > 0.99
            np.testing.assert_allclose(L_o, img[i, j], rtol=0.02)
    assert errors[1] < errors[0]


def test_glossy_on_a_cap_map_matches_scipy():
    """Two-valued map (a polar cap of rows, exact): L_o = c2 rho + (c1 - c2) int_cap k, by scipy dblquad.

    The cap lies wholly above the horizon of n, so the scipy integrand is smooth; the
    kernel is the independent GGX formula above.
    """
    H, W, rows = 32, 64, 8  # cap theta < pi/4 about +y (up = "y")
    c1, c2 = np.array([3.0, 2.0, 1.0]), np.array([0.2, 0.2, 0.2])
    img = _cap_map(H, W, rows, c1, c2)
    alpha = 0.3
    n = _unit([0.0, math.cos(0.5), math.sin(0.5)])
    t, b = _frame_for(n)
    wo = math.cos(0.7) * n + math.sin(0.7) * t

    def k_world(d):
        local = np.array([d @ t, d @ b, d @ n])
        return _ggx_kernel_local(local, np.array([wo @ t, wo @ b, wo @ n]), alpha)

    def f(th, ph):
        d = uv_to_direction(ph / (2 * math.pi) + 0.5, th / math.pi)
        return k_world(d) * math.sin(th)

    cap, _ = integrate.dblquad(f, -math.pi, math.pi, 0.0, math.pi / 4, epsabs=1e-10, epsrel=1e-9)
    rho = reference_glossy(np.ones((H, W, 3)), n, wo, alpha)[0]
    np.testing.assert_allclose(reference_glossy(img, n, wo, alpha), c2 * rho + (c1 - c2) * cap, rtol=1e-5)


def test_glossy_accuracy_reports_a_small_change():
    """Doubling the quadrature resolution changes the result little; the report says how much."""
    img = np.random.default_rng(17).random((16, 32, 3))
    normals = np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    wo = _unit([[0.3, 0.9, 0.1], [0.2, 0.1, 0.9]])
    rep = reference_glossy_accuracy(img, normals, wo, [0.2, 0.05])
    assert rep["values"].shape == (2, 3)
    assert 0.0 <= rep["relative_change"] < 1e-4
    np.testing.assert_allclose(rep["values"], rep["coarse"], atol=rep["change"] + 1e-15)


# ---------------------------------------------------------------------------
# bad input
# ---------------------------------------------------------------------------

def test_bad_input_messages():
    img = np.ones((8, 16, 3))
    bad = img.copy()
    bad[2, 3, 1] = np.nan
    with pytest.raises(MapValidationError, match="NaN or Inf"):
        reference_irradiance(bad, [0, 1, 0])
    with pytest.raises(MapValidationError, match=r"\(H, W, 3\)"):
        reference_irradiance(np.ones((8, 16)), [0, 1, 0])
    with pytest.raises(ValueError, match="unit vectors"):
        reference_irradiance(img, [0, 2, 0])
    with pytest.raises(ValueError, match=r"shape \(\.\.\., 3\)"):
        reference_irradiance(img, [0, 1])
    with pytest.raises(ValueError, match="NaN or Inf"):
        reference_irradiance(img, [np.nan, 1, 0])
    with pytest.raises(ValueError, match="unknown up axis 'x'"):
        reference_irradiance(img, [0, 1, 0], up="x")
    with pytest.raises(ValueError, match="chunk"):
        reference_irradiance(img, [0, 1, 0], chunk=0)
    with pytest.raises(ValueError, match="WIDTHxHEIGHT"):
        reference_irradiance(img, [0, 1, 0], size="big")
    with pytest.raises(ValueError, match="roughness"):
        reference_glossy(img, [0, 1, 0], [0, 1, 0], 0.0)
    with pytest.raises(ValueError, match="do not broadcast"):
        reference_glossy(img, np.eye(3), np.eye(3)[:2], 0.3)
    with pytest.raises(ValueError, match="coeffs"):
        sh9_irradiance(np.zeros(4), [0, 1, 0])
