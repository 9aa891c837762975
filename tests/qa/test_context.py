"""Tests of envsample.qa.context: the solid-angle weighted quantiles.

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

from envsample.core.sphere import row_solid_angles
from envsample.qa.context import RowWeightedSample


def test_row_weighted_quantiles_match_an_argsort_reference(rng):
    """The packed-key sort must give the same weighted quantiles as a plain argsort of
    (value, weight) pairs (numpy reference), including ties and zeros."""
    values = rng.lognormal(size=(37, 74)).astype(np.float32)
    values[rng.random(values.shape) < 0.2] = 0.0
    values[3, :10] = -0.0
    values[5] = values[6]  # ties across rows
    w = row_solid_angles(37, 74)
    sample = RowWeightedSample(values, w)
    flat = np.maximum(values, 0).ravel().astype(np.float64)
    weights = np.broadcast_to(w[:, None], values.shape).ravel()
    order = np.argsort(flat, kind="stable")
    cdf = np.cumsum(weights[order])
    for q in (0.0, 0.01, 0.25, 0.5, 0.9, 0.999, 1.0):
        k = min(int(np.searchsorted(cdf, q * cdf[-1], side="left")), flat.size - 1)
        assert sample.quantile(q) == flat[order[k]]
