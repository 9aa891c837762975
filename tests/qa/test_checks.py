"""Tests of envsample.qa: every check on synthetic maps with one known defect each.

Sources of the expected values (named again beside each test):
- The traditional overcast sky L = Lz (1 + 2 cos theta) / 3 (Moon & Spencer 1942,
  CIE standard overcast sky, CIE S 003/E:1996): horizontal irradiance 7 pi / 9 Lz
  (closed form; cross-checked with scipy.integrate.quad).
- A uniform sky L: irradiance pi L on any surface (textbook).
- Moments of uniform-sphere sampling of the clamped cosine, E[max(0, cos)^k] = 1/(2(k+1))
  (textbook), for the relative RMSE of table-only sampling of a uniform map.
- The balance heuristic (Veach 1997, eq. 9.4 and section 9.2): in multi-sample MIS
  with half the samples from the table, a sample term is at most twice the table-only
  term L cos / p_table <= 2 integral(L).
- IEEE 754 binary16: largest finite value 65504.  IEC 61966-2-1: the sRGB encoding.
- The sun's mean angular diameter 0.533 deg (from memory; envsample.constants).

Maps are 256x128 or smaller except where a resolved sun disk is needed.  The test
profile lowers the resolution floor to these sizes; everything else is the default.
"""

from __future__ import annotations

import hashlib
import json
import math

import numpy as np
import pytest
from scipy import integrate

from envsample.core.constants import HALF_FLOAT_MAX, PRIMARIES, SUN_ANGULAR_DIAMETER_RAD, SUN_SOLID_ANGLE_SR
from envsample.core.sphere import pixel_center_directions, row_solid_angles
from envsample.io.maps import MapImage, write_map
from envsample.qa import checks as qa
from envsample.synth import skies

W, H = 256, 128
SUN_EL, SUN_AZ = 35.0, 40.0

TEST_PROFILE = """\
[profile]
name = "tests"

[resolution]
# The maps here are 64..256 px wide; the default floors are for production maps.
fail_below_width = 16
warn_below_width = 64
"""


@pytest.fixture(scope="module")
def profile_path(tmp_path_factory):
    p = tmp_path_factory.mktemp("profiles") / "tests.toml"
    p.write_text(TEST_PROFILE)
    return p


@pytest.fixture(scope="module")
def profile(profile_path):
    return qa.load_profile(profile_path)


def sunny(width=W, height=None, **kw):
    """Overcast sky with a real-sized sun and a Lambertian ground of albedo 0.2 (envsample.skies)."""
    opts = dict(elevation_deg=SUN_EL, azimuth_deg=SUN_AZ, sky="overcast", ground_albedo=0.2)
    opts.update(kw)
    return skies.sun_sky(width, height, **opts)


def overcast_with_point_sun(width=W, height=H) -> np.ndarray:
    """Built here, independently of envsample.skies: the traditional overcast sky sampled at
    pixel centres, a uniform ground, and a sun smaller than a pixel added to the one pixel
    that holds its direction with the disk's power (E_sun = 3 on a surface facing it)."""
    d = pixel_center_directions(height, width)
    cos_t = d[..., 1]
    sky = np.where(cos_t > 0, (1.0 + 2.0 * cos_t) / 3.0, 0.15)
    img = np.repeat(sky[..., None], 3, axis=2)
    el, az = math.radians(50.0), math.radians(-120.0)
    theta = math.pi / 2 - el
    row = int(theta / math.pi * height)
    col = int((az / (2 * math.pi) + 0.5) * width)
    img[row, col] += 3.0 / row_solid_angles(height, width)[row]
    return img.astype(np.float32)


def non_pass(report):
    return {c.id: c.severity for c in report.checks if c.severity != "pass"}


# ----------------------------------------------------------------------------- clean maps


