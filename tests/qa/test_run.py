"""Tests of envsample.qa.run (check_map): whole reports on clean and broken maps, files, usage errors.

The traditional overcast sky (1 + 2 cos theta) / 3 (CIE S 003/E:1996) and a sun of the mean 0.533 deg
diameter (from memory) are the clean maps; a uniform sky is the furnace test (textbook).
"""

from __future__ import annotations

import hashlib
import json

import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.io.maps import write_map
from envsample.qa.checks import CHECKS
from envsample.qa.run import check_map
from envsample.synth import skies


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
    report = check_map(make(), profile=profile)
    assert non_pass(report) == {}, [c.message for c in report.checks if c.severity != "pass"]
    assert report.verdict == "pass"
    assert report.exit_code() == 0 and report.exit_code(strict=True) == 0
    assert [c.id for c in report.checks] == list(CHECKS)



def test_uniform_sky_only_warns_that_it_is_flat(profile):
    """A constant map (the furnace test) is legal but has no light direction: only dynamic-range warns."""
    report = check_map(skies.make_sky("uniform", width=W), profile=profile)
    assert non_pass(report) == {"dynamic-range": "warn"}
    assert report["dynamic-range"].value == 0.0



def test_unreadable_files_give_a_failing_read_check_and_exit_2(tmp_path):
    missing = check_map(tmp_path / "nope.exr")
    assert not missing.readable and missing.exit_code() == 2 and missing.exit_code(strict=True) == 2
    assert [c.id for c in missing.checks] == ["read"] and missing["read"].severity == "fail"
    assert missing.source.sha256 is None and missing.source.size is None
    corrupt = tmp_path / "broken.exr"
    corrupt.write_bytes(b"not an exr file at all")
    report = check_map(corrupt)
    assert report.exit_code() == 2 and report.verdict == "fail"
    assert report.source.sha256 == hashlib.sha256(b"not an exr file at all").hexdigest()
    assert report.source.size == 22
    assert {s["id"] for s in report.skipped} == set(CHECKS) - {"read"}
    assert str(corrupt) in report["read"].message



def test_exr_file_source_and_pixel_type(tmp_path, profile):
    path = write_map(tmp_path / "sky.exr", sunny(), pixel_type="half")
    report = check_map(path, profile=profile)
    data = path.read_bytes()
    assert report.source.path == str(path)
    assert report.source.sha256 == hashlib.sha256(data).hexdigest()
    assert report.source.size == len(data)
    assert report["pixel-type"].value == "half"
    assert report.verdict == "pass", non_pass(report)



def test_disabled_checks_are_skipped_and_listed():
    report = check_map(sunny(), profile={"sampling": {"enabled": False}, "resolution": {"enabled": False}})
    assert report.get("sampling") is None and report.get("resolution") is None
    assert {s["id"] for s in report.skipped} == {"sampling", "resolution"}



def test_usage_errors_raise():
    with pytest.raises(TypeError, match="path_or_image"):
        check_map(42)
    with pytest.raises(ValueError, match="unknown check id"):
        check_map(sunny(64), checks=["seams"])



def test_a_check_refused_by_a_lower_layer_fails_without_stopping_the_others(monkeypatch):
    from envsample.errors import MapValidationError

    def refuse(ctx):
        raise MapValidationError("map: refused on purpose")

    monkeypatch.setitem(CHECKS, "seam", refuse)
    report = check_map(sunny(64), checks=["seam", "poles"])
    assert report["seam"].severity == "fail" and "refused on purpose" in report["seam"].message
    assert report["poles"].severity == "pass"


def test_check_map_never_raises_on_hostile_values(profile):
    """Seeded fuzz (issue 12 item 8): maps of random sizes mixing NaN, +-Inf, negatives, zeros, denormals
    and values near the float32 maximum always give a report; no check fails to run."""
    rng = np.random.default_rng(12)
    specials = np.array([np.nan, np.inf, -np.inf, -1.0, 0.0, -0.0, 1e-45, 1e-40, 3e38, 1e38, 1.0, 65504.0],
                        np.float32)
    for _ in range(40):
        h = int(rng.integers(1, 40))
        w = int(rng.choice([2 * h, int(rng.integers(1, 90))]))
        img = rng.lognormal(0.0, 3.0, (h, w, 3)).astype(np.float32)
        mask = rng.random(img.shape) < rng.choice([0.0, 0.01, 0.3, 1.0])
        img[mask] = rng.choice(specials, size=int(mask.sum()))
        report = check_map(img, profile=profile)
        assert report.readable and report.checks[0].id == "read"
        assert not [c.message for c in report.checks if c.message.startswith("could not run")]
        json.dumps(report.to_dict(), allow_nan=False)
