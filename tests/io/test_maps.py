"""Tests of envsample.io.maps: read_map's choice of reader and its refusals of bad files, validate_map,
and write_map's atomic writes (the format readers and writers have their own files: test_exr.py,
test_radiance.py, test_ldr.py, test_image.py).

External references used below: IEEE 754-2008 (NaN and +-Inf are the non-finite values counted);
POSIX ``rename``/``os.replace`` (a write lands whole or not at all, so a failed write leaves the
previous file and no temporary one).
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from support.map_files import H, W, leftovers, random_map

from envsample.errors import EnvsampleWarning, MapReadError, MapValidationError, MapWriteError
from envsample.io import maps as eio
from envsample.io.maps import MapImage, read_map, supported_extensions, validate_map, write_map

# --------------------------------------------------------------------------- bad files


def test_missing_file(tmp_path):
    with pytest.raises(MapReadError, match=r"nowhere\.exr: file not found"):
        read_map(tmp_path / "nowhere.exr")


def test_directory_instead_of_file(tmp_path):
    (tmp_path / "maps.exr").mkdir()
    with pytest.raises(MapReadError, match="is a directory"):
        read_map(tmp_path / "maps.exr")


@pytest.mark.parametrize("name", ["empty.exr", "empty.hdr", "empty.png"])
def test_empty_file(tmp_path, name):
    (tmp_path / name).touch()
    with pytest.raises(MapReadError, match=r"file is empty \(0 bytes\)"):
        read_map(tmp_path / name)


def test_unknown_extension_lists_supported(tmp_path):
    (tmp_path / "map.bmp").write_bytes(b"BM" + b"\x00" * 60)
    with pytest.raises(MapReadError, match=r"unsupported file extension '\.bmp'; supported: \.exr, \.hdr, \.png"):
        read_map(tmp_path / "map.bmp")
    with pytest.raises(MapReadError, match=r"extension \(none\)"):
        read_map(tmp_path / "map")


def test_layer_on_non_exr(tmp_path):
    path = write_map(tmp_path / "m.hdr", random_map(seed=32))
    with pytest.raises(MapReadError, match="applies to OpenEXR files only"):
        read_map(path, layer="sky")


def test_extension_matching_is_case_insensitive(tmp_path):
    path = write_map(tmp_path / "UPPER.EXR", random_map(seed=34), pixel_type="float")
    np.testing.assert_array_equal(read_map(path).rgb, random_map(seed=34))


def test_supported_extensions():
    assert supported_extensions() == (".exr", ".hdr", ".png", ".jpg", ".jpeg", ".tif", ".tiff")
    assert supported_extensions(write=True) == (".exr", ".hdr")


# --------------------------------------------------------------------------- validation


def _map(rgb) -> MapImage:
    return MapImage.from_array(rgb)


def test_validate_clean_map_passes_unchanged():
    rgb = random_map(seed=40)
    clean, notes = validate_map(_map(rgb))
    assert notes == []
    np.testing.assert_array_equal(clean.rgb, rgb)


def test_validate_non_finite_raises_with_counts():
    rgb = random_map(seed=41)
    rgb[0, 0, 0] = np.nan
    rgb[1, 2, 1] = np.nan
    rgb[5, 5, 2] = np.inf
    rgb[6, 6, 0] = -np.inf
    with pytest.raises(MapValidationError, match=r"4 non-finite values \(2 NaN, 1 \+Inf, 1 -Inf\) in 4 pixels.*repair=True"):
        validate_map(_map(rgb))


def test_validate_repair_replaces_non_finite_and_leaves_input_alone():
    rgb = random_map(seed=42)
    rgb[0, 0] = np.nan
    rgb[3, 7, 1] = np.inf
    before = rgb.copy()
    image = _map(rgb)
    clean, notes = validate_map(image, repair=True)
    assert np.isfinite(clean.rgb).all()
    np.testing.assert_array_equal(clean.rgb[0, 0], 0.0)
    assert clean.rgb[3, 7, 1] == 0.0
    assert any("replaced 4 non-finite values (3 NaN, 1 +Inf, 0 -Inf) in 2 pixels with 0" in n for n in notes)
    np.testing.assert_array_equal(image.rgb, before)  # NaN compares equal position-wise in assert_array_equal
    assert clean is not image and clean.rgb is not image.rgb


def test_validate_clamps_negatives_with_warning():
    rgb = random_map(seed=43)
    rgb[2, 3] = [-0.5, 1.0, -2.0]
    rgb[9, 9, 1] = -1e-3
    before = rgb.copy()
    with pytest.warns(EnvsampleWarning, match=r"clamped 3 negative values \(lowest -2\) to 0"):
        clean, notes = validate_map(_map(rgb))
    assert clean.rgb.min() >= 0.0
    np.testing.assert_array_equal(clean.rgb[2, 3], [0.0, 1.0, 0.0])
    assert any("clamped 3 negative values" in n for n in notes)
    np.testing.assert_array_equal(rgb, before)


def test_validate_aspect():
    rgb = random_map(seed=44, h=32, w=48)
    with pytest.raises(MapValidationError, match=r"48x32, not 2:1 .*allow_aspect=True"):
        validate_map(_map(rgb))
    clean, notes = validate_map(_map(rgb), allow_aspect=True)
    assert clean.width == 48 and any("not 2:1" in n for n in notes)


def test_validate_too_small():
    with pytest.raises(MapValidationError, match="4x2 pixels, smaller than the minimum 8x4"):
        validate_map(_map(random_map(seed=45, h=2, w=4)))
    validate_map(_map(random_map(seed=45, h=4, w=8)))  # the minimum itself passes
    with pytest.raises(MapValidationError, match="smaller than the minimum 64x32"):
        validate_map(_map(random_map(seed=45, h=4, w=8)), min_size=(64, 32))


def test_validate_names_the_source(tmp_path):
    rgb = random_map(seed=46)
    rgb[0, 0, 0] = np.nan
    path = write_map(tmp_path / "studio.exr", rgb, pixel_type="float")
    with pytest.raises(MapValidationError, match=r"studio\.exr: 1 non-finite"):
        validate_map(read_map(path))
    with pytest.raises(MapValidationError, match=r"^job 7: 1 non-finite"):
        validate_map(read_map(path), source="job 7")


def test_validate_notes_alpha_and_bad_shape():
    image = MapImage.from_array(random_map(seed=47), alpha=np.ones((H, W)))
    _, notes = validate_map(image)
    assert any("alpha" in n for n in notes)
    with pytest.raises(MapValidationError, match=r"shape \(32, 64\), expected \(H, W, 3\)"):
        validate_map(MapImage(rgb=np.ones((H, W), np.float32)))


# --------------------------------------------------------------------------- writing


def test_write_bad_arguments(tmp_path):
    rgb = random_map(seed=50)
    with pytest.raises(ValueError, match=r"valid names: none, rle, zip, zips, piz"):
        write_map(tmp_path / "m.exr", rgb, compression="dwaa")
    with pytest.raises(ValueError, match=r"unknown pixel_type 'double'; valid names: half, float"):
        write_map(tmp_path / "m.exr", rgb, pixel_type="double")
    with pytest.raises(ValueError, match=r"shape \(H, W, 3\).*\(32, 64, 4\)"):
        write_map(tmp_path / "m.exr", np.ones((H, W, 4)))
    with pytest.raises(ValueError, match=r"alpha must be a real array of shape \(32, 64\)"):
        write_map(tmp_path / "m.exr", rgb, alpha=np.ones((W, H)))
    with pytest.raises(ValueError, match="chromaticities must be a dict with keys red, green, blue, white"):
        write_map(tmp_path / "m.exr", rgb, chromaticities={"red": (0.64, 0.33)})
    with pytest.raises(ValueError, match=r"write_map writes \.exr, \.hdr"):
        write_map(tmp_path / "m.png", rgb)
    assert leftovers(tmp_path) == []


def test_write_missing_parent_directory(tmp_path):
    with pytest.raises(MapWriteError, match=r"directory .*no_such_dir does not exist; create it first"):
        write_map(tmp_path / "no_such_dir" / "m.exr", random_map(seed=51))
    assert leftovers(tmp_path) == []


@pytest.mark.parametrize("ext", [".exr", ".hdr"])
def test_write_leaves_only_the_target(tmp_path, ext):
    path = write_map(tmp_path / f"m{ext}", random_map(seed=52))
    assert leftovers(tmp_path) == [f"m{ext}"]
    assert path.stat().st_mode & 0o777 != 0o600  # not mkstemp's private mode


def test_failed_write_leaves_nothing_and_keeps_old_file(tmp_path, monkeypatch):
    """A library failure half-way through the write: no temp file, the previous map intact."""
    target = write_map(tmp_path / "m.exr", random_map(seed=53))
    old_bytes = target.read_bytes()

    def broken_writer(p, arr, pixel_type, compression, chroma, alpha):
        def write(tmp):
            with open(tmp, "wb") as fh:
                fh.write(b"\x76\x2f\x31\x01 partial")
            raise RuntimeError("disk full (simulated)")

        return write

    monkeypatch.setattr(eio, "_exr_writer", broken_writer)
    with pytest.raises(MapWriteError, match=r"writing failed \(disk full \(simulated\)\); nothing was written"):
        write_map(target, random_map(seed=54))
    assert leftovers(tmp_path) == ["m.exr"]
    assert target.read_bytes() == old_bytes


def test_failed_rename_leaves_no_temp_file(tmp_path):
    """The target is a non-empty directory, so os.replace fails after the data was written."""
    (tmp_path / "m.exr").mkdir()
    (tmp_path / "m.exr" / "keep.txt").write_text("x")
    with pytest.raises(MapWriteError, match="writing failed"):
        write_map(tmp_path / "m.exr", random_map(seed=55))
    assert leftovers(tmp_path) == ["m.exr"]
    assert os.listdir(tmp_path / "m.exr") == ["keep.txt"]
