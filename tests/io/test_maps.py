"""Tests of envsample.io: reading, validating and writing environment maps.

External references used below (each test names its own):
- IEEE 754-2008 binary16: 11-bit significand, so round-to-nearest has a relative
  error of at most 2**-11 for normal numbers; largest finite value 65504.
- Ward, G. (1991). Real Pixels. Graphics Gems II, 80-83: RGBE stores a shared
  exponent E (biased by 128) and 8-bit mantissas; a byte b decodes to
  b * 2**(E - 136) and an encoded channel loses less than one mantissa step
  2**(e - 8), where (m, e) = frexp(largest channel).
- Radiance picture header layout (Ward Larson & Shakespeare 1998, Rendering with
  Radiance, from memory): "#?RADIANCE", FORMAT=, EXPOSURE=, PRIMARIES=, blank
  line, resolution line "-Y H +X W", then scanlines.
- ITU-R BT.709-6 primaries and D65 white point (chromaticity round trip).
- hashlib (Python standard library) as the reference SHA-256.
Files that are written "with the OpenEXR bindings directly" do not go through
envsample.io, so reading them checks io against the official library.
"""

from __future__ import annotations

import hashlib
import json
import os

import numpy as np
import OpenEXR
import pytest

from envsample.errors import EnvsampleWarning, MapReadError, MapValidationError, MapWriteError
from envsample.io import maps as eio
from envsample.io.maps import MapImage, read_map, supported_extensions, validate_map, write_map

# IEEE 754 binary16 relative rounding bound (round to nearest, normal range).
HALF_REL_ERROR = 2.0**-11

# ITU-R BT.709-6, item 1.3/1.4: primaries and D65 white point, CIE 1931 xy.
BT709 = {"red": (0.640, 0.330), "green": (0.300, 0.600), "blue": (0.150, 0.060), "white": (0.3127, 0.3290)}

H, W = 32, 64


def _random_map(seed=0, h=H, w=W, low=1e-3, high=6e4) -> np.ndarray:
    """Log-uniform positive values covering the normal half-float range (invented test data)."""
    rng = np.random.default_rng(seed)
    return np.exp(rng.uniform(np.log(low), np.log(high), size=(h, w, 3))).astype(np.float32)


def _exr_header(compression=OpenEXR.ZIP_COMPRESSION) -> dict:
    return {"compression": compression, "type": OpenEXR.scanlineimage}


def _write_exr_direct(path, channels: dict, header=None) -> None:
    """Write a file with the OpenEXR bindings only (no envsample code involved)."""
    fresh = {k: np.ascontiguousarray(v) for k, v in channels.items()}
    with OpenEXR.File(header or _exr_header(), fresh) as f:
        f.write(str(path))


def _radiance_bytes(height, width, pixels: bytes, extra_header: bytes = b"") -> bytes:
    """A Radiance picture with flat (not run-length encoded) RGBE scanlines, byte by byte."""
    head = b"#?RADIANCE\n" + extra_header + b"FORMAT=32-bit_rle_rgbe\n\n" + b"-Y %d +X %d\n" % (height, width)
    return head + pixels


def _leftovers(directory) -> list[str]:
    return sorted(p.name for p in directory.iterdir())


# --------------------------------------------------------------------------- EXR


@pytest.mark.parametrize("pixel_type", ["half", "float"])
def test_exr_round_trip_rgb(tmp_path, pixel_type):
    """float is exact; half is within 2**-11 relative (IEEE 754-2008 binary16)."""
    rgb = _random_map()
    path = write_map(tmp_path / "roof.exr", rgb, pixel_type=pixel_type)
    img = read_map(path)
    assert img.rgb.dtype == np.float32 and img.rgb.shape == (H, W, 3)
    assert (img.height, img.width) == (H, W)
    assert img.format == "exr" and img.pixel_type == pixel_type and img.compression == "zip"
    assert img.channels == ["R", "G", "B"] and img.is_hdr and img.alpha is None
    if pixel_type == "float":
        np.testing.assert_array_equal(img.rgb, rgb)
    else:
        rel = np.abs(img.rgb.astype(np.float64) - rgb) / rgb
        assert rel.max() <= HALF_REL_ERROR
        assert rel.max() > 0  # the values really went through half precision


