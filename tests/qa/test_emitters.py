"""Tests of envsample.qa.emitters: the checks' adapters to envsample.lights.emitters give the same emitters
as the library functions applied to the whole map with the profile's thresholds.

No outside reference is needed beyond that equivalence (the emitters themselves are tested against
closed forms in tests/lights/test_emitters.py); the map is an invented overcast sky with a sun of
the mean 0.533 deg diameter (tests/support/qa_maps.py).
"""

from __future__ import annotations

import numpy as np
from support.qa_maps import sunny

from envsample.io.maps import MapImage
from envsample.lights import emitters as lights_emitters
from envsample.lights.regions import label_wrapped
from envsample.qa.context import CheckContext
from envsample.qa.emitters import emitter_level, emitter_mask, find_emitters


def test_the_level_from_the_scans_row_maxima_is_the_level_of_the_whole_map(profile):
    ctx = CheckContext(MapImage.from_array(sunny()), profile)
    s = profile.section("sun")
    whole = lights_emitters.emitter_level(ctx.luminance, ctx.median_luminance,
                                          median_multiple=s["threshold_median_multiple"],
                                          max_fraction=s["threshold_max_fraction"])
    assert emitter_level(ctx) == whole


def test_the_emitters_are_those_of_the_whole_maps_mask(profile):
    ctx = CheckContext(MapImage.from_array(sunny()), profile)
    level = emitter_level(ctx)
    labels, n = label_wrapped(ctx.luminance > level)
    want = lights_emitters.find_emitters(ctx.luminance, labels, n, ctx.row_solid_angles)
    got = find_emitters(ctx)
    assert len(got) == len(want) >= 1
    for a, b in zip(got, want):
        assert (a.pixels, a.peak) == (b.pixels, b.peak)
        np.testing.assert_allclose([a.share, a.solid_angle_sr, a.azimuth_deg, a.elevation_deg],
                                   [b.share, b.solid_angle_sr, b.azimuth_deg, b.elevation_deg], rtol=1e-6)


def test_an_emitters_mask_covers_exactly_its_pixels(profile):
    ctx = CheckContext(MapImage.from_array(sunny()), profile)
    sun = find_emitters(ctx)[0]
    rows, mask = emitter_mask(ctx, sun)
    labels = ctx.emitter_labels[0]
    assert np.array_equal(rows, np.nonzero((labels == sun.label).any(axis=1))[0])
    assert np.array_equal(mask, labels[rows] == sun.label) and int(mask.sum()) == sun.pixels
    flat = CheckContext(MapImage.from_array(np.ones((64, 128, 3), np.float32)), profile)
    assert find_emitters(flat) == [] and flat.emitter_rows.size == 0
