"""Tests of envsample.qa.emitters: regions that wrap across the seam and around the poles are one region.
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