@pytest.mark.parametrize("compression", eio.LOSSLESS_COMPRESSIONS)
def test_exr_lossless_compressions_read_back_exactly(tmp_path, compression):
    rgb = _random_map(seed=1, h=16, w=32)
    img = read_map(write_map(tmp_path / "c.exr", rgb, pixel_type="float", compression=compression))
    assert img.compression == compression
    np.testing.assert_array_equal(img.rgb, rgb)


def test_exr_file_is_readable_by_the_bindings_and_marked_latlong(tmp_path):
    """What write_map produces is an ordinary EXR for the official library: RGB data and envmap=latlong."""
    rgb = _random_map(seed=2)
    path = write_map(tmp_path / "m.exr", rgb, pixel_type="float")
    with OpenEXR.File(str(path)) as f:
        np.testing.assert_array_equal(f.channels()["RGB"].pixels, rgb)
        assert f.header()["envmap"] == OpenEXR.ENVMAP_LATLONG


def test_exr_rgba_keeps_alpha(tmp_path):
    rgb = _random_map(seed=3)
    alpha = np.linspace(0.0, 1.0, H * W, dtype=np.float32).reshape(H, W)
    img = read_map(write_map(tmp_path / "a.exr", rgb, pixel_type="float", alpha=alpha))
    assert img.channels == ["R", "G", "B", "A"]
    np.testing.assert_array_equal(img.alpha, alpha)
    np.testing.assert_array_equal(img.rgb, rgb)


@pytest.mark.parametrize("dtype", [np.float16, np.float32])
def test_exr_single_channel_y_reads_as_grey(tmp_path, dtype):
    y = _random_map(seed=4, high=1e3)[..., 0].astype(dtype)
    _write_exr_direct(tmp_path / "y.exr", {"Y": y})
    img = read_map(tmp_path / "y.exr")
    assert img.channels == ["Y"]
    assert img.pixel_type == ("half" if dtype == np.float16 else "float")
    for k in range(3):
        np.testing.assert_array_equal(img.rgb[..., k], y.astype(np.float32))


def test_exr_separate_channels_keep_their_order(tmp_path):
    """Distinct constants per channel: R, G and B must land in rgb[..., 0], [1], [2]."""
    ones = np.ones((H, W), np.float32)
    _write_exr_direct(tmp_path / "s.exr", {"B": 3.0 * ones, "R": 1.0 * ones, "G": 2.0 * ones})
    img = read_map(tmp_path / "s.exr")
    assert img.channels == ["R", "G", "B"]
    np.testing.assert_array_equal(img.rgb[0, 0], [1.0, 2.0, 3.0])


def test_exr_mixed_pixel_types(tmp_path):
    a = np.full((H, W), 0.5, np.float32)
    _write_exr_direct(tmp_path / "mix.exr", {"R": a.astype(np.float16), "G": a, "B": a})
    assert read_map(tmp_path / "mix.exr").pixel_type == "float"


def _layered(path, with_root=False):
    sky, ground = _random_map(seed=5), _random_map(seed=6)
    channels = {}
    for name, arr in (("sky", sky), ("ground", ground)):
        for k, c in enumerate("RGB"):
            channels[f"{name}.{c}"] = arr[..., k].copy()
    if with_root:
        root = _random_map(seed=7)
        channels.update({c: root[..., k].copy() for k, c in enumerate("RGB")})
    _write_exr_direct(path, channels)
    return sky, ground


def test_exr_layer_selected_by_name(tmp_path):
    sky, ground = _layered(tmp_path / "l.exr")
    img = read_map(tmp_path / "l.exr", layer="sky")
    assert img.channels == ["sky.R", "sky.G", "sky.B"]
    np.testing.assert_array_equal(img.rgb, sky)
    np.testing.assert_array_equal(read_map(tmp_path / "l.exr", layer="ground").rgb, ground)


