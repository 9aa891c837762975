"""Tests of envsample.qa.checks.geometry: aspect, resolution, seam, poles, orientation.

The std/mean of 1 + a sin(phi) over a full period is a / sqrt(2) (textbook); an equirectangular map is 2:1
(common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.qa.run import check_map


def test_seam_from_an_exposure_ramp_that_does_not_wrap(profile):
    """Stitched halves of different exposure, blended inside the image: the only step is at the seam."""
    u = (np.arange(W) + 0.5) / W
    img = sunny() * (1.0 + 0.3 * u)[None, :, None].astype(np.float32)  # a 23 % step at the seam
    report = check_map(img, profile=profile)
    assert non_pass(report) == {"seam": "fail"}
    assert report["seam"].value > 0.9  # nearly every lit row steps
    assert report["seam"].remedy



def test_seam_not_raised_by_rolling_the_map(profile):
    """np.roll keeps the wrap-around continuous: moving the seam elsewhere must not create one."""
    img = np.roll(sunny(), W // 3, axis=1)
    assert check_map(img, profile=profile)["seam"].severity == "pass"



def test_upside_down_map_warns_orientation_only(profile):
    report = check_map(np.flipud(sunny()).copy(), profile=profile)
    assert non_pass(report) == {"orientation": "warn"}
    assert report["orientation"].value < 50.0 and report["orientation"].unit == "%"
    assert "envsample fix --flip" in report["orientation"].remedy
    assert report.exit_code() == 0 and report.exit_code(strict=True) == 1


def test_profile_sets_the_severity_of_an_upside_down_map(profile_path, tmp_path):
    """Issue 9: a library that never takes upside-down maps can make the check fail."""
    p = tmp_path / "strict.toml"
    p.write_text(profile_path.read_text() + '\n[orientation]\nseverity = "fail"\n')
    report = check_map(np.flipud(sunny()).copy(), profile=p)
    assert non_pass(report) == {"orientation": "fail"}



def test_square_map_fails_aspect_only(profile):
    report = check_map(sunny(128, 128), profile=profile)
    assert non_pass(report) == {"aspect": "fail"}
    assert report["aspect"].value == 1.0



def test_non_constant_pole_row_fails_poles_only(profile):
    img = sunny()
    phi = (np.arange(W) + 0.5) / W * 2 * np.pi - np.pi
    img[0] *= (1.0 + 0.9 * np.sin(phi))[:, None].astype(np.float32)
    report = check_map(img, profile=profile)
    assert non_pass(report) == {"poles": "fail"}
    # std/mean of 1 + 0.9 sin(phi) over a full period is 0.9 / sqrt(2).
    assert report["poles"].details["top_cv"] == pytest.approx(0.9 / math.sqrt(2), rel=1e-3)



def test_dark_low_resolution_map_fails_resolution_with_defaults():
    report = check_map(sunny(32), checks=["resolution"])
    assert report["resolution"].severity == "fail"
    assert check_map(sunny(128), checks=["resolution"])["resolution"].severity == "warn"


@pytest.mark.parametrize("rows", [H // 2, 2 * H // 3])
def test_an_upper_hemisphere_is_recognised_with_its_own_remedy(profile, rows):
    """Issue 9: a hemisphere-only map (4:1, or stretched to 3:1) was told to flip vertically."""
    full = sunny(ground_albedo=0.0)
    sky = full[: H // 2]
    idx = np.minimum((np.arange(rows) * (H // 2) / rows).astype(int), H // 2 - 1)
    img = np.ascontiguousarray(sky[idx])
    report = check_map(img, profile=profile)
    assert report["hemisphere"].severity == "fail"
    assert "--pad-hemisphere" in report["hemisphere"].remedy and "--pad-hemisphere" in report["aspect"].remedy
    assert "flip" not in report["orientation"].remedy


def test_an_upper_hemisphere_stretched_to_two_to_one_is_recognised(profile):
    """Its top row is a zenith (constant) while its bottom row, which should be the nadir, is a horizon."""
    full = sunny(ground_albedo=0.0) + np.float32(0.0)
    sky = full[: H // 2]
    stretched = np.ascontiguousarray(np.repeat(sky, 2, axis=0))
    # A horizon that varies with azimuth (a skyline), so the bottom row is not constant.
    stretched[-3:, ::3] *= 0.1
    report = check_map(stretched, profile=profile)
    assert report["hemisphere"].severity == "fail" and "stretched" in report["hemisphere"].message
    assert report["orientation"].severity == "pass"


def test_a_full_sphere_is_not_a_hemisphere(profile):
    c = check_map(sunny(), profile=profile)["hemisphere"]
    assert c.severity == "pass" and c.unit == "ratio"


def test_an_upper_hemisphere_fails_aspect_and_hemisphere_only(profile):
    report = check_map(sunny(ground_albedo=0.0)[: H // 2].copy(), profile=profile)
    assert non_pass(report) == {"aspect": "fail", "hemisphere": "fail"}
