"""Tests of envsample.table: building, sampling, pdf and eval of environment-map tables.

External references used here (each test names the one it relies on):
- Closed forms: the sphere's solid angle 4*pi; the solid angle of a lat-long row
  (cos theta_i - cos theta_{i+1}) * 2*pi / W; Archimedes' hat-box theorem (the height
  z = cos theta of a uniformly distributed direction is uniform on [-1, 1]).
- The CIE traditional overcast sky, L(theta) = Lz (1 + 2 cos theta) / 3 (Moon & Spencer 1942,
  adopted by the CIE; CIE S 011/E:2003 lists it beside the 15 general sky types).  By hand,
  with mu = cos theta and d(omega) = d(mu) d(phi):
    integral L d(omega)           = 2 pi Lz int_0^1 (1 + 2 mu)/3 d(mu)       = 2 pi Lz (1 + 1)/3 = 4 pi Lz / 3
    integral L cos(theta) d(omega) = 2 pi Lz int_0^1 (mu + 2 mu^2)/3 d(mu)   = 2 pi Lz (1/2 + 2/3)/3 = 7 pi Lz / 9
  and both are also integrated numerically with scipy.integrate.
- scipy.stats.chisquare (Pearson 1900) for sample counts against cell probabilities, and
  scipy.stats.kstest (Kolmogorov-Smirnov) for in-cell coordinates.
- Hesterberg (1995), Technometrics 37(2): a defensive mixture m * uniform + (1 - m) * table has
  pdf >= m / (4 pi) everywhere.
- Karlík et al. (2019), ACM TOG 38(6): MIS compensation subtracts the mean and clamps at zero.
- Pharr, Jakob & Humphreys (2016), PBR 3rd ed. sec. 14.2.4: the uv-linear pdf p(u, v) / (2 pi^2 sin theta).
- colour-science's BT.709 Y row is the reference luminance (see tests/test_color.py).

Statistical tests use fixed seeds.  Chi-square and KS tests reject at p < P_REJECT = 1e-4: with
the ~40 such tests here a false alarm on some seed would have probability ~4e-3, and every such
test is paired with a check that the same statistic does reject a deliberately wrong model, so
the tests have power.  Means are compared within 4 standard errors (N_SIGMA).
"""

from __future__ import annotations

import math

import colour
import numpy as np
import pytest
from scipy import integrate, stats

from envsample.core.latlong import MAPPINGS, parse_size
from envsample.core.sphere import UP_AXES, direction_to_uv, pixel_center_directions, uv_to_direction
from envsample.errors import EnvsampleWarning, MapValidationError
from envsample.sampling.kernels import backend_name
from envsample.sampling.table import SAMPLE_METHODS, build_table

P_REJECT = 1e-4
N_SIGMA = 4.0
#: pdf(sample(u).directions) vs sample(u).pdf (issue 2).
PDF_RTOL = 1e-5
BT709_Y = colour.RGB_COLOURSPACES["ITU-R BT.709"].matrix_RGB_to_XYZ[1]

#: The compiled sampler is optional; when it is built, both code paths are tested.
BACKENDS = ["numpy"] + (["compiled"] if backend_name() == "compiled" else [])


def _sample(table, u, method="inverse", backend="auto"):
    return table.sample(u, method=method, backend=backend)


# ------------------------------------------------------------------ maps and references
def _random_map(rng, h=16, w=32) -> np.ndarray:
    """Log-normal coloured radiance: a dynamic range of a few hundred, like a cloudy sky."""
    return np.exp(rng.normal(0.0, 1.0, (h, w, 3))).astype(np.float32)


def _sun_map(rng, h=32, w=64, sun=(9, 41), ratio=1e6) -> np.ndarray:
    """A random sky of radiance 0.5..1.5 with a one-pixel 'sun' ratio times brighter."""
    sky = rng.uniform(0.5, 1.5, (h, w, 1)) * np.array([0.9, 1.0, 1.1])
    sky = sky.astype(np.float32)
    sky[sun] = ratio
    return sky


def _exact_row_solid_angles(h, w) -> np.ndarray:
    """(cos theta_i - cos theta_{i+1}) * 2*pi / w, written out here rather than taken from envsample."""
    edges = np.cos(np.pi * np.arange(h + 1) / h)
    return (edges[:-1] - edges[1:]) * 2.0 * np.pi / w


def _reference_probabilities(rgb) -> np.ndarray:
    """Cell probabilities from first principles: BT.709 luminance (colour-science) x exact solid angle."""
    y = np.maximum(rgb.astype(np.float64) @ BT709_Y, 0.0)
    wgt = y * _exact_row_solid_angles(*rgb.shape[:2])[:, None]
    return wgt / wgt.sum()


def _uniform_directions(rng, n) -> np.ndarray:
    """Uniform directions on the sphere: normalised standard normal vectors (Muller 1959; common practice)."""
    d = rng.normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1, keepdims=True)