def test_exr_layers_ambiguous_or_missing_are_listed(tmp_path):
    _layered(tmp_path / "l.exr")
    with pytest.raises(MapReadError, match=r"several layers \('ground', 'sky'\).*layer="):
        read_map(tmp_path / "l.exr")
    with pytest.raises(MapReadError, match=r"no layer 'roof'; layers in this file: 'ground', 'sky'"):
        read_map(tmp_path / "l.exr", layer="roof")


def test_exr_unprefixed_layer_is_the_default(tmp_path):
    _layered(tmp_path / "l.exr", with_root=True)
    img = read_map(tmp_path / "l.exr")
    assert img.channels == ["R", "G", "B"]
    assert read_map(tmp_path / "l.exr", layer="sky").channels == ["sky.R", "sky.G", "sky.B"]


def test_exr_multi_part(tmp_path):
    beauty = _random_map(seed=8)
    mask = np.full((H, W), 0.25, np.float32)
    parts = [
        OpenEXR.Part(_exr_header(), {"RGB": np.ascontiguousarray(beauty)}, "beauty"),
        OpenEXR.Part(_exr_header(OpenEXR.PIZ_COMPRESSION), {"Y": mask}, "mask"),
    ]
    with OpenEXR.File(parts) as f:
        f.write(str(tmp_path / "mp.exr"))
    default = read_map(tmp_path / "mp.exr")  # the only unprefixed RGB layer wins
    np.testing.assert_array_equal(default.rgb, beauty)
    chosen = read_map(tmp_path / "mp.exr", layer="mask")
    assert chosen.channels == ["Y"] and chosen.compression == "piz"
    np.testing.assert_array_equal(chosen.rgb[..., 1], mask)


def test_exr_multi_part_two_rgb_parts_are_ambiguous(tmp_path):
    parts = [
        OpenEXR.Part(_exr_header(), {"RGB": _random_map(seed=9)}, "east"),
        OpenEXR.Part(_exr_header(), {"RGB": _random_map(seed=10)}, "west"),
    ]
    with OpenEXR.File(parts) as f:
        f.write(str(tmp_path / "two.exr"))
    with pytest.raises(MapReadError, match=r"several layers \('east', 'west'\)"):
        read_map(tmp_path / "two.exr")
    np.testing.assert_array_equal(read_map(tmp_path / "two.exr", layer="west").rgb, _random_map(seed=10))


def test_exr_chromaticities_preserved(tmp_path):
    """BT.709-6 primaries survive the float32 attribute and read back as the published decimals."""
    img = read_map(write_map(tmp_path / "c.exr", _random_map(seed=11), chromaticities=BT709))
    assert img.chromaticities == BT709
    assert read_map(write_map(tmp_path / "n.exr", _random_map(seed=11))).chromaticities is None


def test_exr_chromaticities_written_by_the_bindings(tmp_path):
    header = _exr_header()
    header["chromaticities"] = tuple(v for k in ("red", "green", "blue", "white") for v in BT709[k])
    _write_exr_direct(tmp_path / "c.exr", {"RGB": _random_map(seed=12)}, header)
    assert read_map(tmp_path / "c.exr").chromaticities == BT709


def test_exr_non_contiguous_input_is_written_as_seen(tmp_path):
    """A reversed, strided view must be written as it looks, not as its parent buffer (design notes trap)."""
    base = _random_map(seed=13, w=2 * W)
    view = base[:, ::-2, ::-1]
    img = read_map(write_map(tmp_path / "v.exr", view, pixel_type="float"))
    np.testing.assert_array_equal(img.rgb, view)


def test_exr_half_overflow_is_refused(tmp_path):
    """65504 is the largest finite binary16 value (IEEE 754-2008); 1e5 would become +Inf."""
    rgb = np.ones((H, W, 3), np.float32)
    rgb[3, 4, 0] = 1e5
    with pytest.raises(ValueError, match=r"1 values exceed the half-float maximum 65504.*pixel_type='float'"):
        write_map(tmp_path / "o.exr", rgb)
    assert _leftovers(tmp_path) == []
    np.testing.assert_array_equal(read_map(write_map(tmp_path / "o.exr", rgb, pixel_type="float")).rgb, rgb)


