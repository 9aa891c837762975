"""Tests of envsample.distribution: CDF tables, their inversion, and alias tables.

External references used here:
- Walker (1977), ACM TOMS 3(3); Vose (1991), IEEE TSE 17(9): an alias table over n cells
  encodes the cell probabilities P(k) = prob[k]/n + sum_{i: alias[i] = k} (1 - prob[i])/n,
  which must equal the normalised weights.  (We evaluate that sum independently below with
  numpy.bincount, and also via the module's own ``alias_cell_probabilities``.)
- A piecewise-constant CDF inverted with ``numpy.searchsorted(cdf, u, side="right") - 1``
  (the textbook definition: the largest i with cdf[i] <= u) is the reference for the
  vectorised bisection in ``sample_row_cdfs``.
- Pharr, Jakob & Humphreys (2016), PBR 3rd ed. sec. 13.6.7: the conditional CDF of each
  row and the marginal CDF over row totals.
- hypothesis generates random weight vectors for the alias property test.

Tolerances: the tables are stored in float32.  A cell's probability is reproduced to
REL_TOL = 1e-6 relative, plus the float32 storage bound of the alias identity above: every
bucket that feeds cell k contributes (1 - prob[i]) / n, and prob[i] carries float32 rounding
(at most 2**-24 absolute for a value in [0, 1]), so cell k may be off by
(1 + #{i: alias[i] = k}) * 2**-24 / n.  A sweep hands every rounding left over to the last
heavy cell, which keeps itself: that one cell may be off by the whole table's drift,
n * 2**-24 / n = 2**-24 in absolute probability (relevant only for flat maps with a single
slightly brighter cell, where the drift is systematic; a construction error of a whole
bucket is still orders of magnitude larger).  Cells whose probability is below ~1e-30 are
outside what float32 tables can represent (float32's smallest normal number is 1.2e-38);
ABS_TOL covers them.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from envsample.sampling import distribution as dist
from envsample.sampling.distribution import (
    alias_cell_probabilities,
    build_alias,
    build_cdf,
    build_row_cdfs,
    check_cdf,
    sample_alias,
    sample_cdf,
    sample_row_cdfs,
)
from envsample.sampling.kernels import backend_name

REL_TOL = 1e-6
ABS_TOL = 1e-30
#: Rounding of one stored float32 probability in [0, 1]: the float32 scaled weight and the stored
#: value each round by at most half an ulp below 1, 2**-25.
F32_STORE = 2.0**-24

#: The compiled kernels are optional; when they are built, both code paths are tested.
BACKENDS = ["numpy"] + (["compiled"] if backend_name() == "compiled" else [])


def _build_alias(weights, backend="auto", **kw):
    return build_alias(weights, backend=backend, **kw)


def _expected(weights, row_scale=None) -> np.ndarray:
    w = np.asarray(weights, dtype=np.float64)
    if row_scale is not None:
        w = w * np.asarray(row_scale, dtype=np.float64)[:, None]
    w = w.reshape(-1)
    return w / w.sum()


def _alias_probabilities_by_bincount(prob, alias) -> np.ndarray:
    """Independent evaluation of the Walker/Vose identity (not the module's helper)."""
    prob = np.asarray(prob, dtype=np.float64)
    n = prob.size
    return (prob + np.bincount(np.asarray(alias), weights=1.0 - prob, minlength=n)) / n


def _assert_alias_valid(prob, alias, expected):
    n = expected.size
    assert prob.shape == (n,) and alias.shape == (n,)
    assert prob.dtype == np.float32 and alias.dtype == np.int32
    assert np.all((prob >= 0.0) & (prob <= 1.0))
    assert alias.min() >= 0 and alias.max() < n
    got = alias_cell_probabilities(prob, alias)
    independent = _alias_probabilities_by_bincount(prob, alias)
    np.testing.assert_allclose(independent, got, rtol=1e-12, atol=1e-300)
    assert abs(got.sum() - 1.0) < 1e-9
    err = np.abs(got - expected)
    tol = REL_TOL * expected + ABS_TOL + (1 + np.bincount(alias, minlength=n)) * F32_STORE / n
    bad = np.flatnonzero(err > tol)
    # At most one cell (the last heavy) may carry the table's total float32 drift.
    last_ok = bad.size == 1 and err[bad[0]] <= REL_TOL * expected[bad[0]] + F32_STORE
    assert bad.size == 0 or last_ok, (
        f"{bad.size} cells off; n={n}, cells {bad[:5]}, n*error {(err * n)[bad][:5]}, "
        f"n*tol {(tol * n)[bad][:5]}, n*expected {(expected * n)[bad][:5]}"
    )
    # A zero-weight cell must never be drawn: exactly zero, not merely small.
    assert np.all(got[expected == 0] == 0.0)


def _peaky(rng, n=4096):
    w = rng.uniform(0.5, 1.5, n).astype(np.float32)
    w[n // 3] = 1e6  # a one-cell "sun" 1e6 times the sky
    return w


# ------------------------------------------------------------------ alias tables
@pytest.mark.parametrize(
    "kind",
    ["random", "peaky", "zeros", "constant", "one", "two-one-zero", "leading-zeros", "wide-range", "flat-plus-one"],
)
@pytest.mark.parametrize("backend", BACKENDS)
def test_build_alias_reproduces_cell_probabilities(kind, backend, rng):
    """Walker (1977) / Vose (1991): the table encodes exactly the normalised weights."""
    weights = {
        "random": lambda: rng.random(1000),
        "peaky": lambda: _peaky(rng),
        "zeros": lambda: np.where(rng.random(3000) < 0.6, 0.0, rng.random(3000)),
        "constant": lambda: np.full(777, 3.5, dtype=np.float32),
        "one": lambda: np.array([2.0]),
        "two-one-zero": lambda: np.array([0.0, 1.0]),
        "leading-zeros": lambda: np.concatenate([np.zeros(50), [1.0, 2.0], np.zeros(50)]),
        "wide-range": lambda: 10.0 ** rng.uniform(-12, 12, 2000),
        # Many identical lights just below the mean feeding one heavy: the float32 storage case.
        "flat-plus-one": lambda: np.concatenate([np.ones(20000), [3.0]]),
    }[kind]()
    prob, alias = _build_alias(weights, backend)
    _assert_alias_valid(prob, alias, _expected(weights))


@pytest.mark.parametrize("backend", BACKENDS)
def test_build_alias_2d_with_row_scale(backend, rng):
    """2D weights times a per-row factor (the exact row solid angle of a lat-long map)."""
    h, w = 64, 128
    weights = rng.random((h, w)).astype(np.float32)
    weights[:3] = 0.0
    weights[20, 7] = 1e6
    scale = np.diff(-np.cos(np.pi * np.arange(h + 1) / h)) * 2 * math.pi / w
    prob, alias = _build_alias(weights, backend, row_scale=scale)
    _assert_alias_valid(prob, alias, _expected(weights, scale))


@pytest.mark.parametrize("backend", BACKENDS)
def test_build_alias_flat_map_with_one_brighter_cell_is_exact(backend):
    """A flat 256 x 128 lat-long map (a studio backdrop) with one pixel 5 x brighter: every cell,
    including the last heavy, to 1e-6 relative plus the per-bucket float32 bound (no drift allowance).

    Both sweeps round the stored probabilities so that float32 rounding does not pile up
    on the last heavy cell (the numpy one by error diffusion, the compiled one per heavy)."""
    h, w = 128, 256
    weights = np.ones((h, w), dtype=np.float32)
    weights[h // 10, w // 3] = 5.0
    scale = np.diff(-np.cos(np.pi * np.arange(h + 1) / h)) * 2 * math.pi / w
    prob, alias = _build_alias(weights, backend, row_scale=scale)
    expected = _expected(weights, scale)
    n = expected.size
    err = np.abs(alias_cell_probabilities(prob, alias) - expected)
    tol = REL_TOL * expected + (1 + np.bincount(alias, minlength=n)) * F32_STORE / n
    assert np.all(err <= tol), f"worst relative error {np.max(err / expected):.3g}"


def test_build_alias_across_chunk_boundaries(rng, monkeypatch):
    """The construction streams rows in chunks; force many tiny chunks so lights and heavies
    are matched across chunk boundaries, and compare with the unchunked table's probabilities."""
    h, w = 40, 24
    weights = (rng.random((h, w)) ** 4).astype(np.float32)
    weights[5] = 0.0
    weights[30, 3] = 5e4
    scale = rng.uniform(0.1, 2.0, h)
    expected = _expected(weights, scale)
    monkeypatch.setattr(dist, "_CHUNK_CELLS", 1)  # one row per chunk
    prob, alias = _build_alias(weights, "numpy", row_scale=scale)  # the chunked (numpy) path
    _assert_alias_valid(prob, alias, expected)


@pytest.mark.parametrize("backend", BACKENDS)
def test_build_alias_all_zero_is_uniform(backend):
    prob, alias = _build_alias(np.zeros((3, 4)), backend)
    np.testing.assert_allclose(alias_cell_probabilities(prob, alias), np.full(12, 1 / 12), rtol=1e-12)


def test_build_alias_rejects_bad_shapes():
    with pytest.raises(ValueError, match="non-empty 1D or 2D"):
        build_alias(np.zeros((2, 2, 2)))
    with pytest.raises(ValueError, match="non-empty 1D or 2D"):
        build_alias(np.zeros(0))


# Weights as a renderer meets them: zero, or in a luminance-like range spanning 12 decades.
_weight = st.one_of(st.just(0.0), st.floats(min_value=1e-6, max_value=1e6, allow_nan=False, allow_infinity=False))


@settings(max_examples=150, deadline=None)
@given(
    weights=hnp.arrays(np.float64, st.integers(1, 300), elements=_weight),
    as_float32=st.booleans(),
)
@pytest.mark.parametrize("backend", BACKENDS)
def test_alias_property_random_weight_vectors(backend, weights, as_float32):
    """Property (hypothesis): for any non-negative weight vector with a positive entry, the alias
    table reproduces the normalised weights (Vose 1991); an all-zero vector gives the uniform table."""
    if as_float32:
        weights = weights.astype(np.float32)
    prob, alias = _build_alias(weights, backend)
    if weights.sum() == 0:
        np.testing.assert_allclose(alias_cell_probabilities(prob, alias), 1.0 / weights.size, rtol=1e-12)
    else:
        _assert_alias_valid(prob, alias, _expected(weights))


@settings(max_examples=60, deadline=None)
@given(
    shape=st.tuples(st.integers(1, 12), st.integers(1, 12)),
    seed=st.integers(0, 2**32 - 1),
    zero_fraction=st.floats(0.0, 0.9),
    chunk=st.integers(1, 40),
)
def test_alias_property_2d_chunked(shape, seed, zero_fraction, chunk):
    """Property (hypothesis): 2D weights with a row scale and any chunk size give the same probabilities."""
    r = np.random.default_rng(seed)
    weights = (r.random(shape) ** 3 * 10).astype(np.float32)
    weights[r.random(shape) < zero_fraction] = 0.0
    scale = r.uniform(0.01, 1.0, shape[0])
    if not (weights.astype(np.float64) * scale[:, None]).sum() > 0:
        weights[0, 0] = 1.0
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(dist, "_CHUNK_CELLS", chunk)
        prob, alias = _build_alias(weights, "numpy", row_scale=scale)
    _assert_alias_valid(prob, alias, _expected(weights, scale))


def test_sample_alias_frequencies_on_a_fine_grid(rng):
    """Feeding a fine regular grid of u through sample_alias yields each cell with its probability:
    every bucket's 'keep' and 'alias' parts are intervals of u, so the count is exact up to one grid
    step per interval end (Walker 1977)."""
    weights = _peaky(rng, 64)
    weights[10:14] = 0.0
    prob, alias = build_alias(weights)
    m = 64 * 4096
    u = (np.arange(m) + 0.5) / m
    cells, fresh = sample_alias(prob, alias, u)
    counts = np.bincount(cells, minlength=64) / m
    # A cell owns at most its own keep-interval and one alias interval per bucket aliased to it.
    owners = 1 + np.bincount(alias, minlength=64)
    assert np.all(np.abs(counts - _expected(weights)) <= 2.0 * owners / m)
    assert np.all(counts[10:14] == 0)
    assert np.all((fresh >= 0.0) & (fresh < 1.0))


def test_sample_alias_fresh_uniform_is_uniform_within_a_cell(rng):
    """The recycled fraction is a new U[0, 1) number: within each bucket's keep and alias parts it is
    an affine map of u, so on the grid it fills [0, 1) evenly (checked by its mean and spread)."""
    prob, alias = build_alias(np.array([1.0, 3.0, 0.5, 2.5]))
    u = (np.arange(400_000) + 0.5) / 400_000
    cells, fresh = sample_alias(prob, alias, u)
    for c in range(4):
        f = fresh[cells == c]
        assert f.mean() == pytest.approx(0.5, abs=2e-3)
        assert f.var() == pytest.approx(1.0 / 12.0, abs=2e-3)  # variance of U[0,1) (textbook)


# ------------------------------------------------------------------ CDFs
def test_build_cdf_ends_monotone_and_total(rng):
    w = rng.random(1000).astype(np.float32) ** 8
    w[::7] = 0.0
    cdf, total = build_cdf(w)
    assert cdf.dtype == np.float32 and cdf.shape == (1001,)
    assert cdf[0] == 0.0 and cdf[-1] == 1.0
    assert np.all(np.diff(cdf) >= 0)
    assert total == pytest.approx(float(w.astype(np.float64).sum()), rel=1e-12)
    np.testing.assert_allclose(np.diff(cdf.astype(np.float64)), w / w.astype(np.float64).sum(), atol=2e-7)
    assert check_cdf(cdf) is None


def test_build_cdf_zero_weights_give_uniform():
    cdf, total = build_cdf(np.zeros(8))
    assert total == 0.0
    np.testing.assert_allclose(cdf, np.arange(9) / 8, atol=0)


def test_build_cdf_rejects_bad_shapes():
    with pytest.raises(ValueError, match="non-empty 1D"):
        build_cdf(np.zeros((2, 3)))
    with pytest.raises(ValueError, match="non-empty 1D"):
        build_cdf([])


def test_build_cdf_float32_rounding_never_decreases():
    """Huge weights followed by tiny ones: float32 rounding must not make the CDF decrease
    or end anywhere but exactly at 1."""
    w = np.array([1e30, 1.0, 1e-20, 1e30, 3.0] * 200, dtype=np.float32)
    cdf, _ = build_cdf(w)
    assert cdf[0] == 0.0 and cdf[-1] == 1.0 and np.all(np.diff(cdf) >= 0)


def test_build_row_cdfs_rows_totals_zero_rows(rng, monkeypatch):
    h, n = 30, 50
    w = rng.random((h, n)).astype(np.float32) ** 3
    w[[0, 7, 29]] = 0.0
    w[3, :10] = 0.0
    scale = rng.uniform(0.5, 2.0, h)
    monkeypatch.setattr(dist, "_CHUNK_CELLS", 120)  # several rows per chunk, and a ragged last chunk
    cdf, totals = build_row_cdfs(w, row_scale=scale)
    assert cdf.dtype == np.float32 and cdf.shape == (h, n + 1)
    assert np.all(cdf[:, 0] == 0.0) and np.all(cdf[:, -1] == 1.0)
    assert np.all(np.diff(cdf, axis=1) >= 0)
    assert check_cdf(cdf) is None
    np.testing.assert_allclose(totals, w.astype(np.float64).sum(axis=1) * scale, rtol=1e-12)
    for r in (0, 7, 29):  # zero rows: uniform (PBR 3rd ed. 13.6.7 treats them the same way)
        np.testing.assert_allclose(cdf[r], np.arange(n + 1) / n, atol=1e-7)
    row = w[5].astype(np.float64)
    np.testing.assert_allclose(cdf[5, 1:], np.cumsum(row) / row.sum(), atol=2e-7)
    # out= is honoured.
    buf = np.empty((h, n + 1), dtype=np.float32)
    out, _ = build_row_cdfs(w, row_scale=scale, out=buf)
    assert out is buf
    np.testing.assert_array_equal(buf, cdf)
    with pytest.raises(ValueError, match="non-empty 2D"):
        build_row_cdfs(np.ones(4))


def test_check_cdf_reports_each_problem():
    assert check_cdf(np.array([0.0, 0.5, 1.0], dtype=np.float32)) is None
    assert "non-finite" in check_cdf(np.array([0.0, np.nan, 1.0]))
    assert "start at exactly 0" in check_cdf(np.array([0.1, 0.5, 1.0]))
    assert "end at exactly 1" in check_cdf(np.array([0.0, 0.5, 0.999]))
    assert "non-decreasing" in check_cdf(np.array([0.0, 0.6, 0.5, 1.0]))
    # 2D (one CDF per row): one bad row is enough.
    assert "non-decreasing" in check_cdf(np.array([[0.0, 0.5, 1.0], [0.0, 1.1, 1.0]]))
    assert "end at exactly 1" in check_cdf(np.array([[0.0, 0.5, 1.0], [0.0, 0.5, 0.5]]))


# ------------------------------------------------------------------ CDF inversion
def _reference_search(cdf, u):
    """Textbook inversion: the largest i with cdf[i] <= u (numpy.searchsorted, side='right')."""
    u = np.clip(u, 0.0, np.nextafter(1.0, 0.0))
    return np.clip(np.searchsorted(cdf, u, side="right") - 1, 0, cdf.size - 2)


def test_sample_cdf_agrees_with_searchsorted(rng):
    w = rng.random(200).astype(np.float32)
    w[[0, 1, 50, 51, 52, 199]] = 0.0  # zero-width cells at the start, middle and end
    cdf, _ = build_cdf(w)
    u = np.concatenate([rng.random(20000), cdf[:-1].astype(np.float64), [0.0, np.nextafter(1.0, 0.0), 1.0]])
    idx, frac = sample_cdf(cdf, u)
    np.testing.assert_array_equal(idx, _reference_search(cdf, u))
    assert idx.dtype == np.int64
    assert np.all(w[idx] > 0), "a zero-width cell was returned"
    assert np.all((frac >= 0.0) & (frac <= 1.0))
    # The fraction places u back within its cell.
    lo, hi = cdf[idx].astype(np.float64), cdf[idx + 1].astype(np.float64)
    uc = np.clip(u, 0.0, np.nextafter(1.0, 0.0))
    np.testing.assert_allclose(lo + frac * (hi - lo), uc, atol=1e-12)


def test_sample_cdf_is_monotone(rng):
    cdf, _ = build_cdf(rng.random(64) ** 4)
    u = np.sort(rng.random(50000))
    idx, frac = sample_cdf(cdf, u)
    assert np.all(np.diff(idx) >= 0)
    assert np.all(np.diff(idx + frac) >= -1e-12)


def test_sample_row_cdfs_agrees_with_searchsorted_per_row(rng):
    """The vectorised bisection equals numpy.searchsorted on each sample's own row, for row widths
    that are and are not powers of two (1, 2, 3, 64, 100)."""
    for n in (1, 2, 3, 64, 100):
        h = 9
        w = rng.random((h, n)).astype(np.float32) ** 2
        w[2] = 0.0
        if n > 2:
            w[4, : n // 2] = 0.0
            w[5, n // 2 :] = 0.0
        cdf2d, _ = build_row_cdfs(w)
        rows = rng.integers(0, h, 5000)
        u = rng.random(5000)
        u[:h] = 0.0
        u[h : 2 * h] = 1.0
        u[2 * h : 3 * h] = np.nextafter(1.0, 0.0)
        col, frac = sample_row_cdfs(cdf2d, rows, u)
        want = np.array([_reference_search(cdf2d[r], x) for r, x in zip(rows, u)])
        np.testing.assert_array_equal(col, want, err_msg=f"n={n}")
        positive_row = w.sum(axis=1)[rows] > 0
        assert np.all(w[rows, col][positive_row] > 0), "a zero-width cell was returned"
        assert np.all((frac >= 0.0) & (frac <= 1.0))


def test_sample_row_cdfs_monotone_within_a_row(rng):
    w = rng.random((4, 37)) ** 3
    cdf2d, _ = build_row_cdfs(w)
    u = np.sort(rng.random(20000))
    col, frac = sample_row_cdfs(cdf2d, np.full(u.size, 2), u)
    assert np.all(np.diff(col) >= 0)
    assert np.all(np.diff(col + frac) >= -1e-12)


def test_sample_cdf_frequencies_on_a_fine_grid(rng):
    """A regular grid of u lands in each cell in proportion to its CDF step (exact up to one grid step)."""
    w = _peaky(rng, 100).astype(np.float64)
    w[40:45] = 0.0
    cdf, _ = build_cdf(w)
    m = 1_000_000
    idx, _ = sample_cdf(cdf, (np.arange(m) + 0.5) / m)
    counts = np.bincount(idx, minlength=100) / m
    assert np.all(np.abs(counts - np.diff(cdf.astype(np.float64))) <= 1.0 / m + 1e-12)
    np.testing.assert_allclose(np.diff(cdf.astype(np.float64)), w / w.sum(), atol=1e-7)