def _pooled_chisquare(observed, expected, min_expected=5.0):
    """Pearson's chi-square with neighbouring cells pooled (in flat order) until every bin
    expects >= min_expected counts, the usual validity condition of the test (Cochran 1954)."""
    observed = np.asarray(observed, dtype=np.float64)
    expected = np.asarray(expected, dtype=np.float64)
    obs_bins, exp_bins = [], []
    o_acc = e_acc = 0.0
    for o, e in zip(observed, expected):
        o_acc += o
        e_acc += e
        if e_acc >= min_expected:
            obs_bins.append(o_acc)
            exp_bins.append(e_acc)
            o_acc = e_acc = 0.0
    if e_acc > 0 or o_acc > 0:  # the remainder joins the last bin
        obs_bins[-1] += o_acc
        exp_bins[-1] += e_acc
    obs_bins, exp_bins = np.array(obs_bins), np.array(exp_bins)
    exp_bins *= obs_bins.sum() / exp_bins.sum()
    assert exp_bins.min() >= min_expected * 0.999
    assert obs_bins.size >= 2, "too few bins for a chi-square test"
    return stats.chisquare(obs_bins, exp_bins), obs_bins.size


def _cells_from_directions(table, d) -> np.ndarray:
    row, col, _ = table.cells_of(d)
    return row * table.table_width + col


# ------------------------------------------------------------------ integrals
@pytest.mark.parametrize("shape", [(8, 16), (16, 32), (7, 13), (64, 128)])
def test_constant_map_integrates_to_four_pi_L(shape):
    """integral of a constant L over the sphere = 4 pi L (closed form), per channel and for luminance."""
    L = np.array([0.25, 2.0, 7.5], dtype=np.float32)
    rgb = np.broadcast_to(L, shape + (3,)).copy()
    t = build_table(rgb)
    np.testing.assert_allclose(t.integrals["rgb"], 4 * np.pi * L.astype(np.float64), rtol=1e-6)
    assert t.integrals["luminance"] == pytest.approx(4 * np.pi * float(L.astype(np.float64) @ BT709_Y), rel=1e-6)
    # A constant map gives each cell its solid-angle share.
    np.testing.assert_allclose(t.cell_probability, np.broadcast_to(_exact_row_solid_angles(*shape)[:, None] / (4 * np.pi), shape), rtol=1e-6)