def test_exr_cube_map_is_refused(tmp_path):
    header = _exr_header()
    header["envmap"] = OpenEXR.ENVMAP_CUBE
    _write_exr_direct(tmp_path / "cube.exr", {"RGB": _random_map(seed=14)}, header)
    with pytest.raises(MapReadError, match="cube map"):
        read_map(tmp_path / "cube.exr")


def test_exr_without_colour_channels(tmp_path):
    z = np.ones((H, W), np.float32)
    _write_exr_direct(tmp_path / "z.exr", {"Z": z, "N.x": z})
    with pytest.raises(MapReadError, match=r"no R, G, B or Y channels \(found: N.x, Z\)"):
        read_map(tmp_path / "z.exr")
    _write_exr_direct(tmp_path / "ryby.exr", {"Y": z, "RY": z, "BY": z})
    with pytest.raises(MapReadError, match="luminance/chroma"):
        read_map(tmp_path / "ryby.exr")


# --------------------------------------------------------------------------- Radiance .hdr


def test_hdr_round_trip_within_ward_precision(tmp_path):
    """Each channel loses less than one mantissa step 2**(e-8), e = frexp(max channel)[1] (Ward 1991)."""
    rgb = _random_map(seed=20, low=1e-2, high=1e5)
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
    path.write_bytes(_radiance_bytes(2, 4, pixels))
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
    path.write_bytes(_radiance_bytes(1, 2, bytes([128, 64, 32, 129] * 2), header))
    assert read_map(path).chromaticities == BT709
    written = read_map(write_map(tmp_path / "w.hdr", _random_map(seed=21), chromaticities=BT709))
    assert written.chromaticities == BT709


def test_hdr_exposure_is_reported_not_applied(tmp_path):
    path = tmp_path / "e.hdr"
    path.write_bytes(_radiance_bytes(1, 2, bytes([128, 64, 32, 129] * 2), b"EXPOSURE=2\nEXPOSURE=1.5\n"))
    with pytest.warns(EnvsampleWarning, match="EXPOSURE=3; pixel values are kept as stored"):
        img = read_map(path)
    np.testing.assert_array_equal(img.rgb[0, 0], [1.0, 0.5, 0.25])


def test_hdr_unsupported_variants(tmp_path):
    flipped = tmp_path / "flip.hdr"
    flipped.write_bytes(_radiance_bytes(1, 2, b"\x80\x40\x20\x81" * 2).replace(b"-Y 1 +X 2", b"+Y 1 +X 2"))
    with pytest.raises(MapReadError, match=r"orientation '\+Y 1 \+X 2' is not supported.*-Y H \+X W"):
        read_map(flipped)
    xyze = tmp_path / "xyz.hdr"
    xyze.write_bytes(_radiance_bytes(1, 2, b"\x80\x40\x20\x81" * 2).replace(b"rle_rgbe", b"rle_xyze"))
    with pytest.raises(MapReadError, match="XYZE"):
        read_map(xyze)


def test_hdr_truncated(tmp_path):
    flat = tmp_path / "flat.hdr"
    flat.write_bytes(_radiance_bytes(2, 4, bytes([128, 64, 32, 129] * 5)))  # 5 of 8 pixels
    with pytest.raises(MapReadError, match="truncated Radiance file"):
        read_map(flat)
    data = write_map(tmp_path / "full.hdr", _random_map(seed=22)).read_bytes()
    cut = tmp_path / "cut.hdr"
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(MapReadError, match="truncated or corrupt Radiance file"):
        read_map(cut)


def test_hdr_text_file(tmp_path):
    (tmp_path / "notes.hdr").write_text("sky notes, not a picture\n")
    with pytest.raises(MapReadError, match=r"not a Radiance RGBE file.*re-export it as \.hdr"):
        read_map(tmp_path / "notes.hdr")


