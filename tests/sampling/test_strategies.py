"""Tests of envsample.strategies against closed forms, published identities and scipy.

Sources named per test.  Statistical tests use fixed seeds; chi-square tests fail
below a p-value of 1e-4 (about a 3.7-sigma event).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from envsample.core.sphere import (
    direction_to_pixel,
    pixel_center_directions,
    pixel_solid_angles,
    to_local,
    to_world,
)
from envsample.sampling.strategies import (
    CosineHemisphere,
    GGXReflection,
    LambertBSDF,
    TableStrategy,
    UniformHemisphere,
    UniformSphere,
    concentric_disk,
    ggx_d,
    ggx_g1,
    ggx_g2,
    make_frame,
    make_strategy,
)
from envsample.sampling.table import build_table

#: Smallest chi-square p-value accepted (fixed seeds; ~3.7 sigma).
P_MIN = 1e-4
#: Samples per chi-square test.
N_CHI = 200_000


def _random_normals(rng, n):
    v = rng.normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1)[:, None]


def _local_view(theta):
    return np.array([math.sin(theta), 0.0, math.cos(theta)])


def _frame_with_view(rng, n, theta_v, alpha):
    """Random world normals with the view at polar angle theta_v in each local frame."""
    normals = _random_normals(rng, n)
    wo = to_world(np.broadcast_to(_local_view(theta_v), (n, 3)), normals)
    return make_frame(normals, wo, alpha)


def _bin_probabilities(strategy, frame_one, z_edges, phi_edges, sub=24):
    """Probability of each (z, phi) bin in the local frame, by dense midpoint quadrature.

    ``frame_one`` has the normal +z so local = world (Duff et al. 2017 basis of +z is
    the identity).  The solid-angle element is dz dphi.
    """
    nz, nphi = len(z_edges) - 1, len(phi_edges) - 1
    zs = (z_edges[:-1, None] + (np.arange(sub) + 0.5)[None, :] / sub * np.diff(z_edges)[:, None]).ravel()
    ps = (phi_edges[:-1, None] + (np.arange(sub) + 0.5)[None, :] / sub * np.diff(phi_edges)[:, None]).ravel()
    z, p = np.meshgrid(zs, ps, indexing="ij")
    s = np.sqrt(np.maximum(0.0, 1.0 - z * z))
    d = np.stack([s * np.cos(p), s * np.sin(p), z], axis=-1).reshape(-1, 3)
    fr = make_frame(np.broadcast_to([0.0, 0.0, 1.0], d.shape),
                    None if frame_one.wo is None else np.broadcast_to(frame_one.wo[0], d.shape),
                    None if frame_one.roughness is None else frame_one.roughness[0])
    dens = strategy.pdf(d, fr).reshape(nz * sub, nphi * sub)
    cell = np.outer(np.repeat(np.diff(z_edges) / sub, sub), np.repeat(np.diff(phi_edges) / sub, sub))
    return (dens * cell).reshape(nz, sub, nphi, sub).sum(axis=(1, 3))


def _chi_square(strategy, frame, z_edges, phi_edges, seed):
    """Pearson chi-square of samples (local coordinates) vs the strategy's own pdf (scipy.stats.chisquare)."""
    rng = np.random.default_rng(seed)
    d, pdf = strategy.sample(rng.random((len(frame), 2)), frame)
    local = to_local(d, frame.normals)
    z = np.clip(local[:, 2], -1.0, 1.0)
    phi = np.mod(np.arctan2(local[:, 1], local[:, 0]), 2.0 * math.pi)
    observed, _, _ = np.histogram2d(z, phi, bins=[z_edges, phi_edges])
    one = frame.take(slice(0, 1))
    one = make_frame([0.0, 0.0, 1.0], None if one.wo is None else to_local(one.wo, one.normals),
                     None if one.roughness is None else one.roughness)
    prob = _bin_probabilities(strategy, one, z_edges, phi_edges)
    expected = prob.ravel() * len(frame)
    observed = observed.ravel()
    # Pool bins with < 5 expected samples (the usual validity rule of Pearson's test).
    small = expected < 5.0
    obs = np.append(observed[~small], observed[small].sum())
    exp = np.append(expected[~small], expected[small].sum())
    # Mass outside the binned range must be sampled as often as the pdf says.
    exp_out = len(frame) - exp.sum()
    obs_out = len(frame) - obs.sum()
    obs = np.append(obs, obs_out)
    exp = np.append(exp, max(exp_out, 0.0))
    keep = exp > 0
    assert np.all(obs[~keep] == 0), "samples fell where the pdf says there is no mass"
    obs, exp = obs[keep], exp[keep]
    exp *= obs.sum() / exp.sum()  # quadrature rounding only; checked separately to ~1e-4
    return stats.chisquare(obs, exp).pvalue, pdf, d


