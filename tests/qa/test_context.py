"""Tests of envsample.qa.context: the solid-angle weighted quantiles against an argsort reference.
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
