"""Tests of envsample.qa.checks.container: hdr, pixel-type, channels, chromaticities.

IEC 61966-2-1: the sRGB encoding of the 8-bit test image.  Chromaticities of ACES AP1 and ITU-R BT.709
(envsample.core.constants, from the standards).
"""

from __future__ import annotations

import numpy as np
import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.core.constants import PRIMARIES
from envsample.io.maps import MapImage
from envsample.qa.run import check_map
from envsample.synth import skies


def test_8bit_png_fails_hdr_only(tmp_path, profile):
    imageio = pytest.importorskip("imageio.v3")
    sky = skies.make_sky("overcast", width=W, ground_albedo=0.2)
    code = np.round(255 * srgb_encode(0.9 * sky / sky.max())).astype(np.uint8)
    path = tmp_path / "sky.png"
    imageio.imwrite(path, code)
    report = check_map(path, profile=profile)
    assert report.readable
    assert non_pass(report) == {"hdr": "fail", "pixel-type": "warn"}
    assert report["pixel-type"].value == "uint8"
    assert report.exit_code() == 1



def test_alpha_below_one_warns_channels(profile):
    rgb = sunny()
    alpha = np.ones(rgb.shape[:2], np.float32)
    alpha[:4] = 0.5
    report = check_map(MapImage.from_array(rgb, alpha=alpha), profile=profile)
    assert non_pass(report) == {"channels": "warn"}



def test_chromaticities_mismatch_warns_and_names_the_match(profile):
    p = PRIMARIES["acescg"]
    chroma = {"red": p["r"], "green": p["g"], "blue": p["b"], "white": p["w"]}
    report = check_map(MapImage.from_array(sunny(), chromaticities=chroma), profile=profile)
    assert non_pass(report) == {"chromaticities": "warn"}
    assert "acescg" in report["chromaticities"].remedy
    # The same file passes when the profile assumes its primaries.
    matched = check_map(MapImage.from_array(sunny(), chromaticities=chroma),
                           profile={"profile": {"primaries": "acescg"}}, checks=["chromaticities"])
    assert matched["chromaticities"].severity == "pass"
    bt709 = PRIMARIES["bt709"]
    same = {"red": bt709["r"], "green": bt709["g"], "blue": bt709["b"], "white": bt709["w"]}
    assert check_map(MapImage.from_array(sunny(), chromaticities=same),
                        checks=["chromaticities"])["chromaticities"].severity == "pass"
