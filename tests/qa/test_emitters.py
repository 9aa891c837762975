"""Tests of envsample.qa.emitters.

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

from envsample.qa.emitters import label_wrapped


def test_label_wrapped_joins_across_the_seam_and_around_the_poles():
    mask = np.zeros((8, 16), bool)
    mask[3, 0] = mask[4, 15] = True  # diagonal neighbours across the seam
    mask[0, 2] = mask[0, 9] = True  # both touch the zenith
    mask[6, 7] = True  # alone
    labels, n = label_wrapped(mask)
    assert n == 3
    assert labels[3, 0] == labels[4, 15] != 0
    assert labels[0, 2] == labels[0, 9] != 0
    assert len({labels[3, 0], labels[0, 2], labels[6, 7]}) == 3
