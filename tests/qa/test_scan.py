"""Tests of envsample.qa.scan: the one pass over a map (row sums and maxima, the reduced map) and its
solid-angle weighted quantiles, against numpy reductions and an argsort reference.
"""

from __future__ import annotations

import numpy as np
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.core.sphere import row_solid_angles
from envsample.qa.scan import scan_map


def test_scan_quantiles_match_an_argsort_reference_to_the_bucket_width(rng):
    """Quantiles from the scan's log histogram must match a plain argsort of (value, weight) pairs
    (numpy reference) to within the bucket width, 2^-8 of the value (IEEE 754 binary32 layout:
    8 mantissa bits kept), including ties, zeros and negative zeros."""
    values = rng.lognormal(size=(37, 74)).astype(np.float32)
    values[rng.random(values.shape) < 0.2] = 0.0
    values[3, :10] = -0.0
    values[5] = values[6]  # ties across rows
    scan = scan_map(np.repeat(values[..., None], 3, axis=2), primaries="mean")
    w = row_solid_angles(37, 74)
    flat = np.maximum(scan.luminance, 0).ravel().astype(np.float64)
    weights = np.broadcast_to(w[:, None], values.shape).ravel()
    order = np.argsort(flat, kind="stable")
    cdf = np.cumsum(weights[order])
    assert np.isclose(scan.histogram.total, w.sum() * 74)
    for q in (0.0, 0.01, 0.25, 0.5, 0.9, 0.999, 1.0):
        k = min(int(np.searchsorted(cdf, q * cdf[-1], side="left")), flat.size - 1)
        exact = flat[order[k]]
        assert abs(scan.histogram.quantile(q) - exact) <= 2.0 ** -8 * exact + 1e-30


def test_scan_row_sums_maxima_and_reduction_match_numpy(rng):
    """Row sums and maxima per channel, luminance and the reduced map against whole-array numpy
    (reference: numpy reductions; the reduction against envsample.core.latlong.reduce_power)."""
    from envsample.core.color import luminance
    from envsample.core.latlong import reduce_power

    rgb = rng.lognormal(size=(64, 128, 3)).astype(np.float32)
    rgb[10, 5, 1] = np.nan
    rgb[11, 7, 2] = -3.0
    scan = scan_map(rgb, reduce_to=(32, 16))
    clean = np.where(np.isfinite(rgb) & (rgb > 0), rgb, 0).astype(np.float32)
    assert not scan.finite and not scan.nonnegative
    assert np.array_equal(scan.row_channel_max, clean.max(axis=1))
    assert np.allclose(scan.row_channel_sum, clean.sum(axis=1, dtype=np.float64), rtol=1e-6)
    assert np.allclose(scan.luminance, luminance(clean), rtol=1e-6)
    assert np.allclose(scan.reduced, reduce_power(clean, (32, 16)), rtol=1e-5)
    assert scan.raw_max == float(np.nanmax(rgb))