@pytest.mark.parametrize(
    "name, make",
    [
        ("overcast", lambda: skies.make_sky("overcast", width=W)),
        ("sun over overcast", lambda: sunny()),
        ("sun over clear sky", lambda: skies.make_sky("sun", width=W, elevation_deg=20.0, ground_albedo=0.3)),
        ("studio", lambda: skies.make_sky("studio", width=W)),
        ("rooftop demo", lambda: skies.make_sky("rooftop", width=W)),
        ("product studio demo", lambda: skies.make_sky("product-studio", width=W)),
        ("built in the test", lambda: overcast_with_point_sun()),
        ("small sun sky", lambda: sunny(64)),
    ],
)
def test_clean_analytic_skies_pass_every_check(name, make, profile):
    report = qa.check_map(make(), profile=profile)
    assert non_pass(report) == {}, [c.message for c in report.checks if c.severity != "pass"]
    assert report.verdict == "pass"
    assert report.exit_code() == 0 and report.exit_code(strict=True) == 0
    assert [c.id for c in report.checks] == list(qa.CHECKS)


def test_uniform_sky_only_warns_that_it_is_flat(profile):
    """A constant map (the furnace test) is legal but has no light direction: only dynamic-range warns."""
    report = qa.check_map(skies.make_sky("uniform", width=W), profile=profile)
    assert non_pass(report) == {"dynamic-range": "warn"}
    assert report["dynamic-range"].value == 0.0


# ----------------------------------------------------------------------------- one defect each


def test_seam_from_an_exposure_ramp_that_does_not_wrap(profile):
    """Stitched halves of different exposure, blended inside the image: the only step is at the seam."""
    u = (np.arange(W) + 0.5) / W
    img = sunny() * (1.0 + 0.3 * u)[None, :, None].astype(np.float32)  # a 23 % step at the seam
    report = qa.check_map(img, profile=profile)
    assert non_pass(report) == {"seam": "fail"}
    assert report["seam"].value > 0.9  # nearly every lit row steps
    assert report["seam"].remedy


