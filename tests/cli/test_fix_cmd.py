"""Tests of envsample.cli.fix_cmd (``envsample fix``): the remedies applied, before and after printed.

No outside reference is needed: the command's contract (exit statuses, the ``.fix.json`` file) is the
project's own (README, "fix"); the maps are invented (tests/support/qa_maps.py).
"""

from __future__ import annotations

import json

import numpy as np
from support.qa_maps import TEST_PROFILE, sunny

from envsample.io.maps import write_map


def test_fix_auto_prints_before_and_after_and_exits_zero(run, tmp_path):
    prof = tmp_path / "p.toml"
    prof.write_text(TEST_PROFILE)
    img = sunny()
    img[10, 10] = np.nan
    write_map(tmp_path / "m.exr", img, pixel_type="float")
    r = run("fix", tmp_path / "m.exr", "-o", tmp_path / "f.exr", "--auto", "--profile", prof)
    assert r.exit_code == 0, r.output
    assert "fill-nonfinite" in r.output and "nan" in r.output and "verdict fail -> pass" in r.output
    assert json.loads((tmp_path / "f.fix.json").read_text())["after"]["verdict"] == "pass"


def test_fix_without_a_remedy_is_a_usage_error(run, tmp_path):
    write_map(tmp_path / "m.exr", sunny(), pixel_type="float")
    r = run("fix", tmp_path / "m.exr", "-o", tmp_path / "f.exr")
    assert r.exit_code == 2 and "nothing to do" in r.output
