"""Tests of envsample.cli.batch_cmd (``envsample batch``): per-map results, exit statuses, resumable
reruns, the build options and --fix.

Outside references: ``csv`` (Python standard library) reads summary.csv; the maps are invented
analytic skies (envsample.synth.skies, tests/support/qa_maps.py).
"""

from __future__ import annotations

import csv
import json

import numpy as np
from support.qa_maps import sunny

from envsample.io.maps import write_map
from envsample.synth.skies import make_sky


def test_batch_reports_bad_files_and_resumes(run, tmp_path):
    src = tmp_path / "library"
    src.mkdir()
    write_map(src / "overcast.exr", make_sky("overcast", width=128), pixel_type="float")
    write_map(src / "sun.exr", make_sky("sun", width=128), pixel_type="float")
    (src / "broken.exr").write_text("not an image")
    out = tmp_path / "out"

    r = run("batch", src, "-o", out, "--workers", "0")
    assert r.exit_code == 1, r.output  # one map could not be read
    assert "broken.exr" in r.output
    assert "3 maps:" in r.output
    with open(out / "summary.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert sorted(row["source"].rsplit("/", 1)[-1] for row in rows) == ["broken.exr", "overcast.exr", "sun.exr"]
    assert (out / "index.html").exists()

    again = run("batch", src, "-o", out, "--workers", "0")
    assert "(3 up to date, not redone)" in again.output


def test_batch_usage_errors_exit_two(run, tmp_path):
    r = run("batch", tmp_path / "nothing-here", "-o", tmp_path / "out")
    assert r.exit_code == 2
    assert r.output.startswith("error:")


def test_batch_takes_the_build_options_and_says_what_it_kept_and_found_stale(run, tmp_path):
    """issue 10: --raw, --tune and --repair reach every map; failed maps get no table unless
    --build-failed; a changed source's folder is listed and --prune removes it."""
    import numpy as np

    src = tmp_path / "library"
    src.mkdir()
    write_map(src / "sky.exr", make_sky("overcast", width=64), pixel_type="float")
    holes = make_sky("overcast", width=64)
    holes[3, 4] = np.nan
    write_map(src / "holes.exr", holes, pixel_type="float")
    out = tmp_path / "out"
    r = run("batch", src, "-o", out, "--workers", "0", "--raw", "--repair")
    assert r.exit_code == 1, r.output  # the NaN pixel fails QA
    assert list(out.glob("maps/sky-*/table.bin")) and not list(out.glob("maps/holes-*/table.json"))
    assert "fail   " in r.output and "holes.exr" in r.output
    r = run("batch", src, "-o", out, "--workers", "0", "--repair", "--build-failed")
    assert list(out.glob("maps/holes-*/table.json")), r.output  # repaired (NaN set to 0) and built
    assert list(out.glob("maps/sky-*/table.bin"))  # kept: the rerun did not ask for --raw
    write_map(src / "sky.exr", make_sky("overcast", width=64, zenith_luminance=2.0), pixel_type="float")
    r = run("batch", src, "-o", out, "--workers", "0")
    assert "stale: maps/sky-" in r.output and "source changed" in r.output and "--prune removes it" in r.output
    r = run("batch", src, "-o", out, "--workers", "0", "--prune")
    assert "removed" in r.output and len(list(out.glob("maps/sky-*"))) == 1


def test_batch_help_lists_the_new_options(run):
    r = run("batch", "--help")
    for flag in ("--raw", "--tune", "--repair", "--build-failed", "--prune", "--follow-links", "--compensate"):
        assert flag in r.output


def test_batch_verify_prints_the_reference_bound_and_time(run, tmp_path):
    src = tmp_path / "library"
    src.mkdir()
    write_map(src / "overcast.exr", make_sky("overcast", width=64), pixel_type="float")
    r = run("batch", src, "-o", tmp_path / "out", "--workers", "0", "--verify")
    assert r.exit_code == 0, r.output
    line = next(x for x in r.output.splitlines() if x.startswith("verify reference:"))
    assert "exact irradiance on 1 maps at their table size, relative error bound <=" in line
    assert "s in all, at most" in line


def test_batch_fix_repairs_before_building(run, tmp_path):
    lib = tmp_path / "lib"
    lib.mkdir()
    img = sunny(1024)
    img[100:104, 300:310] = np.nan
    write_map(lib / "m.exr", img, pixel_type="float")
    out = tmp_path / "out"
    r = run("batch", lib, "-o", out, "--fix", "--workers", "0")
    assert r.exit_code == 0, r.output
    row = json.loads((out / "summary.json").read_text())["maps"][0]
    assert row["verdict"] == "pass" and "fixed (fill-nonfinite)" in row["table_note"]
    folder = out / row["folder"]
    assert (folder / "fixed.exr").is_file() and (folder / "table.npz").is_file()
    assert json.loads((folder / "fix.json").read_text())["before"]["verdict"] == "fail"