def test_seam_not_raised_by_rolling_the_map(profile):
    """np.roll keeps the wrap-around continuous: moving the seam elsewhere must not create one."""
    img = np.roll(sunny(), W // 3, axis=1)
    assert qa.check_map(img, profile=profile)["seam"].severity == "pass"


def clipped_sun(width=W):
    """A sun with a wide glare halo whose top was clipped at 500: a plateau with a soft shoulder."""
    img = sunny(width).astype(np.float64)
    d = pixel_center_directions(width // 2, width)
    s = skies.sun_direction(azimuth_deg=SUN_AZ, elevation_deg=SUN_EL)
    angle = np.degrees(np.arccos(np.clip(d @ s, -1, 1)))
    img += (5e4 * np.exp(-(angle ** 2) / (2 * 4.0 ** 2)))[..., None]
    return np.minimum(img, 500.0).astype(np.float32)


def test_clipped_sun_fails_clipping_only(profile):
    report = qa.check_map(clipped_sun(), profile=profile)
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
    report = qa.check_map(img, profile=profile)
    assert report["clipping"].severity == "fail"
    assert report["clipping"].value == 1
    assert "65504" in report["clipping"].message


def test_sun_smaller_than_a_pixel_is_not_clipping(profile):
    report = qa.check_map(sunny(), profile=profile)
    assert report["clipping"].severity == "pass"
    assert not report["sun"].details["emitters"][0]["resolved"]


def test_resolved_uniform_sun_disk_is_not_clipping():
    """At 2048 px a 0.533 deg disk of constant radiance covers several whole pixels with equal values;
    a plateau no larger than the real sun is not clipping."""
    report = qa.check_map(sunny(2048), checks=["clipping", "sun"])
    assert report["clipping"].severity == "pass"
    sun = report["sun"].details["emitters"][0]
    assert sun["resolved"]
    pixel = 360.0 / 2048
    # Equivalent diameter: the disk plus the partly covered pixels around it.
    assert math.degrees(SUN_ANGULAR_DIAMETER_RAD) <= sun["diameter_deg"] <= math.degrees(SUN_ANGULAR_DIAMETER_RAD) + 3 * pixel
    assert report["sun"].severity == "pass"


def test_nan_pixels_fail_nan_only(profile):
    img = sunny()
    img[10, 20, 1] = np.nan
    img[90, 200] = np.nan
    report = qa.check_map(img, profile=profile)
    assert non_pass(report) == {"nan": "fail"}
    c = report["nan"]
    assert c.value == 2 and c.details["first_row"] == 10 and c.details["first_column"] == 20
    # The JSON report stays valid JSON (no NaN literals).
    json.dumps(report.to_dict(), allow_nan=False)


def test_inf_pixels_fail_inf_only(profile):
    img = sunny()
    img[5, 5, 0] = np.inf
    report = qa.check_map(img, profile=profile)
    assert non_pass(report) == {"inf": "fail"}


def test_negative_values_warn_then_fail_with_area(profile):
    img = sunny()
    img[60, 10, 2] = -0.01
    assert non_pass(qa.check_map(img, profile=profile)) == {"negative": "warn"}
    img[50:70, :, 2] = -0.01  # about 24 % of the sphere
    report = qa.check_map(img, profile=profile)
    assert report["negative"].severity == "fail"
    # Rows 50..69 cover (cos theta_50 - cos theta_70) / 2 of the sphere (exact band area / 4 pi).
    assert report["negative"].value == pytest.approx((np.cos(np.pi * 50 / 128) - np.cos(np.pi * 70 / 128)) / 2)


def srgb_encode(x):
    """IEC 61966-2-1 encoding of linear values in [0, 1]."""
    return np.where(x <= 0.0031308, 12.92 * x, 1.055 * np.power(x, 1 / 2.4) - 0.055)


def test_8bit_png_fails_hdr_only(tmp_path, profile):
    imageio = pytest.importorskip("imageio.v3")
    sky = skies.make_sky("overcast", width=W, ground_albedo=0.2)
    code = np.round(255 * srgb_encode(0.9 * sky / sky.max())).astype(np.uint8)
    path = tmp_path / "sky.png"
    imageio.imwrite(path, code)
    report = qa.check_map(path, profile=profile)
    assert report.readable
    assert non_pass(report) == {"hdr": "fail", "pixel-type": "warn"}
    assert report["pixel-type"].value == "uint8"
    assert report.exit_code() == 1


def test_upside_down_map_warns_orientation_only(profile):
    report = qa.check_map(np.flipud(sunny()).copy(), profile=profile)
    assert non_pass(report) == {"orientation": "warn"}
    assert report["orientation"].value < 0.5
    assert report.exit_code() == 0 and report.exit_code(strict=True) == 1


def test_square_map_fails_aspect_only(profile):
    report = qa.check_map(sunny(128, 128), profile=profile)
    assert non_pass(report) == {"aspect": "fail"}
    assert report["aspect"].value == 1.0


def test_non_constant_pole_row_fails_poles_only(profile):
    img = sunny()
    phi = (np.arange(W) + 0.5) / W * 2 * np.pi - np.pi
    img[0] *= (1.0 + 0.9 * np.sin(phi))[:, None].astype(np.float32)
    report = qa.check_map(img, profile=profile)
    assert non_pass(report) == {"poles": "fail"}
    # std/mean of 1 + 0.9 sin(phi) over a full period is 0.9 / sqrt(2).
    assert report["poles"].details["top_cv"] == pytest.approx(0.9 / math.sqrt(2), rel=1e-3)


def test_alpha_below_one_warns_channels(profile):
    rgb = sunny()
    alpha = np.ones(rgb.shape[:2], np.float32)
    alpha[:4] = 0.5
    report = qa.check_map(MapImage.from_array(rgb, alpha=alpha), profile=profile)
    assert non_pass(report) == {"channels": "warn"}


def test_chromaticities_mismatch_warns_and_names_the_match(profile):
    p = PRIMARIES["acescg"]
    chroma = {"red": p["r"], "green": p["g"], "blue": p["b"], "white": p["w"]}
    report = qa.check_map(MapImage.from_array(sunny(), chromaticities=chroma), profile=profile)
    assert non_pass(report) == {"chromaticities": "warn"}
    assert "acescg" in report["chromaticities"].remedy
    # The same file passes when the profile assumes its primaries.
    matched = qa.check_map(MapImage.from_array(sunny(), chromaticities=chroma),
                           profile={"profile": {"primaries": "acescg"}}, checks=["chromaticities"])
    assert matched["chromaticities"].severity == "pass"
    bt709 = PRIMARIES["bt709"]
    same = {"red": bt709["r"], "green": bt709["g"], "blue": bt709["b"], "white": bt709["w"]}
    assert qa.check_map(MapImage.from_array(sunny(), chromaticities=same),
                        checks=["chromaticities"])["chromaticities"].severity == "pass"


def test_dark_low_resolution_map_fails_resolution_with_defaults():
    report = qa.check_map(sunny(32), checks=["resolution"])
    assert report["resolution"].severity == "fail"
    assert qa.check_map(sunny(128), checks=["resolution"])["resolution"].severity == "warn"


# ----------------------------------------------------------------------------- measured values


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
    rel = qa.check_map(img, checks=["light-level"])["light-level"]
    assert rel.value == pytest.approx(piecewise, rel=1e-6)
    assert rel.value == pytest.approx(closed, rel=1e-4)
    assert "lux" not in rel.message and "not certified lighting calculations" in rel.message
    lux = qa.check_map(img, checks=["light-level"], profile={"light-level": {"calibrated": True}})["light-level"]
    assert lux.severity == "pass" and lux.details["unit"] == "lx"
    assert "lux" in lux.message and "not certified lighting calculations" in lux.message


def test_light_level_of_a_uniform_sky_is_pi_l():
    """Uniform radiance L gives pi L on any surface (textbook)."""
    img = skies.uniform_sky(64, radiance=2.5)
    assert qa.check_map(img, checks=["light-level"])["light-level"].value == pytest.approx(math.pi * 2.5, rel=1e-6)


def test_calibrated_light_level_outside_daylight_range_warns():
    img = skies.cie_overcast_sky(64, zenith_luminance=1e-3)
    c = qa.check_map(img, checks=["light-level"], profile={"light-level": {"calibrated": True}})["light-level"]
    assert c.severity == "warn"


def test_sun_direction_power_share_and_size():
    """Sun at elevation 35 deg, azimuth 40 deg: the emitter is found there, and its share of the
    light is the disk's power E_sun (skies: integral over the disk = sun_illuminance) over the map's total."""
    img = sunny(512, sun_illuminance=4.0)
    report = qa.check_map(img, checks=["sun"])
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
    report = qa.check_map(img, checks=["sun", "seam"])
    emitters = report["sun"].details["emitters"]
    assert abs(abs(emitters[0]["azimuth_deg"]) - 180.0) < 1.5
    assert len([e for e in emitters if e["share"] > 0.05]) == 1
    assert report["seam"].severity == "pass"


def test_label_wrapped_joins_across_the_seam_and_around_the_poles():
    mask = np.zeros((8, 16), bool)
    mask[3, 0] = mask[4, 15] = True  # diagonal neighbours across the seam
    mask[0, 2] = mask[0, 9] = True  # both touch the zenith
    mask[6, 7] = True  # alone
    labels, n = qa.label_wrapped(mask)
    assert n == 3
    assert labels[3, 0] == labels[4, 15] != 0
    assert labels[0, 2] == labels[0, 9] != 0
    assert len({labels[3, 0], labels[0, 2], labels[6, 7]}) == 3


def test_flat_map_dynamic_range_in_stops():
    """Two-level map: p99.9 / p1 = 8 exactly gives 3 stops."""
    img = np.ones((64, 128, 3), np.float32)
    img[:32] = 8.0
    c = qa.check_map(img, checks=["dynamic-range"])["dynamic-range"]
    assert c.severity == "pass" and c.value == pytest.approx(3.0)


# ----------------------------------------------------------------------------- sampling


def test_sampling_table_only_rmse_on_a_uniform_map_matches_theory():
    """On a uniform map the table samples the sphere uniformly, so one sample of E(n) is
    X = 4 pi L max(0, cos); with E[max(0, cos)^k] = 1/(2(k+1)) (textbook), E[X] = pi L and
    Var X = (5/3) pi^2 L^2, so the relative RMSE at n spp is sqrt(5/3)/sqrt(n).  The
    measured value pools normals x repeats independent estimates; its tolerance is 4 sigma
    of the RMSE estimate from the exact fourth moment.  Cosine sampling is exact there."""
    report = qa.check_map(skies.uniform_sky(64), checks=["sampling"])
    d = report["sampling"].details
    n, count = d["spp"], d["normals"] * d["repeats"]
    m = [1.0 / (2 * (k + 1)) * (4 * math.pi) ** k for k in range(5)]  # raw moments of X / L
    mu = m[1]
    var = m[2] - mu**2
    mu4 = m[4] - 4 * mu * m[3] + 6 * mu**2 * m[2] - 3 * mu**4
    var_mean = var / n
    mu4_mean = (mu4 + 3 * (n - 1) * var**2) / n**3
    rmse = math.sqrt(var_mean)
    se_rmse = math.sqrt((mu4_mean - var_mean**2) / count) / (2 * rmse)
    measured = d["estimators"]["table"]["relative_rmse"]
    assert measured == pytest.approx(rmse / mu, abs=4 * se_rmse / mu)
    assert d["estimators"]["cosine"]["relative_rmse"] < 1e-5


def test_sampling_mis_terms_stay_under_the_balance_heuristic_bound():
    """Veach 1997 (eq. 9.4, balance heuristic), half the samples from the table: every term is
    at most 2 L cos / p_table <= 2 integral(L dw), so peak sample share <= 2 integral / (spp mean E).
    At 64 px the sun pixel is large enough for cosine samples to hit it (about 10 hits
    expected), and those terms break the bound by far."""
    img = sunny(64)
    report = qa.check_map(img, checks=["sampling"])
    d = report["sampling"].details
    y = img.astype(np.float64) @ np.array([0.212639, 0.715169, 0.072192])
    total = float((y * row_solid_angles(32, 64)[:, None]).sum())
    bound = 2.0 * total / (d["spp"] * d["mean_reference"])
    assert d["estimators"]["mis-balance"]["peak_sample_share"] <= bound * (1 + 1e-4)
    assert d["estimators"]["cosine"]["peak_sample_share"] > bound  # cosine sampling hits the sun rarely and hard


def test_sampling_fails_when_the_graded_estimator_is_cosine_only():
    """A renderer without environment importance sampling: a sun at 16 spp is hopeless.

    At 64 px the sun pixel is hit often enough (about 10 times in the check's samples)
    for the measured error to be stable; a smaller sun is hit even less and does worse."""
    report = qa.check_map(sunny(64), checks=["sampling"], profile={"sampling": {"estimator": "cosine"}})
    c = report["sampling"]
    assert c.severity == "fail" and c.value > 2.0
    assert "MIS" in c.remedy and "mis-balance" in c.remedy
    assert qa.check_map(sunny(), checks=["sampling"])["sampling"].severity == "pass"


def test_sampling_advises_an_analytic_sun_when_it_holds_most_of_the_light():
    img = skies.sun_sky(W, sky="none", elevation_deg=40.0)
    advice = qa.check_map(img, checks=["sampling"])["sampling"].details["advice"]
    assert any("analytic light" in a for a in advice)


def test_sampling_is_reproducible():
    a = qa.check_map(sunny(), checks=["sampling"])["sampling"].details
    b = qa.check_map(sunny(), checks=["sampling"])["sampling"].details
    assert a == b


# ----------------------------------------------------------------------------- files, reports, exit codes


def test_unreadable_files_give_a_failing_read_check_and_exit_2(tmp_path):
    missing = qa.check_map(tmp_path / "nope.exr")
    assert not missing.readable and missing.exit_code() == 2 and missing.exit_code(strict=True) == 2
    assert [c.id for c in missing.checks] == ["read"] and missing["read"].severity == "fail"
    assert missing.source.sha256 is None and missing.source.size is None
    corrupt = tmp_path / "broken.exr"
    corrupt.write_bytes(b"not an exr file at all")
    report = qa.check_map(corrupt)
    assert report.exit_code() == 2 and report.verdict == "fail"
    assert report.source.sha256 == hashlib.sha256(b"not an exr file at all").hexdigest()
    assert report.source.size == 22
    assert {s["id"] for s in report.skipped} == set(qa.CHECKS) - {"read"}
    assert str(corrupt) in report["read"].message


def test_exr_file_source_and_pixel_type(tmp_path, profile):
    path = write_map(tmp_path / "sky.exr", sunny(), pixel_type="half")
    report = qa.check_map(path, profile=profile)
    data = path.read_bytes()
    assert report.source.path == str(path)
    assert report.source.sha256 == hashlib.sha256(data).hexdigest()
    assert report.source.size == len(data)
    assert report["pixel-type"].value == "half"
    assert report.verdict == "pass", non_pass(report)


def test_exit_codes():
    def report(*severities):
        return qa.Report(source=qa.Source(), checks=[qa.CheckResult(f"c{i}", s) for i, s in enumerate(severities)])

    assert report("pass", "pass").exit_code() == 0
    assert report("pass", "warn").exit_code() == 0
    assert report("pass", "warn").exit_code(strict=True) == 1
    assert report("warn", "fail").exit_code() == 1
    assert report("pass", "fail").verdict == "fail"
    assert report().verdict == "pass"
    with pytest.raises(ValueError, match="severity"):
        qa.CheckResult("x", "error")


REPORT_KEYS = {"schema", "schema_version", "source", "readable", "verdict", "counts", "profile", "image", "checks",
               "skipped", "caution"}
CHECK_KEYS = {"id", "severity", "value", "threshold", "message", "remedy", "details"}


def test_json_report_keys_are_pinned(profile):
    """The JSON schema is a public interface: changing these keys needs a new schema version."""
    d = qa.check_map(sunny(), profile=profile).to_dict()
    assert set(d) == REPORT_KEYS
    assert (d["schema"], d["schema_version"]) == ("envsample.qa-report", 2)
    assert set(d["source"]) == {"path", "sha256", "size"}
    assert set(d["counts"]) == {"pass", "warn", "fail"}
    assert set(d["profile"]) == {"name", "path"} and d["profile"]["name"] == "tests"
    for c in d["checks"]:
        assert set(c) == CHECK_KEYS
        assert "\n" not in c["message"] and "\n" not in c["remedy"]
    assert "not certified lighting calculations" in d["caution"]
    many = json.loads(qa.report_to_json([qa.check_map(sunny(), profile=profile), qa.check_map("missing.exr")]))
    assert set(many) == {"schema", "schema_version", "summary", "reports"}
    assert (many["schema"], many["schema_version"]) == ("envsample.qa-reports", 2)
    assert many["summary"] == {"files": 2, "unreadable": 1, "pass": 1, "warn": 0, "fail": 0}
    assert [set(r) for r in many["reports"]] == [REPORT_KEYS, REPORT_KEYS]


def test_format_report_is_a_compact_table(profile):
    report = qa.check_map(np.flipud(sunny()).copy(), profile=profile)
    plain = qa.format_report(report, color=False)
    assert "\x1b[" not in plain
    lines = plain.splitlines()
    assert lines[0].startswith("<in memory>") and "WARN" in lines[0]
    for cid in qa.CHECKS:
        assert any(line.split()[1:2] == [cid] for line in lines if line.startswith("  ")), cid
    assert any("->" in line and "flip" in line for line in lines)  # the remedy of the warning
    coloured = qa.format_report([report, qa.check_map("missing.exr")], color=True)
    assert "\x1b[33m" in coloured and "\x1b[0m" in coloured and "missing.exr" in coloured


# ----------------------------------------------------------------------------- profiles


def test_default_profile_has_one_section_per_check():
    """Adding a check is one function, one CHECKS entry and one profile section: keep them in step."""
    defaults = qa.load_profile(None)
    assert set(defaults.sections) == set(qa.CHECKS) | {"profile"}
    for cid in qa.CHECKS:
        assert defaults.section(cid)["enabled"] is True
    assert defaults.name == "default" and defaults.primaries == "bt709"


def test_profile_file_overrides_only_what_it_lists(profile):
    assert profile.name == "tests"
    assert profile.section("resolution")["warn_below_width"] == 64
    assert profile.section("seam") == qa.load_profile(None).section("seam")


@pytest.mark.parametrize(
    "text, match",
    [
        ("[seam]\nstep_size = 3\n", r"unknown key seam\.step_size; valid keys in \[seam\]"),
        ("[seams]\nenabled = false\n", r"unknown section \[seams\]"),
        ("[seam]\nwarn_share = 'high'\n", r"\[seam\] warn_share must be a number"),
        ("[sampling]\nspp = 0\n", r"\[sampling\] spp must be >= 1"),
        ("[profile]\nprimaries = 'p3'\n", r"unknown primaries 'p3'"),
        ("[sampling]\nestimator = 'magic'\n", r"unknown estimator 'magic'"),
        ("[seam]\nwarn_share = 0.9\nfail_share = 0.5\n", r"warn_share must not exceed fail_share"),
        ("[seam\n", r"not valid TOML"),
    ],
)
def test_bad_profiles_raise_one_line_errors_naming_the_problem(tmp_path, text, match):
    p = tmp_path / "bad.toml"
    p.write_text(text)
    with pytest.raises(qa.ProfileError, match=match) as info:
        qa.load_profile(p)
    assert "\n" not in str(info.value) and str(p) in str(info.value)


def test_missing_profile_file_is_an_error(tmp_path):
    with pytest.raises(qa.ProfileError, match="file not found"):
        qa.load_profile(tmp_path / "none.toml")


def test_disabled_checks_are_skipped_and_listed():
    report = qa.check_map(sunny(), profile={"sampling": {"enabled": False}, "resolution": {"enabled": False}})
    assert report.get("sampling") is None and report.get("resolution") is None
    assert {s["id"] for s in report.skipped} == {"sampling", "resolution"}


def test_usage_errors_raise():
    with pytest.raises(TypeError, match="path_or_image"):
        qa.check_map(42)
    with pytest.raises(ValueError, match="unknown check id"):
        qa.check_map(sunny(64), checks=["seams"])


def test_row_weighted_quantiles_match_an_argsort_reference(rng):
    """The packed-key sort must give the same weighted quantiles as a plain argsort of
    (value, weight) pairs (numpy reference), including ties and zeros."""
    values = rng.lognormal(size=(37, 74)).astype(np.float32)
    values[rng.random(values.shape) < 0.2] = 0.0
    values[3, :10] = -0.0
    values[5] = values[6]  # ties across rows
    w = row_solid_angles(37, 74)
    sample = qa._RowWeightedSample(values, w)
    flat = np.maximum(values, 0).ravel().astype(np.float64)
    weights = np.broadcast_to(w[:, None], values.shape).ravel()
    order = np.argsort(flat, kind="stable")
    cdf = np.cumsum(weights[order])
    for q in (0.0, 0.01, 0.25, 0.5, 0.9, 0.999, 1.0):
        k = min(int(np.searchsorted(cdf, q * cdf[-1], side="left")), flat.size - 1)
        assert sample.quantile(q) == flat[order[k]]


def test_a_check_refused_by_a_lower_layer_fails_without_stopping_the_others(monkeypatch):
    from envsample.errors import MapValidationError

    def refuse(ctx):
        raise MapValidationError("map: refused on purpose")

    monkeypatch.setitem(qa.CHECKS, "seam", refuse)
    report = qa.check_map(sunny(64), checks=["seam", "poles"])
    assert report["seam"].severity == "fail" and "refused on purpose" in report["seam"].message
    assert report["poles"].severity == "pass"


def test_sharp_edged_area_lights_are_plateaus_but_not_clipping():
    """Uniform rectangular lights (envsample.skies studio) share their exact radiance over many
    pixels; with no shoulder this is their real radiance, reported as a note."""
    c = qa.check_map(skies.make_sky("studio", width=W), checks=["clipping"])["clipping"]
    p = c.details["plateau"]
    assert c.severity == "pass" and p["pixels"] >= 100 and p["shoulder"] < 0.01
    assert "sharp-edged" in c.message
