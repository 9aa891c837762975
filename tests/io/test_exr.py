"""Tests of envsample.io.exr: reading and writing OpenEXR maps (through envsample.io.maps.read_map/write_map).

External references used below (each test names its own):
- The official OpenEXR bindings (``OpenEXR.File``) write files directly, not through envsample.io
  (tests/support/map_files.py), so reading them checks the reader against the library itself.
- IEEE 754-2008 binary16: 11-bit significand, so round-to-nearest has a relative error of at most
  2**-11 for normal numbers; largest finite value 65504.
- ITU-R BT.709-6 primaries and D65 white point (chromaticity round trip).
"""

from __future__ import annotations

import numpy as np
import OpenEXR
import pytest
from support.map_files import BT709, HALF_REL_ERROR, H, W, exr_header, leftovers, random_map, write_exr_direct

from envsample.errors import MapReadError
from envsample.io import maps as eio
from envsample.io.maps import read_map, write_map


@pytest.mark.parametrize("pixel_type", ["half", "float"])
def test_exr_round_trip_rgb(tmp_path, pixel_type):
    """float is exact; half is within 2**-11 relative (IEEE 754-2008 binary16)."""
    rgb = random_map()
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
    rgb = random_map(seed=1, h=16, w=32)
    img = read_map(write_map(tmp_path / "c.exr", rgb, pixel_type="float", compression=compression))
    assert img.compression == compression
    np.testing.assert_array_equal(img.rgb, rgb)


def test_exr_file_is_readable_by_the_bindings_and_marked_latlong(tmp_path):
    """What write_map produces is an ordinary EXR for the official library: RGB data and envmap=latlong."""
    rgb = random_map(seed=2)
    path = write_map(tmp_path / "m.exr", rgb, pixel_type="float")
    with OpenEXR.File(str(path)) as f:
        np.testing.assert_array_equal(f.channels()["RGB"].pixels, rgb)
        assert f.header()["envmap"] == OpenEXR.ENVMAP_LATLONG


def test_exr_rgba_keeps_alpha(tmp_path):
    rgb = random_map(seed=3)
    alpha = np.linspace(0.0, 1.0, H * W, dtype=np.float32).reshape(H, W)
    img = read_map(write_map(tmp_path / "a.exr", rgb, pixel_type="float", alpha=alpha))
    assert img.channels == ["R", "G", "B", "A"]
    np.testing.assert_array_equal(img.alpha, alpha)
    np.testing.assert_array_equal(img.rgb, rgb)


@pytest.mark.parametrize("dtype", [np.float16, np.float32])
def test_exr_single_channel_y_reads_as_grey(tmp_path, dtype):
    y = random_map(seed=4, high=1e3)[..., 0].astype(dtype)
    write_exr_direct(tmp_path / "y.exr", {"Y": y})
    img = read_map(tmp_path / "y.exr")
    assert img.channels == ["Y"]
    assert img.pixel_type == ("half" if dtype == np.float16 else "float")
    for k in range(3):
        np.testing.assert_array_equal(img.rgb[..., k], y.astype(np.float32))


def test_exr_separate_channels_keep_their_order(tmp_path):
    """Distinct constants per channel: R, G and B must land in rgb[..., 0], [1], [2]."""
    ones = np.ones((H, W), np.float32)
    write_exr_direct(tmp_path / "s.exr", {"B": 3.0 * ones, "R": 1.0 * ones, "G": 2.0 * ones})
    img = read_map(tmp_path / "s.exr")
    assert img.channels == ["R", "G", "B"]
    np.testing.assert_array_equal(img.rgb[0, 0], [1.0, 2.0, 3.0])


def test_exr_mixed_pixel_types(tmp_path):
    a = np.full((H, W), 0.5, np.float32)
    write_exr_direct(tmp_path / "mix.exr", {"R": a.astype(np.float16), "G": a, "B": a})
    assert read_map(tmp_path / "mix.exr").pixel_type == "float"


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
    beauty = random_map(seed=8)
    mask = np.full((H, W), 0.25, np.float32)
    parts = [
        OpenEXR.Part(exr_header(), {"RGB": np.ascontiguousarray(beauty)}, "beauty"),
        OpenEXR.Part(exr_header(OpenEXR.PIZ_COMPRESSION), {"Y": mask}, "mask"),
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
        OpenEXR.Part(exr_header(), {"RGB": random_map(seed=9)}, "east"),
        OpenEXR.Part(exr_header(), {"RGB": random_map(seed=10)}, "west"),
    ]
    with OpenEXR.File(parts) as f:
        f.write(str(tmp_path / "two.exr"))
    with pytest.raises(MapReadError, match=r"several layers \('east', 'west'\)"):
        read_map(tmp_path / "two.exr")
    np.testing.assert_array_equal(read_map(tmp_path / "two.exr", layer="west").rgb, random_map(seed=10))


