"""Tests of envsample.qa.context (CheckContext): what every check reads, from one scan of the map.

Outside references: closed forms (a constant map L has luminance integral 4 pi L; a polar cap of
half-angle a holds the share (1 - cos a) / 2 of the sphere, Archimedes' hat-box theorem); the sRGB
decoding of IEC 61966-2-1:1999 (code value 0.5 -> ((0.5 + 0.055) / 1.055)^2.4 = 0.2140); IEEE 754
non-finite values.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from envsample.io.maps import MapImage, read_map
from envsample.qa.context import SUBSAMPLE_SIZE, CheckContext

H, W = 64, 128


def _ctx(rgb, profile):
    return CheckContext(MapImage.from_array(np.asarray(rgb, np.float32)), profile)


def test_defects_are_cleaned_for_the_other_checks_and_the_raw_map_kept(profile):
    rgb = np.full((H, W, 3), 0.5, np.float32)
    rgb[3, 4] = (np.nan, np.inf, -np.inf)
    rgb[5, 6, 1] = -2.0
    ctx = _ctx(rgb, profile)
    assert not ctx.all_finite and not ctx.clean
    assert np.array_equal(ctx.rgb[3, 4], [0, 0, 0]) and ctx.rgb[5, 6, 1] == 0.0
    bad = np.zeros((H, W, 3), bool)
    bad[3, 4] = bad[5, 6, 1] = True
    assert np.array_equal(ctx.rgb[~bad], rgb[~bad])
    assert np.isnan(ctx.raw[3, 4, 0]) and ctx.raw[5, 6, 1] == -2.0  # the map as read
    clean = _ctx(np.full((H, W, 3), 0.5), profile)
    assert clean.clean and clean.rgb is clean.raw  # no copy of a clean map


def test_total_power_of_a_constant_map_is_four_pi_times_its_luminance(profile):
    ctx = _ctx(np.full((H, W, 3), 2.5), profile)
    assert ctx.total_power == pytest.approx(4.0 * math.pi * 2.5, rel=1e-6)
    assert ctx.row_power.shape == (H,) and ctx.row_power.sum() == pytest.approx(ctx.total_power)
    assert ctx.peak_luminance == pytest.approx(2.5, rel=1e-6)


def test_quantiles_are_weighted_by_solid_angle(profile):
    """A bright polar cap (theta < 45 deg, 3.0) over a dim rest (1.0): the cap holds (1 - cos 45 deg) / 2 =
    14.6 % of the sphere, so the median is the dim level and the 90th percentile the bright one (to 0.4 %),
    although the cap is a quarter of the pixel rows."""
    rgb = np.ones((H, W, 3), np.float32)
    rgb[: H // 4] = 3.0
    ctx = _ctx(rgb, profile)
    share = (1.0 - math.cos(math.pi / 4)) / 2.0
    assert share < 0.5 and 1.0 - share < 0.9
    assert ctx.median_luminance == pytest.approx(1.0, rel=4e-3)
    assert ctx.quantile(0.9) == pytest.approx(3.0, rel=4e-3)
    assert ctx.quantile(0.8) == pytest.approx(1.0, rel=4e-3)


def test_an_ldr_image_is_srgb_decoded(tmp_path, profile):
    import imageio.v3 as iio

    iio.imwrite(tmp_path / "photo.png", np.full((32, 64, 3), 128, np.uint8))
    ctx = CheckContext(read_map(tmp_path / "photo.png"), profile)
    v = 128 / 255
    assert ctx.rgb[0, 0, 0] == pytest.approx(((v + 0.055) / 1.055) ** 2.4, rel=1e-5)
    assert ctx.channel_medians == pytest.approx([((v + 0.055) / 1.055) ** 2.4] * 3, rel=1e-5)


def test_pixel_directions_and_the_subsample_follow_the_map(profile):
    ctx = _ctx(np.ones((H, W, 3)), profile)
    theta, phi = ctx.pixel_directions
    np.testing.assert_allclose(theta, (np.arange(H) + 0.5) * math.pi / H)
    np.testing.assert_allclose(phi, (np.arange(W) + 0.5) * 2 * math.pi / W - math.pi)
    assert ctx.subsample.shape == (H * W, 3)  # a small map is kept whole
    big = _ctx(np.ones((1024, 2048, 3)), profile)
    assert big.subsample.shape[0] <= SUBSAMPLE_SIZE
    assert ctx.settings("sun") == profile.section("sun")
