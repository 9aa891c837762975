"""MIS heuristics: weights that combine several sampling strategies (Veach 1997, section 9.2).

With ``q_i = n_i p_i(x)`` (``n_i`` samples of strategy ``i`` in multi-sample MIS, or
its selection probability ``c_i`` in one-sample MIS):

``balance``   w_i = q_i / sum_k q_k                       (the balance heuristic)
``power``     w_i = q_i^beta / sum_k q_k^beta, beta = 2    (power heuristic)
``maximum``   w_i = 1 if q_i is the largest, else 0        (maximum heuristic)
``cutoff``    w_i = q_i / sum of q_k >= c q_max, 0 if q_i < c q_max, c = ``cutoff``  (cutoff heuristic)

Each is its own function in ``HEURISTICS``; :func:`mis_weights` dispatches by ``method=``.
Every heuristic gives weights that sum to 1 wherever some pdf is positive and a
zero weight wherever a strategy's pdf is zero, the two conditions of Veach's
unbiasedness argument (section 9.1).  Ties in ``maximum`` go to the first strategy.

References
----------
- Veach, E. (1997). Robust Monte Carlo Methods for Light Transport Simulation. PhD
  thesis, Stanford University, chapter 9 (Multiple Importance Sampling).
- Veach, E. and Guibas, L. J. (1995). Optimally Combining Sampling Techniques for
  Monte Carlo Rendering. SIGGRAPH 95.
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.compat import renamed_keywords, warn_renamed

__all__ = [
    "HEURISTICS",
    "balance_heuristic",
    "power_heuristic",
    "maximum_heuristic",
    "cutoff_heuristic",
    "heuristic_name",
    "mis_weights",
    "sample_counts",
]


def _normalise(weights: np.ndarray) -> np.ndarray:
    total = weights.sum(axis=0)
    return np.divide(weights, total, out=np.zeros_like(weights), where=total > 0.0)


def balance_heuristic(q: np.ndarray) -> np.ndarray:
    """Balance heuristic w_i = q_i / sum_k q_k (Veach 1997, section 9.2); q = n_i p_i, shape (k, N)."""
    return _normalise(np.array(q, dtype=np.float64))


def power_heuristic(q: np.ndarray, *, beta: float = 2.0) -> np.ndarray:
    """Power heuristic w_i = q_i^beta / sum_k q_k^beta (Veach 1997, section 9.2); beta > 0, default 2."""
    beta = float(beta)
    if not (beta > 0.0 and math.isfinite(beta)):
        raise ValueError(f"power heuristic beta must be a finite number > 0, got {beta}")
    q = np.asarray(q, dtype=np.float64)
    qmax = q.max(axis=0)
    # Scaling by the largest q first keeps q**beta finite for sharp lobes and suns.
    r = np.divide(q, qmax, out=np.zeros_like(q), where=qmax > 0.0)
    return _normalise(r**beta)


def maximum_heuristic(q: np.ndarray) -> np.ndarray:
    """Maximum heuristic: weight 1 for the strategy with the largest q_i, else 0 (Veach 1997, section 9.2).

    Ties go to the first strategy; all weights are 0 where every q is 0.
    """
    q = np.asarray(q, dtype=np.float64)
    w = np.zeros_like(q)
    if q.shape[1]:
        best = np.argmax(q, axis=0)
        cols = np.arange(q.shape[1])
        w[best, cols] = (q[best, cols] > 0.0).astype(np.float64)
    return w


@renamed_keywords(alpha="cutoff")
def cutoff_heuristic(q: np.ndarray, *, cutoff: float = 0.1) -> np.ndarray:
    """Cutoff heuristic (Veach 1997, section 9.2): drop q_i < cutoff * q_max, balance the rest; 0 <= cutoff <= 1.

    cutoff = 0 is the balance heuristic; cutoff = 1 keeps only the largest (ties share).
    (Veach writes the threshold alpha; envsample keeps alpha for GGX roughness.)
    The default 0.1 is our choice, not a published optimum.
    """
    cutoff = float(cutoff)
    if not (0.0 <= cutoff <= 1.0):
        raise ValueError(f"cutoff heuristic threshold cutoff must lie in [0, 1], got {cutoff}")
    q = np.asarray(q, dtype=np.float64)
    qmax = q.max(axis=0)
    keep = (q >= cutoff * qmax) & (q > 0.0)
    return _normalise(np.where(keep, q, 0.0))


#: Heuristics by name; each takes q = n_i p_i (k, N) and its own keyword parameters.
HEURISTICS = {
    "balance": balance_heuristic,
    "power": power_heuristic,
    "maximum": maximum_heuristic,
    "cutoff": cutoff_heuristic,
}


_HEURISTIC_PARAMS = {"balance": (), "power": ("beta",), "maximum": (), "cutoff": ("cutoff",)}


_HEURISTIC_ALIASES = {"max": "maximum"}


def heuristic_name(method: str) -> str:
    key = _HEURISTIC_ALIASES.get(method, method)
    if key not in HEURISTICS:
        valid = ", ".join(list(HEURISTICS) + list(_HEURISTIC_ALIASES))
        raise ValueError(f"unknown MIS heuristic {method!r}; valid names: {valid}")
    return key


def mis_weights(pdfs, counts, *, method: str = "balance", **params) -> np.ndarray:
    """MIS weights of k strategies at N points, float64 (k, N).

    Parameters
    ----------
    pdfs : array_like (k, N)
        Density of each strategy at each point, per steradian (any common measure works).
    counts : array_like (k,)
        Samples per strategy n_i (multi-sample MIS) or selection probabilities c_i
        (one-sample MIS); non-negative.
    method : {"balance", "power", "maximum" (alias "max"), "cutoff"}
    **params
        ``beta`` for power (default 2), ``cutoff`` for cutoff (default 0.1).
    """
    key = heuristic_name(method)
    if key == "cutoff" and "alpha" in params and "cutoff" not in params:
        warn_renamed("alpha", "cutoff")
        params["cutoff"] = params.pop("alpha")
    extra = set(params) - set(_HEURISTIC_PARAMS[key])
    if extra:
        allowed = ", ".join(_HEURISTIC_PARAMS[key]) or "none"
        raise ValueError(f"parameter(s) {', '.join(sorted(extra))} do not apply to the {key} heuristic; allowed: {allowed}")
    p = np.asarray(pdfs, dtype=np.float64)
    if p.ndim != 2:
        raise ValueError(f"pdfs must have shape (k, N), got {p.shape}")
    c = np.asarray(counts, dtype=np.float64).reshape(-1)
    if c.shape[0] != p.shape[0]:
        raise ValueError(f"counts has {c.shape[0]} entries but pdfs has {p.shape[0]} strategies")
    if np.any(c < 0.0) or np.any(p < 0.0) or not np.all(np.isfinite(p)):
        raise ValueError("pdfs and counts must be finite and non-negative")
    return HEURISTICS[key](c[:, None] * p, **params)


def sample_counts(spp: int, fractions) -> tuple[int, ...]:
    """Split ``spp`` samples among strategies in proportion to ``fractions`` (largest remainder), each >= 1."""
    f = np.asarray(fractions, dtype=np.float64)
    if spp < f.size:
        raise ValueError(f"spp={spp} is too small for multi-sample MIS over {f.size} strategies; use spp >= {f.size}")
    raw = f * spp
    n = np.floor(raw).astype(np.int64)
    order = np.argsort(-(raw - n), kind="stable")
    n[order[: spp - int(n.sum())]] += 1
    while np.any(n < 1):  # give every strategy at least one sample, taken from the largest
        n[np.argmax(n)] -= 1
        n[np.argmin(n)] += 1
    return tuple(int(x) for x in n)
