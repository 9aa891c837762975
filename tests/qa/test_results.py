"""Tests of envsample.qa.results: exit codes and the pinned JSON keys of the report.
"""

from __future__ import annotations

import json

import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.qa.report import report_to_json
from envsample.qa.results import CheckResult, Report, Source
from envsample.qa.run import check_map


def test_exit_codes():
    def report(*severities):
        return Report(source=Source(), checks=[CheckResult(f"c{i}", s) for i, s in enumerate(severities)])

    assert report("pass", "pass").exit_code() == 0
    assert report("pass", "warn").exit_code() == 0
    assert report("pass", "warn").exit_code(strict=True) == 1
    assert report("warn", "fail").exit_code() == 1
    assert report("pass", "fail").verdict == "fail"
    assert report().verdict == "pass"
    with pytest.raises(ValueError, match="severity"):
        CheckResult("x", "error")



REPORT_KEYS = {"schema", "schema_version", "source", "readable", "verdict", "counts", "profile", "image", "checks",
               "skipped", "caution"}



CHECK_KEYS = {"id", "severity", "value", "threshold", "unit", "message", "cleared_by", "remedy", "details"}



def test_json_report_keys_are_pinned(profile):
    """The JSON schema is a public interface: changing these keys needs a new schema version."""
    d = check_map(sunny(), profile=profile).to_dict()
    assert set(d) == REPORT_KEYS
    assert (d["schema"], d["schema_version"]) == ("envsample.qa-report", 3)
    assert set(d["source"]) == {"path", "sha256", "size"}
    assert set(d["counts"]) == {"pass", "warn", "fail"}
    assert set(d["profile"]) == {"name", "path"} and d["profile"]["name"] == "tests"
    for c in d["checks"]:
        assert set(c) == CHECK_KEYS
        assert "\n" not in c["message"] and "\n" not in c["remedy"]
    assert "not certified lighting calculations" in d["caution"]
    many = json.loads(report_to_json([check_map(sunny(), profile=profile), check_map("missing.exr")]))
    assert set(many) == {"schema", "schema_version", "summary", "reports"}
    assert (many["schema"], many["schema_version"]) == ("envsample.qa-reports", 3)
    assert many["summary"] == {"files": 2, "unreadable": 1, "pass": 1, "warn": 0, "fail": 0}
    assert [set(r) for r in many["reports"]] == [REPORT_KEYS, REPORT_KEYS]
