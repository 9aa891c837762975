"""Tests of envsample.cli.inspect_cmd (``envsample inspect``): the facts of a map and of a table.

External references used below (each test names its own):
- Closed form: the traditional overcast sky L = Lz (1 + 2 cos theta) / 3 (Moon & Spencer 1942;
  CIE S 003/E:1996) integrates to 4*pi/3 * Lz over the upper hemisphere.
- Spherical to Cartesian coordinates (textbook): a direction at azimuth phi and elevation e is
  cos(e) (cos(phi) f + sin(phi) r) + sin(e) a in a frame (forward f, right r, up a); envsample's
  frames are documented in envsample.core.sphere.
- hashlib (Python standard library) as the reference SHA-256.
"""

from __future__ import annotations

import hashlib
import json
import math

import numpy as np
import pytest
from support.cli_helpers import H, W, assert_one_line_error, gradient, json_of, ldr_png, nan_map, write_test_map

from envsample.io.maps import write_map
from envsample.sampling.table import load_table


def _direction(az_deg, el_deg, up):
    """Textbook spherical -> Cartesian in envsample's documented frames (envsample.sphere)."""
    frames = {"y": ((0, 0, -1), (1, 0, 0), (0, 1, 0)), "z": ((0, 1, 0), (1, 0, 0), (0, 0, 1))}
    f, r, a = (np.array(v, float) for v in frames[up])
    az, el = math.radians(az_deg), math.radians(el_deg)
    return math.cos(el) * (math.cos(az) * f + math.sin(az) * r) + math.sin(el) * a


