"""Tests of envsample.qa.checks.clipping.

IEEE 754-2008 binary16: the largest finite value is 65504.  The sun's mean angular diameter 0.533 deg
(from memory; envsample.core.constants).
"""

from __future__ import annotations

import math

from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.core.constants import HALF_FLOAT_MAX, SUN_ANGULAR_DIAMETER_RAD
from envsample.qa.run import check_map
from envsample.synth import skies


def test_clipped_sun_fails_clipping_only(profile):
    report = check_map(clipped_sun(), profile=profile)
    fails = {k for k, v in non_pass(report).items() if v == "fail"}
    assert fails == {"clipping"}
    c = report["clipping"]
    assert c.value >= 3 and c.details["plateau"]["level"] == 500.0
    assert c.details["plateau"]["shoulder"] > 0.0
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
    p = c.details["plateau"]
    assert c.severity == "pass" and p["pixels"] >= 100 and p["shoulder"] < 0.01
    assert "sharp-edged" in c.message
