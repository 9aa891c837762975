"""Tests of envsample.sampling.strategies against closed forms, published identities and scipy.

Sources named per test.  Statistical tests use fixed seeds; chi-square tests fail
below a p-value of 1e-4 (about a 3.7-sigma event).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats
from support.sampling_checks import *  # noqa: F403 - the shared test maps and helpers

from envsample.core.sphere import direction_to_pixel, pixel_center_directions, pixel_solid_angles, to_world
from envsample.sampling.frames import make_frame
from envsample.sampling.strategies import (
    CosineHemisphere,
    LambertBSDF,
    TableStrategy,
    UniformHemisphere,
    UniformSphere,
    concentric_disk,
    make_strategy,
)
from envsample.sampling.table import build_table


@pytest.mark.parametrize("strategy,z_edges", [
    (CosineHemisphere(), HEMI_Z),
    (UniformHemisphere(), HEMI_Z),
    (UniformSphere(), SPHERE_Z),
    (LambertBSDF(0.7), HEMI_Z),
])
def test_simple_strategy_samples_follow_their_pdf(strategy, z_edges):
    """Pearson chi-square (scipy.stats.chisquare) of samples vs pdf on a (cos theta, phi) grid."""
    rng = np.random.default_rng(11)
    frame = make_frame(random_normals(rng, N_CHI))
    p, pdf, d = chi_square(strategy, frame, z_edges, PHI, seed=12)
    assert p > P_MIN
    np.testing.assert_allclose(pdf, strategy.pdf(d, frame), rtol=1e-12, atol=1e-15)



def test_chi_square_detects_a_wrong_pdf():
    """The test above can fail: samples of the uniform hemisphere judged against the cosine pdf."""
    class Mislabelled(CosineHemisphere):
        def sample(self, u, frame):
            return UniformHemisphere().sample(u, frame)

    rng = np.random.default_rng(31)
    frame = make_frame(random_normals(rng, 20_000))
    p, _, _ = chi_square(Mislabelled(), frame, HEMI_Z, PHI, seed=32)
    assert p < P_MIN



@pytest.mark.parametrize("strategy,expected_pdf", [
    # Closed forms: cos/pi, 1/(2 pi), 1/(4 pi) (textbook; Lambert's cosine law for the first).
    (CosineHemisphere(), lambda z: np.maximum(z, 0.0) / math.pi),
    (UniformHemisphere(), lambda z: np.where(z > 0, 1.0 / (2.0 * math.pi), 0.0)),
    (UniformSphere(), lambda z: np.full_like(z, 1.0 / (4.0 * math.pi))),
])
def test_simple_pdfs_match_closed_forms_and_integrate_to_one(strategy, expected_pdf):
    """Each pdf equals its closed form and integrates to 1 (scipy.integrate.quad over cos theta)."""
    one = make_frame([0.0, 0.0, 1.0])

    def pdf_of_z(z):
        d = np.array([[math.sqrt(max(0.0, 1.0 - z * z)), 0.0, z]])
        return float(strategy.pdf(d, one)[0])

    total = 2.0 * math.pi * integrate.quad(pdf_of_z, -1.0, 1.0, points=[0.0], limit=200)[0]
    assert total == pytest.approx(1.0, abs=1e-8)
    z = np.linspace(-1, 1, 101)
    d = np.stack([np.sqrt(1 - z * z), np.zeros_like(z), z], axis=1)
    np.testing.assert_allclose(strategy.pdf(d, make_frame(np.broadcast_to([0.0, 0.0, 1.0], d.shape))),
                               expected_pdf(z), rtol=1e-12, atol=1e-15)



def test_lambert_eval_is_albedo_over_pi_and_weight_is_albedo():
    """Lambert's cosine law: f = albedo / pi, and with cosine sampling f cos / pdf = albedo exactly."""
    rng = np.random.default_rng(71)
    normals = random_normals(rng, 4000)
    wo = to_world(np.broadcast_to(local_view(0.4), normals.shape), normals)
    frame = make_frame(normals, wo)
    lam = LambertBSDF(0.6)
    d, pdf = lam.sample(rng.random((4000, 2)), frame)
    cos = np.sum(d * normals, axis=1)
    ok = pdf > 0
    np.testing.assert_allclose(lam.eval(d, frame)[ok], 0.6 / math.pi, rtol=1e-15)
    np.testing.assert_allclose(lam.eval(d, frame)[ok] * cos[ok] / pdf[ok], 0.6, rtol=1e-9)
    # Below the surface (or a view from below) there is no reflection.
    assert np.all(lam.eval(-d, frame) == 0.0)
    assert np.all(lam.eval(d, make_frame(normals, -wo)) == 0.0)



