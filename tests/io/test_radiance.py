"""Tests of envsample.io.radiance: reading and writing Radiance RGBE (.hdr) maps.

External references used below (each test names its own):
- Ward, G. (1991). Real Pixels. Graphics Gems II, 80-83: RGBE stores a shared exponent E (biased
  by 128) and 8-bit mantissas; a byte b decodes to b * 2**(E - 136) and an encoded channel loses
  less than one mantissa step 2**(e - 8), where (m, e) = frexp(largest channel).
- Radiance picture header layout (Ward Larson & Shakespeare 1998, Rendering with Radiance, from
  memory): "#?RADIANCE", FORMAT=, EXPOSURE=, PRIMARIES=, blank line, resolution line "-Y H +X W",
  then scanlines; the test files are written byte by byte (tests/support/map_files.py).
- ITU-R BT.709-6 primaries and D65 white point (the PRIMARIES= header).
"""

from __future__ import annotations

import hashlib

import numpy as np
import pytest
from support.map_files import BT709, H, W, leftovers, radiance_bytes, random_map

from envsample.errors import EnvsampleWarning, MapReadError
from envsample.io.maps import read_map, write_map


def test_hdr_round_trip_within_ward_precision(tmp_path):
    """Each channel loses less than one mantissa step 2**(e-8), e = frexp(max channel)[1] (Ward 1991)."""
    rgb = random_map(seed=20, low=1e-2, high=1e5)
    img = read_map(write_map(tmp_path / "roof.hdr", rgb))
    assert img.format == "hdr" and img.pixel_type == "rgbe" and img.compression == "rle"
    assert img.channels == ["R", "G", "B"] and img.rgb.dtype == np.float32 and img.rgb.shape == (H, W, 3)
    _, e = np.frexp(rgb.max(axis=-1, keepdims=True).astype(np.float64))
    step = np.ldexp(1.0, e - 8)
    err = np.abs(img.rgb.astype(np.float64) - rgb)
    assert np.all(err < step)
    # The relative form quoted for RGBE: under 2**-7 (about 0.8 %) of the largest channel, in practice about 0.5 %.
    assert np.all(err <= rgb.max(axis=-1, keepdims=True) * 2.0**-7)


def test_hdr_hand_made_bytes_decode_by_wards_rule(tmp_path):
    """Byte b with exponent E decodes to b * 2**(E - 136) (Ward 1991); exponent 0 means black."""
    pixels = bytes(
        [128, 64, 32, 129, 200, 100, 0, 136, 1, 2, 3, 128, 0, 0, 0, 0]  # row 0 (top)
        + [255, 128, 0, 140, 64, 64, 64, 127, 10, 20, 30, 131, 9, 9, 9, 0]  # row 1
    )
    path = tmp_path / "hand.hdr"
    path.write_bytes(radiance_bytes(2, 4, pixels))
    img = read_map(path)
    expected = np.array(
        [
            [[1.0, 0.5, 0.25], [200.0, 100.0, 0.0], [1 / 256, 2 / 256, 3 / 256], [0.0, 0.0, 0.0]],
            [[255 * 16.0, 128 * 16.0, 0.0], [64 / 512, 64 / 512, 64 / 512], [10 / 32, 20 / 32, 30 / 32], [0, 0, 0]],
        ],
        dtype=np.float32,
    )
    np.testing.assert_array_equal(img.rgb, expected)
    assert img.compression == "flat"
    assert img.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_hdr_primaries_header_and_round_trip(tmp_path):
    path = tmp_path / "p.hdr"
    header = b"PRIMARIES= 0.640 0.330 0.300 0.600 0.150 0.060 0.3127 0.3290\n"
    path.write_bytes(radiance_bytes(1, 2, bytes([128, 64, 32, 129] * 2), header))
    assert read_map(path).chromaticities == BT709
    written = read_map(write_map(tmp_path / "w.hdr", random_map(seed=21), chromaticities=BT709))
    assert written.chromaticities == BT709


def test_hdr_exposure_is_reported_not_applied(tmp_path):
    path = tmp_path / "e.hdr"
    path.write_bytes(radiance_bytes(1, 2, bytes([128, 64, 32, 129] * 2), b"EXPOSURE=2\nEXPOSURE=1.5\n"))
    with pytest.warns(EnvsampleWarning, match="EXPOSURE=3; pixel values are kept as stored"):
        img = read_map(path)
    np.testing.assert_array_equal(img.rgb[0, 0], [1.0, 0.5, 0.25])


def test_hdr_unsupported_variants(tmp_path):
    flipped = tmp_path / "flip.hdr"
    flipped.write_bytes(radiance_bytes(1, 2, b"\x80\x40\x20\x81" * 2).replace(b"-Y 1 +X 2", b"+Y 1 +X 2"))
    with pytest.raises(MapReadError, match=r"orientation '\+Y 1 \+X 2' is not supported.*-Y H \+X W"):
        read_map(flipped)
    xyze = tmp_path / "xyz.hdr"
    xyze.write_bytes(radiance_bytes(1, 2, b"\x80\x40\x20\x81" * 2).replace(b"rle_rgbe", b"rle_xyze"))
    with pytest.raises(MapReadError, match="XYZE"):
        read_map(xyze)


def test_hdr_truncated(tmp_path):
    flat = tmp_path / "flat.hdr"
    flat.write_bytes(radiance_bytes(2, 4, bytes([128, 64, 32, 129] * 5)))  # 5 of 8 pixels
    with pytest.raises(MapReadError, match="truncated Radiance file"):
        read_map(flat)
    data = write_map(tmp_path / "full.hdr", random_map(seed=22)).read_bytes()
    cut = tmp_path / "cut.hdr"
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(MapReadError, match="truncated or corrupt Radiance file"):
        read_map(cut)


def test_hdr_text_file(tmp_path):
    (tmp_path / "notes.hdr").write_text("sky notes, not a picture\n")
    with pytest.raises(MapReadError, match=r"not a Radiance RGBE file.*re-export it as \.hdr"):
        read_map(tmp_path / "notes.hdr")


def test_hdr_write_refuses_what_rgbe_cannot_store(tmp_path):
    rgb = random_map(seed=23)
    bad = rgb.copy()
    bad[0, 0, 0] = np.nan
    with pytest.raises(ValueError, match="1 non-finite values; RGBE cannot store NaN/Inf"):
        write_map(tmp_path / "n.hdr", bad)
    bad = rgb.copy()
    bad[1, 1] = -1.0
    with pytest.raises(ValueError, match="3 negative values"):
        write_map(tmp_path / "n.hdr", bad)
    with pytest.raises(ValueError, match="no alpha channel"):
        write_map(tmp_path / "n.hdr", rgb, alpha=np.ones((H, W)))
    assert leftovers(tmp_path) == []
