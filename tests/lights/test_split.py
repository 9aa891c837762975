"""Tests of envsample.lights.split: the sun split off a map, its energy, the filled sky and the sun file.

Sources: energy conservation of the split (issue 11: within 1e-4 relative); the sun's power against
the analytic disk's (tests/support/sun_maps.py); the variance of sampling the split against the
unsplit table (Veach 1997's MIS estimators, measured with fixed seeds).  The fill and the restoration
have their own files (test_fill.py, test_restore.py).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.sun_maps import analytic_sun, true_sun_power

from envsample.core.color import luminance
from envsample.core.sphere import pixel_center_directions
from envsample.errors import SunSplitError
from envsample.lights.regions import ring
from envsample.lights.split import SUN_SCHEMA, map_integral, split_sun
from envsample.synth import skies

SPLITS = [(1024, 20.0, 30.0, 0.533), (2048, 179.9, 1.5, 0.533), (1024, -180.0, 60.0, 2.0), (4096, -40.0, 12.0, 0.533)]


@pytest.mark.parametrize(("width", "az", "el", "diam"), SPLITS)
def test_split_conserves_energy(width, az, el, diam):
    img = analytic_sun(width, azimuth_deg=az, elevation_deg=el, diameter_deg=diam)
    sp = split_sun(img)
    total = map_integral(img)
    assert np.allclose(map_integral(sp.sky) + sp.sun.power, total, rtol=1e-4, atol=0)
    assert sp.moved_rgb @ [0.212639, 0.715169, 0.072192] == pytest.approx(true_sun_power(diam), rel=0.01)


@pytest.mark.parametrize(("width", "az", "el", "diam"), SPLITS)
def test_filled_sky_has_no_ring_brighter_than_its_surroundings(width, az, el, diam):
    """99th percentile of the filled region below that of a 3-pixel annulus around it (issue 11)."""
    sp = split_sun(analytic_sun(width, azimuth_deg=az, elevation_deg=el, diameter_deg=diam))
    lo, hi = sp.found.rows
    lum = luminance(sp.sky[lo:hi])
    hole = sp.found.hole
    annulus = hole.copy()
    for _ in range(3):
        annulus |= ring(annulus)
    annulus &= ~hole
    assert np.percentile(lum[hole], 99) <= np.percentile(lum[annulus], 99)
    assert lum[hole].max() <= lum[annulus].max()


def test_sun_document_has_the_keys_the_issue_asks_for():
    sp = split_sun(analytic_sun(1024, azimuth_deg=20.0, elevation_deg=30.0))
    doc = sp.document(files={"sky_map": "sky.exr"})
    assert SUN_SCHEMA.matches(doc)
    assert len(doc["direction"]) == 3 and math.isclose(np.linalg.norm(doc["direction"]), 1.0)
    assert any("irradiance" in k and "normal" in k for k in doc)
    for key in ("angular_diameter_deg", "solid_angle_sr", "radiance_rgb", "energy_moved_rgb", "method", "caution"):
        assert key in doc
    assert "fill" in doc["method"] and "finder" in doc["method"]
    assert "not certified" in doc["caution"]


def test_split_refuses_a_map_without_a_sun():
    with pytest.raises(SunSplitError, match="no sun-like emitter"):
        split_sun(skies.cie_overcast_sky(256))


def test_split_rooftop_has_lower_variance_than_table_only_sampling_of_the_unsplit_map():
    """Rooftop demo scene, equal samples: sun + sky table + cosine MIS on the split versus the unsplit table."""
    from envsample.estimation.estimators import estimate_irradiance
    from envsample.sampling.table import build_table

    img = skies.rooftop_scene(512)
    sp = split_sun(img)
    normals = pixel_center_directions(6, 12).reshape(-1, 3)
    _, whole = estimate_irradiance(build_table(img), normals, estimator="table", spp=64, seed=3, return_samples=True)
    _, split = estimate_irradiance(build_table(sp.sky), normals, estimator="sun-mis-balance", spp=64, seed=3,
                                   sun=sp.sun, return_samples=True)
    assert split.variance().mean() < whole.variance().mean()
