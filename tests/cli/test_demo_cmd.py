"""Tests of envsample.cli.demo_cmd (``envsample demo``): the summary table, reruns, --json and bad widths.

The demo's scenes are invented (envsample.synth.demo); a rerun into the same folder must rebuild the
same tables bit for bit (their XXH64 checksums, the reference binding ``xxhash``, as the table JSON
records them) and the same golden vectors (numpy.random.default_rng, PCG64).
"""

from __future__ import annotations

import json

from support.demo_runs import DEMO_WIDTH as WIDTH
from support.demo_runs import table_checksums

from envsample.synth.demo import DEMO_SCENES


def test_demo_command_reruns_in_the_same_folder_with_the_same_tables(run, demo_run):
    """The command prints its summary table; a rerun into the same folder rebuilds the same tables bit for bit."""
    out = demo_run["out"]
    result = run("demo", out, "--width", WIDTH)
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    assert lines[0].startswith(f"demo in {out}: invented scenes")
    header = next(k for k, line in enumerate(lines) if line.startswith("map "))
    assert lines[header].split() == ["map", "size", "integral", "Y", "brightest", "(az,", "el)", "table", "build",
                                     "check", "best", "sampling", "(rel.", "RMSE)"]
    rows = [line.split()[0] for line in lines[header + 1 : header + 1 + len(DEMO_SCENES)]]
    assert rows == [s.name for s in DEMO_SCENES]
    assert f"next: envsample inspect {out}/tables/rooftop.json" in result.stdout
    assert table_checksums(demo_run["summary"]) == demo_run["checksums"]
    vectors = json.loads(open(demo_run["summary"]["vectors"][0]["path"], encoding="utf-8").read())["vectors"]
    assert vectors == demo_run["vectors"]


def test_demo_command_json_and_bad_width(run, tmp_path):
    done = run("demo", tmp_path / "small", "--width", "32", "--json")
    assert done.exit_code == 0
    assert json.loads(done.stdout)["width"] == 32
    odd = run("demo", tmp_path / "odd", "--width", "63")
    assert odd.exit_code == 2 and odd.stderr.startswith("error: Invalid value for '--width': 63 is odd")
    assert not (tmp_path / "odd").exists()
