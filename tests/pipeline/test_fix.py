"""Tests of envsample.pipeline.fix: the source is never touched, the output is written with its steps in
the EXR header and a JSON log beside it, the checks are re-run, unfixable maps are refused."""

from __future__ import annotations

import json

import numpy as np
import pytest
from support.qa_maps import TEST_PROFILE, sunny

from envsample.core.files import OutputIsInputError
from envsample.io.maps import read_map, write_map
from envsample.pipeline.fix import HEADER_ATTRIBUTE, FixRefusedError, fix_map, log_path
from envsample.synth.skies import make_sky


@pytest.fixture()
def profile_file(tmp_path):
    p = tmp_path / "tests.toml"
    p.write_text(TEST_PROFILE)
    return p


def _header(path):
    import OpenEXR

    with OpenEXR.File(str(path), header_only=True) as f:
        return {k: f.header()[k] for k in f.header()}


def test_auto_fix_repairs_writes_logs_and_rechecks(tmp_path, profile_file):
    img = sunny()
    img[30:33, 50:60] = np.nan
    img[90, 7, 0] = -1.0
    src = tmp_path / "m.exr"
    write_map(src, img, pixel_type="float")
    before = src.read_bytes()
    out = tmp_path / "m.fixed.exr"
    result = fix_map(src, out, auto=True, profile=profile_file)
    assert src.read_bytes() == before  # never touches the source
    assert [s["remedy"] for s in result.steps] == ["fill-nonfinite", "clamp-negative"]
    assert result.before.verdict == "fail" and result.after.verdict == "pass"
    header = json.loads(_header(out)[HEADER_ATTRIBUTE])
    assert [s["remedy"] for s in header["steps"]] == ["fill-nonfinite", "clamp-negative"]
    assert header["source_sha256"] == result.before.source.sha256
    log = json.loads(log_path(out).read_text())
    assert log["schema"] == "envsample.fix-log" and log["after"]["verdict"] == "pass"
    assert log["before"]["checks"]["nan"] == "fail" and log["after"]["checks"]["nan"] == "pass"
    fixed = read_map(out).rgb
    bad = ~np.isfinite(img).all(axis=2) | (img < 0).any(axis=2)
    assert np.array_equal(fixed[~bad], img[~bad])


def test_geometry_remedies_are_proposed_not_applied_by_auto(tmp_path, profile_file):
    src = tmp_path / "flipped.exr"
    write_map(src, sunny()[::-1].copy(), pixel_type="float")
    with pytest.raises(ValueError, match="the checks propose flip"):
        fix_map(src, tmp_path / "o.exr", auto=True, profile=profile_file)
    result = fix_map(src, tmp_path / "o.exr", remedies={"flip": {}}, profile=profile_file)
    assert result.before["orientation"].severity == "warn" and result.after["orientation"].severity == "pass"


@pytest.mark.parametrize("what", ["clipped", "8-bit"])
def test_unfixable_maps_are_refused_and_nothing_is_written(tmp_path, profile_file, what):
    from support.qa_maps import clipped_sun

    if what == "clipped":
        img = clipped_sun()
    else:
        img = np.round(np.clip(sunny() / 4.0, 0, 1) * 255) / 255
    src = tmp_path / "bad.exr"
    write_map(src, img.astype(np.float32), pixel_type="half")
    out = tmp_path / "out.exr"
    with pytest.raises(FixRefusedError, match="cannot be fixed"):
        fix_map(src, out, auto=True, remedies={"poles": {}}, profile=profile_file)
    assert not out.exists() and not log_path(out).exists()


def test_output_naming_the_source_is_refused(tmp_path, profile_file):
    src = tmp_path / "m.exr"
    write_map(src, sunny(), pixel_type="float")
    with pytest.raises(OutputIsInputError, match="would overwrite the input"):
        fix_map(src, tmp_path / "." / "m.exr", remedies={"poles": {}}, profile=profile_file)


def test_sun_azimuth_rotation_puts_the_sun_there(tmp_path, profile_file):
    src = tmp_path / "m.exr"
    write_map(src, sunny(), pixel_type="float")
    result = fix_map(src, tmp_path / "r.exr", remedies={"rotate": {"sun_azimuth": -100.0}}, profile=profile_file)
    az = next(e for e in result.after["sun"].details["emitters"] if e["sun_like"])["azimuth_deg"]
    assert abs(az + 100.0) <= 360.0 / 256


def test_a_missing_output_folder_is_created_only_for_a_repaired_map(tmp_path, profile_file):
    img = sunny(64)
    img[5, 7] = np.nan
    src = write_map(tmp_path / "m.exr", img, pixel_type="float")
    result = fix_map(src, tmp_path / "new" / "deeper" / "f.exr", auto=True, profile=profile_file)
    assert result.output.is_file() and log_path(result.output).is_file()
    clean = write_map(tmp_path / "clean.exr", sunny(64), pixel_type="float")
    with pytest.raises(ValueError, match="no remedy to apply"):
        fix_map(clean, tmp_path / "other" / "f.exr", auto=True, profile=profile_file)
    assert not (tmp_path / "other").exists()


def test_auto_remedies_planned_before_a_requested_flip_are_asked_again(tmp_path, profile_file):
    """An upside-down map warns about its exposure only because it is upside down: after the requested flip
    the exposure check passes, so --auto does not rescale it (the flipped pixels stay exactly the source's)."""
    img = make_sky("sun", width=256, elevation_deg=55.0, azimuth_deg=30.0)  # a black ground: flipped, no light falls on "up"
    src = write_map(tmp_path / "down.exr", np.flipud(img).copy(), pixel_type="float")
    result = fix_map(src, tmp_path / "up.exr", auto=True, remedies={"flip": {}}, profile=profile_file)
    assert result.before["exposure"].severity == "warn"
    assert [s["remedy"] for s in result.steps] == ["flip"]
    assert any(k["remedy"] == "exposure" and "passes after the earlier steps" in k["reason"] for k in result.skipped)
    assert np.array_equal(read_map(result.output).rgb, img)
