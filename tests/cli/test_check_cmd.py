"""Tests of envsample.cli.check_cmd (``envsample check``): exit statuses as documented, JSON and HTML reports.

Outside references: ``json`` (Python standard library) parses the report; the page is parsed by
Python's ``html.parser`` with the self-contained checks of tests/support/html_pages.py (WHATWG HTML
syntax, RFC 2397 data: URIs, PNG signature).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from support.html_pages import assert_images_valid, assert_self_contained, parse

from envsample.io.maps import write_map
from envsample.reports.pages import CAUTION
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


def test_clean_map_exits_zero(run, maps):
    r = run("check", maps / "clean.exr")
    assert r.exit_code == 0, r.output
    assert "PASS" in r.output


def test_failing_check_exits_one(run, maps):
    r = run("check", maps / "nan.exr")
    assert r.exit_code == 1, r.output
    assert "nan" in r.output


def test_warning_exits_zero_unless_strict(run, maps):
    assert run("check", maps / "flipped.exr").exit_code == 0
    r = run("check", "--strict", maps / "flipped.exr")
    assert r.exit_code == 1
    assert "orientation" in r.output


def test_unreadable_input_exits_two(run, maps):
    r = run("check", maps / "clean.exr", maps / "broken.exr")
    assert r.exit_code == 2
    assert "broken.exr" in r.output


def test_json_report_lists_every_check(run, maps, tmp_path):
    out = tmp_path / "report.json"
    r = run("check", "--json", out, maps / "clean.exr", maps / "nan.exr")
    assert r.exit_code == 1, r.output
    doc = json.loads(out.read_text())
    assert doc["summary"]["files"] == 2
    by_file = {rep["source"]["path"].split("/")[-1]: rep for rep in doc["reports"]}
    nan_checks = {c["id"]: c for c in by_file["nan.exr"]["checks"]}
    assert nan_checks["nan"]["severity"] == "fail"
    assert nan_checks["nan"]["value"] == 1
    assert not list(tmp_path.glob(".*.tmp"))


def test_missing_output_folder_is_a_usage_error(run, maps, tmp_path):
    r = run("check", "--json", tmp_path / "nowhere" / "r.json", maps / "clean.exr")
    assert r.exit_code == 2
    assert "does not exist" in r.output


def test_json_to_standard_output_is_only_json(run, maps):
    """Issue 9: `check --json -` piped into a JSON parser must not meet the human table."""
    r = run("check", maps / "clean.exr", "--json", "-")
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["schema"] == "envsample.qa-reports" and doc["reports"][0]["verdict"] == "pass"
    assert "PASS" in r.stderr  # the table is still shown, on standard error


@pytest.mark.parametrize("option", ["--json", "--html"])
def test_an_output_that_is_the_input_is_refused_and_the_map_kept(run, maps, tmp_path, option):
    """Issue 12 item 6: `check m.exr --json m.exr` replaced the map."""
    m = tmp_path / "m.exr"
    m.write_bytes((maps / "clean.exr").read_bytes())
    before = m.read_bytes()
    r = run("check", m, option, tmp_path / "." / "m.exr")
    assert r.exit_code == 2
    assert "would overwrite the input" in r.output and "\n" not in r.output.strip()
    assert m.read_bytes() == before


@pytest.mark.parametrize("name, make", [
    ("black", lambda: np.zeros((64, 128, 3), np.float32)),
    ("huge", lambda: np.full((64, 128, 3), 3e38, np.float32)),
    ("random-huge", lambda: (np.random.default_rng(5).random((64, 128, 3)) * 1e38).astype(np.float32)),
    ("denormal", lambda: np.full((64, 128, 3), 1e-45, np.float32)),
])
def test_extreme_maps_get_a_report_with_the_value_range_check(run, tmp_path, name, make):
    """Issue 12 item 8: all black, all 3e38, random up to 1e38 and all 1e-45 (denormal) maps end in a
    report whose `value-range` check fails with a remedy, never an internal error (exit 3)."""
    m = tmp_path / f"{name}.exr"
    write_map(m, make(), pixel_type="float")
    out = tmp_path / f"{name}.json"
    r = run("check", m, "--json", out)
    assert r.exit_code == 1, r.output
    doc = json.loads(out.read_text())["reports"][0]
    vr = {c["id"]: c for c in doc["checks"]}["value-range"]
    assert vr["severity"] == "fail" and vr["remedy"]
    assert "finite and non-negative" not in r.output


def test_cli_check_writes_the_page(run, maps, tmp_path):
    """``envsample check MAP --html FILE`` goes through check_page: a parsed, self-contained page."""
    out = tmp_path / "cli.html"
    result = run("check", maps / "clean.exr", "--html", out)
    assert result.exit_code == 0, result.output
    p, raw = parse(out)
    assert_self_contained(p, raw)
    assert_images_valid(p)
    assert "clean.exr" in p.all_text and CAUTION in p.all_text
