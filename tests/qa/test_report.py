"""Tests of envsample.qa.report: the terminal table.
"""

from __future__ import annotations

import numpy as np
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.qa.checks import CHECKS
from envsample.qa.report import format_report
from envsample.qa.run import check_map


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
