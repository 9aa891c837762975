"""Tests of envsample.qa.results: exit codes and the pinned JSON keys.

Sources of the expected values (named again beside each test):
- The traditional overcast sky L = Lz (1 + 2 cos theta) / 3 (Moon & Spencer 1942,
  CIE standard overcast sky, CIE S 003/E:1996): horizontal irradiance 7 pi / 9 Lz
  (closed form; cross-checked with scipy.integrate.quad).
- A uniform sky L: irradiance pi L on any surface (textbook).
- Moments of uniform-sphere sampling of the clamped cosine, E[max(0, cos)^k] = 1/(2(k+1))
  (textbook), for the relative RMSE of table-only sampling of a uniform map.
- The balance heuristic (Veach 1997, eq. 9.4 and section 9.2): in multi-sample MIS
  with half the samples from the table, a sample term is at most twice the table-only
  term L cos / p_table <= 2 integral(L).
- IEEE 754 binary16: largest finite value 65504.  IEC 61966-2-1: the sRGB encoding.
- The sun's mean angular diameter 0.533 deg (from memory; envsample.constants).

Maps are 256x128 or smaller except where a resolved sun disk is needed.  The test
profile lowers the resolution floor to these sizes; everything else is the default.
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
