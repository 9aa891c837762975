"""`envsample check` through the command line: exit statuses as documented, JSON report written."""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from envsample.cli import main
from envsample.io.maps import write_map
from envsample.synth.skies import make_sky


@pytest.fixture(scope="module")
def maps(tmp_path_factory):
    root = tmp_path_factory.mktemp("check")
    clean = make_sky("overcast", width=1024)  # the default profile warns below 1024 px wide
    write_map(root / "clean.exr", clean, pixel_type="float")
    bad = clean.copy()
    bad[10, 20] = np.nan  # a NaN pixel: the `nan` check fails
    write_map(root / "nan.exr", bad, pixel_type="float")
    # Upside down: legal but suspicious, so `orientation` warns (exit 0, or 1 with --strict).
    write_map(root / "flipped.exr", clean[::-1].copy(), pixel_type="float")
    (root / "broken.exr").write_text("not an image")
    return root


def _run(*args):
    return CliRunner().invoke(main, list(map(str, args)))


def test_clean_map_exits_zero(maps):
    r = _run("check", maps / "clean.exr")
    assert r.exit_code == 0, r.output
    assert "PASS" in r.output


def test_failing_check_exits_one(maps):
    r = _run("check", maps / "nan.exr")
    assert r.exit_code == 1, r.output
    assert "nan" in r.output


def test_warning_exits_zero_unless_strict(maps):
    assert _run("check", maps / "flipped.exr").exit_code == 0
    r = _run("check", "--strict", maps / "flipped.exr")
    assert r.exit_code == 1
    assert "orientation" in r.output


def test_unreadable_input_exits_two(maps):
    r = _run("check", maps / "clean.exr", maps / "broken.exr")
    assert r.exit_code == 2
    assert "broken.exr" in r.output


def test_json_report_lists_every_check(maps, tmp_path):
    out = tmp_path / "report.json"
    r = _run("check", "--json", out, maps / "clean.exr", maps / "nan.exr")
    assert r.exit_code == 1, r.output
    doc = json.loads(out.read_text())
    assert doc["summary"]["files"] == 2
    by_file = {rep["source"]["path"].split("/")[-1]: rep for rep in doc["reports"]}
    nan_checks = {c["id"]: c for c in by_file["nan.exr"]["checks"]}
    assert nan_checks["nan"]["severity"] == "fail"
    assert nan_checks["nan"]["value"] == 1
    assert not list(tmp_path.glob(".*.tmp"))


def test_missing_output_folder_is_a_usage_error(maps, tmp_path):
    r = _run("check", "--json", tmp_path / "nowhere" / "r.json", maps / "clean.exr")
    assert r.exit_code == 2
    assert "does not exist" in r.output
