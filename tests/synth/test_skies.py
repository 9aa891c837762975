"""Tests of envsample.skies against closed forms, published sky formulas and scipy.integrate.

Sources named per test: textbook integrals over the sphere; the traditional overcast
sky (Moon & Spencer 1942, CIE S 003/E:1996) and the CIE S 011/E:2003 general sky
type 1 (formula from memory); scipy.integrate as an independent quadrature.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from envsample.core.color import luminance
from envsample.core.constants import SUN_SOLID_ANGLE_SR
from envsample.core.sphere import (
    direction_to_uv,
    pixel_center_directions,
    pixel_solid_angles,
    row_cos_edges,
    row_solid_angles,
)
from envsample.synth import skies

#: Relative tolerance of integrals of float32 maps whose cell averages are exact.
EXACT_RTOL = 2e-6
#: Sun power must match L * Omega within this fraction (sub-sampled disk coverage).
SUN_POWER_RTOL = 0.01


def _integral(img: np.ndarray) -> np.ndarray:
    """int L d omega per channel, float64 (map units times steradians)."""
    omega = pixel_solid_angles(*img.shape[:2])
    return np.einsum("hwc,hw->c", img.astype(np.float64), omega)


def _horizontal_irradiance(img: np.ndarray) -> np.ndarray:
    """int_{upper hemisphere} L cos(theta) d omega of a piecewise-constant map, exactly per pixel.

    Over pixel (i, j): int cos(theta) d omega = (pi / W) * (mu_top^2 - mu_bot^2),
    with mu clipped at 0 for the upper hemisphere (closed form).
    """
    h, w = img.shape[:2]
    mu = np.clip(row_cos_edges(h), 0.0, None)
    weight = (math.pi / w) * (mu[:-1] ** 2 - mu[1:] ** 2)
    return np.einsum("hwc,h->c", img.astype(np.float64), weight)


def _type1_horizontal_factor() -> float:
    """Horizontal illuminance / Lz of CIE S 011/E:2003 sky type 1 (a = 4, b = -0.7; from memory), by scipy.quad."""
    grad = lambda mu: 1.0 + 4.0 * math.exp(-0.7 / mu)  # noqa: E731
    val, _ = integrate.quad(lambda mu: grad(mu) / grad(1.0) * mu, 1e-12, 1.0)
    return 2.0 * math.pi * val


# ---------------------------------------------------------------------------
# uniform
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("width,height", [(64, 32), (256, 128), (50, 25), (40, 31)])
@pytest.mark.parametrize("radiance", [1.0, 3.5])
def test_uniform_sky_integral_is_four_pi_radiance(width, height, radiance):
    """Closed form: int L d omega = 4*pi*L for a constant map."""
    color = np.array([1.0, 0.5, 2.0])
    img = skies.uniform_sky(width, height, radiance=radiance, color=color)
    assert img.shape == (height, width, 3) and img.dtype == np.float32
    np.testing.assert_allclose(_integral(img), 4.0 * math.pi * radiance * color, rtol=EXACT_RTOL)


def test_default_height_is_half_the_width():
    assert skies.uniform_sky(96).shape == (48, 96, 3)
    assert skies.make_sky("overcast", width=64).shape == (32, 64, 3)


# ---------------------------------------------------------------------------
# traditional overcast sky
# ---------------------------------------------------------------------------

def test_overcast_radiance_follows_the_traditional_formula():
    """Moon & Spencer (1942) / CIE S 003: L = Lz (1 + 2 cos theta)/3; horizon at Lz/3."""
    mu = np.array([1.0, 0.5, 0.0, -0.2])
    np.testing.assert_allclose(skies.overcast_radiance(mu, zenith_luminance=3.0), [3.0, 2.0, 1.0, 0.0])


@pytest.mark.parametrize("height", [32, 33, 128])
@pytest.mark.parametrize("ground", [0.0, 0.25])
def test_overcast_map_integral_matches_closed_form(height, ground):
    """int over the sky of Lz(1+2mu)/3 d omega = 2*pi*Lz*(1 + 1)/3 = 4*pi/3*Lz; the ground adds 2*pi*Lg.

    An odd height puts the horizon inside a row: that row is split, so the integral stays exact.
    """
    lz = 2.0
    img = skies.cie_overcast_sky(2 * height, height, zenith_luminance=lz, ground=ground)
    expected = 4.0 * math.pi / 3.0 * lz + 2.0 * math.pi * ground
    np.testing.assert_allclose(_integral(img), expected, rtol=EXACT_RTOL)


@pytest.mark.parametrize("height", [32, 64, 256])
def test_overcast_horizontal_irradiance_is_seven_pi_over_nine(height):
    """Closed form 7*pi/9*Lz (2*pi*int_0^1 (1+2mu)/3 mu dmu); CIE type 1 gives a different value.

    A map constant per row falls short by exactly pi/9*Lz*sum(dmu^3) over the sky rows (algebra
    on the row averages (1 + mu_top + mu_bot)/3); we check that bound and that the map is much
    closer to 7*pi/9 than to the general sky type 1 (about 2.4495, computed here with scipy).
    """
    lz = 1.5
    img = skies.cie_overcast_sky(2 * height, height, zenith_luminance=lz)
    e_map = _horizontal_irradiance(img)
    exact = 7.0 * math.pi / 9.0 * lz
    mu = np.clip(row_cos_edges(height), 0.0, None)
    shortfall = math.pi / 9.0 * lz * np.sum((mu[:-1] - mu[1:]) ** 3)
    np.testing.assert_allclose(e_map, exact - shortfall, rtol=1e-6)
    assert math.isclose(skies.OVERCAST_HORIZONTAL_FACTOR * lz, exact)
    type1 = _type1_horizontal_factor() * lz
    assert abs(type1 - exact) / exact > 1e-3  # the two skies really differ
    assert np.all(np.abs(e_map - exact) < 0.5 * abs(type1 - exact))


def test_overcast_scipy_quadrature_agrees_with_map():
    """scipy.integrate.dblquad of L cos(theta) sin(theta) over the hemisphere, against the map and 7*pi/9."""
    lz = 1.0
    f = lambda theta, phi: float(skies.overcast_radiance(math.cos(theta), zenith_luminance=lz)) * math.cos(theta) * math.sin(theta)  # noqa: E731
    val, err = integrate.dblquad(f, 0.0, 2.0 * math.pi, 0.0, math.pi / 2.0)
    assert err < 1e-8
    assert math.isclose(val, 7.0 * math.pi / 9.0, rel_tol=1e-9)
    img = skies.cie_overcast_sky(256, 128, zenith_luminance=lz)
    np.testing.assert_allclose(_horizontal_irradiance(img), val, rtol=1e-3)


def test_overcast_rows_are_solid_angle_averages_by_scipy():
    """Each row equals (1/dmu) int L(mu) dmu over the row, by scipy.integrate.quad (odd height too)."""
    h = 17
    img = skies.cie_overcast_sky(34, h, zenith_luminance=1.0, ground=0.3)
    mu = row_cos_edges(h)

    def radiance(m):
        return float(skies.overcast_radiance(m)) if m >= 0 else 0.3

    for i in range(h):
        val, _ = integrate.quad(radiance, mu[i + 1], mu[i], points=[0.0] if mu[i + 1] < 0 < mu[i] else None)
        assert math.isclose(float(img[i, 5, 0]), val / (mu[i] - mu[i + 1]), rel_tol=1e-6)


def test_overcast_ground_albedo_is_lambertian():
    """A Lambertian ground of albedo rho under irradiance E has radiance rho*E/pi (textbook): rho*7/9*Lz."""
    img = skies.cie_overcast_sky(64, 32, zenith_luminance=2.0, ground_albedo=0.3)
    np.testing.assert_allclose(img[-1, 0], 0.3 * 7.0 / 9.0 * 2.0, rtol=1e-6)
    with pytest.raises(ValueError, match="either ground"):
        skies.cie_overcast_sky(64, 32, ground=0.1, ground_albedo=0.3)


# ---------------------------------------------------------------------------
# clear sky and sun
# ---------------------------------------------------------------------------

def test_clear_sky_rows_are_cell_averages_by_scipy():
    """Row values of the clear gradient equal (1/dmu) int L(mu) dmu (scipy.integrate.quad)."""
    h = 24
    img = skies.sun_sky(48, h, elevation_deg=-90.0, sun_illuminance=0.0, sky="clear", zenith_luminance=1.3)
    mu = row_cos_edges(h)
    for i in range(h // 2):
        for c in range(3):
            val, _ = integrate.quad(lambda m: float(skies.clear_sky_radiance(m, zenith_luminance=1.3)[c]), mu[i + 1], mu[i])
            assert math.isclose(float(img[i, 0, c]), val / (mu[i] - mu[i + 1]), rel_tol=1e-5)
    assert np.all(img[h // 2:] == 0.0)


def test_sun_solid_angle_and_radiance_closed_forms():
    """Omega = 2*pi*(1 - cos r) ~ 6.8e-5 sr (0.533 deg, from memory); E_normal = L * int_cap cos = L*pi*sin^2 r."""
    assert math.isclose(skies.sun_solid_angle(), SUN_SOLID_ANGLE_SR, rel_tol=1e-12)
    assert 6.7e-5 < SUN_SOLID_ANGLE_SR < 6.9e-5
    r = math.radians(0.533) / 2.0
    cap, _ = integrate.quad(lambda a: math.cos(a) * math.sin(a) * 2.0 * math.pi, 0.0, r)
    assert math.isclose(skies.sun_radiance(5.0) * cap, 5.0, rel_tol=1e-9)


def _sun_only(width, **kw):
    return skies.sun_sky(width, sky="none", **kw).astype(np.float64)


@pytest.mark.parametrize("width", [64, 256, 1024])
@pytest.mark.parametrize("el,az", [(45.0, 0.0), (12.0, -65.0), (89.9, 30.0), (90.0, 0.0), (60.0, -180.0), (30.0, 359.0)])
def test_sun_power_matches_radiance_times_solid_angle(width, el, az):
    """sum(L * omega_pixel) over the disk = L_sun * Omega_sun (closed form), even when the disk is sub-pixel.

    At width 64 a pixel spans 5.6 deg, ten times the disk.  Luminance of the disk = L_sun
    because sun_color is scaled to unit BT.709 luminance.
    """
    img = _sun_only(width, elevation_deg=el, azimuth_deg=az, sun_illuminance=3.0, sun_color=(1, 1, 1))
    power = _integral(img)
    expected = skies.sun_radiance(3.0) * SUN_SOLID_ANGLE_SR
    np.testing.assert_allclose(power, expected, rtol=SUN_POWER_RTOL)


@pytest.mark.parametrize("el", [0.1, -0.1, 0.2])
def test_sun_below_horizon_is_hidden_by_the_ground(el):
    """Visible fraction of a disk of radius r whose centre is h above the horizon.

    Circular-segment area (textbook plane geometry; the disk is small enough to be flat
    to ~1e-5): hidden fraction = (acos(d) - d*sqrt(1 - d^2)) / pi with d = h / r.
    """
    img = _sun_only(256, elevation_deg=el, azimuth_deg=20.0, sun_illuminance=1.0, sun_color=(1, 1, 1))
    r = 0.533 / 2.0
    d = abs(el) / r
    hidden = (math.acos(d) - d * math.sqrt(1.0 - d * d)) / math.pi
    visible = 1.0 - hidden if el > 0 else hidden
    expected = skies.sun_radiance(1.0) * SUN_SOLID_ANGLE_SR * visible
    np.testing.assert_allclose(_integral(img), expected, rtol=SUN_POWER_RTOL)


@pytest.mark.parametrize("up", ["y", "z"])
@pytest.mark.parametrize("el,az", [(35.0, 40.0), (12.0, -65.0), (5.0, 179.0), (70.0, -120.0)])
def test_sun_appears_at_requested_position(up, el, az):
    """The disk's power-weighted centroid direction lies on sun_direction(el, az); its uv via direction_to_uv."""
    w, h = 128, 64
    img = _sun_only(w, elevation_deg=el, azimuth_deg=az, sun_color=(1, 1, 1))
    weight = img[..., 1] * pixel_solid_angles(h, w)
    dirs = pixel_center_directions(h, w, up=up)
    centroid = np.einsum("hw,hwk->k", weight, dirs)
    centroid /= np.linalg.norm(centroid)
    target = skies.sun_direction(azimuth_deg=az, elevation_deg=el, up=up)
    pixel_angle = math.pi / h
    assert math.acos(min(1.0, float(centroid @ target))) < 0.5 * pixel_angle
    # The brightest pixel is the one that contains the sun direction.
    u, v = direction_to_uv(target, up=up)
    row, col = np.unravel_index(np.argmax(weight), weight.shape)
    assert abs(row - v * h) <= 1.0
    assert min(abs(col - u * w), w - abs(col - u * w)) <= 1.0
    # Elevation and azimuth are read back from uv with the convention's formulas.
    assert math.isclose(90.0 - 180.0 * float(v), el, abs_tol=1e-9)
    assert math.isclose((360.0 * (float(u) - 0.5) - az + 180.0) % 360.0 - 180.0, 0.0, abs_tol=1e-9)


