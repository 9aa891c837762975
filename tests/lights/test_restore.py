"""Tests of envsample.lights.restore: giving a clipped sun its energy back, and the sky's horizontal irradiance.

Outside references: pvlib's Ineichen-Perez clear-sky model (DNI over DHI, Kasten & Young 1989 air
mass; see tests/core/test_clearsky.py); closed forms for the irradiance of an up-facing surface,
integral of L cos(theta) over the upper hemisphere: pi L for a uniform sky, and 7 pi Lz / 9 for the
traditional overcast sky L = Lz (1 + 2 cos theta) / 3 (Moon & Spencer 1942; CIE S 003/E:1996).
The clipped captures are invented (tests/support/sun_maps.py).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.sun_maps import analytic_sun, clipped_capture, true_sun_power

from envsample.core.color import luminance
from envsample.errors import SunSplitError
from envsample.lights.restore import sky_horizontal_irradiance
from envsample.lights.split import split_sun
from envsample.synth import skies


def _capture(width=1024, az=20.0, el=30.0, **clear):
    clean = skies.sun_sky(width, azimuth_deg=az, elevation_deg=el, **clear)
    return clean, clipped_capture(clean, azimuth_deg=az, elevation_deg=el)


def test_sun_illuminance_restores_a_clipped_sun_within_one_percent():
    clean = analytic_sun(1024, azimuth_deg=20.0, elevation_deg=30.0)
    cap = clipped_capture(clean, azimuth_deg=20.0, elevation_deg=30.0)
    lost = split_sun(cap)
    assert lost.found.clipped and lost.sun.power.mean() < 0.5 * true_sun_power()
    sp = split_sun(cap, sun_illuminance=4.0)
    assert sp.restored and sp.restoration.method == "illuminance"
    lum = float(luminance(sp.sun.power[None, :], dtype=np.float64)[0])
    assert lum == pytest.approx(true_sun_power(), rel=0.01)
    assert sp.sun.diameter_deg == pytest.approx(0.533)
    assert any("colour" in a for a in sp.restoration.assumptions)


def test_clear_sky_restoration_gives_the_models_direct_to_diffuse_ratio():
    """The restored sun's normal irradiance over the sky's horizontal one is pvlib's DNI/DHI (1 %)."""
    pvlib = pytest.importorskip("pvlib")
    for el in (8.0, 30.0, 65.0):
        clean, cap = _capture(el=el)
        sp = split_sun(cap, restore="clear-sky", linke_turbidity=3.0)
        e_n = float(luminance(sp.sun.normal_irradiance[None, :], dtype=np.float64)[0])
        e_h = sky_horizontal_irradiance(sp.sky)
        z = 90.0 - sp.found.elevation_deg
        am = pvlib.atmosphere.get_relative_airmass(z, model="kastenyoung1989")
        ref = pvlib.clearsky.ineichen(z, pvlib.atmosphere.get_absolute_airmass(am), 3.0)
        assert e_n / e_h == pytest.approx(float(ref["dni"] / ref["dhi"]), rel=0.01)
        assert sp.restoration.parameters["linke_turbidity"] == 3.0


def test_clear_sky_restoration_refuses_a_sun_below_the_horizon():
    img = analytic_sun(1024, azimuth_deg=0.0, elevation_deg=0.1)
    # A clipped sun a degree below the horizon: what the ground leaves of it is found below the horizon,
    # where the clear-sky model (an air mass of the sun's elevation) has nothing to say.
    cap = clipped_capture(analytic_sun(1024, azimuth_deg=0.0, elevation_deg=-1.0), azimuth_deg=0.0,
                          elevation_deg=-1.0, clip=40.0, glare=400.0)
    sp = split_sun(cap)
    assert sp.found.clipped and sp.found.elevation_deg < 0.0
    with pytest.raises(SunSplitError, match="--sun-illuminance"):
        split_sun(cap, restore="clear-sky")
    with pytest.raises(SunSplitError, match="unknown restore method"):
        split_sun(img, restore="guess")


H, W = 256, 512


def _row_thetas(h=H):
    return (np.arange(h) + 0.5) * math.pi / h


@pytest.mark.parametrize("primaries", ["bt709", "acescg"])
def test_a_uniform_sky_gives_pi_times_its_radiance_on_an_up_facing_surface(primaries):
    """integral over the upper hemisphere of L cos(theta) d(omega) = pi L (closed form); the lower half is unseen."""
    rgb = np.zeros((H, W, 3), np.float32)
    rgb[: H // 2] = 0.8
    rgb[H // 2 :] = 50.0  # the ground does not light an up-facing surface
    y = float(luminance(np.array([[0.8, 0.8, 0.8]]), primaries, dtype=np.float64)[0])
    assert sky_horizontal_irradiance(rgb, primaries=primaries) == pytest.approx(math.pi * y, rel=1e-6)


def test_the_overcast_sky_gives_seven_ninths_pi_lz():
    """Traditional overcast sky (Moon & Spencer 1942): E_h = 7 pi Lz / 9 (closed form).  Each row holds
    its centre's radiance; the rows' cosine weights are exact, so what is left is the midpoint rule's
    error over theta, O(1 / H^2): below 1e-4 relative at 256 rows."""
    lz = 3.0
    theta = _row_thetas()
    lum = np.where(theta < math.pi / 2, lz * (1.0 + 2.0 * np.cos(theta)) / 3.0, 0.0)
    rgb = np.repeat(np.repeat(lum[:, None, None], W, axis=1), 3, axis=2).astype(np.float32)
    assert sky_horizontal_irradiance(rgb) == pytest.approx(7.0 * math.pi * lz / 9.0, rel=1e-4)


def _found_sun():
    from envsample.lights.finder import find_sun

    img = analytic_sun(1024, azimuth_deg=20.0, elevation_deg=30.0)
    return img, find_sun(img)


def test_restore_by_illuminance_takes_the_given_value_and_needs_a_positive_one():
    from envsample.lights.restore import restore_sun

    img, found = _found_sun()
    r = restore_sun(found, img, img, sun_illuminance=4.0)
    assert r.method == "illuminance" and r.normal_irradiance == 4.0
    assert r.parameters["irradiance_normal"] == 4.0 and r.diameter_deg == pytest.approx(found.diameter_deg)
    for bad in (0.0, -1.0, float("nan"), None):
        with pytest.raises(SunSplitError, match="needs a positive sun illuminance"):
            restore_sun(found, img, img, sun_illuminance=bad, method="illuminance")
    with pytest.raises(SunSplitError, match="unknown restore method 'guess'; valid names: illuminance, clear-sky"):
        restore_sun(found, img, img, method="guess")
