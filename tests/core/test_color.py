"""Tests of envsample.core.color: luminance of images under named primaries.

Reference: colour-science's ``colour.RGB_to_XYZ`` with the colourspaces of the same published primaries
(tests/support/colour_spaces.py); the weights themselves are tested in tests/core/test_constants.py.
"""

from __future__ import annotations

import colour
import numpy as np
import pytest
from support.colour_spaces import COLOUR_SPACES

from envsample.core.color import PRIMARY_NAMES, canonical_primaries, luminance
from envsample.core.constants import PRIMARIES, luminance_weights

#: luminance() works in float32 (images are float32): about 2**-24 relative per operation.
FLOAT32_RTOL = 2e-6



@pytest.mark.parametrize("name, space", sorted(COLOUR_SPACES.items()))
def test_luminance_of_images_matches_colour_rgb_to_xyz(name, space, rng):
    """luminance() equals the Y channel of colour.RGB_to_XYZ (no chromatic adaptation, the space's own
    white point) on a random HDR image, clamped at zero."""
    cs = colour.RGB_COLOURSPACES[space]
    rgb = (rng.random((12, 24, 3)) ** 3 * 50.0).astype(np.float32)
    xyz = colour.RGB_to_XYZ(
        rgb.astype(np.float64), cs, illuminant=cs.whitepoint, chromatic_adaptation_transform=None
    )
    expected = np.maximum(xyz[..., 1], 0.0)
    got = luminance(rgb, name)
    assert got.dtype == np.float32 and got.shape == (12, 24)
    np.testing.assert_allclose(got, expected, rtol=FLOAT32_RTOL, atol=1e-6)



def test_aces2065_negative_blue_weight_is_clamped_at_zero():
    """colour-science's ACES2065-1 Y row has a negative blue weight (about -0.0721): saturated blue
    would give negative luminance; envsample clamps it at zero (color.luminance docstring)."""
    w = colour.RGB_COLOURSPACES["ACES2065-1"].matrix_RGB_to_XYZ[1]
    assert w[2] < 0
    rgb = np.array([[0.0, 0.0, 1.0], [0.1, 0.0, 1.0], [1.0, 1.0, 1.0], [0.0, 0.2, 1.0]], dtype=np.float32)
    raw = rgb.astype(np.float64) @ w
    assert raw[0] < 0 and raw[1] < 0 and raw[3] > 0
    got = luminance(rgb, "aces2065-1")
    np.testing.assert_array_equal(got[:2], [0.0, 0.0])
    assert got[2] == pytest.approx(1.0, rel=FLOAT32_RTOL)
    assert got[3] == pytest.approx(raw[3], rel=FLOAT32_RTOL)
    assert np.all(got >= 0)



def test_max_and_mean_primaries(rng):
    """'max' and 'mean' weight by the largest channel and the channel mean (common practice)."""
    rgb = rng.random((5, 7, 3)).astype(np.float32)
    np.testing.assert_array_equal(luminance(rgb, "max"), rgb.max(axis=-1))
    np.testing.assert_allclose(luminance(rgb, "mean"), rgb.mean(axis=-1), rtol=FLOAT32_RTOL)



def test_shapes_scalar_vector_grid(rng):
    """(3,) -> (), (N, 3) -> (N,), (H, W, 3) -> (H, W); float32 out for float64 or float32 in."""
    assert luminance(np.ones(3)).shape == ()
    assert luminance(rng.random((9, 3))).shape == (9,)
    out = luminance(rng.random((4, 6, 3)))
    assert out.shape == (4, 6) and out.dtype == np.float32
    with pytest.raises(ValueError, match=r"rgb must have shape \(\.\.\., 3\)"):
        luminance(np.ones((4, 4)))



def test_nan_is_not_hidden():
    """A NaN pixel stays NaN (it is rejected or repaired by map validation, not silently zeroed here)."""
    assert np.isnan(luminance(np.array([np.nan, 1.0, 1.0], dtype=np.float32)))



@pytest.mark.parametrize("alias, canonical", [("sRGB", "bt709"), ("rec709", "bt709"), ("Rec2020", "bt2020"),
                                              ("AP1", "acescg"), ("ap0", "aces2065-1"), ("BT709", "bt709")])
def test_aliases(alias, canonical):
    assert canonical_primaries(alias) == canonical
    np.testing.assert_array_equal(luminance_weights(alias), luminance_weights(canonical))



def test_unknown_primaries_error_lists_valid_names():
    with pytest.raises(ValueError, match=r"unknown primaries 'p3'; valid names: .*bt709.*aces2065-1.*max.*mean"):
        luminance(np.ones(3), "p3")
    with pytest.raises(ValueError, match=r"unknown primaries 'dci'; valid names: .*bt2020.*srgb"):
        luminance_weights("dci")
    with pytest.raises(ValueError, match="unknown primaries"):
        canonical_primaries("")



def test_every_listed_name_works():
    for name in PRIMARY_NAMES:
        assert luminance(np.full(3, 2.0, dtype=np.float32), name) == pytest.approx(2.0, rel=FLOAT32_RTOL)
    assert set(PRIMARIES) == set(COLOUR_SPACES)
