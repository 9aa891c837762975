"""Tests of envsample.cli.build_cmd (``envsample build``): tables from maps, options, refused input.

External references used below (each test names its own):
- Closed forms: a constant map L integrates to 4*pi*L over the sphere.
- hashlib (Python standard library) as the reference SHA-256.
- The OpenEXR bindings write the layered file directly (not through envsample.io).

Hangs run in a child process under a timeout, so that a regression fails instead of blocking the
suite (issue 12).  Small maps only.
"""

from __future__ import annotations

import hashlib
import json
import math
import subprocess
import sys

import numpy as np
import pytest
from support.cli_helpers import H, W, assert_one_line_error, gradient, ldr_png, nan_map, write_test_map

from envsample.io.maps import write_map
from envsample.sampling.table import load_table
from envsample.synth.skies import make_sky

TIMEOUT = 120


def test_build_of_an_all_denormal_map_finishes_and_writes_a_table_that_loads(tmp_path):
    """Issue 12, items 1 and 8: an all-1e-45 map builds a loadable table (luminance scaled internally)."""
    write_map(tmp_path / "tiny.exr", np.full((16, 32, 3), 1e-45, np.float32), pixel_type="float")
    r = subprocess.run([sys.executable, "-c", "from envsample.cli import main; main()", "build", "tiny.exr", "-o", "t"],
                       cwd=tmp_path, capture_output=True, text=True, timeout=TIMEOUT)
    assert r.returncode == 0, r.stderr
    t = load_table(tmp_path / "t")
    assert np.isfinite(t.cell_pdf).all() and t.cell_probability.sum() == pytest.approx(1.0, abs=1e-6)


@pytest.mark.parametrize("size, message", [("2048x1024", "larger than the 64x32 map"), ("60x20", "not 2:1"),
                                           ("100000x50000", "larger than the 64x32 map")])
def test_build_refuses_a_size_above_the_map_or_not_2_to_1(run, tmp_path, size, message):
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    assert_one_line_error(run("build", tmp_path / "m.exr", "-o", tmp_path / "t", "--size", size), message, alone=True)
    assert not list(tmp_path.glob("t*"))


def test_build_refuses_a_request_above_the_memory_limit_naming_the_estimate(run, tmp_path):
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    assert_one_line_error(run("build", tmp_path / "m.exr", "-o", tmp_path / "t", "--max-memory", "2k"),
                    "needs about", alone=True)
    assert run("build", tmp_path / "m.exr", "-o", tmp_path / "t", "--max-memory", "1G").exit_code == 0


def test_build_options_one_method_and_embedded_radiance(run, tmp_path):
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    r = run("build", tmp_path / "m.exr", "-o", tmp_path / "t", "--cell-choice", "alias", "--embed-radiance")
    assert r.exit_code == 0, r.output
    doc = json.loads((tmp_path / "t.json").read_text())
    assert doc["options"]["cell_choice"] == "alias" and doc["radiance"] == "embedded"
    assert "alias cell choice only" in r.output


def test_build_refuses_a_prefix_whose_files_would_replace_the_map(run, tmp_path):
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    (tmp_path / "x.npz").write_bytes(b"")  # a map called x.npz is unlikely, but a prefix must never name the input
    assert_one_line_error(run("build", tmp_path / "x.npz", "-o", tmp_path / "x"), "would overwrite the input",
                          alone=True)


def _unknown_extension(d):
    p = d / "map.bmp"
    p.write_bytes(b"BM" + bytes(64))
    return p


def _empty(d):
    p = d / "empty.exr"
    p.write_bytes(b"")
    return p


