"""Tests of envsample.cli.sky_cmd (``envsample sky``): invented analytic skies written as maps.

External references used below (each test names its own):
- Closed forms: a constant map L integrates to 4*pi*L over the sphere; a latitude-longitude
  rectangle [a0, a1] x [e0, e1] subtends (a1 - a0) * (sin e1 - sin e0) steradians (textbook
  spherical geometry).
- IEEE 754-2008 binary16: largest finite value 65504.
"""

from __future__ import annotations

import math

import pytest
from support.cli_helpers import assert_one_line_error, json_of

from envsample.io.maps import read_map


def test_sky_uniform_integral(run, tmp_path):
    """Constant radiance 2.5: integral 4*pi*2.5 (closed form)."""
    out = tmp_path / "maps" / "u.exr"
    result = run("sky", "uniform", "-o", out, "--size", "64x32", "--radiance", "2.5")
    assert result.exit_code == 0, result.output
    img = read_map(out)
    assert (img.width, img.height, img.pixel_type) == (64, 32, "half")
    assert f"Y {4.0 * math.pi * 2.5:.4g}" in result.stdout


def test_sky_studio_lights_match_the_rectangle_solid_angle(run, tmp_path):
    """Integral = 4*pi*bg + sum (L_k - bg) * (a1 - a0) * (sin e1 - sin e0) (lat-long rectangle, closed form)."""
    out = tmp_path / "studio.exr"
    lights = [(-50.0, -20.0, 10.0, 40.0, 5.0), (100.0, 130.0, -5.0, 25.0, 2.0)]
    args = [a for light in lights for a in ("--light", ",".join(f"{v:g}" for v in light))]
    result = run("sky", "studio", "-o", out, "--size", "128x64", "--pixel-type", "float", "--background", "0.1", *args)
    assert result.exit_code == 0, result.output
    bg = 0.1
    expected = 4.0 * math.pi * bg + sum(
        (lk - bg) * math.radians(a1 - a0) * (math.sin(math.radians(e1)) - math.sin(math.radians(e0)))
        for a0, a1, e0, e1, lk in lights
    )
    facts = json_of(run("inspect", out, "--json"))
    assert facts["integrals"]["luminance"] == pytest.approx(expected, rel=1e-5)


def test_sky_sun_position_is_found_by_inspect(run, tmp_path):
    out = tmp_path / "sun.hdr"
    result = run("sky", "sun", "-o", out, "--size", "256x128", "--elevation", "25", "--azimuth", "40")
    assert result.exit_code == 0, result.output
    assert "azimuth 40 deg, elevation 25 deg" in result.stdout
    facts = json_of(run("inspect", out, "--json"))
    assert facts["format"] == "hdr"
    pixel_deg = 360.0 / 256
    assert facts["brightest"]["azimuth_deg"] == pytest.approx(40.0, abs=pixel_deg)
    assert facts["brightest"]["elevation_deg"] == pytest.approx(25.0, abs=pixel_deg)


def test_sky_refuses_options_of_other_kinds(run, tmp_path):
    out = tmp_path / "u.exr"
    assert_one_line_error(run("sky", "uniform", "-o", out, "--elevation", "10"),
                           "--elevation does not apply to sky 'uniform'; options for it: --radiance")
    assert_one_line_error(run("sky", "studio", "-o", out, "--light", "1,2,3"), "is not AZ0,AZ1,EL0,EL1,RADIANCE")
    assert_one_line_error(run("sky", "sun", "-o", out, "--elevation", "95"), "--elevation")
    assert_one_line_error(run("sky", "sun", "-o", tmp_path / "s.png"), "write .exr or .hdr")
    assert list(tmp_path.iterdir()) == []


def test_sky_half_overflow_asks_for_float(run, tmp_path):
    """A sun brighter than the half-float maximum 65504 (IEEE 754 binary16) is refused as half."""
    out = tmp_path / "sun.exr"
    args = ("sky", "sun", "-o", out, "--size", "64x32", "--sun-illuminance", "4000")
    assert_one_line_error(run(*args), "above the half-float maximum 65504; use --pixel-type float")
    assert not out.exists()
    assert run(*args, "--pixel-type", "float").exit_code == 0
    assert read_map(out).rgb.max() > 65504.0


def test_sky_refuses_an_enormous_size_before_allocating(run, tmp_path):
    assert_one_line_error(run("sky", "uniform", "-o", tmp_path / "s.exr", "--size", "200000x100000"), "needs about",
                          alone=True)
    assert not (tmp_path / "s.exr").exists()
