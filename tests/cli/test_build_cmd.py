"""Tests of ``envsample build`` (and the table side of ``vectors`` and ``inspect``) against hostile input.

Hangs run in a child process under a timeout, so that a regression fails instead of
blocking the suite (issue 12).  Small maps only.
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from click.testing import CliRunner

from envsample.cli import EXIT_USER_ERROR, main
from envsample.io.maps import write_map
from envsample.sampling.table import load_table

TIMEOUT = 120


@pytest.fixture
def run():
    runner = CliRunner()

    def invoke(*args):
        return runner.invoke(main, [str(a) for a in args])

    return invoke


def _one_line_error(result, match):
    assert result.exit_code == EXIT_USER_ERROR, result.output
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ") and match in lines[0], result.output


def _child(code: str, tmp_path):
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], cwd=tmp_path, capture_output=True,
                          text=True, timeout=TIMEOUT)


def test_the_warning_printer_does_not_loop_on_a_library_warning(tmp_path):
    """Issue 12, item 1: a warning from a library (not envsample's own) raised inside the printer's
    context used to be re-recorded while being shown: an endless loop.  Now it prints once."""
    r = _child("""
        import warnings
        from envsample.cli.output import warnings_as_lines
        with warnings_as_lines([]):
            warnings.warn("overflow encountered in multiply", RuntimeWarning)
            warnings.warn("overflow encountered in multiply", RuntimeWarning)
        print("done")
    """, tmp_path)
    assert r.returncode == 0 and r.stdout.strip() == "done", r.stderr
    assert r.stderr.count("overflow encountered") == 1


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
    _one_line_error(run("build", tmp_path / "m.exr", "-o", tmp_path / "t", "--size", size), message)
    assert not list(tmp_path.glob("t*"))


def test_build_refuses_a_request_above_the_memory_limit_naming_the_estimate(run, tmp_path):
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    _one_line_error(run("build", tmp_path / "m.exr", "-o", tmp_path / "t", "--max-memory", "2k"),
                    "needs about")
    assert run("build", tmp_path / "m.exr", "-o", tmp_path / "t", "--max-memory", "1G").exit_code == 0


def test_sky_refuses_an_enormous_size_before_allocating(run, tmp_path):
    _one_line_error(run("sky", "uniform", "-o", tmp_path / "s.exr", "--size", "200000x100000"), "needs about")
    assert not (tmp_path / "s.exr").exists()


def test_build_options_one_method_and_embedded_radiance(run, tmp_path):
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    r = run("build", tmp_path / "m.exr", "-o", tmp_path / "t", "--cell-choice", "alias", "--embed-radiance")
    assert r.exit_code == 0, r.output
    doc = json.loads((tmp_path / "t.json").read_text())
    assert doc["options"]["cell_choice"] == "alias" and doc["radiance"] == "embedded"
    assert "alias cell choice only" in r.output


def test_vectors_refuses_to_overwrite_the_table_or_its_map(run, tmp_path):
    """Issue 12, item 6: `vectors t -o t.json` used to replace the table's own metadata."""
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    assert run("build", tmp_path / "m.exr", "-o", tmp_path / "t").exit_code == 0
    before = (tmp_path / "t.json").read_bytes()
    for target in ("t.json", "t.npz", "m.exr"):
        _one_line_error(run("vectors", tmp_path / "t", "-o", tmp_path / target), "would overwrite the input")
    assert (tmp_path / "t.json").read_bytes() == before
    assert run("vectors", tmp_path / "t", "-o", tmp_path / "v.json", "-n", "4").exit_code == 0


def test_build_refuses_a_prefix_whose_files_would_replace_the_map(run, tmp_path):
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    (tmp_path / "x.npz").write_bytes(b"")  # a map called x.npz is unlikely, but a prefix must never name the input
    _one_line_error(run("build", tmp_path / "x.npz", "-o", tmp_path / "x"), "would overwrite the input")


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
    _one_line_error(run("inspect", tmp_path / "t.bin"), "fails its checksum")
    (tmp_path / "t.bin").write_bytes(bytes(data[:-100]))
    _one_line_error(run("inspect", tmp_path / "t"), "truncated or padded")
