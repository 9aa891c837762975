"""Tests of envsample.qa.checks.light: light-level, sun, dynamic-range.

- The traditional overcast sky L = Lz (1 + 2 cos theta) / 3 (Moon & Spencer 1942, CIE S 003/E:1996):
  horizontal irradiance 7 pi / 9 Lz (closed form; cross-checked with scipy.integrate.quad).
- A uniform sky L: irradiance pi L on any surface (textbook).
- The sun's mean angular diameter 0.533 deg (from memory; envsample.core.constants).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.core.constants import SUN_SOLID_ANGLE_SR
from envsample.core.sphere import row_solid_angles
from envsample.qa.run import check_map
from envsample.synth import skies


def test_light_level_matches_the_overcast_closed_form():
    """Traditional overcast sky: E = 7 pi / 9 Lz (closed form; also integrated with scipy.integrate.quad).

    The map holds exact cell averages of L (envsample.skies) and is read as constant per
    pixel, which differs from the continuous sky by an exact term: L is linear in
    mu = cos(theta), so each row band [mu1, mu0] of width d loses
    2 pi (2 Lz / 3) (int mu^2 - (int mu)^2 / d) = 2 pi (2 Lz / 3) d^3 / 12.  The check's
    value must equal 7 pi / 9 Lz minus that sum up to float32 storage.
    """
    lz = 1.0e4  # cd/m2 at the zenith: a bright overcast day (invented value)
    closed = 7.0 * math.pi / 9.0 * lz
    quad = 2 * math.pi * integrate.quad(lambda mu: lz * (1 + 2 * mu) / 3 * mu, 0.0, 1.0)[0]
    assert quad == pytest.approx(closed, rel=1e-12)
    mu = np.cos(np.pi * np.arange(H + 1) / H)
    d = -np.diff(mu)[: H // 2]
    piecewise = closed - 2 * math.pi * (2 * lz / 3) * float(np.sum(d**3)) / 12
    img = skies.cie_overcast_sky(W, zenith_luminance=lz)
    rel = check_map(img, checks=["light-level"])["light-level"]
    assert rel.value == pytest.approx(piecewise, rel=1e-6)
    assert rel.value == pytest.approx(closed, rel=1e-4)
    assert "lux" not in rel.message and "not certified lighting calculations" in rel.message
    lux = check_map(img, checks=["light-level"], profile={"light-level": {"calibrated": True}})["light-level"]
    assert lux.severity == "pass" and lux.details["unit"] == "lx"
    assert "lux" in lux.message and "not certified lighting calculations" in lux.message



def test_light_level_of_a_uniform_sky_is_pi_l():
    """Uniform radiance L gives pi L on any surface (textbook)."""
    img = skies.uniform_sky(64, radiance=2.5)
    assert check_map(img, checks=["light-level"])["light-level"].value == pytest.approx(math.pi * 2.5, rel=1e-6)



def test_calibrated_light_level_outside_daylight_range_warns():
    img = skies.cie_overcast_sky(64, zenith_luminance=1e-3)
    c = check_map(img, checks=["light-level"], profile={"light-level": {"calibrated": True}})["light-level"]
    assert c.severity == "warn"



def test_sun_direction_power_share_and_size():
    """Sun at elevation 35 deg, azimuth 40 deg: the emitter is found there, and its share of the
    light is the disk's power E_sun (skies: integral over the disk = sun_illuminance) over the map's total."""
    img = sunny(512, sun_illuminance=4.0)
    report = check_map(img, checks=["sun"])
    sun = report["sun"].details["emitters"][0]
    pixel = 360.0 / 512
    assert sun["elevation_deg"] == pytest.approx(SUN_EL, abs=pixel)
    assert sun["azimuth_deg"] == pytest.approx(SUN_AZ, abs=pixel)
    y = img.astype(np.float64) @ np.array([0.212639, 0.715169, 0.072192])
    total = float((y * row_solid_angles(256, 512)[:, None]).sum())
    assert sun["share"] == pytest.approx(4.0 / total, rel=0.03)
    assert sun["solid_angle_sr"] >= SUN_SOLID_ANGLE_SR



def test_sun_on_the_seam_is_one_emitter():
    """A sun at azimuth 180 deg straddles the left and right edges: it is one emitter, not two."""
    img = sunny(256, azimuth_deg=180.0)
    report = check_map(img, checks=["sun", "seam"])
    emitters = report["sun"].details["emitters"]
    assert abs(abs(emitters[0]["azimuth_deg"]) - 180.0) < 1.5
    assert len([e for e in emitters if e["share"] > 0.05]) == 1
    assert report["seam"].severity == "pass"



def test_flat_map_dynamic_range_in_stops():
    """Two-level map: p99.9 / p1 = 8 exactly gives 3 stops."""
    img = np.ones((64, 128, 3), np.float32)
    img[:32] = 8.0
    c = check_map(img, checks=["dynamic-range"])["dynamic-range"]
    assert c.severity == "pass" and c.value == pytest.approx(3.0)


def test_dynamic_range_of_a_sky_over_a_black_ground_uses_the_lit_pixels():
    """Issue 9: `dynamic-range` was skipped as "p99.9/p1 undefined" on the tool's own `sky sun`
    (half the sphere black).  Over the lit upper hemisphere cos(theta) is uniform in solid angle, so the
    q-quantile of the overcast sky (1 + 2 cos theta) / 3 is (1 + 2 q) / 3 (closed form): p99.9/p1 is
    log2(2.998 / 1.02) = 1.556 stops (to the histogram's 0.4 % and the pixel centres)."""
    c = check_map(skies.make_sky("overcast", width=256), checks=["dynamic-range"])["dynamic-range"]
    assert c.severity == "pass" and c.value == pytest.approx(math.log2(2.998 / 1.02), abs=0.01)
    assert c.unit == "stops" and "black and left out" in c.message
    c = check_map(skies.make_sky("sun", width=256), checks=["dynamic-range"])["dynamic-range"]
    assert c.severity == "pass" and c.value is not None


@pytest.mark.parametrize("stops, severity", [(-10.0, "warn"), (-3.0, "pass"), (0.0, "pass"), (7.0, "warn")])
def test_exposure_plausibility(stops, severity):
    """Issue 9: maps 10 stops too dark and 7 too bright passed.  A uniform sky L gives E = pi L
    (textbook), so E / pi = L and the check reports log2(L) stops."""
    img = np.full((64, 128, 3), 2.0 ** stops, np.float32)
    c = check_map(img, checks=["exposure"])["exposure"]
    assert c.severity == severity and c.value == pytest.approx(stops, abs=1e-6) and c.unit == "stops"
    if severity == "warn":
        assert "envsample fix --exposure" in c.remedy


def test_exposure_is_skipped_for_calibrated_maps():
    report = check_map(np.full((64, 128, 3), 2.0 ** 14, np.float32), checks=["exposure"],
                       profile={"light-level": {"calibrated": True}})
    assert report.get("exposure") is None
    assert {"id": "exposure", "reason": "the map is calibrated: light-level checks its lux"} in report.skipped


def test_sun_check_reports_the_shared_finders_measures():
    """QA's sun check and envsample split see one sun: the details carry find_sun's result."""
    from envsample.lights.finder import find_sun

    img = skies.sun_sky(1024, azimuth_deg=30.0, elevation_deg=25.0)
    details = check_map(img, checks=["sun"])["sun"].details
    found = find_sun(img)
    assert details["sun"]["azimuth_deg"] == pytest.approx(found.azimuth_deg)
    assert details["sun"]["solid_angle_sr"] == pytest.approx(found.solid_angle_sr)
    assert details["sun"]["clipped"] is False
