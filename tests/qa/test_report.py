"""Tests of envsample.qa.report: the terminal table.

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