def test_hdr_write_refuses_what_rgbe_cannot_store(tmp_path):
    rgb = _random_map(seed=23)
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
    assert _leftovers(tmp_path) == []


# --------------------------------------------------------------------------- LDR


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


@pytest.mark.parametrize("keep", [0.3, 0.9])
def test_truncated_exr(tmp_path, keep):
    data = write_map(tmp_path / "full.exr", _random_map(seed=30), pixel_type="float", compression="none").read_bytes()
    cut = tmp_path / "cut.exr"
    cut.write_bytes(data[: int(len(data) * keep)])
    with pytest.raises(MapReadError, match="truncated or corrupt OpenEXR file"):
        read_map(cut)


def test_header_only_exr_is_corrupt(tmp_path):
    data = write_map(tmp_path / "full.exr", _random_map(seed=31)).read_bytes()
    (tmp_path / "head.exr").write_bytes(data[:40])
    with pytest.raises(MapReadError, match="truncated or corrupt OpenEXR file"):
        read_map(tmp_path / "head.exr")


def test_text_file_named_exr(tmp_path):
    (tmp_path / "readme.exr").write_text("this is a note about the rooftop shoot\n")
    with pytest.raises(MapReadError, match="not an OpenEXR file .*magic number"):
        read_map(tmp_path / "readme.exr")


def test_unknown_extension_lists_supported(tmp_path):
    (tmp_path / "map.bmp").write_bytes(b"BM" + b"\x00" * 60)
    with pytest.raises(MapReadError, match=r"unsupported file extension '\.bmp'; supported: \.exr, \.hdr, \.png"):
        read_map(tmp_path / "map.bmp")
    with pytest.raises(MapReadError, match=r"extension \(none\)"):
        read_map(tmp_path / "map")


def test_layer_on_non_exr(tmp_path):
    path = write_map(tmp_path / "m.hdr", _random_map(seed=32))
    with pytest.raises(MapReadError, match="applies to OpenEXR files only"):
        read_map(path, layer="sky")


def test_sha256_matches_hashlib(tmp_path):
    path = write_map(tmp_path / "m.exr", _random_map(seed=33))
    img = read_map(path)
    assert img.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert MapImage.from_array(img.rgb).sha256 is None


def test_extension_matching_is_case_insensitive(tmp_path):
    path = write_map(tmp_path / "UPPER.EXR", _random_map(seed=34), pixel_type="float")
    np.testing.assert_array_equal(read_map(path).rgb, _random_map(seed=34))


def test_supported_extensions():
    assert supported_extensions() == (".exr", ".hdr", ".png", ".jpg", ".jpeg", ".tif", ".tiff")
    assert supported_extensions(write=True) == (".exr", ".hdr")


# --------------------------------------------------------------------------- validation


def _map(rgb) -> MapImage:
    return MapImage.from_array(rgb)


def test_validate_clean_map_passes_unchanged():
    rgb = _random_map(seed=40)
    clean, notes = validate_map(_map(rgb))
    assert notes == []
    np.testing.assert_array_equal(clean.rgb, rgb)


def test_validate_non_finite_raises_with_counts():
    rgb = _random_map(seed=41)
    rgb[0, 0, 0] = np.nan
    rgb[1, 2, 1] = np.nan
    rgb[5, 5, 2] = np.inf
    rgb[6, 6, 0] = -np.inf
    with pytest.raises(MapValidationError, match=r"4 non-finite values \(2 NaN, 1 \+Inf, 1 -Inf\) in 4 pixels.*repair=True"):
        validate_map(_map(rgb))


def test_validate_repair_replaces_non_finite_and_leaves_input_alone():
    rgb = _random_map(seed=42)
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
    rgb = _random_map(seed=43)
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
    rgb = _random_map(seed=44, h=32, w=48)
    with pytest.raises(MapValidationError, match=r"48x32, not 2:1 .*allow_aspect=True"):
        validate_map(_map(rgb))
    clean, notes = validate_map(_map(rgb), allow_aspect=True)
    assert clean.width == 48 and any("not 2:1" in n for n in notes)


