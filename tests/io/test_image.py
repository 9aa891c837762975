"""Tests of envsample.io.image: the MapImage record, its JSON-ready description, file_sha256 and map_pixels
(the one boundary check of in-memory maps).

External reference: hashlib (Python standard library) as the reference SHA-256.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
from support.map_files import BT709, H, W, random_map

from envsample.errors import MapReadError, MapValidationError
from envsample.io.maps import MapImage, read_map, write_map


def test_sha256_matches_hashlib(tmp_path):
    path = write_map(tmp_path / "m.exr", random_map(seed=33))
    img = read_map(path)
    assert img.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert MapImage.from_array(img.rgb).sha256 is None


def test_describe_is_json_ready_and_has_no_pixels(tmp_path):
    path = write_map(tmp_path / "m.exr", random_map(seed=60), chromaticities=BT709, alpha=np.ones((H, W)))
    info = read_map(path).describe()
    text = json.dumps(info)
    assert len(text) < 2000
    assert info["width"] == W and info["height"] == H and info["has_alpha"] is True
    assert info["chromaticities"]["white"] == [0.3127, 0.329]
    assert info["path"] == str(path) and info["encoding"] == "linear"
    assert "rgb" not in info


def test_from_array_checks_shape():
    img = MapImage.from_array(np.ones((4, 8, 3), dtype=np.float64))
    assert img.rgb.dtype == np.float32 and img.format == "array" and img.path is None
    with pytest.raises(ValueError, match=r"shape \(H, W, 3\)"):
        MapImage.from_array(np.ones((4, 8)))
    assert "4" in repr(img) and "in memory" in repr(img)


def test_file_sha256_matches_hashlib_across_its_read_blocks(tmp_path, monkeypatch):
    """More than one read block (the block size lowered to 1000 bytes): the digest is hashlib's of the whole."""
    from envsample.io import image

    monkeypatch.setattr(image, "_HASH_CHUNK", 1000)
    path = tmp_path / "blob.bin"
    path.write_bytes(np.random.default_rng(3).integers(0, 256, 4567, dtype=np.uint8).tobytes())
    assert image.file_sha256(path) == hashlib.sha256(path.read_bytes()).hexdigest()
    with pytest.raises(MapReadError, match=r"nothing\.bin: cannot be read"):
        image.file_sha256(tmp_path / "nothing.bin")


def test_map_pixels_gives_float32_and_keeps_float64_only_when_asked():
    from envsample.io.image import map_pixels

    f32 = np.ones((2, 4, 3), np.float32)
    assert map_pixels(f32) is f32  # no copy
    assert map_pixels(np.ones((2, 4, 3), np.uint16)).dtype == np.float32
    f64 = np.ones((2, 4, 3))
    assert map_pixels(f64).dtype == np.float32 and map_pixels(f64, keep_float64=True) is f64
    img = MapImage.from_array(f32)
    np.testing.assert_array_equal(map_pixels(img), f32)  # anything with .rgb


@pytest.mark.parametrize("bad, problem", [(np.ones((4, 8)), r"\(H, W, 3\).*got \(4, 8\)"),
                                          (np.ones((0, 8, 3)), r"H, W >= 1; got \(0, 8, 3\)"),
                                          (np.ones((4, 8, 3), complex), "real numbers, got dtype complex128"),
                                          (np.full((4, 8, 3), "x"), "real numbers")])
def test_map_pixels_refuses_what_is_not_an_rgb_image_naming_the_argument(bad, problem):
    from envsample.io.image import map_pixels

    with pytest.raises(MapValidationError, match=r"^sky must .*" + problem):
        map_pixels(bad, name="sky")