HEMI_Z = np.linspace(0.0, 1.0, 17)
SPHERE_Z = np.linspace(-1.0, 1.0, 25)
PHI = np.linspace(0.0, 2.0 * math.pi, 13)


@pytest.mark.parametrize("strategy,z_edges", [
    (CosineHemisphere(), HEMI_Z),
    (UniformHemisphere(), HEMI_Z),
    (UniformSphere(), SPHERE_Z),
    (LambertBSDF(0.7), HEMI_Z),
])
def test_simple_strategy_samples_follow_their_pdf(strategy, z_edges):
    """Pearson chi-square (scipy.stats.chisquare) of samples vs pdf on a (cos theta, phi) grid."""
    rng = np.random.default_rng(11)
    frame = make_frame(_random_normals(rng, N_CHI))
    p, pdf, d = _chi_square(strategy, frame, z_edges, PHI, seed=12)
    assert p > P_MIN
    np.testing.assert_allclose(pdf, strategy.pdf(d, frame), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("alpha,theta_v", [(0.1, 0.3), (0.35, 1.0), (0.8, 1.4), (1.0, 0.0)])
def test_ggx_samples_follow_their_pdf_on_the_whole_sphere(alpha, theta_v):
    """GGX visible-normal samples (Heitz 2018) vs the reflected-direction pdf G1 D / (4 v_z), whole sphere.

    Below-surface directions are binned too: the pdf is not renormalised to the hemisphere.
    """
    rng = np.random.default_rng(21)
    frame = _frame_with_view(rng, N_CHI, theta_v, alpha)
    # The pdf jumps to 0 at wi_z = -wo_z (h reaches the horizon): make that a bin edge so the
    # quadrature of the expected counts never straddles the jump; nothing may land below it.
    vz = math.cos(theta_v)
    below = [-1.0] if vz < 1.0 else []
    z_edges = np.concatenate([below, np.linspace(-vz, 0.0, 5)[:-1], np.linspace(0.0, 1.0, 33)])
    p, pdf, d = _chi_square(GGXReflection(), frame, z_edges, np.linspace(0.0, 2.0 * math.pi, 25), seed=22)
    assert p > P_MIN
    np.testing.assert_allclose(pdf, GGXReflection().pdf(d, frame), rtol=1e-9)


def test_chi_square_detects_a_wrong_pdf():
    """The test above can fail: samples of the uniform hemisphere judged against the cosine pdf."""
    class Mislabelled(CosineHemisphere):
        def sample(self, u, frame):
            return UniformHemisphere().sample(u, frame)

    rng = np.random.default_rng(31)
    frame = make_frame(_random_normals(rng, 20_000))
    p, _, _ = _chi_square(Mislabelled(), frame, HEMI_Z, PHI, seed=32)
    assert p < P_MIN


def _cap_integral(f, theta_max, nt=1500, nphi=720):
    """Midpoint quadrature of f(directions (M,3)) over the cap theta in [0, theta_max], all phi,
    with dOmega = sin(theta) dtheta dphi.  Callers end the cap at the integrand's jump so the
    rule sees only smooth pieces."""
    t = (np.arange(nt) + 0.5) * (theta_max / nt)
    p = (np.arange(nphi) + 0.5) * (2.0 * math.pi / nphi)
    tt, pp = np.meshgrid(t, p, indexing="ij")
    d = np.stack([np.sin(tt) * np.cos(pp), np.sin(tt) * np.sin(pp), np.cos(tt)], axis=-1).reshape(-1, 3)
    w = (np.sin(tt) * (theta_max / nt) * (2.0 * math.pi / nphi)).ravel()
    return float(np.dot(f(d), w))


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


@pytest.mark.parametrize("alpha", [0.02, 0.1, 0.5, 1.0])
def test_ggx_d_is_normalised_by_projected_area(alpha):
    """Walter et al. (2007): the integral of D(h) cos theta_h over the hemisphere is 1 (scipy.integrate.quad)."""
    def integrand(z):
        return ggx_d(np.array([[math.sqrt(1.0 - z * z), 0.0, z]]), alpha)[0] * z

    val = 2.0 * math.pi * integrate.quad(integrand, 0.0, 1.0, points=[1.0 - alpha**2], limit=500, epsabs=1e-12)[0]
    assert val == pytest.approx(1.0, abs=1e-7)


@pytest.mark.parametrize("alpha,theta_v", [(0.2, 0.5), (0.6, 1.3), (1.0, 1.5)])
def test_ggx_visible_normals_and_reflected_pdf_are_normalised(alpha, theta_v):
    """Heitz (2014): the visible projected area of the microsurface equals v_z,
    i.e. integral of G1(v) max(0, v.h) D(h) dh = v_z; and the reflected-direction pdf
    integrates to 1 over the whole sphere (dense quadrature), including directions below the surface."""
    v = _local_view(theta_v)

    def visible(h):
        vv = np.broadcast_to(v, h.shape)
        return ggx_g1(vv, alpha) * np.maximum(h @ v, 0.0) * ggx_d(h, alpha)

    # D vanishes for h below the surface, so the cap ends at the horizon.
    assert _cap_integral(visible, math.pi / 2) == pytest.approx(v[2], rel=1e-5)
    frame_of = lambda d: make_frame(np.broadcast_to([0.0, 0.0, 1.0], d.shape), np.broadcast_to(v, d.shape), alpha)
    # h = normalize(wi + wo) is below the surface (pdf 0) exactly when wi_z < -wo_z.
    total = _cap_integral(lambda d: GGXReflection().pdf(d, frame_of(d)), math.acos(-v[2]))
    assert total == pytest.approx(1.0, rel=1e-4)


def test_ggx_reflections_below_the_surface_keep_their_pdf_and_contribute_nothing():
    """Heitz (2018): at high roughness and grazing view some reflected directions point below
    the surface; they are returned with their (non-zero) pdf and f = 0, never renormalised."""
    rng = np.random.default_rng(41)
    frame = _frame_with_view(rng, 50_000, 1.45, 0.9)
    g = GGXReflection()
    d, pdf = g.sample(rng.random((len(frame), 2)), frame)
    below = np.sum(d * frame.normals, axis=1) < 0.0
    assert below.mean() > 0.05  # the design notes measured 8-49 % in this regime
    assert np.all(pdf[below] > 0.0)
    assert np.all(g.eval(d[below], frame.take(below)) == 0.0)


def test_ggx_eval_is_reciprocal():
    """Helmholtz reciprocity of the microfacet BRDF (Walter et al. 2007): f(wi, wo) = f(wo, wi)."""
    rng = np.random.default_rng(51)
    n = 5000
    normals = _random_normals(rng, n)
    a = to_world(np.abs(_random_normals(rng, n)) * [1, 1, 1], normals)
    b = to_world(np.abs(_random_normals(rng, n)) * [1, -1, 1], normals)
    alpha = rng.uniform(0.05, 1.0, n)
    g = GGXReflection()
    f_ab = g.eval(a, make_frame(normals, b, alpha))
    f_ba = g.eval(b, make_frame(normals, a, alpha))
    assert np.all(f_ab > 0.0)
    np.testing.assert_allclose(f_ab, f_ba, rtol=1e-12)


def test_ggx_sample_weight_is_g2_over_g1():
    """Heitz (2018): with visible-normal sampling and F = 1 the weight f cos / pdf equals G2(wi, wo) / G1(wo)."""
    rng = np.random.default_rng(61)
    n = 20_000
    frame = _frame_with_view(rng, n, 1.1, 0.4)
    g = GGXReflection()
    d, pdf = g.sample(rng.random((n, 2)), frame)
    wi = to_local(d, frame.normals)
    wo = to_local(frame.wo, frame.normals)
    up = wi[:, 2] > 1e-6
    weight = g.eval(d, frame)[up] * wi[up, 2] / pdf[up]
    expected = ggx_g2(wi[up], wo[up], 0.4) / ggx_g1(wo[up], 0.4)
    np.testing.assert_allclose(weight, expected, rtol=1e-9)
    assert np.all(weight <= 1.0 + 1e-12)


def test_lambert_eval_is_albedo_over_pi_and_weight_is_albedo():
    """Lambert's cosine law: f = albedo / pi, and with cosine sampling f cos / pdf = albedo exactly."""
    rng = np.random.default_rng(71)
    normals = _random_normals(rng, 4000)
    wo = to_world(np.broadcast_to(_local_view(0.4), normals.shape), normals)
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
    frame = make_frame(_random_normals(rng, N_CHI))
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


def test_bad_frames_and_parameters_are_rejected_with_clear_messages():
    with pytest.raises(ValueError, match="normals contains a zero vector"):
        make_frame([[0.0, 0.0, 0.0]])
    with pytest.raises(ValueError, match="normals contains NaN or Inf"):
        make_frame([[np.nan, 0.0, 1.0]])
    with pytest.raises(ValueError, match=r"normals must have shape \(N, 3\)"):
        make_frame(np.zeros((4, 2)))
    with pytest.raises(ValueError, match="wo has 2 rows but the normals have 3"):
        make_frame(np.eye(3), np.eye(3)[:2])
    with pytest.raises(ValueError, match=r"roughness \(GGX alpha\) must lie in"):
        make_frame([0.0, 0.0, 1.0], [0.0, 0.0, 1.0], 0.0)
    with pytest.raises(ValueError, match="needs frame.wo and frame.roughness"):
        GGXReflection().sample(np.zeros((1, 2)), make_frame([0.0, 0.0, 1.0]))
    with pytest.raises(ValueError, match=r"u must have shape \(1, 2\)"):
        CosineHemisphere().sample(np.zeros((2, 2)), make_frame([0.0, 0.0, 1.0]))
    with pytest.raises(ValueError, match="albedo must lie in"):
        LambertBSDF(1.5)
    # Inputs are normalised, and one wo is broadcast to every normal.
    fr = make_frame([[0.0, 0.0, 2.0], [0.0, 3.0, 0.0]], [0.0, 0.0, 5.0], 0.3)
    np.testing.assert_allclose(fr.normals, [[0, 0, 1], [0, 1, 0]])
    np.testing.assert_allclose(fr.wo, [[0, 0, 1], [0, 0, 1]])
    np.testing.assert_allclose(fr.roughness, [0.3, 0.3])


def test_ggx_view_from_below_has_zero_pdf():
    """A view direction under the surface sees no microfacets (Heitz 2018): pdf 0, f 0."""
    frame = make_frame(np.tile([0.0, 0.0, 1.0], (10, 1)), [0.3, 0.0, -0.9], 0.5)
    g = GGXReflection()
    d, pdf = g.sample(np.random.default_rng(3).random((10, 2)), frame)
    assert np.all(pdf == 0.0) and np.all(g.pdf(d, frame) == 0.0) and np.all(g.eval(d, frame) == 0.0)
    assert np.all(np.isfinite(d))
