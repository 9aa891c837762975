"""Tests of envsample.sphere: the direction convention, exact pixel solid angles, shading frames.

External references used here:
- The solid angle of a band of polar angle [a, b] and azimuth width dphi is
  dphi * integral_a^b sin(theta) dtheta (textbook spherical geometry); we check it
  against ``scipy.integrate.quad`` and the whole sphere against 4*pi.
- Right-handedness: the cross product of two vectors of a right-handed frame
  (``numpy.cross``) follows x cross y = z (textbook vector algebra).
- Duff et al. (2017), "Building an Orthonormal Basis, Revisited", JCGT 6(1): the
  basis completes n to an orthonormal frame with t x b = n.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from envsample.core import sphere
from envsample.core.sphere import (
    UP_AXES,
    convention,
    direction_to_pixel,
    direction_to_uv,
    orthonormal_basis,
    pixel_center_directions,
    pixel_solid_angles,
    row_cos_edges,
    row_solid_angles,
    to_local,
    to_world,
    uv_to_direction,
)

UPS = tuple(UP_AXES)
#: Round-trip tolerance on u and v (dimensionless); double precision trig loses a few ulps.
UV_TOL = 1e-12


# ------------------------------------------------------------------ solid angles
@pytest.mark.parametrize("height, width", [(1, 1), (4, 8), (7, 13), (64, 128), (1024, 2048)])
def test_pixel_solid_angles_sum_to_four_pi(height, width):
    """The sphere's solid angle is 4*pi steradians (textbook)."""
    total = pixel_solid_angles(height, width).sum(dtype=np.float64)
    assert total == pytest.approx(4.0 * math.pi, rel=1e-13)
    assert row_solid_angles(height, width).sum() * width == pytest.approx(4.0 * math.pi, rel=1e-13)


