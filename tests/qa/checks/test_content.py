"""Tests of envsample.qa.checks.content: ``hdr`` judges the data, not the container.

Sources: 8-bit quantisation k/255 and the sRGB EOTF (IEC 61966-2-1:1999); IEEE 754 binary16 (half)
storage; a merge of bracketed 8-bit exposures with sensor noise by Debevec & Malik (1997), eq. 6;
Radiance RGBE (Ward 1991) for .hdr files.
"""

from __future__ import annotations

import numpy as np
import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.io.maps import write_map
from envsample.qa.run import check_map
from envsample.synth import skies


def _rooftop(width=256):
    return skies.make_sky("rooftop", width=width)


@pytest.mark.parametrize("scale", [1.0, 37.5, 0.01])
@pytest.mark.parametrize("srgb", [False, True])
@pytest.mark.parametrize("width", [256, 512])
def test_eight_bit_data_in_a_half_exr_fails_hdr(tmp_path, profile, scale, srgb, width):
    """Issue 9: values on a k/255 grid (linear or sRGB code values), maximum 1.0 times any exposure
    pushed afterwards, saved as half floats, passed `hdr` because only the container was looked at."""
    path = tmp_path / "ldr.exr"
    write_map(path, eight_bit(_rooftop(width), scale=scale, srgb=srgb), pixel_type="half")
    report = check_map(path, profile=profile)
    c = report["hdr"]
    assert c.severity == "fail", c.message
    assert "8-bit pipeline" in c.message and "re-export the linear, scene-referred merge" in c.remedy
    fitted = {e["lattice"] for e in c.details["lattice"]}
    assert fitted == {"sRGB 8-bit code values" if srgb else "linear 8-bit (k/255)"}
    assert all(e["scale"] == pytest.approx(scale, rel=2e-3) for e in c.details["lattice"])
    # Other checks may see the clip at the top, nothing else fails without reason.
    fails = {k for k, v in non_pass(report).items() if v == "fail"}
    assert fails <= {"hdr", "clipping"}


def test_sixteen_bit_data_in_a_float_exr_fails_hdr(profile):
    """A 16-bit pipeline: at most 65536 levels per channel over many stops (float32 container)."""
    img = _rooftop(1024)
    x = np.clip(img / np.percentile(img, 99.0), 0, 1)
    q = (np.round(x * 65535.0) / 65535.0).astype(np.float32)
    c = check_map(q, profile=profile, checks=["hdr"])["hdr"]
    assert c.severity == "fail" and any(e["bits"] == 16 for e in c.details["lattice"])


def test_display_referred_data_without_a_lattice_fails_hdr(profile):
    """Resampled display-referred data has many levels but keeps a pile-up at exactly 1.0 and few stops."""
    img = _rooftop(512).astype(np.float64)
    x = np.clip(img / np.percentile(img, 90.0), 0, 1)
    x = (x + np.roll(x, 1, axis=1)) / 2.0  # a resize: the levels are no longer on the lattice
    x[x > 0.999] = 1.0
    c = check_map(x.astype(np.float32), profile=profile, checks=["hdr"])["hdr"]
    assert c.severity == "fail" and "display-referred" in c.message


@pytest.mark.parametrize("make", [
    lambda: debevec_malik_merge(_rooftop(256)),
    lambda: debevec_malik_merge(sunny(512), exposures=(1 / 4096, 1 / 256, 1 / 16, 1.0, 16.0)),
    lambda: debevec_malik_merge(_rooftop(512) * 30.0, noise=0.01, seed=3),
], ids=["rooftop", "sun", "bright-noisy"])
def test_merged_captures_with_sensor_noise_pass_hdr_and_clipping(profile, make):
    """Real HDR: bracketed 8-bit exposures with noise, merged (Debevec & Malik 1997)."""
    report = check_map(make(), profile=profile, checks=["hdr", "clipping", "dynamic-range"])
    assert report["hdr"].severity == "pass", report["hdr"].message
    assert report["clipping"].severity == "pass", report["clipping"].message


@pytest.mark.parametrize("make", [
    lambda: sunny(), lambda: skies.make_sky("overcast", width=256), _rooftop,
    lambda: skies.make_sky("sun", width=256), lambda: debevec_malik_merge(_rooftop(256)),
], ids=["sun-overcast", "overcast", "rooftop", "sky-sun", "merged"])
def test_rgbe_hdr_files_pass_hdr(tmp_path, profile, make):
    """RGBE mantissas are 8-bit but the exponents differ per pixel: not 8-bit data (Ward 1991)."""
    path = tmp_path / "m.hdr"
    write_map(path, make())
    report = check_map(path, profile=profile)
    assert report.image["pixel_type"] == "rgbe"
    assert report["hdr"].severity == "pass", report["hdr"].message


@pytest.mark.parametrize("scale", [1.0, 20.0])
def test_linear_eight_bit_data_in_an_rgbe_file_fails_hdr(tmp_path, profile, scale):
    """The fit runs on the levels RGBE keeps exactly enough (codes below 32): 8-bit data stay 8-bit data.
    (sRGB-coded 8-bit data in RGBE are caught only when display-referred signs remain: few of their
    levels fall below code 32.)"""
    path = tmp_path / "ldr.hdr"
    write_map(path, eight_bit(_rooftop(512), scale=scale))
    c = check_map(path, profile=profile, checks=["hdr"])["hdr"]
    assert c.severity == "fail" and "8-bit pipeline" in c.message