def test_validate_too_small():
    with pytest.raises(MapValidationError, match="4x2 pixels, smaller than the minimum 8x4"):
        validate_map(_map(_random_map(seed=45, h=2, w=4)))
    validate_map(_map(_random_map(seed=45, h=4, w=8)))  # the minimum itself passes
    with pytest.raises(MapValidationError, match="smaller than the minimum 64x32"):
        validate_map(_map(_random_map(seed=45, h=4, w=8)), min_size=(64, 32))


def test_validate_names_the_source(tmp_path):
    rgb = _random_map(seed=46)
    rgb[0, 0, 0] = np.nan
    path = write_map(tmp_path / "studio.exr", rgb, pixel_type="float")
    with pytest.raises(MapValidationError, match=r"studio\.exr: 1 non-finite"):
        validate_map(read_map(path))
    with pytest.raises(MapValidationError, match=r"^job 7: 1 non-finite"):
        validate_map(read_map(path), source="job 7")


def test_validate_notes_alpha_and_bad_shape():
    image = MapImage.from_array(_random_map(seed=47), alpha=np.ones((H, W)))
    _, notes = validate_map(image)
    assert any("alpha" in n for n in notes)
    with pytest.raises(MapValidationError, match=r"shape \(32, 64\), expected \(H, W, 3\)"):
        validate_map(MapImage(rgb=np.ones((H, W), np.float32)))


# --------------------------------------------------------------------------- writing


def test_write_bad_arguments(tmp_path):
    rgb = _random_map(seed=50)
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
    assert _leftovers(tmp_path) == []


def test_write_missing_parent_directory(tmp_path):
    with pytest.raises(MapWriteError, match=r"directory .*no_such_dir does not exist; create it first"):
        write_map(tmp_path / "no_such_dir" / "m.exr", _random_map(seed=51))
    assert _leftovers(tmp_path) == []


@pytest.mark.parametrize("ext", [".exr", ".hdr"])
def test_write_leaves_only_the_target(tmp_path, ext):
    path = write_map(tmp_path / f"m{ext}", _random_map(seed=52))
    assert _leftovers(tmp_path) == [f"m{ext}"]
    assert path.stat().st_mode & 0o777 != 0o600  # not mkstemp's private mode


def test_failed_write_leaves_nothing_and_keeps_old_file(tmp_path, monkeypatch):
    """A library failure half-way through the write: no temp file, the previous map intact."""
    target = write_map(tmp_path / "m.exr", _random_map(seed=53))
    old_bytes = target.read_bytes()

    def broken_writer(p, arr, pixel_type, compression, chroma, alpha):
        def write(tmp):
            with open(tmp, "wb") as fh:
                fh.write(b"\x76\x2f\x31\x01 partial")
            raise RuntimeError("disk full (simulated)")

        return write

    monkeypatch.setattr(eio, "_exr_writer", broken_writer)
    with pytest.raises(MapWriteError, match=r"writing failed \(disk full \(simulated\)\); nothing was written"):
        write_map(target, _random_map(seed=54))
    assert _leftovers(tmp_path) == ["m.exr"]
    assert target.read_bytes() == old_bytes


def test_failed_rename_leaves_no_temp_file(tmp_path):
    """The target is a non-empty directory, so os.replace fails after the data was written."""
    (tmp_path / "m.exr").mkdir()
    (tmp_path / "m.exr" / "keep.txt").write_text("x")
    with pytest.raises(MapWriteError, match="writing failed"):
        write_map(tmp_path / "m.exr", _random_map(seed=55))
    assert _leftovers(tmp_path) == ["m.exr"]
    assert os.listdir(tmp_path / "m.exr") == ["keep.txt"]


# --------------------------------------------------------------------------- MapImage


def test_describe_is_json_ready_and_has_no_pixels(tmp_path):
    path = write_map(tmp_path / "m.exr", _random_map(seed=60), chromaticities=BT709, alpha=np.ones((H, W)))
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