@pytest.mark.parametrize("up", ["y", "z"])
def test_inspect_map_finds_the_brightest_direction(run, tmp_path, up):
    rgb = gradient()
    path = write_test_map(tmp_path / "m.exr", rgb)
    facts = json_of(run("inspect", path, "--json", "--up", up))
    b = facts["brightest"]
    assert (b["row"], b["col"]) == (5, 40)
    # Pixel centre: u = 40.5/64 -> azimuth 360*(u - 0.5); v = 5.5/32 -> elevation 90 - 180*v.
    assert b["azimuth_deg"] == pytest.approx(360.0 * (40.5 / W - 0.5), abs=1e-3)
    assert b["elevation_deg"] == pytest.approx(90.0 - 180.0 * 5.5 / H, abs=1e-3)
    np.testing.assert_allclose(b["direction"], _direction(b["azimuth_deg"], b["elevation_deg"], up), atol=1e-6)
    assert facts["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert (facts["width"], facts["height"], facts["format"], facts["pixel_type"]) == (W, H, "exr", "float")
    assert facts["range"]["max"] == pytest.approx([400.0, 300.0, 200.0])
    assert facts["range"]["min"] == pytest.approx(rgb.min(axis=(0, 1)).tolist())
    assert facts["build"]["ok"] is True


def test_inspect_map_integral_of_the_overcast_sky(run, tmp_path):
    """Traditional overcast sky, black ground: integral of L = 4*pi/3 * Lz (closed form, Moon & Spencer 1942)."""
    path = tmp_path / "overcast.exr"
    assert run("sky", "overcast", "-o", path, "--size", "64x32", "--pixel-type", "float", "--zenith", "3").exit_code == 0
    facts = json_of(run("inspect", path, "--json"))
    assert facts["integrals"]["luminance"] == pytest.approx(4.0 * math.pi / 3.0 * 3.0, rel=1e-5)
    assert facts["integrals"]["rgb"] == pytest.approx([4.0 * math.pi] * 3, rel=1e-5)


def test_inspect_map_text_output(run, tmp_path):
    result = run("inspect", write_test_map(tmp_path / "m.exr", gradient()))
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    keys = [line.split()[0] for line in lines[:-1]]
    assert keys == ["map", "file", "sha256", "size", "range", "integral", "brightest", "build"]
    assert "not certified" in lines[-1]


def test_inspect_reports_problems_that_build_would_refuse(run, tmp_path):
    facts = json_of(run("inspect", nan_map(tmp_path), "--json"))
    assert facts["non_finite_values"] == 2
    assert facts["build"]["ok"] is False and "non-finite" in facts["build"]["problem"]
    result = run("inspect", ldr_png(tmp_path))
    assert result.exit_code == 0
    assert "refused:" in result.stdout and "LDR" in result.stdout


def test_inspect_table(run, tmp_path):
    """Overcast sky over a black ground: exactly the upper H/2 rows have nonzero probability."""
    path = tmp_path / "overcast.exr"
    run("sky", "overcast", "-o", path, "--size", "64x32")
    assert run("build", path, "-o", tmp_path / "t", "--raw").exit_code == 0
    table = load_table(tmp_path / "t")
    for target in (tmp_path / "t", tmp_path / "t.json", tmp_path / "t.npz"):
        facts = json_of(run("inspect", target, "--json"))
        assert facts["kind"] == "table"
        assert facts["cells"] == H * W and facts["nonzero_cells"] == H // 2 * W
        assert facts["largest_cell"]["probability"] == pytest.approx(float(table.cell_probability.max()))
        assert [f["path"].rsplit(".", 1)[1] for f in facts["files"]] == ["json", "npz", "bin"]
        assert facts["source"]["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    text = run("inspect", tmp_path / "t").stdout
    assert f"{H // 2 * W} of {H * W} have nonzero probability (50.0%)" in text


def test_inspect_rotated_table_moves_the_largest_cell(run, tmp_path):
    """rotation_deg R turns the map about the up axis: azimuths shift by R (envsample.sphere convention)."""
    src = write_test_map(tmp_path / "m.exr", gradient())
    run("build", src, "-o", tmp_path / "a")
    run("build", src, "-o", tmp_path / "b", "--rotation", "90")
    a = json_of(run("inspect", tmp_path / "a", "--json"))["largest_cell"]
    b = json_of(run("inspect", tmp_path / "b", "--json"))["largest_cell"]
    assert b["azimuth_deg"] == pytest.approx(((a["azimuth_deg"] + 90.0 + 180.0) % 360.0) - 180.0, abs=1e-3)
    assert b["elevation_deg"] == pytest.approx(a["elevation_deg"], abs=1e-9)


def test_inspect_refuses_a_tampered_table(run, tmp_path):
    run("build", write_test_map(tmp_path / "m.exr", gradient()), "-o", tmp_path / "t")
    doc = json.loads((tmp_path / "t.json").read_text())
    doc["arrays"]["cell_pdf"]["xxh64"] = "0" * 16
    (tmp_path / "t.json").write_text(json.dumps(doc))
    # The JSON alone reads no array (issue 8); --verify, or naming the array file itself, checks them.
    assert run("inspect", tmp_path / "t.json").exit_code == 0
    assert_one_line_error(run("inspect", tmp_path / "t.json", "--verify"), "fails its checksum")
    assert_one_line_error(run("inspect", tmp_path / "t.npz"), "fails its checksum")
    assert_one_line_error(run("inspect", tmp_path / "nothing.json"), "table metadata file not found")


def test_inspect_reads_no_array_unless_asked(run, tmp_path):
    """Issue 8: inspect of a table reads its JSON and checks file sizes; --verify (or naming the .npz
    or .bin) reads and checks every array."""
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    assert run("build", tmp_path / "m.exr", "-o", tmp_path / "t", "--raw").exit_code == 0
    data = bytearray((tmp_path / "t.bin").read_bytes())
    data[-3] ^= 0x20
    (tmp_path / "t.bin").write_bytes(bytes(data))
    r = run("inspect", tmp_path / "t")
    assert r.exit_code == 0 and "metadata and file sizes only" in r.output
    assert_one_line_error(run("inspect", tmp_path / "t.bin"), "fails its checksum", alone=True)
    (tmp_path / "t.bin").write_bytes(bytes(data[:-100]))
    assert_one_line_error(run("inspect", tmp_path / "t"), "truncated or padded", alone=True)