def test_exr_chromaticities_preserved(tmp_path):
    """BT.709-6 primaries survive the float32 attribute and read back as the published decimals."""
    img = read_map(write_map(tmp_path / "c.exr", random_map(seed=11), chromaticities=BT709))
    assert img.chromaticities == BT709
    assert read_map(write_map(tmp_path / "n.exr", random_map(seed=11))).chromaticities is None


def test_exr_chromaticities_written_by_the_bindings(tmp_path):
    header = exr_header()
    header["chromaticities"] = tuple(v for k in ("red", "green", "blue", "white") for v in BT709[k])
    write_exr_direct(tmp_path / "c.exr", {"RGB": random_map(seed=12)}, header)
    assert read_map(tmp_path / "c.exr").chromaticities == BT709


def test_exr_non_contiguous_input_is_written_as_seen(tmp_path):
    """A reversed, strided view must be written as it looks, not as its parent buffer (design notes trap)."""
    base = random_map(seed=13, w=2 * W)
    view = base[:, ::-2, ::-1]
    img = read_map(write_map(tmp_path / "v.exr", view, pixel_type="float"))
    np.testing.assert_array_equal(img.rgb, view)


def test_exr_half_overflow_is_refused(tmp_path):
    """65504 is the largest finite binary16 value (IEEE 754-2008); 1e5 would become +Inf."""
    rgb = np.ones((H, W, 3), np.float32)
    rgb[3, 4, 0] = 1e5
    with pytest.raises(ValueError, match=r"1 values exceed the half-float maximum 65504.*pixel_type='float'"):
        write_map(tmp_path / "o.exr", rgb)
    assert leftovers(tmp_path) == []
    np.testing.assert_array_equal(read_map(write_map(tmp_path / "o.exr", rgb, pixel_type="float")).rgb, rgb)


def test_exr_cube_map_is_refused(tmp_path):
    header = exr_header()
    header["envmap"] = OpenEXR.ENVMAP_CUBE
    write_exr_direct(tmp_path / "cube.exr", {"RGB": random_map(seed=14)}, header)
    with pytest.raises(MapReadError, match="cube map"):
        read_map(tmp_path / "cube.exr")


def test_exr_without_colour_channels(tmp_path):
    z = np.ones((H, W), np.float32)
    write_exr_direct(tmp_path / "z.exr", {"Z": z, "N.x": z})
    with pytest.raises(MapReadError, match=r"no R, G, B or Y channels \(found: N.x, Z\)"):
        read_map(tmp_path / "z.exr")
    write_exr_direct(tmp_path / "ryby.exr", {"Y": z, "RY": z, "BY": z})
    with pytest.raises(MapReadError, match="luminance/chroma"):
        read_map(tmp_path / "ryby.exr")


def _layered(path, with_root=False):
    sky, ground = random_map(seed=5), random_map(seed=6)
    channels = {}
    for name, arr in (("sky", sky), ("ground", ground)):
        for k, c in enumerate("RGB"):
            channels[f"{name}.{c}"] = arr[..., k].copy()
    if with_root:
        root = random_map(seed=7)
        channels.update({c: root[..., k].copy() for k, c in enumerate("RGB")})
    write_exr_direct(path, channels)
    return sky, ground


@pytest.mark.parametrize("keep", [0.3, 0.9])
def test_truncated_exr(tmp_path, keep):
    data = write_map(tmp_path / "full.exr", random_map(seed=30), pixel_type="float", compression="none").read_bytes()
    cut = tmp_path / "cut.exr"
    cut.write_bytes(data[: int(len(data) * keep)])
    with pytest.raises(MapReadError, match="truncated or corrupt OpenEXR file"):
        read_map(cut)


def test_header_only_exr_is_corrupt(tmp_path):
    data = write_map(tmp_path / "full.exr", random_map(seed=31)).read_bytes()
    (tmp_path / "head.exr").write_bytes(data[:40])
    with pytest.raises(MapReadError, match="truncated or corrupt OpenEXR file"):
        read_map(tmp_path / "head.exr")


def test_text_file_named_exr(tmp_path):
    (tmp_path / "readme.exr").write_text("this is a note about the rooftop shoot\n")
    with pytest.raises(MapReadError, match="not an OpenEXR file .*magic number"):
        read_map(tmp_path / "readme.exr")