def test_sun_adds_to_the_sky():
    """The sun map is the background sky plus the disk (the disk adds to the sky behind it)."""
    kw = dict(elevation_deg=25.0, azimuth_deg=-10.0)
    both = skies.sun_sky(128, sky="overcast", **kw).astype(np.float64)
    sky = skies.cie_overcast_sky(128).astype(np.float64)
    np.testing.assert_allclose(both - sky, _sun_only(128, **kw), rtol=1e-5, atol=1e-5)


def test_sun_sky_ground_albedo_adds_the_sun():
    """Lambertian ground radiance rho*(E_sky + E_sun*sin(elevation))/pi (textbook), overcast background."""
    img = skies.sun_sky(64, sky="overcast", elevation_deg=30.0, sun_illuminance=2.0, sun_color=(1, 1, 1),
                        ground_albedo=0.2)
    expected = 0.2 * (7.0 * math.pi / 9.0 + 2.0 * 0.5) / math.pi
    np.testing.assert_allclose(img[-1, 0], expected, rtol=1e-6)


# ---------------------------------------------------------------------------
# studio
# ---------------------------------------------------------------------------

def test_studio_integral_matches_light_solid_angles():
    """int L d omega = 4*pi*bg + sum (L_k - bg) * (a1 - a0) * (sin e1 - sin e0) (closed form), with a seam-wrapping light."""
    lights = [((-50.0, -20.0), (20.0, 50.0), 5.0), ((170.0, -160.0), (-10.0, 35.5), (1.0, 2.0, 3.0))]
    bg = 0.03
    img = skies.studio_sky(90, 45, lights=lights, background=bg)
    expected = np.full(3, 4.0 * math.pi * bg)
    for (a0, a1), (e0, e1), rad in lights:
        span = math.radians((a1 - a0) % 360.0)
        expected += (np.asarray(rad, float) - bg) * span * (math.sin(math.radians(e1)) - math.sin(math.radians(e0)))
    np.testing.assert_allclose(_integral(img), expected, rtol=EXACT_RTOL)
    # A pixel well inside the first light carries its full radiance.
    u, v = direction_to_uv(skies.sun_direction(azimuth_deg=-35.0, elevation_deg=35.0))
    np.testing.assert_allclose(img[int(v * 45), int(u * 90)], 5.0, rtol=1e-6)