def _overcast_map(h, w, lz):
    """Traditional overcast sky on the upper hemisphere, black below, with exact row averages.
    The solid-angle average of (1 + 2 mu)/3 over mu in [mu1, mu0] is (1 + mu0 + mu1)/3 (by hand)."""
    assert h % 2 == 0  # the horizon is a row edge
    mu = np.cos(np.pi * np.arange(h + 1) / h)
    mu[h // 2] = 0.0
    avg = lz * (1.0 + mu[:-1] + mu[1:]) / 3.0
    avg[h // 2 :] = 0.0
    return np.broadcast_to(avg[:, None, None], (h, w, 3)).astype(np.float32), mu


def test_overcast_sky_closed_forms_hold_by_scipy():
    """scipy.integrate.dblquad on the analytic traditional overcast sky confirms the hand
    derivations 4 pi Lz / 3 and 7 pi Lz / 9 used below (Lz = 1)."""
    lum = lambda t: (1 + 2 * math.cos(t)) / 3
    radiance, _ = integrate.dblquad(lambda t, p: lum(t) * math.sin(t), 0, 2 * math.pi, 0, math.pi / 2)
    irradiance, _ = integrate.dblquad(lambda t, p: lum(t) * math.cos(t) * math.sin(t), 0, 2 * math.pi, 0, math.pi / 2)
    assert radiance == pytest.approx(4 * math.pi / 3, rel=1e-10)
    assert irradiance == pytest.approx(7 * math.pi / 9, rel=1e-10)
    assert 7 * math.pi / 9 == pytest.approx(2.4435, abs=1e-4)


@pytest.mark.parametrize("shape", [(32, 64), (64, 128)])
def test_overcast_sky_integrals(shape):
    """Traditional overcast sky (Moon & Spencer 1942; CIE S 011/E:2003):
    integral L d(omega) = 4 pi Lz / 3 exactly (the rows hold exact averages), and the horizontal
    irradiance from the map plus its exact piecewise-constant discretisation error equals 7 pi Lz / 9."""
    h, w = shape
    lz = 3000.0
    rgb, mu = _overcast_map(h, w, lz)
    t = build_table(rgb)
    np.testing.assert_allclose(t.integrals["rgb"], [4 * np.pi * lz / 3] * 3, rtol=1e-6)
    assert t.integrals["luminance"] == pytest.approx(4 * np.pi * lz / 3, rel=1e-6)

    # Horizontal irradiance of the map: each row's radiance times its exact integral of cos(theta) d(omega),
    # 2 pi (mu0^2 - mu1^2) / 2 for the whole row.
    row_l = rgb[:, 0, 0].astype(np.float64)
    e_map = float(np.sum(row_l * np.pi * (mu[:-1] ** 2 - mu[1:] ** 2)))
    # Within a row L = Lbar + (2 Lz/3)(mu - mubar), so the map misses 2 pi (2 Lz/3) sum(dmu^3/12) (by hand).
    dmu = (mu[:-1] - mu[1:])[: h // 2]
    missing = 2 * np.pi * (2 * lz / 3) * np.sum(dmu**3) / 12
    assert e_map + missing == pytest.approx(7 * np.pi * lz / 9, rel=1e-6)
    assert abs(e_map - 7 * np.pi * lz / 9) <= missing * 1.0001
    assert missing / e_map < 1e-3  # the discretisation is fine at these sizes


@pytest.mark.parametrize("method", SAMPLE_METHODS)
def test_overcast_irradiance_by_sampling_the_table(method, rng):
    """Monte Carlo horizontal irradiance from table samples (L cos+ / pdf) agrees with the map's exact
    value within 4 standard errors, and with 7 pi Lz / 9 (closed form) to the map's discretisation."""
    lz = 1.0
    rgb, mu = _overcast_map(32, 64, lz)
    t = build_table(rgb)
    s = _sample(t, rng.random((200_000, 2)), method)
    cos_t = s.directions[:, 1]  # up = +Y
    y = s.radiance.astype(np.float64) @ BT709_Y
    est = y * np.maximum(cos_t, 0.0) / s.pdf
    e_map = float(np.sum(rgb[:, 0, 0].astype(np.float64) * np.pi * (mu[:-1] ** 2 - mu[1:] ** 2)))
    se = est.std(ddof=1) / math.sqrt(est.size)
    assert abs(est.mean() - e_map) < N_SIGMA * se
    assert est.mean() == pytest.approx(7 * np.pi * lz / 9, rel=5e-3)
    assert np.all(cos_t > -1e-12), "the overcast table sampled below the horizon, where L = 0"


# ------------------------------------------------------------------ table contents
def test_cell_probability_is_luminance_times_exact_solid_angle(rng):
    """The table's cell probabilities equal BT.709 luminance (colour-science) x exact solid angle, normalised."""
    rgb = _random_map(rng, 16, 32)
    t = build_table(rgb)
    np.testing.assert_allclose(t.cell_probability, _reference_probabilities(rgb), rtol=1e-5)
    assert t.cell_probability.sum() == pytest.approx(1.0, abs=1e-6)
    np.testing.assert_allclose(t.luminance, rgb.astype(np.float64) @ BT709_Y, rtol=1e-5)


@pytest.mark.parametrize("backend", BACKENDS)
def test_stored_cdfs_and_alias_encode_the_cell_probabilities(rng, backend):
    """The float32 CDF steps (marginal x conditional) and the alias table encode cell_probability
    (Walker 1977 identity for the alias; CDF differences for inversion) to float32 resolution."""
    from envsample.sampling.distribution import alias_cell_probabilities

    rgb = _sun_map(rng, 32, 64)
    t = build_table(rgb)
    p = t.cell_probability
    marg = np.diff(t.marginal_cdf.astype(np.float64))
    cond = np.diff(t.conditional_cdf.astype(np.float64), axis=1)
    np.testing.assert_allclose(marg[:, None] * cond, p, rtol=1e-4, atol=2e-7)
    a = alias_cell_probabilities(t.alias_probability, t.alias_index).reshape(p.shape)
    np.testing.assert_allclose(a, p, rtol=1e-5, atol=2**-24)


# ------------------------------------------------------------------ chi-square
@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("mapping", MAPPINGS)
@pytest.mark.parametrize("method", SAMPLE_METHODS)
def test_chisquare_random_map(method, mapping, backend, rng):
    """Pearson chi-square (scipy.stats.chisquare) of 200k samples against the reference cell
    probabilities (BT.709 luminance x exact solid angle), cells found from the directions."""
    rgb = _random_map(rng, 16, 32)
    t = build_table(rgb, mapping=mapping, up="z", rotation_deg=30.0)
    n = 200_000
    s = _sample(t, rng.random((n, 2)), method, backend)
    cells = _cells_from_directions(t, s.directions)
    np.testing.assert_array_equal(cells, s.cells)
    counts = np.bincount(cells, minlength=t.table_height * t.table_width)
    res, bins = _pooled_chisquare(counts, n * _reference_probabilities(rgb).reshape(-1))
    assert bins > 400
    assert res.pvalue > P_REJECT, f"chi2={res.statistic:.1f} on {bins - 1} dof, p={res.pvalue:.2e}"


@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("mapping", MAPPINGS)
@pytest.mark.parametrize("method", SAMPLE_METHODS)
def test_chisquare_one_pixel_sun(method, mapping, backend, rng):
    """A one-pixel sun 1e6 x the sky: chi-square of 1M samples, with the sky cells pooled so every bin
    expects >= 5 counts; the sun's count is also within 4 sigma of its binomial expectation."""
    sun = (9, 41)
    rgb = _sun_map(rng, 32, 64, sun=sun)
    t = build_table(rgb, mapping=mapping)
    n = 1_000_000
    s = _sample(t, rng.random((n, 2)), method, backend)
    cells = _cells_from_directions(t, s.directions)
    np.testing.assert_array_equal(cells, s.cells)
    p = _reference_probabilities(rgb).reshape(-1)
    counts = np.bincount(cells, minlength=p.size)
    k = sun[0] * 64 + sun[1]
    assert 0.99 < p[k] < 0.999  # the sky keeps ~0.2 %: a few thousand samples to test its shape
    assert abs(counts[k] - n * p[k]) < N_SIGMA * math.sqrt(n * p[k] * (1 - p[k]))
    res, bins = _pooled_chisquare(counts, n * p)
    assert bins > 100
    assert res.pvalue > P_REJECT, f"chi2={res.statistic:.1f} on {bins - 1} dof, p={res.pvalue:.2e}"


def test_chisquare_rejects_wrong_distributions(rng):
    """The chi-square test has power: the same samples are rejected (p < 1e-4) against plausible bugs:
    weighting by luminance without the solid angle, and the marginal shifted by one row."""
    rgb = _random_map(rng, 16, 32)
    t = build_table(rgb)
    n = 200_000
    s = _sample(t, rng.random((n, 2)), "inverse")
    counts = np.bincount(s.cells, minlength=16 * 32)
    y = rgb.astype(np.float64) @ BT709_Y
    no_sin = (y / y.sum()).reshape(-1)
    shifted = np.roll(_reference_probabilities(rgb), 1, axis=0).reshape(-1)
    for wrong in (no_sin, shifted):
        res, _ = _pooled_chisquare(counts, n * wrong)
        assert res.pvalue < P_REJECT
    # ... while the right distribution passes on these very samples.
    assert _pooled_chisquare(counts, n * _reference_probabilities(rgb).reshape(-1))[0].pvalue > P_REJECT


# ------------------------------------------------------------------ within a cell
def _in_cell_coordinates(t, d):
    """Fractions within the cell: cos-theta fraction, theta fraction and u fraction, each in [0, 1]."""
    h, w = t.table_height, t.table_width
    u, v = direction_to_uv(d, up=t.up, rotation_deg=t.rotation_deg)
    row = np.minimum((v * h).astype(np.int64), h - 1)
    col = np.minimum((u * w).astype(np.int64), w - 1)
    edges = np.cos(np.pi * np.arange(h + 1) / h)
    cos_t = np.cos(np.pi * v)
    s_cos = (edges[row] - cos_t) / (edges[row] - edges[row + 1])
    s_theta = v * h - row
    t_u = u * w - col
    return s_cos, s_theta, t_u


@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("method", SAMPLE_METHODS)
@pytest.mark.parametrize("mapping", MAPPINGS)
def test_in_cell_placement_is_uniform_in_the_mapping_coordinate(mapping, method, backend, rng):
    """Within a cell, phi is uniform in the column and the mapping's polar coordinate is uniform in
    the row band (scipy.stats.kstest against U(0, 1)), independently (chi-square on an 8 x 8 grid):
    cos(theta) for equal-area, theta (i.e. v) for uv-linear (PBR 3rd ed. 14.2.4).  Power check: the
    other polar coordinate is *not* uniform within the polar rows (which hold ~4 % of the samples
    each), and KS sees it."""
    rgb = np.ones((8, 16, 3), dtype=np.float32)
    rgb[2:4] *= 3.0
    t = build_table(rgb, mapping=mapping)
    s = _sample(t, rng.random((100_000, 2)), method, backend)
    s_cos, s_theta, t_u = _in_cell_coordinates(t, s.directions)
    uniform, other = (s_cos, s_theta) if mapping == "equal-area" else (s_theta, s_cos)
    assert stats.kstest(uniform, "uniform").pvalue > P_REJECT
    assert stats.kstest(t_u, "uniform").pvalue > P_REJECT
    grid = np.histogram2d(uniform, t_u, bins=8, range=[[0, 1], [0, 1]])[0].ravel()
    assert stats.chisquare(grid).pvalue > P_REJECT
    assert stats.kstest(other, "uniform").pvalue < P_REJECT


# ------------------------------------------------------------------ pdf
@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("mapping", MAPPINGS)
@pytest.mark.parametrize("method", SAMPLE_METHODS)
@pytest.mark.parametrize("up, rotation_deg, mix", [("y", 0.0, 0.0), ("z", -75.0, 0.2)])
def test_pdf_of_samples_matches_sample_pdf(method, mapping, backend, up, rotation_deg, mix, rng):
    """pdf(sample(u).directions) == sample(u).pdf to 1e-5 relative (issue 2), for both up axes,
    a rotation and a uniform mixture; directions are unit vectors; radiance equals eval."""
    rgb = _sun_map(rng, 16, 32, sun=(3, 5), ratio=1e4)
    rgb[12:] = 0.0  # black ground: zero-probability cells must never be drawn (without a mixture)
    t = build_table(rgb, mapping=mapping, up=up, rotation_deg=rotation_deg, uniform_mix=mix)
    u = rng.random((50_000, 2))
    u[:4] = [[0.0, 0.0], [np.nextafter(1.0, 0.0)] * 2, [0.0, np.nextafter(1.0, 0.0)], [0.5, 0.5]]
    s = _sample(t, u, method, backend)
    assert s.directions.shape == (50_000, 3) and s.directions.dtype == np.float64
    assert s.pdf.dtype == np.float64 and s.cells.dtype == np.int64
    np.testing.assert_allclose(np.linalg.norm(s.directions, axis=1), 1.0, rtol=1e-12)
    assert np.all(np.isfinite(s.pdf)) and np.all(s.pdf > 0)
    np.testing.assert_allclose(t.pdf(s.directions), s.pdf, rtol=PDF_RTOL)
    np.testing.assert_array_equal(s.radiance, t.eval(s.directions))
    if mix == 0.0:
        assert not np.any(s.cells // t.table_width >= 12), "a black cell was sampled"


@pytest.mark.parametrize("mapping", MAPPINGS)
def test_pdf_integrates_to_one(mapping, rng):
    """Sum over cells of cell_pdf x solid angle is 1, and a Monte Carlo estimate of integral pdf d(omega)
    with uniform sphere directions, 4 pi E[pdf], is 1 within 4 standard errors.  For uv-linear the pdf
    grows like 1/sin(theta) near the poles (infinite variance), so that map keeps its polar rows black."""
    rgb = _random_map(rng, 16, 32)
    if mapping == "uv-linear":
        rgb[[0, -1]] = 0.0
    t = build_table(rgb, mapping=mapping)
    cell_sum = float(np.sum(t.cell_pdf.astype(np.float64) * _exact_row_solid_angles(16, 32)[:, None]))
    assert cell_sum == pytest.approx(1.0, abs=1e-6)
    x = 4 * np.pi * t.pdf(_uniform_directions(rng, 400_000))
    se = x.std(ddof=1) / math.sqrt(x.size)
    assert abs(x.mean() - 1.0) < N_SIGMA * se
    assert se < 0.01  # the check has teeth: a pdf off by 4 % would fail


def test_pdf_integral_check_detects_a_wrong_pdf(rng):
    """Power check for the test above: the uv-linear pdf read as if it were equal-area (its cell
    average) integrates to 1, but the equal-area pdf read through the uv-linear formula does not."""
    rgb = _random_map(rng, 8, 16)
    t = build_table(rgb, mapping="equal-area")
    d = _uniform_directions(rng, 400_000)
    row, col, sin_t = t.cells_of(d)
    wrong = t.cell_pdf[row, col] * 1.0 / np.maximum(sin_t, 1e-3)  # a missing 1/sin normalisation
    x = 4 * np.pi * wrong
    se = x.std(ddof=1) / math.sqrt(x.size)
    assert abs(x.mean() - 1.0) > N_SIGMA * se


@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("method", SAMPLE_METHODS)
def test_grey_map_has_zero_variance_with_equal_area(method, backend, rng):
    """Equal-area mapping: pdf is proportional to L within and across cells, so for a grey map
    L/pdf is the same constant, the integral of L, for every sample (issue 2).  uv-linear on the same
    map is not constant (its pdf varies like 1/sin theta within a row), which shows the check can fail."""
    grey = np.exp(rng.normal(0.0, 1.0, (16, 32, 1))).astype(np.float32)
    rgb = np.repeat(grey, 3, axis=2)
    t = build_table(rgb, mapping="equal-area")
    s = _sample(t, rng.random((20_000, 2)), method, backend)
    ratio = s.radiance.astype(np.float64) / s.pdf[:, None]
    np.testing.assert_allclose(ratio, np.broadcast_to(t.integrals["rgb"], ratio.shape), rtol=1e-5)
    t2 = build_table(rgb, mapping="uv-linear")
    s2 = _sample(t2, rng.random((20_000, 2)), method, backend)
    r2 = s2.radiance[:, 0].astype(np.float64) / s2.pdf
    assert r2.std() / r2.mean() > 1e-2


# ------------------------------------------------------------------ warp properties
@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("mapping", MAPPINGS)
def test_inverse_method_is_a_monotone_warp(mapping, backend, rng):
    """method='inverse' is monotone (PBR 3rd ed. 13.6.7): sorting u[:, 0] gives non-decreasing rows and
    polar angle; within a row, sorting u[:, 1] gives non-decreasing columns and azimuth."""
    rgb = _random_map(rng, 16, 32)
    rgb[5] = 0.0
    t = build_table(rgb, mapping=mapping)
    u0 = np.sort(rng.random(20_000))
    s = _sample(t, np.column_stack([u0, np.full(u0.size, 0.37)]), "inverse", backend)
    rows = s.cells // t.table_width
    assert np.all(np.diff(rows) >= 0)
    _, v = direction_to_uv(s.directions)
    assert np.all(np.diff(v) >= -1e-12)
    u1 = np.sort(rng.random(20_000))
    s = _sample(t, np.column_stack([np.full(u1.size, 0.41), u1]), "inverse", backend)
    assert np.unique(s.cells // t.table_width).size == 1
    assert np.all(np.diff(s.cells) >= 0)
    u, _ = direction_to_uv(s.directions)
    assert np.all(np.diff(u) >= -1e-12)


@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("method", SAMPLE_METHODS)
def test_sampling_is_bit_exact_repeatable(method, backend, rng):
    """Same u in, same output out, bit for bit; and rebuilding the table gives identical arrays."""
    rgb = _sun_map(rng, 16, 32, sun=(4, 4), ratio=1e5)
    t1, t2 = build_table(rgb, uniform_mix=0.05), build_table(rgb, uniform_mix=0.05)
    for name, a in t1.arrays().items():
        np.testing.assert_array_equal(a, t2.arrays()[name], err_msg=name)
    u = rng.random((10_000, 2))
    a, b = _sample(t1, u, method, backend), _sample(t2, u.copy(), method, backend)
    np.testing.assert_array_equal(a.directions, b.directions)
    np.testing.assert_array_equal(a.pdf, b.pdf)
    np.testing.assert_array_equal(a.cells, b.cells)


@pytest.mark.skipif(len(BACKENDS) < 2, reason="only one sampling code path is built here")
@pytest.mark.parametrize("mapping", MAPPINGS)
@pytest.mark.parametrize("method", SAMPLE_METHODS)
def test_compiled_and_numpy_samplers_agree(method, mapping, rng):
    """The compiled and numpy samplers pick the same cells and agree on directions and pdf to rounding."""
    t = build_table(_sun_map(rng, 16, 32, sun=(2, 30), ratio=1e5), mapping=mapping, up="z", rotation_deg=10.0)
    u = rng.random((50_000, 2))
    a, b = _sample(t, u, method, "numpy"), _sample(t, u, method, "compiled")
    np.testing.assert_array_equal(a.cells, b.cells)
    np.testing.assert_allclose(a.directions, b.directions, atol=1e-12)
    np.testing.assert_allclose(a.pdf, b.pdf, rtol=1e-12)


# ------------------------------------------------------------------ options
@pytest.mark.parametrize("mapping", MAPPINGS)
def test_uniform_mix_bounds_the_pdf_from_below(mapping, rng):
    """Defensive mixture (Hesterberg 1995): every cell's pdf >= m / (4 pi); black cells get exactly
    m / (4 pi); pointwise, the equal-area pdf is >= m / (4 pi).  The uv-linear pdf spreads a cell's
    mass like 1/sin(theta), so pointwise it can drop to about half of m / (4 pi) at a polar row's
    lower edge (the ratio of the row's mean of sin(theta) to its largest value)."""
    m = 0.1
    rgb = _sun_map(rng, 16, 32, sun=(3, 3), ratio=1e5)
    rgb[8:] = 0.0  # a black lower hemisphere
    t = build_table(rgb, mapping=mapping, uniform_mix=m)
    floor = m / (4 * np.pi)
    assert t.cell_pdf.min() >= floor * (1 - 1e-6)
    np.testing.assert_allclose(t.cell_pdf[8:], floor, rtol=1e-5)
    assert t.cell_probability.sum() == pytest.approx(1.0, abs=1e-6)
    pdf = t.pdf(_uniform_directions(rng, 100_000))
    if mapping == "equal-area":
        assert pdf.min() >= floor * (1 - 1e-6)
    else:
        dt = np.pi / 16
        worst = ((1 - math.cos(dt)) / dt) / math.sin(dt)
        assert pdf.min() >= floor * worst * (1 - 1e-6)
    # The black half is sampled with probability m / 2 (within 4 sigma, binomial).
    n = 200_000
    s = _sample(t, rng.random((n, 2)), "alias")
    below = np.mean(s.cells // t.table_width >= 8)
    assert abs(below - m / 2) < N_SIGMA * math.sqrt(m / 2 * (1 - m / 2) / n)


def test_all_black_map_warns_and_samples_uniformly(rng):
    """All-black map: EnvsampleWarning, a note, and the uniform table pdf = 1/(4 pi); the sampled
    cos(theta) is uniform on [-1, 1] (Archimedes' hat-box theorem; scipy.stats.kstest)."""
    with pytest.warns(EnvsampleWarning, match="entirely black"):
        t = build_table(np.zeros((16, 32, 3), dtype=np.float32))
    np.testing.assert_allclose(t.cell_pdf, 1 / (4 * np.pi), rtol=1e-6)
    assert any("black" in note for note in t.metadata["notes"])
    assert t.integrals["luminance"] == 0.0 and t.integrals["rgb"] == [0.0, 0.0, 0.0]
    for method in SAMPLE_METHODS:
        s = _sample(t, rng.random((50_000, 2)), method)
        assert stats.kstest(s.directions[:, 1], "uniform", args=(-1, 2)).pvalue > P_REJECT
        np.testing.assert_allclose(s.pdf, 1 / (4 * np.pi), rtol=1e-6)


def _block_reduce(lum, fy, fx):
    """Solid-angle weighted block mean for integer factors, written out from the definition."""
    h, w = lum.shape
    sa = _exact_row_solid_angles(h, w)[:, None] * np.ones((1, w))
    num = (lum * sa).reshape(h // fy, fy, w // fx, fx).sum(axis=(1, 3))
    den = sa.reshape(h // fy, fy, w // fx, fx).sum(axis=(1, 3))
    return num / den


@pytest.mark.parametrize("size", [(32, 16), "32x16", (48, 20), (128, 64), (17, 9)])
def test_size_reduction_preserves_power(size, rng):
    """A coarser table keeps the luminance integral (power): sum(table luminance x cell solid angle)
    equals the full-resolution integral; the image for eval stays at full resolution."""
    rgb = _random_map(rng, 64, 128)
    t = build_table(rgb, size=size)
    w, h = parse_size(size)
    assert (t.table_width, t.table_height) == (w, h) and t.image.shape == (64, 128, 3)
    power = float(np.sum(t.luminance.astype(np.float64) * _exact_row_solid_angles(h, w)[:, None]))
    assert power == pytest.approx(t.integrals["luminance"], rel=1e-5)
    assert t.integrals["luminance"] == pytest.approx(
        float(np.sum((rgb.astype(np.float64) @ BT709_Y) * _exact_row_solid_angles(64, 128)[:, None])), rel=1e-6
    )
    if 64 % h == 0 and 128 % w == 0:
        expected = _block_reduce(rgb.astype(np.float64) @ BT709_Y, 64 // h, 128 // w)
        np.testing.assert_allclose(t.luminance, expected, rtol=1e-5)


def test_size_reduction_keeps_a_one_pixel_sun_in_its_cell(rng):
    """Integer factor: the sun pixel's cell is the brightest and holds the sun's power; the sun's
    direction maps to that cell; sampling lands there with the sun's share of the power."""
    sun = (21, 77)  # in the 128 x 64 map -> cell (5, 19) of a 32 x 16 table
    rgb = _sun_map(rng, 64, 128, sun=sun, ratio=1e6)
    t = build_table(rgb, size=(32, 16))
    assert np.unravel_index(np.argmax(t.luminance), t.luminance.shape) == (5, 19)
    d = uv_to_direction((sun[1] + 0.5) / 128, (sun[0] + 0.5) / 64)
    row, col, _ = t.cells_of(d[None])
    assert (int(row[0]), int(col[0])) == (5, 19)
    sa_full = _exact_row_solid_angles(64, 128)
    sun_power = (rgb[sun].astype(np.float64) @ BT709_Y) * sa_full[sun[0]]
    cell_power = t.luminance[5, 19] * _exact_row_solid_angles(16, 32)[5]
    assert cell_power == pytest.approx(sun_power, rel=2e-3)  # plus its share of sky
    assert t.cell_probability[5, 19] == pytest.approx(sun_power / t.integrals["luminance"], rel=2e-3)


def test_size_reduction_splits_a_sun_across_the_cells_it_overlaps():
    """Non-integer factor on a black map with one bright pixel: exactly the table cells that overlap
    the pixel (in u and in cos theta) receive power, and together they hold all of it."""
    H, W, h, w = 64, 128, 20, 48
    sun = (30, 61)
    rgb = np.zeros((H, W, 3), dtype=np.float32)
    rgb[sun] = 1000.0
    t = build_table(rgb, size=(w, h))
    mu = lambda n: np.cos(np.pi * np.arange(n + 1) / n)
    lo_mu, hi_mu = mu(H)[sun[0] + 1], mu(H)[sun[0]]
    rows = [i for i in range(h) if min(hi_mu, mu(h)[i]) - max(lo_mu, mu(h)[i + 1]) > 1e-12]
    cols = [j for j in range(w) if min((sun[1] + 1) / W, (j + 1) / w) - max(sun[1] / W, j / w) > 1e-12]
    assert len(rows) * len(cols) > 1  # the pixel really straddles cells
    lit = set(zip(*np.nonzero(t.luminance > 0)))
    assert lit == {(i, j) for i in rows for j in cols}
    power = float(np.sum(t.luminance.astype(np.float64) * _exact_row_solid_angles(h, w)[:, None]))
    assert power == pytest.approx(1000.0 * _exact_row_solid_angles(H, W)[sun[0]], rel=1e-5)




@pytest.mark.parametrize("method", SAMPLE_METHODS)
def test_compensated_table_drops_cells_below_the_mean(method, rng):
    """MIS compensation (Karlík et al. 2019): the sampled function is max(Y - mean(Y), 0) with mean(Y) the
    sphere average of the luminance; cells below the mean have probability exactly 0 and are never drawn."""
    rgb = _random_map(rng, 16, 32)
    t = build_table(rgb, compensate=True)
    y = rgb.astype(np.float64) @ BT709_Y
    mean = t.integrals["luminance"] / (4 * np.pi)
    assert mean == pytest.approx(float(np.sum(y * _exact_row_solid_angles(16, 32)[:, None])) / (4 * np.pi), rel=1e-6)
    below = y < mean * (1 - 1e-6)
    assert below.any() and (~below).any()
    assert np.all(t.cell_pdf[below] == 0.0)
    np.testing.assert_allclose(t.luminance, np.maximum(y - mean, 0.0), rtol=1e-4, atol=1e-5 * mean)
    assert t.compensated and t.metadata["valid_only_inside_mis"] is True
    s = _sample(t, rng.random((50_000, 2)), method)
    assert not np.any(below.reshape(-1)[s.cells])


def test_compensating_a_constant_map_gives_a_valid_table():
    t = build_table(np.full((8, 16, 3), 0.5, dtype=np.float32), compensate=True)
    assert t.cell_probability.sum() == pytest.approx(1.0, abs=1e-6)
    assert np.all(np.isfinite(t.cell_pdf))


@pytest.mark.parametrize("primaries, space", [("bt2020", "ITU-R BT.2020"), ("acescg", "ACEScg")])
def test_primaries_choice_changes_the_weights(primaries, space, rng):
    """The table weights use the chosen primaries' Y row (colour-science), and the choice is recorded."""
    rgb = _random_map(rng, 8, 16)
    t = build_table(rgb, primaries=primaries)
    y = rgb.astype(np.float64) @ colour.RGB_COLOURSPACES[space].matrix_RGB_to_XYZ[1]
    np.testing.assert_allclose(t.luminance, y, rtol=1e-5)
    assert t.primaries == primaries and t.metadata["options"]["primaries"] == primaries


# ------------------------------------------------------------------ eval and conventions
@pytest.mark.parametrize("up", tuple(UP_AXES))
def test_eval_returns_the_pixel_of_each_direction(up, rng):
    """eval is nearest-pixel at full resolution in the table's convention (pixel centres -> pixels)."""
    rgb = _random_map(rng, 16, 32)
    t = build_table(rgb, up=up, rotation_deg=123.0, size=(8, 4))
    d = pixel_center_directions(16, 32, up=up, rotation_deg=123.0).reshape(-1, 3)
    np.testing.assert_array_equal(t.eval(d), rgb.reshape(-1, 3))
    assert t.up == up and t.rotation_deg == 123.0
    assert t.metadata["convention"]["up_axis"] == up


def test_build_accepts_a_map_image_like_object(rng):
    class Holder:
        def __init__(self, rgb):
            self.rgb = rgb

        def describe(self):
            return {"path": "rooftop.exr"}

    rgb = _random_map(rng, 8, 16)
    t = build_table(Holder(rgb))
    assert t.metadata["source"] == {"path": "rooftop.exr"}
    np.testing.assert_array_equal(t.image, rgb)


# ------------------------------------------------------------------ bad input
def test_bad_maps_are_refused():
    with pytest.raises(MapValidationError, match="NaN or Inf"):
        build_table(np.full((8, 16, 3), np.nan, dtype=np.float32))
    rgb = np.ones((8, 16, 3), dtype=np.float32)
    rgb[3, 4, 1] = np.inf
    with pytest.raises(MapValidationError, match="NaN or Inf"):
        build_table(rgb)
    rgb[3, 4, 1] = -1.0
    with pytest.raises(MapValidationError, match="negative pixels"):
        build_table(rgb)
    with pytest.raises(MapValidationError, match=r"\(H, W, 3\) RGB array"):
        build_table(np.ones((8, 16)))


def test_bad_options_are_refused(rng):
    rgb = _random_map(rng, 8, 16)
    with pytest.raises(ValueError, match="unknown mapping 'linear'; valid: equal-area, uv-linear"):
        build_table(rgb, mapping="linear")
    with pytest.raises(ValueError, match=r"uniform_mix must be in \[0, 1\)"):
        build_table(rgb, uniform_mix=1.0)
    with pytest.raises(ValueError, match="unknown primaries"):
        build_table(rgb, primaries="p3")
    with pytest.raises(ValueError, match="unknown up axis"):
        build_table(rgb, up="x")
    t = build_table(rgb)
    with pytest.raises(ValueError, match="unknown sampling method 'fast'; valid: inverse, alias"):
        t.sample(rng.random((4, 2)), method="fast")
    with pytest.raises(ValueError, match=r"u must have shape \(N, 2\)"):
        t.sample(rng.random((4, 3)))




def test_pdf_and_eval_refuse_non_finite_directions():
    # A NaN direction has no cell: say so instead of indexing garbage.
    import envsample

    table = envsample.build_table(np.ones((8, 16, 3), np.float32))
    bad = np.array([[0.0, np.nan, 1.0]])
    with pytest.raises(ValueError, match="NaN or Inf"):
        table.pdf(bad)
    with pytest.raises(ValueError, match="NaN or Inf"):
        table.eval(bad)


def test_saving_without_raw_removes_a_stale_raw_file(tmp_path):
    import envsample

    table = envsample.build_table(np.ones((8, 16, 3), np.float32))
    table.save(tmp_path / "t", raw=True)
    assert (tmp_path / "t.bin").exists()
    table.save(tmp_path / "t")
    assert not (tmp_path / "t.bin").exists()
