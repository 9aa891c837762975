"""Tests of envsample.qa.checks.clipping.

IEEE 754-2008 binary16: the largest finite value is 65504.  The sun's mean angular diameter 0.533 deg
(from memory; envsample.core.constants).  Near a smooth maximum M - a r^2 the area above M - d grows
like d (textbook calculus), so an unclipped peak has no excess of pixels in its top band.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.core.constants import HALF_FLOAT_MAX, SUN_ANGULAR_DIAMETER_RAD
from envsample.core.sphere import pixel_center_directions
from envsample.qa.run import check_map
from envsample.synth import skies


def test_clipped_sun_fails_clipping_only(profile):
    report = check_map(clipped_sun(), profile=profile)
    fails = {k for k, v in non_pass(report).items() if v == "fail"}
    assert fails == {"clipping"}
    c = report["clipping"]
    piled = [p for p in c.details["channels"] if "shoulder" in p]
    assert c.value >= 3 and {p["level"] for p in piled} == {500.0}
    assert min(p["shoulder"] for p in piled) > 0.01
    # Other checks may comment on the clipped halo but must not fail.
    assert set(non_pass(report)) <= {"clipping", "sun"}



def test_values_at_the_half_float_maximum_fail_clipping(profile):
    """IEEE 754 binary16 tops out at 65504: pixels holding exactly that were clamped on export."""
    img = sunny()
    img[40, 100] = HALF_FLOAT_MAX
    report = check_map(img, profile=profile)
    assert report["clipping"].severity == "fail"
    assert report["clipping"].value == 1
    assert "65504" in report["clipping"].message



def test_sun_smaller_than_a_pixel_is_not_clipping(profile):
    report = check_map(sunny(), profile=profile)
    assert report["clipping"].severity == "pass"
    assert not report["sun"].details["emitters"][0]["resolved"]



def test_resolved_uniform_sun_disk_is_not_clipping():
    """At 2048 px a 0.533 deg disk of constant radiance covers several whole pixels with equal values;
    a plateau no larger than the real sun is not clipping."""
    report = check_map(sunny(2048), checks=["clipping", "sun"])
    assert report["clipping"].severity == "pass"
    sun = report["sun"].details["emitters"][0]
    assert sun["resolved"]
    pixel = 360.0 / 2048
    # Equivalent diameter: the disk plus the partly covered pixels around it.
    assert math.degrees(SUN_ANGULAR_DIAMETER_RAD) <= sun["diameter_deg"] <= math.degrees(SUN_ANGULAR_DIAMETER_RAD) + 3 * pixel
    assert report["sun"].severity == "pass"



def test_sharp_edged_area_lights_are_plateaus_but_not_clipping():
    """Uniform rectangular lights (envsample.skies studio) share their exact radiance over many
    pixels; with no shoulder this is their real radiance, reported as a note."""
    c = check_map(skies.make_sky("studio", width=W), checks=["clipping"])["clipping"]
    p = max((p for p in c.details["channels"] if "shoulder" in p), key=lambda p: p["pixels"])
    assert c.severity == "pass" and p["pixels"] >= 100 and p["shoulder"] < 0.01
    assert "sharp-edged" in c.message and c.cleared_by.startswith("sharp edge")


def _glare_sky(width=W):
    """A sun with a wide glare halo over the overcast sky (the sky before a clip)."""
    img = sunny(width).astype(np.float64)
    d = pixel_center_directions(width // 2, width)
    s = skies.sun_direction(azimuth_deg=SUN_AZ, elevation_deg=SUN_EL)
    angle = np.degrees(np.arccos(np.clip(d @ s, -1, 1)))
    return img + (50.0 * np.exp(-(angle ** 2) / (2 * 25.0 ** 2)))[..., None]


@pytest.mark.parametrize("scale", [1e-3, 1.0, 1e3])
@pytest.mark.parametrize("width", [128, 512])
def test_a_large_low_clip_fails_at_any_scale_and_size(profile, scale, width):
    """Issue 9: the sun and the brightest sky flattened at one value over about 5 % of the map passed,
    because the plateau test wanted a sun-sized plateau at 4x the median."""
    img = _glare_sky(width)
    lum = img.max(axis=2)
    level = np.quantile(lum, 0.95)
    clipped = (np.minimum(img, level) * scale).astype(np.float32)
    c = check_map(clipped, profile=profile, checks=["clipping"])["clipping"]
    assert c.severity == "fail", c.message
    assert "highlights clipped" in c.message and "envsample fix cannot restore it" in c.remedy


def test_white_balance_after_a_sensor_clip_is_found_in_each_channel(profile):
    """A sensor clip at S followed by white balance gains puts each channel's plateau at its own level."""
    img = np.minimum(_glare_sky(256), 20.0) * np.array([1.0, 0.8, 0.55])
    c = check_map(img.astype(np.float32), profile=profile, checks=["clipping"])["clipping"]
    assert c.severity == "fail"
    levels = {p["channel"]: p["level"] for p in c.details["channels"] if "shoulder" in p}
    assert levels == pytest.approx({"R": 20.0, "G": 16.0, "B": 11.0}, rel=1e-6)


def test_a_single_channel_clip_is_found(profile):
    img = _glare_sky(256)
    img[..., 0] = np.minimum(img[..., 0], np.quantile(img[..., 0], 0.97))
    c = check_map(img.astype(np.float32), profile=profile, checks=["clipping"])["clipping"]
    assert c.severity == "fail" and "R at" in c.message


def test_a_clip_stored_as_half_floats_is_found(tmp_path, profile):
    from envsample.io.maps import write_map

    img = np.minimum(_glare_sky(256), 30.0).astype(np.float32)
    path = tmp_path / "clip.exr"
    write_map(path, img, pixel_type="half")
    assert check_map(path, profile=profile, checks=["clipping"])["clipping"].severity == "fail"


def test_a_smooth_unclipped_maximum_is_no_pile_up(profile):
    """Near a smooth maximum the values thin out evenly (textbook calculus): no excess in the top band."""
    c = check_map(_glare_sky(512).astype(np.float32), profile=profile, checks=["clipping"])["clipping"]
    assert c.severity == "pass" and "no pile-up" in c.message


def test_low_and_white_balanced_clips_fail_clipping_and_nothing_else(profile):
    img = _glare_sky(256)
    low = np.minimum(img, np.quantile(img.max(axis=2), 0.95)).astype(np.float32)
    balanced = (np.minimum(img, 20.0) * np.array([1.0, 0.8, 0.55])).astype(np.float32)
    for m in (low, balanced):
        assert non_pass(check_map(m, profile=profile)) == {"clipping": "fail"}
