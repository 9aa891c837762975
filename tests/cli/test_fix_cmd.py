"""`envsample fix` and `envsample batch --fix` through the command line."""

import json

import numpy as np
from click.testing import CliRunner
from support.qa_maps import TEST_PROFILE, sunny

from envsample.cli import main
from envsample.io.maps import write_map


def test_fix_auto_prints_before_and_after_and_exits_zero(tmp_path):
    prof = tmp_path / "p.toml"
    prof.write_text(TEST_PROFILE)
    img = sunny()
    img[10, 10] = np.nan
    write_map(tmp_path / "m.exr", img, pixel_type="float")
    r = CliRunner().invoke(main, ["fix", str(tmp_path / "m.exr"), "-o", str(tmp_path / "f.exr"), "--auto",
                                  "--profile", str(prof)])
    assert r.exit_code == 0, r.output
    assert "fill-nonfinite" in r.output and "nan" in r.output and "verdict fail -> pass" in r.output
    assert json.loads((tmp_path / "f.fix.json").read_text())["after"]["verdict"] == "pass"


def test_fix_without_a_remedy_is_a_usage_error(tmp_path):
    write_map(tmp_path / "m.exr", sunny(), pixel_type="float")
    r = CliRunner().invoke(main, ["fix", str(tmp_path / "m.exr"), "-o", str(tmp_path / "f.exr")])
    assert r.exit_code == 2 and "nothing to do" in r.output


def test_batch_fix_repairs_before_building(tmp_path):
    lib = tmp_path / "lib"
    lib.mkdir()
    img = sunny(1024)
    img[100:104, 300:310] = np.nan
    write_map(lib / "m.exr", img, pixel_type="float")
    out = tmp_path / "out"
    r = CliRunner().invoke(main, ["batch", str(lib), "-o", str(out), "--fix", "--workers", "0"])
    assert r.exit_code == 0, r.output
    row = json.loads((out / "summary.json").read_text())["maps"][0]
    assert row["verdict"] == "pass" and "fixed (fill-nonfinite)" in row["table_note"]
    folder = out / row["folder"]
    assert (folder / "fixed.exr").is_file() and (folder / "table.npz").is_file()
    assert json.loads((folder / "fix.json").read_text())["before"]["verdict"] == "fail"
