"""Tests of envsample.core.constants: the luminance rows derived from the published primaries.

External references used here:
- colour-science (the ``colour`` package): ``colour.RGB_COLOURSPACES[name].matrix_RGB_to_XYZ``,
  whose second row is the luminance (Y) row of each RGB space, and ``colour.RGB_to_XYZ``.
  colour-science derives its matrices from the published primaries: ITU-R BT.709-6,
  ITU-R BT.2020-2, Academy S-2014-004 (ACEScg / AP1) and SMPTE ST 2065-1 (ACES2065-1 / AP0).
- SMPTE RP 177-1993: the normalised primary matrix maps the white point to Y = 1, so
  the luminance weights of every space sum to 1.

Choice documented and tested here: envsample uses the BT.709 Y row *derived* from the
primaries (0.212639, 0.715169, 0.072192), i.e. colour-science's "ITU-R BT.709" entry,
not its "sRGB" entry, which carries the four-decimal rounding (0.2126, 0.7152, 0.0722)
printed in IEC 61966-2-1.  The two differ in the fourth decimal place.
"""

from __future__ import annotations

import colour
import numpy as np
import pytest
from support.colour_spaces import COLOUR_SPACES

from envsample.core.color import luminance
from envsample.core.constants import luminance_weights

#: colour-science computes the same normalised primary matrix in float64; only rounding differs.
WEIGHT_RTOL = 1e-9
#: luminance() works in float32 (images are float32): about 2**-24 relative per operation.
FLOAT32_RTOL = 2e-6



@pytest.mark.parametrize("name, space", sorted(COLOUR_SPACES.items()))
def test_luminance_weights_match_colour_science(name, space):
    """Y row of colour-science's RGB-to-XYZ matrix (colour.RGB_COLOURSPACES[space].matrix_RGB_to_XYZ[1])."""
    expected = colour.RGB_COLOURSPACES[space].matrix_RGB_to_XYZ[1]
    np.testing.assert_allclose(luminance_weights(name), expected, rtol=WEIGHT_RTOL, atol=1e-12)



@pytest.mark.parametrize("name", sorted(COLOUR_SPACES))
def test_luminance_weights_sum_to_one(name):
    """SMPTE RP 177-1993: the white point (R = G = B = 1) has Y = 1."""
    assert luminance_weights(name).sum() == pytest.approx(1.0, abs=1e-12)



def test_bt709_uses_derived_row_not_rounded_srgb_row():
    """We use the derived BT.709 row (colour-science "ITU-R BT.709": 0.212639, 0.715169, 0.072192),
    not colour-science's rounded "sRGB" row (0.2126, 0.7152, 0.0722).  They agree when rounded to
    four decimals but differ in the fourth decimal place (largest difference ~4e-5)."""
    derived = colour.RGB_COLOURSPACES["ITU-R BT.709"].matrix_RGB_to_XYZ[1]
    rounded = colour.RGB_COLOURSPACES["sRGB"].matrix_RGB_to_XYZ[1]
    ours = luminance_weights("bt709")
    np.testing.assert_allclose(ours, [0.212639, 0.715169, 0.072192], atol=5e-7)
    np.testing.assert_allclose(rounded, [0.2126, 0.7152, 0.0722], atol=1e-12)
    diff = np.abs(ours - rounded)
    assert diff.max() < 5e-5  # same to four decimals ...
    assert diff.max() > 1e-5  # ... but not the same numbers: the difference is in the fourth decimal
    np.testing.assert_array_equal(np.round(ours, 4), rounded)
    np.testing.assert_allclose(ours, derived, rtol=WEIGHT_RTOL)
    # The "srgb" alias shares the BT.709 primaries, so it gets the derived row too.
    np.testing.assert_array_equal(luminance_weights("srgb"), ours)
    # The difference is visible in float32 luminance of a pure red pixel.
    y_red = luminance(np.array([1.0, 0.0, 0.0], dtype=np.float32))
    assert y_red == pytest.approx(derived[0], rel=FLOAT32_RTOL)
    assert abs(float(y_red) - 0.2126) > 10 * np.finfo(np.float32).eps
