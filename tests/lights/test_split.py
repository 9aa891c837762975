"""Tests of envsample.lights.split, fill and restore: energy, the filled sky, restoring a clipped sun.

Sources: energy conservation of the split (issue 11: within 1e-4 relative); the maximum
principle of harmonic functions (Perez, Gangnet & Blake 2003: a membrane fill lies between
its boundary values); pvlib's Ineichen-Perez DNI and DHI (see tests/core/test_clearsky.py).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.sun_maps import analytic_sun, clipped_capture, true_sun_power

from envsample.core.color import luminance
from envsample.core.sphere import pixel_center_directions
from envsample.errors import SunSplitError
from envsample.lights.fill import harmonic_fill
from envsample.lights.regions import ring
from envsample.lights.restore import sky_horizontal_irradiance
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


def test_harmonic_fill_reproduces_a_linear_row_gradient_and_stays_within_its_boundary():
    """Maximum principle (discrete, positive weights): the fill lies within the boundary values."""
    h, w = 40, 80
    band = np.random.default_rng(1).uniform(1.0, 2.0, (h, w, 3)).astype(np.float32)
    hole = np.zeros((h, w), bool)
    hole[10:30, 70:80] = hole[10:30, 0:6] = True  # across the seam
    out = harmonic_fill(band, hole, first_row=20, height=200)
    boundary = ring(hole)
    assert out[hole].min() >= band[boundary].min() - 1e-6 and out[hole].max() <= band[boundary].max() + 1e-6
    assert np.array_equal(out[~hole], band[~hole])
    const = np.full((h, w, 3), 0.75, np.float32)
    assert np.allclose(harmonic_fill(const, hole, first_row=20, height=200), 0.75, atol=1e-6)
    with pytest.raises(ValueError, match="whole band"):
        harmonic_fill(const, np.ones((h, w), bool), first_row=0, height=h)


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


def _capture(width=1024, az=20.0, el=30.0, **clear):
    clean = skies.sun_sky(width, azimuth_deg=az, elevation_deg=el, **clear)
    return clean, clipped_capture(clean, azimuth_deg=az, elevation_deg=el)


def test_sun_illuminance_restores_a_clipped_sun_within_one_percent():
    clean = analytic_sun(1024, azimuth_deg=20.0, elevation_deg=30.0)
    cap = clipped_capture(clean, azimuth_deg=20.0, elevation_deg=30.0)
    lost = split_sun(cap)
    assert lost.found.clipped and lost.sun.power.mean() < 0.5 * true_sun_power()
    sp = split_sun(cap, sun_illuminance=4.0)
    assert sp.restored and sp.restoration.method == "illuminance"
    lum = float(luminance(sp.sun.power[None, :], dtype=np.float64)[0])
    assert lum == pytest.approx(true_sun_power(), rel=0.01)
    assert sp.sun.diameter_deg == pytest.approx(0.533)
    assert any("colour" in a for a in sp.restoration.assumptions)


def test_clear_sky_restoration_gives_the_models_direct_to_diffuse_ratio():
    """The restored sun's normal irradiance over the sky's horizontal one is pvlib's DNI/DHI (1 %)."""
    pvlib = pytest.importorskip("pvlib")
    for el in (8.0, 30.0, 65.0):
        clean, cap = _capture(el=el)
        sp = split_sun(cap, restore="clear-sky", linke_turbidity=3.0)
        e_n = float(luminance(sp.sun.normal_irradiance[None, :], dtype=np.float64)[0])
        e_h = sky_horizontal_irradiance(sp.sky)
        z = 90.0 - sp.found.elevation_deg
        am = pvlib.atmosphere.get_relative_airmass(z, model="kastenyoung1989")
        ref = pvlib.clearsky.ineichen(z, pvlib.atmosphere.get_absolute_airmass(am), 3.0)
        assert e_n / e_h == pytest.approx(float(ref["dni"] / ref["dhi"]), rel=0.01)
        assert sp.restoration.parameters["linke_turbidity"] == 3.0


def test_clear_sky_restoration_refuses_a_sun_below_the_horizon():
    img = analytic_sun(1024, azimuth_deg=0.0, elevation_deg=0.1)
    cap = clipped_capture(img, azimuth_deg=0.0, elevation_deg=-0.5, clip=40.0, glare=400.0)
    sp = split_sun(cap)
    if sp.found.elevation_deg <= 0:
        with pytest.raises(SunSplitError, match="--sun-illuminance"):
            split_sun(cap, restore="clear-sky")
    with pytest.raises(SunSplitError, match="unknown restore method"):
        split_sun(img, restore="guess")


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
