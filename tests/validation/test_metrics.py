"""Tests of envsample.validation.metrics: error figures and the recommendation rule.

Outside references: the RMSE and mean of a weighted sample (textbook definitions, recomputed with
numpy); the large-sample standard error of a root mean square by the delta method, checked against
the spread of RMSEs over independent replications (common practice); the per-sample variance of
i.i.d. samples against ``numpy.var`` with ``ddof=1``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from envsample.core.color import luminance
from envsample.estimation.estimators import EstimatorSamples
from envsample.validation.metrics import BIAS_SIGMAS, error_metrics, json_number, recommendation, weighted_variance


def test_error_metrics_match_the_weighted_definitions(rng):
    n = 200
    ref = rng.uniform(1.0, 2.0, (n, 3))
    est = ref + rng.normal(0.0, 0.1, (n, 3))
    w = rng.uniform(0.5, 1.5, n)
    m = error_metrics(est, ref, w)
    y, yr = luminance(est, "bt709", dtype=np.float64), luminance(ref, "bt709", dtype=np.float64)
    ebar = np.average(yr, weights=w)
    assert m["reference_mean"] == pytest.approx(ebar, rel=1e-12)
    assert m["relative_rmse"] == pytest.approx(math.sqrt(np.average((y - yr) ** 2, weights=w)) / ebar, rel=1e-12)
    assert m["mean_bias"] == pytest.approx(np.average(y - yr, weights=w) / ebar, rel=1e-12)


def test_the_rmse_standard_error_matches_the_spread_over_replications(rng):
    """200 replications of 400 normals: the mean stated SE agrees with the measured spread within 15%
    (the spread of 200 standard deviations is itself known to about 1/sqrt(2*200) = 5%, times 3)."""
    n, reps = 400, 200
    ref = np.ones((n, 3))
    w = np.ones(n)
    rmses, ses = [], []
    for _ in range(reps):
        # Heavy-ish tails (Student t, 5 degrees of freedom), as Monte Carlo errors are.
        est = ref + 0.2 * rng.standard_t(5, size=(n, 1)) * np.ones((1, 3))
        m = error_metrics(est, ref, w)
        rmses.append(m["relative_rmse"])
        ses.append(m["relative_rmse_se"])
    assert np.mean(ses) == pytest.approx(np.std(rmses, ddof=1), rel=0.15)


def test_exact_estimates_have_zero_error_and_a_black_reference_has_none():
    ref = np.ones((10, 3))
    m = error_metrics(ref, ref, np.ones(10))
    assert m["relative_rmse"] == 0.0 and m["relative_rmse_se"] == 0.0 and m["mean_bias"] == 0.0
    black = error_metrics(np.zeros((10, 3)), np.zeros((10, 3)), np.ones(10))
    assert black["relative_rmse"] is None and black["reference_mean"] == 0.0
    with pytest.raises(ValueError, match="same normals"):
        error_metrics(np.ones((3, 3)), np.ones((4, 3)), np.ones(3))


def test_weighted_variance_of_iid_samples_is_numpys_sample_variance(rng):
    c = rng.exponential(2.0, (50, 64))
    s = EstimatorSamples(estimator="x", kind="single", strategies=("cosine",), contributions=c,
                         strategy=np.zeros(c.shape, np.int8))
    v, se = weighted_variance(s, np.ones(50))
    assert v == pytest.approx(np.mean(np.var(c, axis=1, ddof=1)), rel=1e-12)
    assert se > 0


def test_recommendation_takes_the_most_efficient_unbiased_estimator():
    entries = {
        "fast-but-off": {"relative_rmse": 0.1, "efficiency": 1e9, "variance_per_sample": 0.1,
                         "bias_consistent_with_zero": False},
        "good": {"relative_rmse": 0.2, "efficiency": 5e6, "variance_per_sample": 0.3, "bias_consistent_with_zero": True},
        "slow": {"relative_rmse": 0.2, "efficiency": 1e6, "variance_per_sample": 0.2, "bias_consistent_with_zero": True},
    }
    r = recommendation(entries)
    assert r["estimator"] == "good" and r["lowest_variance"] == "slow"
    assert r["excluded_for_bias"] == ["fast-but-off"] and f"{BIAS_SIGMAS:g} standard errors" in r["rule"]
    black = recommendation({"a": {"relative_rmse": None}})
    assert black["estimator"] is None and "black map" in black["rule"]


def test_json_number_turns_non_finite_values_into_none():
    assert json_number(float("inf")) is None and json_number(float("nan")) is None and json_number(2) == 2.0