def test_concentric_disk_is_area_preserving():
    """Shirley & Chiu (1997): the concentric map is uniform in area, so r^2 and the angle are uniform
    (scipy.stats.chisquare on 10 x 8 equal-area bins)."""
    rng = np.random.default_rng(81)
    p = concentric_disk(rng.random((100_000, 2)))
    r2 = np.sum(p * p, axis=1)
    assert r2.max() <= 1.0 + 1e-12
    ang = np.mod(np.arctan2(p[:, 1], p[:, 0]), 2 * math.pi)
    obs, _, _ = np.histogram2d(r2, ang, bins=[np.linspace(0, 1, 11), np.linspace(0, 2 * math.pi, 9)])
    assert stats.chisquare(obs.ravel()).pvalue > P_MIN
    # The centre and corners of the square map to the centre and the rim.
    np.testing.assert_allclose(concentric_disk(np.array([[0.5, 0.5]])), [[0.0, 0.0]])
    np.testing.assert_allclose(np.hypot(*concentric_disk(np.array([[0.0, 0.0]]))[0]), 1.0)



def _test_map(h=16, w=32, seed=5):
    rng = np.random.default_rng(seed)
    img = rng.gamma(0.5, 1.0, size=(h, w, 3)).astype(np.float32)
    img[2, 7] = 200.0  # a bright spot, so the table is far from uniform
    return img



@pytest.mark.parametrize("method", ["alias", "inverse"])
def test_table_strategy_samples_follow_its_pdf(method):
    """The table as a strategy: samples per pixel vs the pdf integrated over each pixel's exact solid angle
    (scipy.stats.chisquare); the frame is ignored."""
    table = build_table(_test_map())
    strat = TableStrategy(table, method=method)
    rng = np.random.default_rng(91)
    frame = make_frame(random_normals(rng, N_CHI))
    d, pdf = strat.sample(rng.random((N_CHI, 2)), frame)
    row, col = direction_to_pixel(d, 16, 32, up=table.up)
    obs = np.bincount(row * 32 + col, minlength=16 * 32).astype(float)
    # Equal-area cells: the pdf is constant within a pixel, so its centre value times the
    # exact pixel solid angle is the pixel's probability.
    dens = strat.pdf(pixel_center_directions(16, 32).reshape(-1, 3), frame.take(slice(0, 16 * 32)))
    exp = dens * pixel_solid_angles(16, 32).ravel() * N_CHI
    assert exp.sum() == pytest.approx(N_CHI, rel=1e-5)
    keep = exp >= 5
    assert stats.chisquare(obs[keep], exp[keep] * obs[keep].sum() / exp[keep].sum()).pvalue > P_MIN
    np.testing.assert_allclose(pdf, strat.pdf(d, frame), rtol=1e-12)
    assert not strat.compensated and TableStrategy(build_table(_test_map(), compensate=True)).compensated



def test_make_strategy_dispatches_and_rejects_unknown_names():
    assert isinstance(make_strategy("cosine"), CosineHemisphere)
    assert make_strategy("lambert", albedo=0.5).albedo == 0.5
    t = build_table(_test_map())
    assert make_strategy("table", table=t, table_method="inverse").method == "inverse"
    with pytest.raises(ValueError, match="unknown strategy 'phong'; valid names: cosine"):
        make_strategy("phong")
    with pytest.raises(ValueError, match="needs table="):
        make_strategy("table")
    with pytest.raises(ValueError, match="unknown table sampling method 'fast'"):
        TableStrategy(t, method="fast")
