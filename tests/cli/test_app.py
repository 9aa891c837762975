"""Tests of the ``envsample`` command line (click.testing.CliRunner, small 64x32 maps).

External references used below (each test names its own):
- Closed forms: a constant map L integrates to 4*pi*L over the sphere; the
  traditional overcast sky L = Lz (1 + 2 cos theta) / 3 (Moon & Spencer 1942;
  CIE S 003/E:1996) integrates to 4*pi/3 * Lz over the upper hemisphere; a
  latitude-longitude rectangle [a0, a1] x [e0, e1] subtends
  (a1 - a0) * (sin e1 - sin e0) steradians (textbook spherical geometry).
- Spherical to Cartesian coordinates (textbook): a direction at azimuth phi and
  elevation e is cos(e) (cos(phi) f + sin(phi) r) + sin(e) a in a frame
  (forward f, right r, up a); envsample's frames are documented in envsample.sphere.
- IEEE 754-2008 binary16: largest finite value 65504.
- numpy.random.default_rng (PCG64) as the reference generator of the golden vectors' u.
- hashlib (Python standard library) as the reference SHA-256.
"""

from __future__ import annotations

import hashlib
import json
import math
from importlib import metadata

import numpy as np
import pytest
from click.testing import CliRunner

import envsample
from envsample.cli.app import EXIT_INTERNAL_ERROR, EXIT_USER_ERROR, main
from envsample.io.maps import read_map, write_map
from envsample.sampling.table import load_table

H, W = 32, 64


@pytest.fixture
def run():
    runner = CliRunner()

    def invoke(*args):
        return runner.invoke(main, [str(a) for a in args], catch_exceptions=False)

    return invoke


def _map(path, rgb, pixel_type="float"):
    write_map(path, np.asarray(rgb, dtype=np.float32), pixel_type=pixel_type)
    return path


def _gradient(h=H, w=W):
    """Invented positive test map with one bright pixel (row 5, col 40)."""
    rng = np.random.default_rng(11)
    rgb = rng.uniform(0.1, 1.0, size=(h, w, 3)).astype(np.float32)
    rgb[5, 40] = (400.0, 300.0, 200.0)
    return rgb


def _json_of(result):
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def _assert_one_line_error(result, match):
    assert result.exit_code == EXIT_USER_ERROR, result.output
    err = result.stderr.strip()
    assert err.startswith("error: "), err
    assert "\n" not in err, err
    assert "Traceback" not in result.output
    assert match in err, err


# --------------------------------------------------------------------------- global options


def test_version_matches_package_metadata(run):
    """--version prints the version the installed distribution declares (importlib.metadata)."""
    result = run("--version")
    assert result.exit_code == 0
    assert result.stdout.strip() == f"envsample {metadata.version('envsample')}"
    assert envsample.__version__ == metadata.version("envsample")


@pytest.mark.parametrize("command", [[], ["build"], ["inspect"], ["vectors"], ["sky"], ["demo"]])
def test_every_command_has_help(run, command):
    result = run(*command, "--help")
    assert result.exit_code == 0
    assert result.stdout.startswith("Usage: envsample")


def test_usage_error_is_one_line_with_a_pointer_to_help(run, tmp_path):
    result = run("build", tmp_path / "x.exr")  # no -o
    _assert_one_line_error(result, "Missing option '-o' / '--output'")
    assert "see 'envsample build --help'" in result.stderr


@pytest.mark.parametrize("where", ["before", "after"])
def test_debug_shows_the_traceback(run, tmp_path, where):
    args = ["build", tmp_path / "missing.exr", "-o", tmp_path / "t"]
    result = run(*(["--debug"] + args if where == "before" else args + ["--debug"]))
    assert result.exit_code == EXIT_USER_ERROR
    assert "Traceback" in result.stderr
    assert result.stderr.strip().splitlines()[-1].startswith("error: ")


