"""Tests of envsample.core.latlong: sizes, power-preserving reduction, block means, per-row sums.

Exact solid angle of a lat-long row, (cos theta_i - cos theta_{i+1}) 2 pi / W (textbook spherical
geometry), written out here; numpy's own reductions are the reference for the block means and sums.
"""

from __future__ import annotations

import numpy as np
import pytest

from envsample.core.latlong import block_mean, parse_size, reduce_power, row_channel_sums


def _row_solid_angles(h: int, w: int) -> np.ndarray:
    t = np.pi * np.arange(h + 1) / h
    return 2.0 * np.pi / w * (np.cos(t[:-1]) - np.cos(t[1:]))


def test_parse_size():
    assert parse_size(None) is None
    assert parse_size("2048x1024") == (2048, 1024)
    assert parse_size(" 64 X 32 ") == (64, 32)
    assert parse_size((16, 8)) == (16, 8)
    for bad in ("2048", "ax3", "10x-2"):
        with pytest.raises(ValueError, match="WIDTHxHEIGHT"):
            parse_size(bad)
    with pytest.raises(ValueError, match="size must be positive"):
        parse_size((0, 8))


@pytest.mark.parametrize("size", [(20, 12), (16, 8), (64, 32), (7, 3)])
def test_reduce_power_preserves_each_channel(size, rng):
    """sum(L dOmega) is the same before and after, for dividing and non-dividing sizes."""
    rgb = rng.lognormal(0.0, 2.0, (32, 64, 3)).astype(np.float32)
    out = reduce_power(rgb, size)
    w, h = size
    assert out.shape == (h, w, 3) and out.dtype == np.float32
    p_in = np.einsum("hwc,h->c", rgb.astype(np.float64), _row_solid_angles(32, 64))
    p_out = np.einsum("hwc,h->c", out.astype(np.float64), _row_solid_angles(h, w))
    np.testing.assert_allclose(p_out, p_in, rtol=1e-5)


def test_block_mean_matches_numpy_and_honours_the_mask(rng):
    a = rng.random((9, 14, 3))
    out = block_mean(a, 3)
    assert out.shape == (3, 4, 3)  # the ragged right column block is dropped
    np.testing.assert_allclose(out[1, 2], a[3:6, 6:9].mean(axis=(0, 1)))
    valid = a[..., 0] > 0.5
    masked = block_mean(a[..., 0], 3, valid=valid)
    block, ok = a[3:6, 6:9, 0], valid[3:6, 6:9]
    expected = block[ok].mean() if ok.any() else np.nan
    np.testing.assert_allclose(masked[1, 2], expected)
    assert np.isnan(block_mean(np.ones((2, 2)), 2, valid=np.zeros((2, 2), bool))[0, 0])
    with pytest.raises(ValueError, match="positive integer"):
        block_mean(a, 0)


def test_row_channel_sums_match_numpy(rng):
    img = rng.random((37, 300, 3)).astype(np.float32)
    np.testing.assert_allclose(row_channel_sums(img), img.astype(np.float64).sum(axis=1), rtol=1e-12)
