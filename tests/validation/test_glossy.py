"""Tests of envsample.validation.glossy: the map the glossy check works on.

Reference: a power-preserving reduction keeps the integral of radiance over the sphere
(sum of L times the exact pixel solid angle; textbook), compared at float32 precision.
"""

from __future__ import annotations

import pytest

from envsample.sampling.table import build_table
from envsample.synth.skies import make_sky
from envsample.validation.glossy import GLOSSY_ESTIMATORS, GLOSSY_MAP, glossy_table


def test_a_large_map_is_reduced_with_its_power_and_options_kept():
    table = build_table(make_sky("sun", width=512), up="z", rotation_deg=30.0)
    small, size = glossy_table(table)
    assert size == list(GLOSSY_MAP) and (small.width, small.height) == GLOSSY_MAP
    assert (small.up, small.rotation_deg, small.primaries) == ("z", 30.0, table.primaries)
    assert small.integrals["luminance"] == pytest.approx(table.integrals["luminance"], rel=1e-5)


def test_a_small_map_is_used_as_it_is():
    table = build_table(make_sky("overcast", width=64))
    small, size = glossy_table(table)
    assert small is table and size == [64, 32]
    assert "bsdf" in GLOSSY_ESTIMATORS and "table" in GLOSSY_ESTIMATORS
