"""Tests of envsample.estimation.heuristics: the MIS weights against their definitions (Veach 1997, section 9.2).

Veach, E. (1997), PhD thesis, Stanford University: eq. 9.4 and section 9.2 (the balance, power,
maximum and cutoff heuristics); section 9.1 (weights sum to one where some pdf is positive and
vanish where a pdf is zero).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from envsample.estimation.heuristics import HEURISTICS, mis_weights, sample_counts


def test_heuristics_match_their_definitions_on_a_worked_example():
    """Veach (1997), section 9.2: two strategies with pdfs (1, 3) and (3, 1), one sample each.
    By hand: balance 1/4, 3/4; power (beta 2) 1/10, 9/10; maximum 0, 1; cutoff with
    alpha 0.5 drops q = 1 < 1.5 (-> maximum) and with alpha 0.2 keeps both (-> balance)."""
    p = np.array([[1.0, 3.0], [3.0, 1.0]])
    c = [1, 1]
    np.testing.assert_allclose(mis_weights(p, c, method="balance"), [[0.25, 0.75], [0.75, 0.25]])
    np.testing.assert_allclose(mis_weights(p, c, method="power"), [[0.1, 0.9], [0.9, 0.1]])
    np.testing.assert_allclose(mis_weights(p, c, method="power", beta=1.0), mis_weights(p, c))
    np.testing.assert_allclose(mis_weights(p, c, method="maximum"), [[0.0, 1.0], [1.0, 0.0]])
    np.testing.assert_allclose(mis_weights(p, c, method="max"), [[0.0, 1.0], [1.0, 0.0]])
    np.testing.assert_allclose(mis_weights(p, c, method="cutoff", cutoff=0.5), [[0.0, 1.0], [1.0, 0.0]])
    np.testing.assert_allclose(mis_weights(p, c, method="cutoff", cutoff=0.2), [[0.25, 0.75], [0.75, 0.25]])
    # Counts multiply the densities: three samples of the first strategy balance (1, 3) evenly.
    np.testing.assert_allclose(mis_weights(p, [3, 1])[:, 0], [0.5, 0.5])


def test_power_heuristic_tends_to_the_maximum_heuristic():
    """Veach (1997), section 9.2: the maximum heuristic is the limit beta -> infinity of the power heuristic."""
    rng = np.random.default_rng(1)
    p = rng.gamma(1.0, size=(3, 50)) * np.array([[1.0], [10.0], [100.0]])
    np.testing.assert_allclose(mis_weights(p, [1, 2, 3], method="power", beta=400.0),
                               mis_weights(p, [1, 2, 3], method="maximum"), atol=1e-6)
    # Large pdfs do not overflow: the power heuristic rescales before raising to beta.
    big = np.array([[1e300, 1e299], [1e299, 1e300]])
    assert np.all(np.isfinite(mis_weights(big, [1, 1], method="power", beta=8.0)))


pdf_values = st.one_of(st.just(0.0), st.floats(min_value=1e-12, max_value=1e12))


@settings(max_examples=150, deadline=None)
@given(
    k=st.integers(2, 4),
    data=st.data(),
    method=st.sampled_from(sorted(HEURISTICS)),
)
def test_weights_sum_to_one_where_some_pdf_is_positive_and_vanish_where_the_pdf_does(k, data, method):
    """Veach (1997), section 9.1: an MIS estimator is unbiased when sum_i w_i = 1 wherever f != 0
    and w_i = 0 wherever p_i = 0.  Every heuristic must meet both (hypothesis property test);
    where all pdfs vanish the weights are all 0."""
    n = data.draw(st.integers(1, 12))
    pdfs = np.array(data.draw(st.lists(st.lists(pdf_values, min_size=n, max_size=n), min_size=k, max_size=k)))
    counts = np.array(data.draw(st.lists(st.integers(1, 64), min_size=k, max_size=k)), dtype=float)
    params = {"power": {"beta": data.draw(st.floats(0.5, 8.0))},
              "cutoff": {"cutoff": data.draw(st.floats(0.0, 1.0))}}.get(method, {})
    w = mis_weights(pdfs, counts, method=method, **params)
    assert w.shape == pdfs.shape
    assert np.all(w >= 0.0) and np.all(w <= 1.0 + 1e-12)
    some = np.any(pdfs > 0.0, axis=0)
    np.testing.assert_allclose(w.sum(axis=0)[some], 1.0, rtol=1e-12)
    assert np.all(w[:, ~some] == 0.0)
    assert np.all(w[pdfs == 0.0] == 0.0)


def test_mis_weights_rejects_bad_input_with_clear_messages():
    p = np.ones((2, 3))
    with pytest.raises(ValueError, match="unknown MIS heuristic 'optimal'; valid names: balance, power"):
        mis_weights(p, [1, 1], method="optimal")
    with pytest.raises(ValueError, match="beta do not apply to the balance heuristic"):
        mis_weights(p, [1, 1], method="balance", beta=2.0)
    with pytest.raises(ValueError, match="counts has 3 entries but pdfs has 2 strategies"):
        mis_weights(p, [1, 1, 1])
    with pytest.raises(ValueError, match="beta must be a finite number > 0"):
        mis_weights(p, [1, 1], method="power", beta=0.0)
    with pytest.raises(ValueError, match=r"cutoff must lie in \[0, 1\]"):
        mis_weights(p, [1, 1], method="cutoff", cutoff=2.0)
    with pytest.raises(ValueError, match="finite and non-negative"):
        mis_weights(-p, [1, 1])


def test_sample_counts_split_spp_by_largest_remainder():
    assert sample_counts(10, [0.3, 0.7]) == (3, 7)
    assert sample_counts(7, [0.5, 0.5]) in ((4, 3), (3, 4))
    assert sample_counts(4, [0.99, 0.01]) == (3, 1)  # every strategy keeps one sample
    with pytest.raises(ValueError, match="spp=1 is too small"):
        sample_counts(1, [0.5, 0.5])
