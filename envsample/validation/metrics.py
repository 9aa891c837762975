"""Error figures of the validation render and the rule that picks the recommended estimator.

Relative RMSE and mean bias on luminance against the exact reference, the per-sample
variance with its large-sample standard error (the fourth central moment,
``(mu4 - mu2^2) / n``: Kendall & Stuart, The Advanced Theory of Statistics, vol. 1; from
memory), and the recommendation: the most efficient estimator whose measured bias is
consistent with zero (``|mean_bias| <= 4 standard errors + the reference's accuracy``).
All the estimators are unbiased in expectation; the measured bias fails that test when a
bright light was missed (the sample variance then understates the error), so the rule
discards estimators that were visibly unlucky at this sample count.  Efficiency includes
wall time, so near ties can swap between runs: the result lists the estimators within 10%
of the best (``close_to_best``) and, as a choice that depends on the seed alone, the one of
least variance per sample (``lowest_variance``).  Efficiency = 1 / (variance x time):
Veach (1997), section 2.2.
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.color import luminance
from envsample.core.text import caution

__all__ = ["BIAS_SIGMAS", "CAUTION", "CLOSE_EFFICIENCY", "error_metrics", "json_number", "sample_statistics",
           "weighted_variance", "recommendation"]

#: Said wherever these numbers are shown.
CAUTION = caution("photometric values (Monte Carlo results)")

#: Measured bias is "consistent with zero" within this many standard errors (plus the reference's accuracy).
BIAS_SIGMAS = 4.0


#: Estimators with at least this fraction of the best efficiency are listed as close to it.
CLOSE_EFFICIENCY = 0.9


def error_metrics(estimate, reference, weights, *, primaries: str = "bt709") -> dict:
    """Relative RMSE and mean bias of an estimate against the reference, on luminance.

    ``estimate`` and ``reference`` are RGB irradiance ``(N, 3)`` (or ``(H, W, 3)``),
    ``weights`` the solid angle of each normal's cell ``(N,)``.  Returns
    ``{"relative_rmse", "mean_bias", "reference_mean"}``: RMSE and bias divided by
    the weighted mean reference luminance ``Ebar`` (see the module docstring), and
    ``Ebar`` itself in map units x sr.
    """
    y = luminance(np.asarray(estimate).reshape(-1, 3), primaries, dtype=np.float64)
    yr = luminance(np.asarray(reference).reshape(-1, 3), primaries, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64).reshape(-1)
    if not (y.shape == yr.shape == w.shape):
        raise ValueError(f"estimate, reference and weights must describe the same normals, got {y.shape}, {yr.shape}, {w.shape}")
    wsum = w.sum()
    ebar = float(np.dot(w, yr) / wsum)
    d = y - yr
    if not ebar > 0.0:
        return {"relative_rmse": None, "relative_rmse_se": None, "mean_bias": None, "reference_mean": ebar}
    sq = d * d
    mse = float(np.dot(w, sq) / wsum)
    mse_se = float(math.sqrt(np.dot(w * w, (sq - mse) ** 2)) / wsum)
    rmse = math.sqrt(mse)
    return {
        "relative_rmse": rmse / ebar,
        "relative_rmse_se": (mse_se / (2.0 * rmse) / ebar) if rmse > 0 else 0.0,
        "mean_bias": float(np.dot(w, d) / wsum / ebar),
        "reference_mean": ebar,
    }


def json_number(x):
    """JSON-safe float: non-finite values become None."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def weighted_variance(samples, weights: np.ndarray) -> tuple[float, float]:
    """Weighted mean per-sample luminance variance (map units, squared) and its large-sample standard error.

    The per-sample variance of one normal is ``variance of its estimate x spp`` (for
    multi-sample MIS the stratified variance); its own variance is ``(m4 - m2^2) / spp``
    from the fourth central moment of the contributions (large-sample; Kendall & Stuart,
    from memory).  Normals are independent, so standard errors add in quadrature.
    """
    spp = samples.spp
    v = np.asarray(samples.variance(), dtype=np.float64) * spp
    c = samples.contributions
    d = c - c.mean(axis=1, keepdims=True)
    m2 = np.mean(d * d, axis=1)
    m4 = np.mean(d ** 4, axis=1)
    wsum = weights.sum()
    se = math.sqrt(np.dot(weights ** 2, np.maximum(m4 - m2 * m2, 0.0) / spp)) / wsum
    return float(np.dot(weights, v) / wsum), float(se)


def sample_statistics(samples, weights: np.ndarray, ebar: float) -> dict:
    """Variance per sample relative to Ebar^2 with its standard error, and the mean bias's standard error."""
    var_mean = np.asarray(samples.variance(), dtype=np.float64)  # variance of each normal's estimate
    v, v_se = weighted_variance(samples, weights)
    scale = ebar * ebar if ebar > 0 else float("nan")
    wsum = weights.sum()
    return {
        "bias_se": float(math.sqrt(np.dot(weights ** 2, var_mean)) / wsum / ebar) if ebar > 0 else None,
        "variance_per_sample": float(v / scale),
        "variance_per_sample_se": float(v_se / scale),
    }


def recommendation(entries: dict) -> dict:
    """The most efficient estimator whose measured bias is consistent with zero."""
    def score(item):
        name, e = item
        if e.get("variance_per_sample") == 0.0:
            return (1, math.inf)
        return (1, e["efficiency"]) if e.get("efficiency") is not None else (0, 0.0)

    if all(e.get("relative_rmse") is None for e in entries.values()):
        return {"estimator": None, "rule": "the reference irradiance is zero everywhere (a black map): nothing to rank",
                "ranking": [], "close_to_best": [], "lowest_variance": None, "excluded_for_bias": []}
    candidates = [(n, e) for n, e in entries.items() if e.get("bias_consistent_with_zero")]
    fallback = not candidates
    pool = candidates if candidates else list(entries.items())
    ranked = sorted(pool, key=score, reverse=True)
    best = ranked[0][0] if ranked else None
    rule = (f"highest efficiency 1/(variance per sample x time per sample) among the estimators whose "
            f"measured mean bias is within {BIAS_SIGMAS:g} standard errors (plus the reference accuracy) of zero")
    if fallback:
        rule += "; no estimator passed the bias check, so all were ranked (increase spp)"
    with_var = [(n, e) for n, e in pool if e.get("variance_per_sample") is not None]
    lowest = min(with_var, key=lambda item: item[1]["variance_per_sample"])[0] if with_var else None
    top = score(ranked[0])[1] if ranked else 0.0
    close = [n for n, e in ranked[1:] if score((n, e))[1] >= CLOSE_EFFICIENCY * top]
    return {"estimator": best, "rule": rule, "ranking": [n for n, _ in ranked],
            "close_to_best": close,
            "lowest_variance": lowest,
            "lowest_variance_means": "least variance per sample among the same estimators; unlike the "
                                     "efficiency ranking it depends on the seed only, not on timings",
            "close_to_best_means": f"efficiency within {1 - CLOSE_EFFICIENCY:.0%} of the best: timing noise can swap them",
            "excluded_for_bias": sorted(n for n, e in entries.items() if e.get("bias_consistent_with_zero") is False)}
