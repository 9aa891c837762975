"""Tests of envsample.qa.report: the terminal table.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.qa.checks import CHECKS
from envsample.qa.messages import fmt
from envsample.qa.report import format_report
from envsample.qa.run import check_map
from envsample.synth import skies


def test_format_report_is_a_compact_table(profile):
    report = check_map(np.flipud(sunny()).copy(), profile=profile)
    plain = format_report(report, color=False)
    assert "\x1b[" not in plain
    lines = plain.splitlines()
    assert lines[0].startswith("<in memory>") and "WARN" in lines[0]
    for cid in CHECKS:
        assert any(line.split()[1:2] == [cid] for line in lines if line.startswith("  ")), cid
    assert any("->" in line and "flip" in line for line in lines)  # the remedy of the warning
    coloured = format_report([report, check_map("missing.exr")], color=True)
    assert "\x1b[33m" in coloured and "\x1b[0m" in coloured and "missing.exr" in coloured


def test_one_unit_per_check_in_the_terminal_the_json_and_the_page(profile, tmp_path):
    """Issue 9: the terminal, the page and the CSV showed one share as 1, 100 % and a fraction.  The value
    is stored in its unit; the terminal table and the JSON show the same number with the same unit."""
    from envsample.reports.pages import check_page

    img = np.flipud(sunny()).copy()
    img[50:70, :, 2] = -0.01
    report = check_map(img, profile=profile)
    d = report.to_dict()
    by_id = {c["id"]: c for c in d["checks"]}
    assert by_id["orientation"]["unit"] == "%" and by_id["negative"]["unit"] == "%"
    assert by_id["clipping"]["unit"] == "px" and by_id["dynamic-range"]["unit"] == "stops"
    text = format_report(report)
    line = next(ln for ln in text.splitlines() if " orientation " in ln)
    assert fmt(by_id["orientation"]["value"]) in line and " % " in line
    check_page([report], tmp_path / "p.html")
    row = (tmp_path / "p.html").read_text().split('<td class="id">orientation</td>')[1].split("</tr>")[0]
    cells = re.findall(r"<td[^>]*>(.*?)</td>", row)
    assert float(cells[0]) == pytest.approx(by_id["orientation"]["value"], rel=1e-3) and cells[2].startswith("%")


def test_a_passing_check_past_its_threshold_says_what_cleared_it(profile):
    """Issue 9: `clipping 12769 3` passed on a studio with no word of the criterion."""
    report = check_map(skies.make_sky("studio", width=W), profile=profile)
    c = report["clipping"]
    assert c.severity == "pass" and c.value >= c.threshold and c.cleared_by
    assert f"passes: {c.cleared_by}" in format_report(report)
