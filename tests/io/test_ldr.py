"""Tests of envsample.io.ldr: 8- and 16-bit images (PNG, JPEG, TIFF) are read, described as LDR and refused
as maps.

External reference: the test images are written with imageio (Pillow, and OpenCV for 16-bit RGB), not
through envsample.io; 8-bit code values scale to [0, 1] by 1/255 and 16-bit ones by 1/65535 (full scale
is the largest code, PNG specification ISO/IEC 15948).
"""

from __future__ import annotations

import numpy as np
import pytest
from support.map_files import H, W

from envsample.errors import MapReadError, MapValidationError
from envsample.io.maps import read_map, validate_map


def test_png_8bit_is_ldr_and_refused(tmp_path):
    import imageio.v3 as iio

    codes = np.arange(H * W * 3, dtype=np.int64).reshape(H, W, 3) % 256
    iio.imwrite(tmp_path / "photo.png", codes.astype(np.uint8))
    img = read_map(tmp_path / "photo.png")
    assert not img.is_hdr and img.pixel_type == "uint8" and img.format == "png"
    np.testing.assert_allclose(img.rgb, codes / 255.0, rtol=1e-6)
    assert img.rgb.max() == 1.0  # code 255 is full scale exactly
    assert "not linearised" in img.describe()["encoding"]
    with pytest.raises(MapValidationError, match=r"is an 8-bit LDR image; environment maps must be HDR \(\.exr or \.hdr\)"):
        validate_map(img)


def test_png_16bit_and_grey(tmp_path):
    import imageio.v3 as iio

    codes = (np.arange(H * W * 3).reshape(H, W, 3) * 37 % 65536).astype(np.uint16)
    # Written through OpenCV: Pillow cannot write 16-bit RGB PNG.
    iio.imwrite(tmp_path / "deep.png", codes, plugin="opencv")
    img = read_map(tmp_path / "deep.png")
    assert img.pixel_type == "uint16" and not img.is_hdr
    np.testing.assert_allclose(img.rgb, codes / 65535.0, rtol=1e-6)
    with pytest.raises(MapValidationError, match="16-bit LDR"):
        validate_map(img)
    grey = (np.arange(H * W).reshape(H, W) % 256).astype(np.uint8)
    iio.imwrite(tmp_path / "grey.png", grey)
    g = read_map(tmp_path / "grey.png")
    assert g.channels == ["Y"]
    np.testing.assert_allclose(g.rgb[..., 2], grey / 255.0, rtol=1e-6)


def test_corrupt_png(tmp_path):
    (tmp_path / "bad.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"\x00" * 20)
    with pytest.raises(MapReadError, match="cannot be decoded as png"):
        read_map(tmp_path / "bad.png")
