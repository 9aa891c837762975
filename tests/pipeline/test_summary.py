"""Tests of envsample.pipeline.summary: summary.json, summary.csv and the index page of a batch.

Outside references: CSV read back with Python's csv module (RFC 4180); the formula-injection rule
(a cell starting with =, +, -, @, tab or carriage return is prefixed with an apostrophe) is the
OWASP community page "CSV Injection" (from memory); JSON read back with Python's json module.
"""

from __future__ import annotations

import csv
import json

import pytest

from envsample.io.maps import write_map
from envsample.pipeline.batch import run_batch
from envsample.pipeline.outcomes import ROW_FIELDS, BatchResult, MapResult
from envsample.pipeline.summary import STATES, SUMMARY_SCHEMA, csv_cell, write_summaries
from envsample.qa.profile import load_profile
from envsample.synth.skies import make_sky


@pytest.mark.parametrize("text", ["=1+2", "+cmd", "-2+3", "@SUM(A1)", "\tx", "\rx"])
def test_text_that_a_spreadsheet_would_run_is_quoted(text):
    assert csv_cell(text) == "'" + text
    assert csv_cell([text, "b"]) == "'" + text + ";b"


def test_numbers_stay_numbers_and_plain_text_is_left_alone():
    assert csv_cell(-30.0) == "-30" and csv_cell(-3) == "-3" and csv_cell(0.125) == "0.125"
    assert csv_cell(None) == "" and csv_cell(True) == "yes" and csv_cell("lib/sky.exr") == "lib/sky.exr"


def test_a_file_named_like_a_formula_is_quoted_in_the_csv_and_kept_in_the_json(tmp_path, monkeypatch):
    """issue 12 item 11: a map given by a relative name that starts with '=' lands first in its CSV cell."""
    lib = tmp_path / "lib"
    lib.mkdir()
    write_map(lib / "=HYPERLINK(1).exr", make_sky("overcast", width=64))
    monkeypatch.chdir(lib)
    out = tmp_path / "out"
    run_batch(["=HYPERLINK(1).exr"], out, workers=0)
    with open(out / "summary.csv", newline="") as fh:
        row = next(csv.DictReader(fh))
    assert row["source"] == "'=HYPERLINK(1).exr"
    summary = json.loads((out / "summary.json").read_text())
    assert summary["maps"][0]["source"] == "=HYPERLINK(1).exr"


def test_a_running_summary_lists_the_pending_maps(tmp_path):
    result = BatchResult(outdir=tmp_path, maps=[MapResult("a.exr", "done", "pass")], options={}, requested=3)
    docs = {"check": {"profile": {}}, "table": {}, "verify": {}}
    paths = write_summaries(result, docs, load_profile(None), state="running", pending=["b.exr", "c.exr"])
    doc = json.loads(paths["json"].read_text())
    assert SUMMARY_SCHEMA.matches(doc) and doc["state"] == "running"
    assert [r["status"] for r in doc["maps"]] == ["done", "pending", "pending"]
    assert doc["counts"]["maps"] == 3 and doc["counts"]["pending"] == 2
    with open(paths["csv"], newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert tuple(rows[0]) == ROW_FIELDS and len(rows) == 3
    assert "2 maps not done yet" in paths["html"].read_text()
    with pytest.raises(ValueError, match="unknown summary state"):
        write_summaries(result, docs, load_profile(None), state="paused")
    assert set(STATES) == {"running", "complete", "interrupted"}
