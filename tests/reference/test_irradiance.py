"""Tests of envsample.reference.irradiance (the exact reference) against closed forms, published formulas
and scipy quadrature, and of its two implementations (compiled kernel and numpy) against each other.

Every external check names its source in its docstring.  Maps are small (at most
256x128) so the file runs in a few seconds.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate
from support.reference_maps import AXES, cap_map, frame_rows, random_normals, unit  # noqa: F401

from envsample.core.latlong import reduce_power
from envsample.core.sphere import pixel_center_directions, row_solid_angles
from envsample.errors import MapValidationError
from envsample.reference.irradiance import (
    KERNELS,
    cell_cosine_integrals,
    first_moment,
    reference_accuracy,
    reference_irradiance,
)

#: The implementations to test: numpy always, the compiled kernel where it is built.
BACKENDS = ["numpy"] + (["compiled"] if KERNELS.backend_name() == "compiled" else [])

#: Relative tolerance of results that are exact up to floating-point rounding.
EXACT_RTOL = 1e-12

# ---------------------------------------------------------------------------
# irradiance: closed forms
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("up", ["y", "z"])
@pytest.mark.parametrize("rotation_deg", [0.0, 90.0, 33.3])
@pytest.mark.parametrize("shape", [(1, 2), (3, 6), (16, 32), (33, 64)])
def test_uniform_map_gives_pi_times_radiance(backend, up, rotation_deg, shape):
    """Lambert's cosine law: integral of max(0, n.w) over the sphere is pi, so E = pi L.

    Includes axis-aligned normals, whose horizon runs along the equator or along a
    meridian edge (the degenerate cases), and odd heights.
    """
    color = np.array([0.25, 1.0, 3.5])
    img = np.broadcast_to(color, shape + (3,))
    normals = np.concatenate([random_normals(40, 1), AXES])
    E = reference_irradiance(img, normals, up=up, rotation_deg=rotation_deg, backend=backend)
    np.testing.assert_allclose(E, np.pi * np.broadcast_to(color, E.shape), rtol=EXACT_RTOL)


def test_normals_of_several_shapes():
    """Output shape is normals.shape (scalar normal, (N, 3), (H, W, 3)); values agree."""
    img = np.random.default_rng(2).random((8, 16, 3))
    grid = random_normals(12, 3).reshape(3, 4, 3)
    flat = reference_irradiance(img, grid.reshape(-1, 3))
    assert reference_irradiance(img, grid).shape == (3, 4, 3)
    np.testing.assert_array_equal(reference_irradiance(img, grid).reshape(-1, 3), flat)
    assert reference_irradiance(img, grid[0, 0]).shape == (3,)
    np.testing.assert_array_equal(reference_irradiance(img, grid[0, 0]), flat[0])
    assert reference_irradiance(img, np.zeros((0, 3))).shape == (0, 3)


@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("up,rotation_deg", [("y", 0.0), ("z", 90.0), ("y", -47.0)])
def test_polar_cap_closed_form(backend, up, rotation_deg):
    """Cap of half-angle a about the up axis, radiance L (textbook closed forms).

    About its axis: E = int_0^a cos t sin t dt * 2 pi * L = pi L sin^2 a.  For a normal
    tilted by tau <= pi/2 - a the whole cap is above the horizon, so E = n . (pi L sin^2 a
    * axis), the cap's first moment.  The cap is the top rows of the map, so the
    piecewise-constant map *is* the cap and the result must be exact.
    """
    H, W, rows = 64, 128, 12
    a = math.pi * rows / H
    L = np.array([2.0, 1.0, 0.5])
    img = cap_map(H, W, rows, L)
    frame = frame_rows(up, rotation_deg)
    axis = frame[2]
    taus = np.array([0.0, 0.3, math.pi / 2 - a])
    azim = np.array([0.4, 2.0, -2.5])
    local = np.stack([np.sin(taus) * np.cos(azim), np.sin(taus) * np.sin(azim), np.cos(taus)], axis=1)
    normals = local @ frame
    E = reference_irradiance(img, normals, up=up, rotation_deg=rotation_deg, backend=backend)
    expected = np.pi * math.sin(a) ** 2 * np.cos(taus)[:, None] * L
    np.testing.assert_allclose(E, expected, rtol=EXACT_RTOL)
    np.testing.assert_allclose(normals @ axis, np.cos(taus), rtol=1e-14)


@pytest.mark.parametrize("backend", BACKENDS)
def test_disk_at_the_normal_is_bracketed_by_inner_and_outer_pixel_sets(backend):
    """A disk of half-angle a centred at the normal: E = pi L sin^2 a (closed form).

    The map cannot represent an off-pole disk exactly, so we bracket it: the pixels
    certainly inside (centre distance + pixel radius <= a) and those possibly touching it
    (centre distance - pixel radius < a).  E is monotone in L (the kernel is >= 0), so
    E(inner) <= pi L sin^2 a <= E(outer).  Pixel radius: from the centre go along its
    latitude (<= sin(theta_c) dphi/2) then along the meridian (<= dtheta/2).
    """
    H, W = 256, 512
    a, L = 0.5, 4.0
    centre = unit([0.3, 0.5, -0.8])
    d = pixel_center_directions(H, W)
    dist = np.arccos(np.clip(d @ centre, -1.0, 1.0))
    theta_c = (np.arange(H) + 0.5) * math.pi / H
    radius = (0.5 * math.pi / H + np.sin(theta_c) * math.pi / W)[:, None]
    inner = np.where(dist + radius <= a, L, 0.0)[..., None] * np.ones(3)
    outer = np.where(dist - radius < a, L, 0.0)[..., None] * np.ones(3)
    e_in = reference_irradiance(inner, centre, backend=backend)[0]
    e_out = reference_irradiance(outer, centre, backend=backend)[0]
    exact = math.pi * L * math.sin(a) ** 2
    assert e_in <= exact <= e_out
    assert e_out - e_in < 0.15 * exact  # the bracket is tight enough to mean something


@pytest.mark.parametrize("backend", BACKENDS)
def test_overcast_sky_horizontal_irradiance(backend):
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
        E = reference_irradiance(img, frame_rows(up, 0.0)[2], up=up, backend=backend)
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
    nx, ny, nz = frame_rows(up, rotation_deg) @ normal
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
    normals = np.concatenate([random_normals(2, 7), AXES[[0, 2, 4]]])
    expected = np.stack([_dblquad_irradiance(img, n, up, rotation_deg) for n in normals])
    for backend in BACKENDS:
        E = reference_irradiance(img, normals, up=up, rotation_deg=rotation_deg, backend=backend)
        np.testing.assert_allclose(E, expected, rtol=1e-11, atol=1e-12)


def _nested_quad_irradiance(img, normal, up, rotation_deg):
    """Sum over cells of L_cell * int_cell max(0, n.w) dw by nested scipy.integrate.quad.

    Inner integral over phi with the zero crossings of n.w passed as break points, outer
    over theta.  More robust than dblquad when the horizon runs nearly along a cell edge
    (dblquad's outer integrand then jumps).
    """
    H, W = img.shape[:2]
    nx, ny, nz = frame_rows(up, rotation_deg) @ normal
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
        F = frame_rows(up, rot)
        phi4 = -math.pi + 2 * math.pi * 4 / 12
        for base in (F[2], np.array([-math.sin(phi4), math.cos(phi4), 0.0]) @ F):
            for eps in (0.0, 1e-17, 1e-12, 3e-9, 1e-6):
                pert = rng.normal(size=3)
                pert = unit(pert - (pert @ base) * base)
                n = unit(base * math.cos(eps) + pert * math.sin(eps))
                expected = _nested_quad_irradiance(img, n, up, rot)
                for backend in BACKENDS:
                    E = reference_irradiance(img, n, up=up, rotation_deg=rot, backend=backend)
                    np.testing.assert_allclose(E, expected, atol=2 * SNAP_RADIANS * power + 1e-11)


def test_horizon_tangent_to_a_latitude_edge():
    """Normals whose horizon just touches a row edge (n_h = |mu_k|, and 1e-16 either side).

    A grid of normals at pixel-centre polar angles hits this whenever the map height is a
    multiple of twice the grid height.  Reference: scipy.integrate.dblquad cell by cell.
    """
    H, W = 6, 12
    img = np.random.default_rng(27).random((H, W, 3))
    F = frame_rows("y", 0.0)
    for k, d, phi in ((1, 0.0, 0.0), (1, 0.0, -1.5), (2, 1e-16, -2.0), (5, 0.0, 2.5), (4, -1e-16, 2.9)):
        mu_k = math.cos(math.pi * k / H)
        nh = abs(mu_k) + d
        nz = math.copysign(math.sqrt(1.0 - nh * nh), mu_k)
        n = np.array([nh * math.cos(phi), nh * math.sin(phi), nz]) @ F
        expected = _dblquad_irradiance(img, n, "y", 0.0)
        for backend in BACKENDS:
            np.testing.assert_allclose(reference_irradiance(img, n, backend=backend), expected, rtol=1e-11, atol=1e-12)


def test_cell_cosine_integrals_closed_form():
    """Unclamped int_cell n.w dw against scipy.integrate.dblquad; sums over the sphere are exact.

    Whole sphere: int w dw = 0.  Upper hemisphere of n = up: int cos t dw = pi (textbook).
    """
    H, W = 8, 12
    n = unit([0.3, -0.7, 0.2])
    for up, rot in (("y", 0.0), ("z", 57.0)):
        cells = cell_cosine_integrals(H, W, n, up=up, rotation_deg=rot)
        nx, ny, nz = frame_rows(up, rot) @ n
        for i, j in ((0, 0), (3, 5), (7, 11), (4, 2)):
            p0, p1 = -math.pi + 2 * math.pi * j / W, -math.pi + 2 * math.pi * (j + 1) / W
            val, _ = integrate.dblquad(
                lambda t, p: (math.sin(t) * (nx * math.cos(p) + ny * math.sin(p)) + nz * math.cos(t)) * math.sin(t),
                p0, p1, math.pi * i / H, math.pi * (i + 1) / H, epsabs=1e-14, epsrel=1e-13)
            assert cells[i, j] == pytest.approx(val, rel=1e-11, abs=1e-14)
        assert abs(cells.sum()) < 1e-14
    up_cells = cell_cosine_integrals(H, W, [0.0, 1.0, 0.0])
    assert up_cells[: H // 2].sum() == pytest.approx(math.pi, rel=EXACT_RTOL)


@pytest.mark.parametrize("backend", BACKENDS)
def test_irradiance_difference_equals_first_moment(backend):
    """max(0, t) - max(0, -t) = t, so E(n) - E(-n) = n . int L w dw (an exact identity).

    The right-hand side comes from the unclamped closed form (first_moment), the left
    from the clipping machinery, so the identity checks one against the other.
    """
    img = np.random.default_rng(11).random((32, 64, 3)) ** 3
    n = random_normals(100, 12)
    for up, rot in (("y", 0.0), ("z", 123.0)):
        kw = {"up": up, "rotation_deg": rot, "backend": backend}
        diff = reference_irradiance(img, n, **kw) - reference_irradiance(img, -n, **kw)
        np.testing.assert_allclose(diff, n @ first_moment(img, up=up, rotation_deg=rot), atol=1e-13)


def test_rotating_map_and_normal_together_changes_nothing():
    """Rotating the map by R about the up axis equals rotating the normal by -R (convention of envsample.sphere)."""
    img = np.random.default_rng(4).random((16, 32, 3))
    n = random_normals(20, 8)
    for up in ("y", "z"):
        for rot in (90.0, 37.0):
            moved = n @ frame_rows(up, rot).T @ frame_rows(up, 0.0)
            np.testing.assert_allclose(reference_irradiance(img, n, up=up, rotation_deg=rot),
                                       reference_irradiance(img, moved, up=up), rtol=1e-12)


# ---------------------------------------------------------------------------
# reduced resolution and the accuracy statement
# ---------------------------------------------------------------------------

def test_size_reduces_with_the_table_filter_and_accuracy_reports_it():
    """``size`` uses envsample.table.reduce_power (power preserving); uniform stays pi L exactly."""
    rng = np.random.default_rng(13)
    img = rng.random((64, 128, 3))
    n = random_normals(16, 14)
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
    # Random normals need no snapping: the statement is the identity residual alone.
    assert full["snap_bound"] == 0.0 and full["relative_error_bound"] == full["identity_residual"]


def test_snap_bound_is_the_move_times_the_power_over_the_scale():
    """A normal 5e-10 rad from the pole is moved onto it; E is 1-Lipschitz in n times the integral
    of |L| (|max(0, n.w) - max(0, n'.w)| <= |n - n'|, common practice), so the bound is that move
    times integral |L| / (pi mean |L|), whatever other normals are present."""
    img = np.random.default_rng(17).random((16, 32, 3))
    eps = 5e-10
    near_pole = np.array([[math.sin(eps), math.cos(eps), 0.0]])
    acc = reference_accuracy(img, np.concatenate([random_normals(8, 18), near_pole]))
    power = np.max(np.einsum("i,ijc->c", row_solid_angles(16, 32), img))
    expected = 2.0 * math.sin(eps / 2.0) * power / (math.pi * np.mean(img))
    assert acc["snap_bound"] == pytest.approx(expected, rel=1e-6)
    assert acc["relative_error_bound"] == max(acc["identity_residual"], acc["snap_bound"])
    assert acc["backend"] in ("compiled", "numpy")


def test_chunking_and_repetition_do_not_change_results():
    """Deterministic: any chunk size gives bit-identical output."""
    img = np.random.default_rng(15).random((16, 32, 3))
    n = random_normals(37, 16)
    base = reference_irradiance(img, n)
    np.testing.assert_array_equal(reference_irradiance(img, n, chunk=5), base)
    np.testing.assert_array_equal(reference_irradiance(img, n), base)


# ---------------------------------------------------------------------------
# the compiled kernel against the numpy code
# ---------------------------------------------------------------------------

needs_compiled = pytest.mark.skipif(KERNELS.backend_name() != "compiled", reason="compiled kernel not built here")


def _hard_normals(seed):
    """Random normals, the axes, a lat-long grid of normals (rows share n_z), and horizons within
    1e-12..1e-8 rad of the equator, of a meridian edge or of the poles (some snapped, some not)."""
    near = []
    for eps in (1e-12, 3e-9, 1e-8):
        near += [[math.sin(eps), math.cos(eps), 0.0], [1.0, eps, 0.0], [0.0, -eps, 1.0], [0.5, 1e-3, -0.8]]
    return np.concatenate([random_normals(40, seed), AXES, pixel_center_directions(6, 12).reshape(-1, 3),
                           unit(np.array(near))])


@needs_compiled
@pytest.mark.parametrize("shape", [(1, 2), (2, 2), (3, 6), (17, 5), (16, 32), (33, 64)])
def test_compiled_kernel_agrees_with_numpy(shape):
    """The two implementations of the same formula agree to rounding (measured: below 3e-15 x pi mean L).

    Maps with varied and constant rows (the kernel's closed form for a constant row), float32
    and float64, both up axes and rotations that put meridians on the normals' horizons.
    """
    rng = np.random.default_rng(31)
    img = rng.random(shape + (3,))
    img[shape[0] // 2:] = (0.3, 0.2, 0.1)
    n = _hard_normals(32)
    worst = 0.0
    for dtype in (np.float64, np.float32):
        for up, rot in (("y", 0.0), ("z", 90.0), ("y", 33.3)):
            kw = {"up": up, "rotation_deg": rot}
            a = reference_irradiance(img.astype(dtype), n, backend="numpy", **kw)
            b = reference_irradiance(img.astype(dtype), n, backend="compiled", **kw)
            worst = max(worst, float(np.max(np.abs(a - b))) / (math.pi * float(np.mean(img))))
    assert worst < 1e-12


@needs_compiled
def test_compiled_results_do_not_depend_on_threads_batches_or_other_normals():
    """Bit-identical whatever the thread count, the batch size, or which other normals are computed."""
    img = np.random.default_rng(33).random((40, 80, 3)).astype(np.float32)
    n = _hard_normals(34)
    base = reference_irradiance(img, n, backend="compiled", threads=1)
    for kw in ({"threads": 2}, {"threads": 3, "chunk": 7}, {"chunk": 1}):
        np.testing.assert_array_equal(reference_irradiance(img, n, backend="compiled", **kw), base)
    for k in (0, 47, n.shape[0] - 1):
        np.testing.assert_array_equal(reference_irradiance(img, n[k], backend="compiled"), base[k])


def test_backend_and_threads_are_checked():
    img = np.ones((4, 8, 3))
    with pytest.raises(ValueError, match="unknown backend 'fast'; valid: auto, compiled, numpy"):
        reference_irradiance(img, [0, 1, 0], backend="fast")
    with pytest.raises(ValueError, match="threads must be a whole number >= 1"):
        reference_irradiance(img, [0, 1, 0], threads=0)


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