@pytest.fixture
def failing_command():
    """A command added to the group (click's public API) whose body fails as a bug would."""
    import click

    @click.command("fail-for-test")
    def fail_for_test():
        raise RuntimeError("boom")

    main.add_command(fail_for_test)
    yield "fail-for-test"
    main.commands.pop("fail-for-test")


def test_unexpected_failure_is_reported_as_a_bug(run, failing_command):
    """A non-user error gets exit status 3 and one line asking for --debug; --debug shows the traceback."""
    result = run(failing_command)
    assert result.exit_code == EXIT_INTERNAL_ERROR
    assert result.stderr.strip() == (
        "error: internal error (RuntimeError: boom); this is a bug; rerun with --debug and report the traceback"
    )
    debug = run(failing_command, "--debug")
    assert debug.exit_code == EXIT_INTERNAL_ERROR and "Traceback" in debug.stderr and "RuntimeError: boom" in debug.stderr


# --------------------------------------------------------------------------- bad input


def _unknown_extension(d):
    p = d / "map.bmp"
    p.write_bytes(b"BM" + bytes(64))
    return p


def _empty(d):
    p = d / "empty.exr"
    p.write_bytes(b"")
    return p


def _truncated(d):
    good = _map(d / "good.exr", _gradient())
    data = good.read_bytes()
    p = d / "truncated.exr"
    p.write_bytes(data[: len(data) // 2])
    return p


def _text(d):
    p = d / "notes.exr"
    p.write_text("shot list for the rooftop, not an image\n")
    return p


def _png8(d):
    import cv2

    p = d / "ldr.png"
    cv2.imwrite(str(p), np.full((H, W, 3), 128, np.uint8))
    return p


def _nan(d):
    rgb = _gradient()
    rgb[3, 4, 1] = np.nan
    rgb[7, 9, 0] = np.inf
    return _map(d / "nan.exr", rgb)


def _square(d):
    return _map(d / "square.exr", np.ones((32, 32, 3)))


def _tiny(d):
    return _map(d / "tiny.exr", np.ones((3, 6, 3)))


def _missing(d):
    return d / "missing.exr"


BAD_INPUTS = [
    (_unknown_extension, "unsupported file extension '.bmp'"),
    (_empty, "file is empty (0 bytes)"),
    (_truncated, "truncated or corrupt OpenEXR file"),
    (_text, "not an OpenEXR file"),
    (_png8, "is an 8-bit LDR image"),
    (_nan, "2 non-finite values (1 NaN, 1 +Inf, 0 -Inf) in 2 pixels; fix the source map or pass --repair"),
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
    _assert_one_line_error(result, match)
    assert str(bad.name) in result.stderr  # the message names the file
    assert list(out.iterdir()) == []  # not even the missing 'tables' folder


def test_nan_pixels_are_replaced_with_repair_and_reported(run, tmp_path):
    result = run("build", _nan(tmp_path), "-o", tmp_path / "t", "--repair")
    assert result.exit_code == 0, result.output
    assert "replaced 2 non-finite values (1 NaN, 1 +Inf, 0 -Inf) in 2 pixels with 0 (--repair)" in result.stdout
    table = load_table(tmp_path / "t")
    assert table.image[3, 4, 1] == 0.0 and table.image[7, 9, 0] == 0.0
    assert np.isfinite(table.image).all()


def test_negative_pixels_are_clamped_and_counted(run, tmp_path):
    rgb = _gradient()
    rgb[2, 3] = (-0.5, -0.25, 0.5)
    rgb[10, 11, 2] = -1.0
    result = run("build", _map(tmp_path / "neg.exr", rgb), "-o", tmp_path / "t")
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
    result = run("build", _map(tmp_path / "m.exr", _gradient()), "-o", blocker / "t")
    _assert_one_line_error(result, "is a file, not a folder")


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
    result = run("build", _map(tmp_path / "m.exr", _gradient()), "-o", tmp_path / "out" / "t", *option)
    _assert_one_line_error(result, match)
    assert not (tmp_path / "out").exists()


# --------------------------------------------------------------------------- build


def test_build_writes_a_table_that_loads(run, tmp_path):
    """A constant map L = 2 integrates to 4*pi*2 (closed form) in the printed and stored integrals."""
    src = _map(tmp_path / "grey.exr", np.full((H, W, 3), 2.0))
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
    result = run("build", _map(tmp_path / "studio.exr", _gradient()), "-o", tmp_path / "tables")
    assert result.exit_code == 0, result.output
    assert (tmp_path / "tables" / "studio.json").exists()


def test_build_options_reach_the_table(run, tmp_path):
    src = _map(tmp_path / "m.exr", _gradient())
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
    _assert_one_line_error(run("build", path, "-o", tmp_path / "t"), "--layer")
    result = run("build", path, "-o", tmp_path / "t", "--layer", "fill")
    assert result.exit_code == 0, result.output
    # Constant 6 over the sphere: 4*pi*6 (closed form).
    assert load_table(tmp_path / "t").integrals["luminance"] == pytest.approx(24.0 * math.pi, rel=1e-6)


# --------------------------------------------------------------------------- inspect


def _direction(az_deg, el_deg, up):
    """Textbook spherical -> Cartesian in envsample's documented frames (envsample.sphere)."""
    frames = {"y": ((0, 0, -1), (1, 0, 0), (0, 1, 0)), "z": ((0, 1, 0), (1, 0, 0), (0, 0, 1))}
    f, r, a = (np.array(v, float) for v in frames[up])
    az, el = math.radians(az_deg), math.radians(el_deg)
    return math.cos(el) * (math.cos(az) * f + math.sin(az) * r) + math.sin(el) * a


@pytest.mark.parametrize("up", ["y", "z"])
def test_inspect_map_finds_the_brightest_direction(run, tmp_path, up):
    rgb = _gradient()
    path = _map(tmp_path / "m.exr", rgb)
    facts = _json_of(run("inspect", path, "--json", "--up", up))
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
    facts = _json_of(run("inspect", path, "--json"))
    assert facts["integrals"]["luminance"] == pytest.approx(4.0 * math.pi / 3.0 * 3.0, rel=1e-5)
    assert facts["integrals"]["rgb"] == pytest.approx([4.0 * math.pi] * 3, rel=1e-5)


def test_inspect_map_text_output(run, tmp_path):
    result = run("inspect", _map(tmp_path / "m.exr", _gradient()))
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    keys = [line.split()[0] for line in lines[:-1]]
    assert keys == ["map", "file", "sha256", "size", "range", "integral", "brightest", "build"]
    assert "not certified" in lines[-1]


def test_inspect_reports_problems_that_build_would_refuse(run, tmp_path):
    facts = _json_of(run("inspect", _nan(tmp_path), "--json"))
    assert facts["non_finite_values"] == 2
    assert facts["build"]["ok"] is False and "non-finite" in facts["build"]["problem"]
    result = run("inspect", _png8(tmp_path))
    assert result.exit_code == 0
    assert "refused:" in result.stdout and "LDR" in result.stdout


def test_inspect_table(run, tmp_path):
    """Overcast sky over a black ground: exactly the upper H/2 rows have nonzero probability."""
    path = tmp_path / "overcast.exr"
    run("sky", "overcast", "-o", path, "--size", "64x32")
    assert run("build", path, "-o", tmp_path / "t", "--raw").exit_code == 0
    table = load_table(tmp_path / "t")
    for target in (tmp_path / "t", tmp_path / "t.json", tmp_path / "t.npz"):
        facts = _json_of(run("inspect", target, "--json"))
        assert facts["kind"] == "table"
        assert facts["cells"] == H * W and facts["nonzero_cells"] == H // 2 * W
        assert facts["largest_cell"]["probability"] == pytest.approx(float(table.cell_probability.max()))
        assert [f["path"].rsplit(".", 1)[1] for f in facts["files"]] == ["json", "npz", "bin"]
        assert facts["source"]["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    text = run("inspect", tmp_path / "t").stdout
    assert f"{H // 2 * W} of {H * W} have nonzero probability (50.0%)" in text


def test_inspect_rotated_table_moves_the_largest_cell(run, tmp_path):
    """rotation_deg R turns the map about the up axis: azimuths shift by R (envsample.sphere convention)."""
    src = _map(tmp_path / "m.exr", _gradient())
    run("build", src, "-o", tmp_path / "a")
    run("build", src, "-o", tmp_path / "b", "--rotation", "90")
    a = _json_of(run("inspect", tmp_path / "a", "--json"))["largest_cell"]
    b = _json_of(run("inspect", tmp_path / "b", "--json"))["largest_cell"]
    assert b["azimuth_deg"] == pytest.approx(((a["azimuth_deg"] + 90.0 + 180.0) % 360.0) - 180.0, abs=1e-3)
    assert b["elevation_deg"] == pytest.approx(a["elevation_deg"], abs=1e-9)


def test_the_old_rotate_flag_still_works_but_help_shows_one_spelling(run, tmp_path):
    """``--rotate`` was the flag's name before ``--rotation``: kept as a hidden alias."""
    src = _map(tmp_path / "m.exr", _gradient())
    run("build", src, "-o", tmp_path / "a", "--rotation", "30")
    run("build", src, "-o", tmp_path / "b", "--rotate", "30")
    a = _json_of(run("inspect", tmp_path / "a", "--json"))
    b = _json_of(run("inspect", tmp_path / "b", "--json"))
    assert a["largest_cell"] == b["largest_cell"] and a["convention"] == b["convention"]
    text = run("build", "--help").output
    assert "--rotation DEG" in text and "--rotate" not in text


def test_inspect_refuses_a_tampered_table(run, tmp_path):
    run("build", _map(tmp_path / "m.exr", _gradient()), "-o", tmp_path / "t")
    doc = json.loads((tmp_path / "t.json").read_text())
    doc["arrays"]["cell_pdf"]["xxh64"] = "0" * 16
    (tmp_path / "t.json").write_text(json.dumps(doc))
    # The JSON alone reads no array (issue 8); --verify, or naming the array file itself, checks them.
    assert run("inspect", tmp_path / "t.json").exit_code == 0
    _assert_one_line_error(run("inspect", tmp_path / "t.json", "--verify"), "fails its checksum")
    _assert_one_line_error(run("inspect", tmp_path / "t.npz"), "fails its checksum")
    _assert_one_line_error(run("inspect", tmp_path / "nothing.json"), "table metadata file not found")


# --------------------------------------------------------------------------- vectors


@pytest.fixture
def table_prefix(run, tmp_path):
    assert run("build", _map(tmp_path / "m.exr", _gradient()), "-o", tmp_path / "t").exit_code == 0
    return tmp_path / "t"


def test_vectors_reproduce_sampling_exactly(run, tmp_path, table_prefix):
    out = tmp_path / "golden" / "v.json"
    result = run("vectors", table_prefix, "--count", "50", "--seed", "9", "-o", out)
    assert result.exit_code == 0, result.output
    doc = json.loads(out.read_text())
    u = np.array([r["u"] for r in doc["vectors"]])
    # The uniforms are numpy's default generator with the recorded seed.
    assert np.array_equal(u, np.random.default_rng(9).random((50, 2)))
    table = load_table(table_prefix)
    for method in ("inverse", "alias"):
        s = table.sample(u, method=method)
        recs = [r[method] for r in doc["vectors"]]
        assert np.array_equal(np.array([r["direction"] for r in recs]), s.directions)
        assert np.array_equal(np.array([r["pdf"] for r in recs]), s.pdf)
        assert np.array_equal(np.array([r["cell"] for r in recs]), s.cells)
        assert np.array_equal(np.array([r["radiance"] for r in recs], dtype=np.float32), s.radiance)
        # pdf(sample(u).directions) == sample(u).pdf to 1e-5 relative (the table's contract).
        np.testing.assert_allclose(table.pdf(s.directions), s.pdf, rtol=1e-5)
    assert doc["seed"] == 9 and doc["count"] == 50 and doc["methods"] == ["inverse", "alias"]
    stored = json.loads((tmp_path / "t.json").read_text())["arrays"]
    assert doc["table"]["array_xxh64"] == {k: v["xxh64"] for k, v in stored.items()}
    assert doc["table"]["json_sha256"] == hashlib.sha256((tmp_path / "t.json").read_bytes()).hexdigest()
    assert set(doc["fields"]) >= {"u", "direction", "pdf", "cell", "radiance"}


def test_vectors_same_seed_same_file(run, tmp_path, table_prefix):
    paths = [tmp_path / f"{name}.json" for name in ("a", "b", "c")]
    for path, seed in zip(paths, (3, 3, 4)):
        assert run("vectors", table_prefix, "--count", "20", "--seed", seed, "-o", path).exit_code == 0
    assert paths[0].read_bytes() == paths[1].read_bytes()
    assert paths[0].read_bytes() != paths[2].read_bytes()


def test_vectors_single_method(run, tmp_path, table_prefix):
    out = tmp_path / "v.json"
    assert run("vectors", table_prefix, "--method", "alias", "-o", out, "-n", "5").exit_code == 0
    doc = json.loads(out.read_text())
    assert doc["methods"] == ["alias"]
    assert all(set(r) == {"u", "alias"} for r in doc["vectors"])


def test_vectors_bad_input_writes_nothing(run, tmp_path, table_prefix):
    out = tmp_path / "v.json"
    _assert_one_line_error(run("vectors", tmp_path / "none", "-o", out), "table metadata file not found")
    _assert_one_line_error(run("vectors", table_prefix, "-o", out, "--count", "0"), "--count")
    assert not out.exists()


# --------------------------------------------------------------------------- sky


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
    facts = _json_of(run("inspect", out, "--json"))
    assert facts["integrals"]["luminance"] == pytest.approx(expected, rel=1e-5)


def test_sky_sun_position_is_found_by_inspect(run, tmp_path):
    out = tmp_path / "sun.hdr"
    result = run("sky", "sun", "-o", out, "--size", "256x128", "--elevation", "25", "--azimuth", "40")
    assert result.exit_code == 0, result.output
    assert "azimuth 40 deg, elevation 25 deg" in result.stdout
    facts = _json_of(run("inspect", out, "--json"))
    assert facts["format"] == "hdr"
    pixel_deg = 360.0 / 256
    assert facts["brightest"]["azimuth_deg"] == pytest.approx(40.0, abs=pixel_deg)
    assert facts["brightest"]["elevation_deg"] == pytest.approx(25.0, abs=pixel_deg)


def test_sky_refuses_options_of_other_kinds(run, tmp_path):
    out = tmp_path / "u.exr"
    _assert_one_line_error(run("sky", "uniform", "-o", out, "--elevation", "10"),
                           "--elevation does not apply to sky 'uniform'; options for it: --radiance")
    _assert_one_line_error(run("sky", "studio", "-o", out, "--light", "1,2,3"), "is not AZ0,AZ1,EL0,EL1,RADIANCE")
    _assert_one_line_error(run("sky", "sun", "-o", out, "--elevation", "95"), "--elevation")
    _assert_one_line_error(run("sky", "sun", "-o", tmp_path / "s.png"), "write .exr or .hdr")
    assert list(tmp_path.iterdir()) == []


def test_sky_half_overflow_asks_for_float(run, tmp_path):
    """A sun brighter than the half-float maximum 65504 (IEEE 754 binary16) is refused as half."""
    out = tmp_path / "sun.exr"
    args = ("sky", "sun", "-o", out, "--size", "64x32", "--sun-illuminance", "4000")
    _assert_one_line_error(run(*args), "above the half-float maximum 65504; use --pixel-type float")
    assert not out.exists()
    assert run(*args, "--pixel-type", "float").exit_code == 0
    assert read_map(out).rgb.max() > 65504.0
