"""Tests of envsample.qa.checks.pixels: nan, inf, negative.

The area of rows a..b of a lat-long map is (cos theta_a - cos theta_b) / 2 of the sphere (exact band area / 4 pi).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.qa.run import check_map


def test_nan_pixels_fail_nan_only(profile):
    img = sunny()
    img[10, 20, 1] = np.nan
    img[90, 200] = np.nan
    report = check_map(img, profile=profile)
    assert non_pass(report) == {"nan": "fail"}
    c = report["nan"]
    assert c.value == 2 and c.details["first_row"] == 10 and c.details["first_column"] == 20
    # The JSON report stays valid JSON (no NaN literals).
    json.dumps(report.to_dict(), allow_nan=False)



def test_inf_pixels_fail_inf_only(profile):
    img = sunny()
    img[5, 5, 0] = np.inf
    report = check_map(img, profile=profile)
    assert non_pass(report) == {"inf": "fail"}



def test_negative_values_warn_then_fail_with_area(profile):
    img = sunny()
    img[60, 10, 2] = -0.01
    assert non_pass(check_map(img, profile=profile)) == {"negative": "warn"}
    img[50:70, :, 2] = -0.01  # about 24 % of the sphere
    report = check_map(img, profile=profile)
    assert report["negative"].severity == "fail"
    # Rows 50..69 cover (cos theta_50 - cos theta_70) / 2 of the sphere (exact band area / 4 pi), in percent.
    assert report["negative"].unit == "%"
    assert report["negative"].value == pytest.approx(50 * (np.cos(np.pi * 50 / 128) - np.cos(np.pi * 70 / 128)))


@pytest.mark.parametrize("name, make, words", [
    ("black", lambda: np.zeros((64, 128, 3), np.float32), "the map is black"),
    ("all 3e38", lambda: np.full((64, 128, 3), 3e38, np.float32), "overflow"),
    ("random up to 1e38", lambda: (np.random.default_rng(5).random((64, 128, 3)) * 1e38).astype(np.float32),
     "overflow"),
    ("all 1e-45", lambda: np.full((64, 128, 3), 1e-45, np.float32), "denormal"),
])
def test_extreme_maps_fail_value_range_with_a_remedy_and_nothing_raises(profile, name, make, words):
    """Issue 12 item 8 (float32 limits, IEEE 754 binary32): a defined outcome for each, no internal error;
    the sampling check, which needs usable light, is skipped with the reason."""
    report = check_map(make(), profile=profile)
    c = report["value-range"]
    assert c.severity == "fail" and words in c.message and c.remedy
    assert not any("could not run" in x.message for x in report.checks)
    assert {"id": "sampling", "reason": "the map has no usable light (see value-range)"} in report.skipped


def test_ordinary_maps_pass_value_range(profile):
    c = check_map(sunny(), profile=profile)["value-range"]
    assert c.severity == "pass" and c.value == pytest.approx(float(sunny().max()))
