"""Tests of envsample.validation.split: the split lights the scene like the original, with less noise.

Reference: the original map's exact irradiance (Arvo 1995, envsample.reference.irradiance); unbiased
estimators agree with it within 4 standard errors (Veach 1997, ch. 9).
"""

from __future__ import annotations

from support.sun_maps import analytic_sun

from envsample.lights.split import split_sun
from envsample.sampling.table import build_table
from envsample.validation.split import compare_split


def test_split_agrees_with_the_original_and_beats_table_only_sampling():
    img = analytic_sun(512, azimuth_deg=40.0, elevation_deg=25.0)
    sp = split_sun(img)
    c = compare_split(build_table(img), build_table(sp.sky), sp.sun, spp=32, normals=(32, 16), seed=4)
    assert c.consistent
    assert abs(c.reference_difference) < 1e-3
    e = c.entries
    assert e["split:sun-mis-balance"]["relative_rmse"] < e["unsplit:table"]["relative_rmse"]
    doc = c.to_dict()
    assert doc["estimators"]["unsplit:table"]["scene"] == "unsplit" and "caution" in doc
