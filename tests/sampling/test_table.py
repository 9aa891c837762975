"""Tests of envsample.sampling.table: building environment-map tables (contents, integrals, options, size
reduction, refused input) and loading them; drawing from a built table is tested in test_envtable.py.

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
- scipy.stats.kstest (Kolmogorov-Smirnov) for the directions drawn from an all-black map's table.
- Hesterberg (1995), Technometrics 37(2): a defensive mixture m * uniform + (1 - m) * table has
  pdf >= m / (4 pi) everywhere.
- Karlík et al. (2019), ACM TOG 38(6): MIS compensation subtracts the mean and clamps at zero.
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
from support.table_sampling import (
    BACKENDS,
    BT709_Y,
    N_SIGMA,
    P_REJECT,
    draw,
    exact_row_solid_angles,
    one_pixel_sun_map,
    random_sky,
    reference_probabilities,
    uniform_directions,
)

from envsample.core.latlong import MAPPINGS, parse_size
from envsample.core.sphere import uv_to_direction
from envsample.errors import EnvsampleWarning, MapValidationError
from envsample.sampling.table import SAMPLE_METHODS, build_table


# ------------------------------------------------------------------ integrals
@pytest.mark.parametrize("shape", [(8, 16), (16, 32), (7, 13), (64, 128)])
def test_constant_map_integrates_to_four_pi_L(shape):
    """integral of a constant L over the sphere = 4 pi L (closed form), per channel and for luminance."""
    L = np.array([0.25, 2.0, 7.5], dtype=np.float32)
    rgb = np.broadcast_to(L, shape + (3,)).copy()
    t = build_table(rgb, allow_aspect=True)  # (7, 13) is not 2:1: the closed form holds all the same
    np.testing.assert_allclose(t.integrals["rgb"], 4 * np.pi * L.astype(np.float64), rtol=1e-6)
    assert t.integrals["luminance"] == pytest.approx(4 * np.pi * float(L.astype(np.float64) @ BT709_Y), rel=1e-6)
    # A constant map gives each cell its solid-angle share.
    np.testing.assert_allclose(t.cell_probability, np.broadcast_to(exact_row_solid_angles(*shape)[:, None] / (4 * np.pi), shape), rtol=1e-6)


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
    s = draw(t, rng.random((200_000, 2)), method)
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
    rgb = random_sky(rng, 16, 32)
    t = build_table(rgb)
    np.testing.assert_allclose(t.cell_probability, reference_probabilities(rgb), rtol=1e-5)
    assert t.cell_probability.sum() == pytest.approx(1.0, abs=1e-6)
    np.testing.assert_allclose(t.luminance, rgb.astype(np.float64) @ BT709_Y, rtol=1e-5)


@pytest.mark.parametrize("backend", BACKENDS)
def test_stored_cdfs_and_alias_encode_the_cell_probabilities(rng, backend):
    """The float32 CDF steps (marginal x conditional) and the alias table encode cell_probability
    (Walker 1977 identity for the alias; CDF differences for inversion) to float32 resolution."""
    from envsample.sampling.distribution import alias_cell_probabilities

    rgb = one_pixel_sun_map(rng, 32, 64)
    t = build_table(rgb)
    p = t.cell_probability
    marg = np.diff(t.marginal_cdf.astype(np.float64))
    cond = np.diff(t.conditional_cdf.astype(np.float64), axis=1)
    np.testing.assert_allclose(marg[:, None] * cond, p, rtol=1e-4, atol=2e-7)
    # Two levels: P(row) from the row table times P(column | row) from that row's table.
    rows = alias_cell_probabilities(t.row_alias_probability, t.row_alias_index)
    cols = np.stack([alias_cell_probabilities(t.alias_probability[i], t.alias_index[i]) for i in range(p.shape[0])])
    np.testing.assert_allclose(rows[:, None] * cols, p, rtol=1e-5, atol=2**-24)


# ------------------------------------------------------------------ options
@pytest.mark.parametrize("mapping", MAPPINGS)
def test_uniform_mix_bounds_the_pdf_from_below(mapping, rng):
    """Defensive mixture (Hesterberg 1995): every cell's pdf >= m / (4 pi); black cells get exactly
    m / (4 pi); pointwise, the equal-area pdf is >= m / (4 pi).  The uv-linear pdf spreads a cell's
    mass like 1/sin(theta), so pointwise it can drop to about half of m / (4 pi) at a polar row's
    lower edge (the ratio of the row's mean of sin(theta) to its largest value)."""
    m = 0.1
    rgb = one_pixel_sun_map(rng, 16, 32, sun=(3, 3), ratio=1e5)
    rgb[8:] = 0.0  # a black lower hemisphere
    t = build_table(rgb, mapping=mapping, uniform_mix=m)
    floor = m / (4 * np.pi)
    assert t.cell_pdf.min() >= floor * (1 - 1e-6)
    np.testing.assert_allclose(t.cell_pdf[8:], floor, rtol=1e-5)
    assert t.cell_probability.sum() == pytest.approx(1.0, abs=1e-6)
    pdf = t.pdf(uniform_directions(rng, 100_000))
    if mapping == "equal-area":
        assert pdf.min() >= floor * (1 - 1e-6)
    else:
        dt = np.pi / 16
        worst = ((1 - math.cos(dt)) / dt) / math.sin(dt)
        assert pdf.min() >= floor * worst * (1 - 1e-6)
    # The black half is sampled with probability m / 2 (within 4 sigma, binomial).
    n = 200_000
    s = draw(t, rng.random((n, 2)), "alias")
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
        s = draw(t, rng.random((50_000, 2)), method)
        assert stats.kstest(s.directions[:, 1], "uniform", args=(-1, 2)).pvalue > P_REJECT
        np.testing.assert_allclose(s.pdf, 1 / (4 * np.pi), rtol=1e-6)


def _block_reduce(lum, fy, fx):
    """Solid-angle weighted block mean for integer factors, written out from the definition."""
    h, w = lum.shape
    sa = exact_row_solid_angles(h, w)[:, None] * np.ones((1, w))
    num = (lum * sa).reshape(h // fy, fy, w // fx, fx).sum(axis=(1, 3))
    den = sa.reshape(h // fy, fy, w // fx, fx).sum(axis=(1, 3))
    return num / den


@pytest.mark.parametrize("size", [(32, 16), "32x16", (48, 20), (128, 64), (17, 9)])
def test_size_reduction_preserves_power(size, rng):
    """A coarser table keeps the luminance integral (power): sum(table luminance x cell solid angle)
    equals the full-resolution integral; the image for eval stays at full resolution."""
    rgb = random_sky(rng, 64, 128)
    t = build_table(rgb, size=size, allow_aspect=True)  # 48x20 and 17x9 are not 2:1
    w, h = parse_size(size)
    assert (t.table_width, t.table_height) == (w, h) and t.image.shape == (64, 128, 3)
    power = float(np.sum(t.luminance.astype(np.float64) * exact_row_solid_angles(h, w)[:, None]))
    assert power == pytest.approx(t.integrals["luminance"], rel=1e-5)
    assert t.integrals["luminance"] == pytest.approx(
        float(np.sum((rgb.astype(np.float64) @ BT709_Y) * exact_row_solid_angles(64, 128)[:, None])), rel=1e-6
    )
    if 64 % h == 0 and 128 % w == 0:
        expected = _block_reduce(rgb.astype(np.float64) @ BT709_Y, 64 // h, 128 // w)
        np.testing.assert_allclose(t.luminance, expected, rtol=1e-5)


def test_size_reduction_keeps_a_one_pixel_sun_in_its_cell(rng):
    """Integer factor: the sun pixel's cell is the brightest and holds the sun's power; the sun's
    direction maps to that cell; sampling lands there with the sun's share of the power."""
    sun = (21, 77)  # in the 128 x 64 map -> cell (5, 19) of a 32 x 16 table
    rgb = one_pixel_sun_map(rng, 64, 128, sun=sun, ratio=1e6)
    t = build_table(rgb, size=(32, 16))
    assert np.unravel_index(np.argmax(t.luminance), t.luminance.shape) == (5, 19)
    d = uv_to_direction((sun[1] + 0.5) / 128, (sun[0] + 0.5) / 64)
    row, col, _ = t.cells_of(d[None])
    assert (int(row[0]), int(col[0])) == (5, 19)
    sa_full = exact_row_solid_angles(64, 128)
    sun_power = (rgb[sun].astype(np.float64) @ BT709_Y) * sa_full[sun[0]]
    cell_power = t.luminance[5, 19] * exact_row_solid_angles(16, 32)[5]
    assert cell_power == pytest.approx(sun_power, rel=2e-3)  # plus its share of sky
    assert t.cell_probability[5, 19] == pytest.approx(sun_power / t.integrals["luminance"], rel=2e-3)


def test_size_reduction_splits_a_sun_across_the_cells_it_overlaps():
    """Non-integer factor on a black map with one bright pixel: exactly the table cells that overlap
    the pixel (in u and in cos theta) receive power, and together they hold all of it."""
    H, W, h, w = 64, 128, 20, 48
    sun = (30, 61)
    rgb = np.zeros((H, W, 3), dtype=np.float32)
    rgb[sun] = 1000.0
    t = build_table(rgb, size=(w, h), allow_aspect=True)
    mu = lambda n: np.cos(np.pi * np.arange(n + 1) / n)
    lo_mu, hi_mu = mu(H)[sun[0] + 1], mu(H)[sun[0]]
    rows = [i for i in range(h) if min(hi_mu, mu(h)[i]) - max(lo_mu, mu(h)[i + 1]) > 1e-12]
    cols = [j for j in range(w) if min((sun[1] + 1) / W, (j + 1) / w) - max(sun[1] / W, j / w) > 1e-12]
    assert len(rows) * len(cols) > 1  # the pixel really straddles cells
    lit = set(zip(*np.nonzero(t.luminance > 0)))
    assert lit == {(i, j) for i in rows for j in cols}
    power = float(np.sum(t.luminance.astype(np.float64) * exact_row_solid_angles(h, w)[:, None]))
    assert power == pytest.approx(1000.0 * exact_row_solid_angles(H, W)[sun[0]], rel=1e-5)


@pytest.mark.parametrize("method", SAMPLE_METHODS)
def test_compensated_table_drops_cells_below_the_mean(method, rng):
    """MIS compensation (Karlík et al. 2019): the sampled function is max(Y - mean(Y), 0) with mean(Y) the
    sphere average of the luminance; cells below the mean have probability exactly 0 and are never drawn."""
    rgb = random_sky(rng, 16, 32)
    t = build_table(rgb, compensate=True)
    y = rgb.astype(np.float64) @ BT709_Y
    mean = t.integrals["luminance"] / (4 * np.pi)
    assert mean == pytest.approx(float(np.sum(y * exact_row_solid_angles(16, 32)[:, None])) / (4 * np.pi), rel=1e-6)
    below = y < mean * (1 - 1e-6)
    assert below.any() and (~below).any()
    assert np.all(t.cell_pdf[below] == 0.0)
    np.testing.assert_allclose(t.luminance, np.maximum(y - mean, 0.0), rtol=1e-4, atol=1e-5 * mean)
    assert t.compensated and t.metadata["valid_only_inside_mis"] is True
    s = draw(t, rng.random((50_000, 2)), method)
    assert not np.any(below.reshape(-1)[s.cells])


def test_compensating_a_constant_map_gives_a_valid_table():
    t = build_table(np.full((8, 16, 3), 0.5, dtype=np.float32), compensate=True)
    assert t.cell_probability.sum() == pytest.approx(1.0, abs=1e-6)
    assert np.all(np.isfinite(t.cell_pdf))


@pytest.mark.parametrize("primaries, space", [("bt2020", "ITU-R BT.2020"), ("acescg", "ACEScg")])
def test_primaries_choice_changes_the_weights(primaries, space, rng):
    """The table weights use the chosen primaries' Y row (colour-science), and the choice is recorded."""
    rgb = random_sky(rng, 8, 16)
    t = build_table(rgb, primaries=primaries)
    y = rgb.astype(np.float64) @ colour.RGB_COLOURSPACES[space].matrix_RGB_to_XYZ[1]
    np.testing.assert_allclose(t.luminance, y, rtol=1e-5)
    assert t.primaries == primaries and t.metadata["options"]["primaries"] == primaries


# ------------------------------------------------------------------ eval and conventions


def test_build_accepts_a_map_image_like_object(rng):
    class Holder:
        def __init__(self, rgb):
            self.rgb = rgb

        def describe(self):
            return {"path": "rooftop.exr"}

    rgb = random_sky(rng, 8, 16)
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
    rgb = random_sky(rng, 8, 16)
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


def test_saving_without_raw_removes_a_stale_raw_file(tmp_path):
    import envsample

    table = envsample.build_table(np.ones((8, 16, 3), np.float32))
    table.save(tmp_path / "t", raw=True)
    assert (tmp_path / "t.bin").exists()
    table.save(tmp_path / "t")
    assert not (tmp_path / "t.bin").exists()


# ------------------------------------------------------------------ hardening (issue 12, items 8 and 10)


@pytest.mark.parametrize("rotation", [math.nan, math.inf, -math.inf])
def test_non_finite_rotation_is_refused(rotation, rng):
    with pytest.raises(ValueError, match="rotation_deg must be a finite number"):
        build_table(random_sky(rng), rotation_deg=rotation)


def test_maps_and_sizes_that_are_not_2_to_1_or_larger_than_the_map_are_refused(rng):
    """Issue 8 item 4 and issue 12 item 10: W != 2H, a size above the map's, a size not 2:1 and a
    fractional size are refused in one line (allow_aspect accepts the aspect on purpose)."""
    with pytest.raises(MapValidationError, match="not 2:1"):
        build_table(random_sky(rng, 16, 20))
    assert build_table(random_sky(rng, 16, 20), allow_aspect=True).table_width == 20
    rgb = random_sky(rng, 16, 32)
    with pytest.raises(ValueError, match="larger than the 32x16 map"):
        build_table(rgb, size=(64, 32))
    with pytest.raises(ValueError, match="not 2:1"):
        build_table(rgb, size=(30, 10))
    with pytest.raises(ValueError, match="whole numbers of cells"):
        build_table(rgb, size=(1.5, 2.7))
    assert build_table(rgb, size=(16.0, 8.0)).table_width == 16  # a whole float is a whole number


def _extreme(kind):
    r = np.random.default_rng(3)
    if kind == "black":
        return np.zeros((16, 32, 3), np.float32)
    if kind == "all 3e38":
        return np.full((16, 32, 3), 3e38, np.float32)
    if kind == "random up to 1e38":
        return (r.random((16, 32, 3)) * 1e38).astype(np.float32)
    return np.full((16, 32, 3), 1e-45, np.float32)  # all denormal (the smallest float32 is 1.4e-45)


@pytest.mark.parametrize("kind", ["black", "all 3e38", "random up to 1e38", "all 1e-45"])
def test_extreme_but_valid_maps_give_valid_tables(kind, tmp_path, rng):
    """Issue 12, item 8: all-black, all 3e38, random up to 1e38 and all-denormal maps each build a
    valid table (finite pdf integrating to 1, exact CDF ends) that saves and loads; a constant map
    gives each cell its solid-angle share (closed form), whatever its scale."""
    import warnings as _warnings

    from envsample.sampling.table import load_table

    rgb = _extreme(kind)
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore", EnvsampleWarning)  # the black map warns, by design
        t = build_table(rgb)
    assert np.isfinite(t.cell_pdf).all() and (t.cell_pdf >= 0).all()
    assert t.cell_probability.sum() == pytest.approx(1.0, abs=1e-6)
    assert all(np.isfinite(t.integrals["rgb"])) and np.isfinite(t.integrals["luminance"])
    if kind != "random up to 1e38":
        share = exact_row_solid_angles(16, 32)[:, None] / (4 * np.pi)
        np.testing.assert_allclose(t.cell_probability, np.broadcast_to(share, (16, 32)), rtol=1e-5)
    t.save(tmp_path / "t")
    loaded = load_table(tmp_path / "t")
    s = loaded.sample(rng.random((1000, 2)), method="alias")
    assert np.isfinite(s.pdf).all() and (s.pdf > 0).all()


def test_the_build_memory_is_estimated_and_refused_before_allocation(rng):
    """Issue 12, item 4: a build above the memory limit is refused in one line naming the estimate."""
    from envsample.errors import ResourceLimitError

    with pytest.raises(ResourceLimitError, match=r"needs about .* of memory, above the limit of 1.0 kiB"):
        build_table(random_sky(rng), max_memory="1k")


@pytest.mark.parametrize("choice, per_cell", [("both", 14), ("inverse", 8), ("alias", 10)])
def test_one_cell_choice_stores_fewer_bytes_and_refuses_the_other_method(choice, per_cell, tmp_path, rng):
    """Issue 8: <= 16 bytes per cell with both methods, <= 12 with one; a method the table lacks is refused."""
    from envsample.io.tables import table_arrays_bytes

    t = build_table(random_sky(rng, 64, 128), cell_choice=choice)
    stored = sum(a.nbytes for a in t.arrays().values())
    assert stored == table_arrays_bytes(128, 64, cell_choice=choice)
    assert stored / (64 * 128) == pytest.approx(per_cell, abs=0.2)  # plus the per-row parts (1/w of a cell each)
    paths = t.save(tmp_path / "t")
    assert paths[0].stat().st_size / (64 * 128) <= (16 if choice == "both" else 12)
    for method in SAMPLE_METHODS:
        if method in t.methods:
            t.sample(rng.random((10, 2)), method=method)
        else:
            with pytest.raises(ValueError, match=f"holds only the {choice} cell choice"):
                t.sample(rng.random((10, 2)), method=method)