def _truncated(d):
    good = write_test_map(d / "good.exr", gradient())
    data = good.read_bytes()
    p = d / "truncated.exr"
    p.write_bytes(data[: len(data) // 2])
    return p


def _text(d):
    p = d / "notes.exr"
    p.write_text("shot list for the rooftop, not an image\n")
    return p


def _square(d):
    return write_test_map(d / "square.exr", np.ones((32, 32, 3)))


def _tiny(d):
    return write_test_map(d / "tiny.exr", np.ones((3, 6, 3)))


def _missing(d):
    return d / "missing.exr"


BAD_INPUTS = [
    (_unknown_extension, "unsupported file extension '.bmp'"),
    (_empty, "file is empty (0 bytes)"),
    (_truncated, "truncated or corrupt OpenEXR file"),
    (_text, "not an OpenEXR file"),
    (ldr_png, "is an 8-bit LDR image"),
    (nan_map, "2 non-finite values (1 NaN, 1 +Inf, 0 -Inf) in 2 pixels; fix the source map or pass --repair"),
    (_square, "map is 32x32, not 2:1"),
    (_tiny, "map is 6x3 pixels, smaller than the minimum 8x4"),
    (_missing, "file not found"),
]


@pytest.mark.parametrize("make, match", BAD_INPUTS, ids=[m.__name__.strip("_") for m, _ in BAD_INPUTS])
def test_bad_input_is_refused_and_nothing_is_written(run, tmp_path, make, match):
    maps = tmp_path / "maps"
    maps.mkdir()
    bad = make(maps)
    out = tmp_path / "out"
    out.mkdir()
    result = run("build", bad, "-o", out / "tables" / "sky", "--raw")
    assert_one_line_error(result, match)
    assert str(bad.name) in result.stderr  # the message names the file
    assert list(out.iterdir()) == []  # not even the missing 'tables' folder


def test_nan_pixels_are_replaced_with_repair_and_reported(run, tmp_path):
    result = run("build", nan_map(tmp_path), "-o", tmp_path / "t", "--repair")
    assert result.exit_code == 0, result.output
    assert "replaced 2 non-finite values (1 NaN, 1 +Inf, 0 -Inf) in 2 pixels with 0 (--repair)" in result.stdout
    table = load_table(tmp_path / "t")
    assert table.image[3, 4, 1] == 0.0 and table.image[7, 9, 0] == 0.0
    assert np.isfinite(table.image).all()


def test_negative_pixels_are_clamped_and_counted(run, tmp_path):
    rgb = gradient()
    rgb[2, 3] = (-0.5, -0.25, 0.5)
    rgb[10, 11, 2] = -1.0
    result = run("build", write_test_map(tmp_path / "neg.exr", rgb), "-o", tmp_path / "t")
    assert result.exit_code == 0, result.output
    assert "clamped 3 negative values (lowest -1) to 0" in result.stdout
    # Said once, as a note, not again as a Python warning.
    assert "EnvsampleWarning" not in result.output and "warning:" not in result.stderr
    assert load_table(tmp_path / "t").image.min() == 0.0


def test_aspect_is_accepted_with_allow_aspect(run, tmp_path):
    result = run("build", _square(tmp_path), "-o", tmp_path / "t", "--allow-aspect")
    assert result.exit_code == 0, result.output
    assert "accepted because of --allow-aspect" in result.stdout
    assert load_table(tmp_path / "t").width == 32


def test_output_under_a_file_is_refused_before_reading(run, tmp_path):
    blocker = tmp_path / "blocker"
    blocker.write_text("x")
    result = run("build", write_test_map(tmp_path / "m.exr", gradient()), "-o", blocker / "t")
    assert_one_line_error(result, "is a file, not a folder")


@pytest.mark.parametrize(
    "option, match",
    [
        (["--size", "12"], "is not of the form WIDTHxHEIGHT"),
        (["--primaries", "p3"], "'p3' is not one of"),
        (["--uniform-mix", "1"], "--uniform-mix"),
        (["--rotation", "nan"], "--rotation"),
        (["--up", "x"], "'x' is not one of 'y', 'z'"),
    ],
)
def test_bad_options_are_refused_before_reading(run, tmp_path, option, match):
    result = run("build", write_test_map(tmp_path / "m.exr", gradient()), "-o", tmp_path / "out" / "t", *option)
    assert_one_line_error(result, match)
    assert not (tmp_path / "out").exists()


def test_build_writes_a_table_that_loads(run, tmp_path):
    """A constant map L = 2 integrates to 4*pi*2 (closed form) in the printed and stored integrals."""
    src = write_test_map(tmp_path / "grey.exr", np.full((H, W, 3), 2.0))
    result = run("build", src, "-o", tmp_path / "new" / "grey", "--raw")
    assert result.exit_code == 0, result.output
    for ext in ("npz", "json", "bin"):
        assert (tmp_path / "new" / f"grey.{ext}").exists()
        assert f"grey.{ext}" in result.stdout
    table = load_table(tmp_path / "new" / "grey")
    assert table.integrals["luminance"] == pytest.approx(8.0 * math.pi, rel=1e-6)
    assert f"Y {8.0 * math.pi:.4g}" in result.stdout
    assert "not certified" in result.stdout
    assert "sha256 " + hashlib.sha256(src.read_bytes()).hexdigest()[:12] in result.stdout


def test_build_into_an_existing_folder_uses_the_map_name(run, tmp_path):
    (tmp_path / "tables").mkdir()
    result = run("build", write_test_map(tmp_path / "studio.exr", gradient()), "-o", tmp_path / "tables")
    assert result.exit_code == 0, result.output
    assert (tmp_path / "tables" / "studio.json").exists()


def test_build_options_reach_the_table(run, tmp_path):
    src = write_test_map(tmp_path / "m.exr", gradient())
    result = run(
        "build", src, "-o", tmp_path / "t", "--size", "32x16", "--primaries", "ACEScg", "--mapping", "uv-linear",
        "--uniform-mix", "0.25", "--up", "z", "--rotation", "30", "--compensate",
    )
    assert result.exit_code == 0, result.output
    t = load_table(tmp_path / "t")
    assert (t.table_width, t.table_height, t.width, t.height) == (32, 16, W, H)
    assert (t.primaries, t.mapping, t.up, t.rotation_deg, t.uniform_mix) == ("acescg", "uv-linear", "z", 30.0, 0.25)
    assert t.compensated and "valid only inside MIS" in result.stdout


def test_build_reads_the_chosen_exr_layer(run, tmp_path):
    import OpenEXR

    plane = np.full((H, W), 3.0, np.float32)
    channels = {f"{layer}.{c}": np.ascontiguousarray(plane * k) for k, layer in ((1, "key"), (2, "fill")) for c in "RGB"}
    path = tmp_path / "layers.exr"
    with OpenEXR.File({"compression": OpenEXR.ZIP_COMPRESSION, "type": OpenEXR.scanlineimage}, channels) as f:
        f.write(str(path))
    assert_one_line_error(run("build", path, "-o", tmp_path / "t"), "--layer")
    result = run("build", path, "-o", tmp_path / "t", "--layer", "fill")
    assert result.exit_code == 0, result.output
    # Constant 6 over the sphere: 4*pi*6 (closed form).
    assert load_table(tmp_path / "t").integrals["luminance"] == pytest.approx(24.0 * math.pi, rel=1e-6)


def test_build_tune_stores_the_recommendation(run, tmp_path):
    write_map(tmp_path / "sun.exr", make_sky("sun", width=64), pixel_type="float")
    r = run("build", tmp_path / "sun.exr", "-o", tmp_path / "t", "--tune")
    assert r.exit_code == 0, r.output
    rec = load_table(tmp_path / "t").metadata["recommendation"]
    assert rec["model"] == "one-sample MIS"
    assert 0.0 < rec["table_fraction"] < 1.0
    assert "tuned" in r.output
