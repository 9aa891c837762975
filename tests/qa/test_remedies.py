"""Tests of envsample.qa.remedies: each remedy makes its check pass and leaves every pixel outside the
repaired region bit for bit identical; the input is never modified.

Sources: the Lambertian ground radiance albedo x E / pi (textbook); IEEE 754 binary32 limits
(1e-45 is the smallest denormal, 3.4e38 the largest finite value); the CIE traditional overcast sky
(1 + 2 cos theta) / 3 (Moon & Spencer 1942), horizontal irradiance 7 pi / 9 Lz (closed form).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.qa import remedies
from envsample.qa.run import check_map


def _frozen(a):
    b = a.copy()
    b.setflags(write=False)
    return b


def test_fill_nonfinite_uses_neighbours_and_changes_only_those_pixels(profile):
    img = sunny()
    bad = np.zeros(img.shape[:2], bool)
    img[40:44, 100:110] = np.nan
    img[70, 0, 1] = np.inf  # on the seam: filled across the wrap
    img[5, W - 1] = -np.inf
    bad[40:44, 100:110] = bad[70, 0] = bad[5, W - 1] = True
    src = _frozen(img)
    rep = remedies.fill_nonfinite(src)
    assert np.isfinite(rep.rgb).all()
    assert np.array_equal(rep.rgb[~bad], img[~bad])  # outside the region: identical
    # Filled from neighbours, not with 0: the sky around the hole is about 1 (overcast, no sun there).
    assert rep.rgb[41, 105].min() > 0.1
    assert rep.record["changed"]["pixels"] == int(bad.sum())
    report = check_map(rep.rgb, profile=profile)
    assert report["nan"].severity == "pass" and report["inf"].severity == "pass"


def test_clamp_negative_changes_only_negative_pixels(profile):
    img = sunny()
    img[60:62, 10:20, 2] = -0.3
    rep = remedies.clamp_negative(_frozen(img))
    neg = (img < 0).any(axis=2)
    assert np.array_equal(rep.rgb[~neg], img[~neg]) and rep.rgb.min() >= 0
    assert check_map(rep.rgb, profile=profile)["negative"].severity == "pass"


def test_constant_poles_changes_only_the_pole_rows(profile):
    img = sunny()
    img[0, ::2] *= 3.0
    img[-1, 1::3] *= 5.0
    assert check_map(img, profile=profile)["poles"].severity == "fail"
    rep = remedies.constant_poles(_frozen(img))
    assert np.array_equal(rep.rgb[1:-1], img[1:-1])
    assert check_map(rep.rgb, profile=profile)["poles"].severity == "pass"


def test_blend_seam_changes_only_the_edge_columns(profile):
    img = sunny()
    img[:, : W // 2] *= 2.0  # an exposure step at the seam (and at the centre, which is not the seam's business)
    assert check_map(img, profile=profile)["seam"].severity == "fail"
    rep = remedies.blend_seam(_frozen(img), columns=4)
    assert np.array_equal(rep.rgb[:, 4:-4], img[:, 4:-4])
    assert check_map(rep.rgb, profile=profile)["seam"].severity == "pass"


def test_flip_and_rotate_are_exact_permutations(profile):
    img = sunny()
    flipped = remedies.flip(_frozen(img[::-1].copy())).rgb
    assert np.array_equal(flipped, img)
    rot = remedies.rotate(_frozen(img), degrees=90.0)
    assert np.array_equal(rot.rgb, np.roll(img, W // 4, axis=1))
    # The sun moves by 90 deg of azimuth (sun check, envsample's own convention: positive to the right).
    az0 = check_map(img, checks=["sun"])["sun"].details["emitters"][0]["azimuth_deg"]
    az1 = check_map(rot.rgb, checks=["sun"])["sun"].details["emitters"][0]["azimuth_deg"]
    assert abs((az1 - az0 - 90.0 + 180.0) % 360.0 - 180.0) < 360.0 / W


@pytest.mark.parametrize("stops", [-10.0, 7.0])
def test_exposure_scaling_makes_the_exposure_check_pass(profile, stops):
    """A map 10 stops too dark or 7 too bright (issue 9): scaled so that E/pi = 1 exactly."""
    img = (sunny() * 2.0 ** stops).astype(np.float32)
    assert check_map(img, profile=profile)["exposure"].severity == "warn"
    rep = remedies.scale_exposure(_frozen(img), target=1.0)
    c = check_map(rep.rgb, profile=profile)["exposure"]
    assert c.severity == "pass" and abs(c.value) < 1e-4


def test_exposure_scaling_to_an_irradiance():
    """A uniform sky L gives E = pi L on an up-facing surface (textbook): E = 1000 makes L = 1000 / pi."""
    rep = remedies.scale_exposure(np.full((32, 64, 3), 0.25, np.float32), irradiance=1000.0)
    assert np.allclose(rep.rgb, 1000.0 / math.pi, rtol=1e-5)
    with pytest.raises(ValueError, match="not both"):
        remedies.scale_exposure(rep.rgb, target=1.0, irradiance=1.0)


@pytest.mark.parametrize("value", [1e-45, 3e38])
def test_exposure_scaling_rescues_maps_at_the_float32_limits(profile, value):
    img = np.full((64, 128, 3), value, np.float32)
    assert check_map(img, profile=profile)["value-range"].severity == "fail"
    rep = remedies.scale_exposure(img, target=1.0)
    assert np.isfinite(rep.rgb).all()
    # A uniform sky L gives E = pi L (textbook): L becomes 1.
    assert np.allclose(rep.rgb, 1.0, rtol=1e-5)
    assert check_map(rep.rgb, profile=profile)["value-range"].severity == "pass"


def test_pad_hemisphere_makes_a_full_sphere_with_a_lambertian_ground(profile):
    """The upper hemisphere of the overcast sky at 4:1 becomes 2:1; the ground radiance is
    albedo x E / pi with E = 7 pi / 9 Lz for the overcast sky (closed form)."""
    full = sunny(sky="overcast", elevation_deg=30.0, ground_albedo=0.0)
    sky_only = full[: H // 2].copy()
    report = check_map(sky_only, profile=profile)
    assert report["hemisphere"].severity == "fail" and "pad" in report["hemisphere"].remedy
    rep = remedies.pad_hemisphere(_frozen(sky_only), ground_albedo=0.5)
    assert rep.rgb.shape == (H, W, 3)
    assert np.array_equal(rep.rgb[: H // 2], sky_only)
    after = check_map(rep.rgb, profile=profile)
    assert after["hemisphere"].severity == "pass" and after["aspect"].severity == "pass"


def test_pad_hemisphere_ground_radiance_matches_the_closed_form():
    from envsample.synth import skies

    sky = skies.make_sky("overcast", width=512)[:128].astype(np.float64)
    ground = remedies.pad_hemisphere(sky.astype(np.float32), ground_albedo=1.0).rgb[-1, 0, 1]
    lz = float(sky[0, 0, 1])  # zenith radiance of the traditional overcast sky
    assert ground == pytest.approx(7.0 / 9.0 * lz, rel=2e-3)  # E / pi with E = 7 pi / 9 Lz


def test_unknown_remedy_lists_the_valid_names():
    with pytest.raises(ValueError, match="unknown remedy 'sharpen'; valid names: fill-nonfinite"):
        remedies.apply_remedy("sharpen", np.ones((4, 8, 3), np.float32))
    with pytest.raises(ValueError, match="nothing to fill from"):
        remedies.fill_nonfinite(np.full((4, 8, 3), np.nan, np.float32))
    with pytest.raises(ValueError, match="no light reaches an up-facing surface"):
        remedies.scale_exposure(np.zeros((4, 8, 3), np.float32))
    assert math.isfinite(remedies.rotate(np.ones((4, 8, 3), np.float32), degrees=-45).record["changed"]["columns_shifted"])