@pytest.mark.parametrize("height, width", [(8, 16), (33, 64), (512, 1024)])
def test_row_solid_angle_matches_scipy_quad(height, width):
    """Row i covers theta in [pi*i/H, pi*(i+1)/H]; its pixels' solid angle is
    (2*pi/W) * integral sin(theta) dtheta over the band, integrated by scipy.integrate.quad.
    Includes the polar rows, where the closed form cos(a) - cos(b) cancels badly."""
    got = row_solid_angles(height, width)
    for i in sorted({0, 1, height // 2, height - 2, height - 1}):
        a, b = math.pi * i / height, math.pi * (i + 1) / height
        band, err = integrate.quad(math.sin, a, b, epsabs=0.0, epsrel=1e-13)
        assert got[i] == pytest.approx(band * 2.0 * math.pi / width, rel=1e-12), i


def test_pixel_solid_angles_shape_and_rows():
    """(H, W) array, constant along a row, symmetric about the equator (sin is symmetric about pi/2)."""
    sa = pixel_solid_angles(6, 12)
    assert sa.shape == (6, 12) and sa.dtype == np.float64
    assert np.all(sa == sa[:, :1])
    np.testing.assert_allclose(sa[:, 0], sa[::-1, 0], rtol=1e-14)
    assert np.all(sa > 0)


def test_row_cos_edges_exact_ends_and_decreasing():
    """cos(theta) at the row edges runs from exactly 1 (zenith) to exactly -1 (nadir)."""
    for h in (1, 2, 3, 64, 1000):
        c = row_cos_edges(h)
        assert c.shape == (h + 1,)
        assert c[0] == 1.0 and c[-1] == -1.0
        assert np.all(np.diff(c) < 0)
        # Row solid angles agree with the cos-edge differences (two forms of the same closed form).
        np.testing.assert_allclose(-np.diff(c) * 2 * math.pi / 5, row_solid_angles(h, 5), rtol=1e-9, atol=1e-15)


@pytest.mark.parametrize("bad", [(0, 4), (4, 0), (-1, 2), (2.5, 4)])
def test_solid_angle_sizes_are_checked(bad):
    with pytest.raises(ValueError, match="height and width must be positive integers"):
        row_solid_angles(*bad)


# ------------------------------------------------------------------ convention
@pytest.mark.parametrize("up", UPS)
def test_documented_frame_is_right_handed(up):
    """The documented frame has right = forward x up (sphere module docstring), and the
    world axes are right-handed: X x Y = Z (numpy.cross, textbook)."""
    f, r, a = (np.array(v) for v in UP_AXES[up])
    np.testing.assert_array_equal(np.cross(f, a), r)
    np.testing.assert_array_equal(np.cross([1, 0, 0], [0, 1, 0]), [0, 0, 1])
    # Orthonormal frame: f, r, a are unit and mutually orthogonal.
    m = np.stack([f, r, a])
    np.testing.assert_allclose(m @ m.T, np.eye(3), atol=0)
    conv = convention(up, 12.5)
    assert conv["handedness"] == "right" and conv["up_axis"] == up
    assert conv["forward"] == f.tolist() and conv["right"] == r.tolist() and conv["up"] == a.tolist()
    assert conv["rotation_deg"] == 12.5


def test_documented_frames_of_each_up_axis():
    """Docstring: up='y' -> up +Y, forward -Z, right +X (y-up camera frame); up='z' -> up +Z, forward +Y, right +X."""
    assert UP_AXES["y"] == ((0.0, 0.0, -1.0), (1.0, 0.0, 0.0), (0.0, 1.0, 0.0))
    assert UP_AXES["z"] == ((0.0, 1.0, 0.0), (1.0, 0.0, 0.0), (0.0, 0.0, 1.0))


@pytest.mark.parametrize("up", UPS)
def test_landmarks(up):
    """Documented landmarks: (0.5, 0.5) looks forward, v = 0 is the up axis, v = 1 straight down,
    u = 0.75 (phi = +pi/2) looks right, u = 0.25 left, u = 0 behind."""
    f, r, a = (np.array(v) for v in UP_AXES[up])
    cases = {
        (0.5, 0.5): f,
        (0.3, 0.0): a,
        (0.9, 1.0): -a,
        (0.75, 0.5): r,
        (0.25, 0.5): -r,
        (0.0, 0.5): -f,
    }
    for (u, v), want in cases.items():
        np.testing.assert_allclose(uv_to_direction(u, v, up=up), want, atol=1e-15, err_msg=str((u, v)))
    # Moving right in the image turns toward the viewer's right (forward x up), as seen from inside.
    d0, d1 = uv_to_direction(0.5, 0.5, up=up), uv_to_direction(0.51, 0.5, up=up)
    assert np.dot(d1 - d0, np.cross(f, a)) > 0


@pytest.mark.parametrize("up", UPS)
def test_rotation_turns_the_image_centre_about_up(up):
    """With rotation_deg = R the image centre looks at azimuth R (docstring): 90 deg -> right."""
    f, r, a = (np.array(v) for v in UP_AXES[up])
    np.testing.assert_allclose(uv_to_direction(0.5, 0.5, up=up, rotation_deg=90.0), r, atol=1e-15)
    np.testing.assert_allclose(uv_to_direction(0.5, 0.5, up=up, rotation_deg=-90.0), -r, atol=1e-15)
    np.testing.assert_allclose(uv_to_direction(0.5, 0.5, up=up, rotation_deg=180.0), -f, atol=1e-15)
    # Rotation never moves the up axis.
    np.testing.assert_allclose(uv_to_direction(0.1, 0.0, up=up, rotation_deg=37.0), a, atol=1e-15)
    # A rotation by R equals shifting u by R / 360.
    u = np.linspace(0.0, 0.7, 9)
    np.testing.assert_allclose(
        uv_to_direction(u, 0.3, up=up, rotation_deg=36.0), uv_to_direction(u + 0.1, 0.3, up=up), atol=1e-14
    )


def test_up_axis_is_case_insensitive_and_unknown_axis_errors():
    np.testing.assert_array_equal(uv_to_direction(0.2, 0.3, up="Y"), uv_to_direction(0.2, 0.3, up="y"))
    with pytest.raises(ValueError, match=r"unknown up axis 'x'; valid: y, z"):
        uv_to_direction(0.5, 0.5, up="x")
    with pytest.raises(ValueError, match="unknown up axis"):
        direction_to_uv([0.0, 0.0, 1.0], up="w")


@pytest.mark.parametrize("up", UPS)
@pytest.mark.parametrize("rotation_deg", [0.0, 33.0, -120.0, 270.0, 725.0])
def test_uv_direction_round_trip(up, rotation_deg, rng):
    """direction_to_uv inverts uv_to_direction (both up axes, several rotations, incl. > 360 deg)."""
    u = rng.random(5000)
    v = rng.uniform(1e-6, 1 - 1e-6, 5000)
    d = uv_to_direction(u, v, up=up, rotation_deg=rotation_deg)
    np.testing.assert_allclose(np.linalg.norm(d, axis=-1), 1.0, rtol=1e-15)
    u2, v2 = direction_to_uv(d, up=up, rotation_deg=rotation_deg)
    np.testing.assert_allclose(v2, v, atol=UV_TOL)
    du = (u2 - u + 0.5) % 1.0 - 0.5  # u is periodic: compare on the circle
    np.testing.assert_allclose(du, 0.0, atol=UV_TOL)
    assert np.all((u2 >= 0.0) & (u2 < 1.0))
    # And direction -> uv -> direction.
    dirs = rng.normal(size=(2000, 3))
    dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
    uu, vv = direction_to_uv(dirs, up=up, rotation_deg=rotation_deg)
    np.testing.assert_allclose(uv_to_direction(uu, vv, up=up, rotation_deg=rotation_deg), dirs, atol=1e-14)


def test_direction_to_uv_accepts_unnormalised_and_zero_vectors():
    """Directions need not be normalised; the zero vector maps to u = 0.5, v = 0 (docstring)."""
    u, v = direction_to_uv([[0.0, 5.0, 0.0], [3.0, 0.0, 0.0], [0.0, 0.0, 0.0]])
    np.testing.assert_allclose(v, [0.0, 0.5, 0.0], atol=1e-15)
    np.testing.assert_allclose(u[1:], [0.75, 0.5], atol=1e-15)


def test_u_is_wrapped_into_unit_interval():
    """Directions just behind (phi = -pi or +pi) map to u in [0, 1), never to 1."""
    behind = np.array([[1e-18, 0.0, 1.0], [-1e-18, 0.0, 1.0], [0.0, 0.0, 1.0]])
    u, _ = direction_to_uv(behind)
    assert np.all((u >= 0.0) & (u < 1.0))


def test_shapes_scalar_vector_and_grid():
    """Scalar -> (3,), (N,) -> (N, 3), (H, W) -> (H, W, 3); and back to the input shapes."""
    d = uv_to_direction(0.25, 0.5)
    assert d.shape == (3,) and d.dtype == np.float64
    u, v = direction_to_uv(d)
    assert u.shape == () and v.shape == ()
    dn = uv_to_direction(np.linspace(0, 0.9, 7), 0.4)
    assert dn.shape == (7, 3)
    assert direction_to_uv(dn)[0].shape == (7,)
    uu, vv = np.meshgrid(np.linspace(0, 0.9, 5), np.linspace(0.1, 0.9, 4))
    dg = uv_to_direction(uu, vv, up="z")
    assert dg.shape == (4, 5, 3)
    u2, v2 = direction_to_uv(dg, up="z")
    assert u2.shape == (4, 5)
    np.testing.assert_allclose(u2, uu, atol=UV_TOL)
    np.testing.assert_allclose(v2, vv, atol=UV_TOL)
    with pytest.raises(ValueError, match=r"directions must have shape \(\.\.\., 3\)"):
        direction_to_uv(np.zeros((4, 2)))


def test_nan_input_propagates_instead_of_becoming_a_direction():
    """A NaN coordinate gives a NaN direction (validation happens at the map boundary, not here)."""
    assert np.isnan(uv_to_direction(np.nan, 0.5)).any()
    u, v = direction_to_uv([np.nan, 0.0, 1.0])
    assert np.isnan(u) and np.isnan(v)


# ------------------------------------------------------------------ pixels
@pytest.mark.parametrize("up", UPS)
@pytest.mark.parametrize("rotation_deg", [0.0, 45.0, -200.0])
def test_pixel_centres_map_back_to_their_pixels(up, rotation_deg):
    h, w = 16, 32
    d = pixel_center_directions(h, w, up=up, rotation_deg=rotation_deg)
    assert d.shape == (h, w, 3)
    row, col = direction_to_pixel(d.reshape(-1, 3), h, w, up=up, rotation_deg=rotation_deg)
    rr, cc = np.divmod(np.arange(h * w), w)
    np.testing.assert_array_equal(row, rr)
    np.testing.assert_array_equal(col, cc)


def test_direction_to_pixel_poles_and_edges():
    """The zenith is in row 0, the nadir in the last row; u just below 1 is in the last column."""
    h, w = 8, 16
    row, _ = direction_to_pixel(np.array([[0.0, 1.0, 0.0], [0.0, -1.0, 0.0]]), h, w)
    np.testing.assert_array_equal(row, [0, h - 1])
    d = uv_to_direction(1.0 - 1e-9, 0.5)
    _, col = direction_to_pixel(d, h, w)
    assert int(col) == w - 1


# ------------------------------------------------------------------ frames
def test_orthonormal_basis_duff_2017(rng):
    """Duff et al. (2017) JCGT 6(1): t, b, n orthonormal and t x b = n, including n = -z (the branch)."""
    n = rng.normal(size=(3000, 3))
    n = np.concatenate([n, [[0, 0, 1], [0, 0, -1], [1, 0, 0], [0, 0, -1 + 1e-12]]])
    n /= np.linalg.norm(n, axis=1, keepdims=True)
    t, b = orthonormal_basis(n)
    for x, y in ((t, b), (t, n), (b, n)):
        np.testing.assert_allclose(np.sum(x * y, axis=1), 0.0, atol=1e-12)
    np.testing.assert_allclose(np.linalg.norm(t, axis=1), 1.0, atol=1e-12)
    np.testing.assert_allclose(np.linalg.norm(b, axis=1), 1.0, atol=1e-12)
    np.testing.assert_allclose(np.cross(t, b), n, atol=1e-12)


def test_to_local_and_to_world_are_inverse(rng):
    n = rng.normal(size=(500, 3))
    n /= np.linalg.norm(n, axis=1, keepdims=True)
    d = rng.normal(size=(500, 3))
    loc = to_local(d, n)
    np.testing.assert_allclose(to_world(loc, n), d, atol=1e-12)
    np.testing.assert_allclose(to_local(n, n), np.tile([0.0, 0.0, 1.0], (500, 1)), atol=1e-12)
    # Lengths are preserved (an orthonormal change of frame).
    np.testing.assert_allclose(np.linalg.norm(loc, axis=1), np.linalg.norm(d, axis=1), rtol=1e-12)


@pytest.mark.parametrize("rotate", [0.0, 30.0, -135.0])
def test_pixel_center_angles_agree_with_the_directions(rotate):
    """Degrees for reports read off the same convention as the directions (azimuth from phi, elevation 90 - theta)."""
    from envsample.core.sphere import direction_angles, pixel_center_angles

    h, w = 6, 12
    d = sphere.pixel_center_directions(h, w, up="z", rotation_deg=rotate)
    az_ref, el_ref = direction_angles(d, up="z", rotation_deg=rotate)
    rows, cols = np.meshgrid(np.arange(h), np.arange(w), indexing="ij")
    az, el = pixel_center_angles(rows, cols, h, w, rotation_deg=rotate)
    np.testing.assert_allclose(el, el_ref, atol=1e-9)
    np.testing.assert_allclose(np.cos(np.radians(az - az_ref)), 1.0, atol=1e-12)  # equal modulo 360


@pytest.mark.parametrize("rotation", [0.0, 30.0, -135.0])
def test_angles_and_uv_are_inverse_and_match_the_direction(rotation):
    """angles_to_uv inverts uv_to_angles, and the angles are those of the textbook spherical direction
    (azimuth phi from forward towards right, elevation from the horizon; the documented frame, up = y)."""
    from envsample.core.sphere import angles_to_uv, direction_angles, uv_to_angles

    rng = np.random.default_rng(7)
    u, v = rng.random(200), rng.uniform(0.01, 0.99, 200)
    az, el = uv_to_angles(u, v, rotation_deg=rotation)
    u2, v2 = angles_to_uv(az, el, rotation_deg=rotation)
    np.testing.assert_allclose(u2, u, atol=1e-12)
    np.testing.assert_allclose(v2, v, atol=1e-12)
    phi, lat = np.radians(az), np.radians(el)
    # forward -Z, right +X, up +Y (the convention of envsample.core.sphere for up = "y")
    d = np.stack([np.cos(lat) * np.sin(phi), np.sin(lat), -np.cos(lat) * np.cos(phi)], axis=-1)
    az3, el3 = direction_angles(d, up="y", rotation_deg=rotation)
    np.testing.assert_allclose(el3, el, atol=1e-9)
    np.testing.assert_allclose(np.cos(np.radians(az3 - az)), 1.0, atol=1e-12)