def test_studio_rejects_bad_lights():
    with pytest.raises(ValueError, match=r"lights\[0\]: elevation range"):
        skies.studio_sky(64, lights=[((0, 10), (30, 20), 1.0)])
    with pytest.raises(ValueError, match=r"lights\[1\] must be"):
        skies.studio_sky(64, lights=[((0, 10), (0, 20), 1.0), (1, 2)])
    with pytest.raises(ValueError, match=r"radiance must be finite"):
        skies.studio_sky(64, lights=[((0, 10), (0, 20), -1.0)])


# ---------------------------------------------------------------------------
# demo scenes and the dispatcher
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("kind", ["rooftop", "product-studio"])
def test_demo_scenes_are_finite_deterministic_maps(kind):
    a = skies.make_sky(kind, width=256)
    b = skies.make_sky(kind, width=256)
    assert a.shape == (128, 256, 3) and a.dtype == np.float32
    assert np.all(np.isfinite(a)) and a.min() >= 0.0
    np.testing.assert_array_equal(a, b)


def test_rooftop_scene_has_its_low_warm_sun_and_blue_to_orange_sky():
    w, h = 512, 256
    img = skies.rooftop_scene(w)
    az, el = skies.ROOFTOP_SUN
    assert skies.sun_position("rooftop") == (az, el)
    weight = img.mean(axis=2) * pixel_solid_angles(h, w)
    row, col = np.unravel_index(np.argmax(weight), weight.shape)
    u, v = direction_to_uv(skies.sun_direction(azimuth_deg=az, elevation_deg=el))
    assert abs(row - v * h) <= 1 and abs(col - u * w) <= 1
    sun_px = img[row, col]
    assert sun_px[0] > sun_px[2]  # warm sun
    zenith = img[0].mean(axis=0)
    assert zenith[2] > zenith[0]  # blue overhead
    near_horizon = img[int(h * (90 - 8) / 180), col]  # 8 deg up, towards the sun: above the skyline
    assert near_horizon[0] > near_horizon[2]  # orange low sky
    assert img[h // 2:].mean() < img[: h // 2].mean()  # darker below the horizon


def test_studio_scene_has_bright_softboxes_on_a_dim_background():
    img = skies.studio_scene(256)
    lum = img.mean(axis=2)
    assert np.median(lum) < 0.1
    assert lum.max() > 50 * np.median(lum)


def test_sky_kinds_lists_every_kind():
    assert skies.sky_kinds() == ("uniform", "overcast", "sun", "studio", "rooftop", "product-studio")
    assert set(skies.SKY_DESCRIPTIONS) == set(skies.sky_kinds())


def test_unknown_kind_lists_valid_names():
    with pytest.raises(ValueError, match=r"unknown sky kind 'cloudy'; valid kinds: uniform, overcast, sun"):
        skies.make_sky("cloudy")
    with pytest.raises(ValueError, match="valid kinds"):
        skies.sun_position("cloudy")


def test_unknown_option_lists_valid_options():
    with pytest.raises(ValueError, match=r"unknown option\(s\) elevation for sky 'sun'; valid options: azimuth_deg, elevation_deg"):
        skies.make_sky("sun", elevation=10.0)


@pytest.mark.parametrize("width,height,match", [(3, None, "width must be an integer >= 4"),
                                                (64.0, None, "width must be an integer"),
                                                (64, 1, "height must be an integer >= 2")])
def test_bad_sizes_are_rejected(width, height, match):
    with pytest.raises(ValueError, match=match):
        skies.make_sky("uniform", width=width, height=height)


@pytest.mark.parametrize("kw,match", [
    (dict(elevation_deg=91.0), r"elevation_deg must lie in \[-90, 90\]"),
    (dict(elevation_deg=float("nan")), "elevation_deg must lie"),
    (dict(sun_illuminance=float("inf")), "sun_illuminance must be finite"),
    (dict(sky="hazy"), "valid: clear, overcast, none"),
    (dict(sun_color=(0, 0, 0)), "sun_color must have positive luminance"),
])
def test_bad_sun_options_are_rejected(kw, match):
    with pytest.raises(ValueError, match=match):
        skies.sun_sky(64, **kw)


def test_sun_position_reports_options():
    assert skies.sun_position("sun", elevation_deg=20.0, azimuth_deg=-5.0) == (-5.0, 20.0)
    assert skies.sun_position("overcast") is None


def test_sun_direction_takes_azimuth_then_elevation_by_keyword():
    """Angles are written (azimuth, elevation) everywhere; the former positional order still works, with a warning."""
    d = skies.sun_direction(azimuth_deg=30.0, elevation_deg=60.0)
    with pytest.warns(DeprecationWarning, match="azimuth_deg= and elevation_deg="):
        old = skies.sun_direction(60.0, 30.0)
    np.testing.assert_array_equal(d, old)
    assert d[1] == pytest.approx(math.sin(math.radians(60.0)))  # up = +y: the y component is sin(elevation)


def test_sun_sky_follows_the_elevation_with_the_clear_sky_model():
    """Sun DNI and sky DHI of pvlib's Ineichen & Perez model at 2, 30 and 80 deg, times CLEAR_SKY_SCALE (1 %)."""
    pvlib = pytest.importorskip("pvlib")
    from envsample.core.latlong import row_cosine_weights
    from envsample.lights.split import split_sun

    integrals, colours = [], []
    for el in (2.0, 30.0, 80.0):
        img = skies.sun_sky(1024, azimuth_deg=15.0, elevation_deg=el)
        sp = split_sun(img)
        z = 90.0 - el
        am = pvlib.atmosphere.get_relative_airmass(z, model="kastenyoung1989")
        ref = pvlib.clearsky.ineichen(z, pvlib.atmosphere.get_absolute_airmass(am), 3.0)
        e_n = float(luminance(sp.sun.normal_irradiance[None, :], dtype=np.float64)[0])
        assert e_n == pytest.approx(float(ref["dni"]) * skies.CLEAR_SKY_SCALE, rel=0.01)
        lum = luminance(sp.sky, dtype=np.float64)
        e_h = float(lum.sum(axis=1) @ row_cosine_weights(512, 1024))
        assert e_h == pytest.approx(float(ref["dhi"]) * skies.CLEAR_SKY_SCALE, rel=0.01)
        integrals.append(float((luminance(img, dtype=np.float64).sum(axis=1) * row_solid_angles(512, 1024)).sum()))
        colours.append(sp.sun.radiance / sp.sun.radiance.sum())
    assert integrals[0] < integrals[1] < integrals[2]
    assert colours[0][2] < colours[1][2] < colours[2][2]  # bluer as the sun climbs


def test_sun_sky_keeps_given_brightness():
    """A given sun_illuminance keeps the former behaviour: the disk's normal illuminance is the value given."""
    from envsample.lights.split import split_sun

    for el in (5.0, 60.0):
        sun = split_sun(skies.sun_sky(1024, elevation_deg=el, sun_illuminance=2.0, zenith_luminance=1.0)).sun
        assert float(luminance(sun.normal_irradiance[None, :], dtype=np.float64)[0]) == pytest.approx(2.0, rel=0.01)
