"""Monte Carlo estimators of irradiance and of glossy reflection: single strategies and MIS combinations.

The MIS weights come from :mod:`envsample.estimation.heuristics` (balance, power, maximum
and cutoff heuristics; Veach 1997, section 9.2).

Estimators
----------
* single strategy:  F = (1/N) sum_j f(X_j) / p(X_j)
* multi-sample MIS (Veach 1997, section 9.2.1): F = sum_i (1/n_i) sum_j w_i(X_ij) f(X_ij) / p_i(X_ij)
* one-sample MIS (Veach section 9.2.4): pick strategy I with probability c_I, then
  F = w_I(X) f(X) / (c_I p_I(X)); ``spp`` such estimates are averaged.

The integrands, per shading point with unit normal n (world space, the table's
direction convention):

* irradiance ``E(n) = integral of L(w) max(0, n.w) dw`` (map units x sr); the "BSDF"
  strategy is then the cosine density, which matches the clamped cosine exactly;
* glossy outgoing radiance ``L_o(n, wo) = integral of L(w) f(w, wo) max(0, n.w) dw`` for
  the GGX reflection of :class:`envsample.strategies.GGXReflection` (F = 1).

The radiance ``L`` is the table's map (``table.eval``) plus any analytic lights passed
as ``sun=`` (:class:`envsample.sampling.sun.SunLight`: a split scene is the sky's table
plus the sun).  The ``sun-*`` estimators combine three strategies, the sun (uniform over
its disk), the sky table and the BSDF, with multi-sample or one-sample MIS.

Named estimators are listed by :func:`estimators`.  Each normal gets ``spp`` samples;
the uniforms come from ``numpy.random.default_rng(seed)`` drawn normal by normal in
a fixed order, so results are reproducible bit for bit and do not depend on how the
normals are chunked to bound memory.

These are Monte Carlo *estimates* for preparing assets, not certified lighting
calculations.

References
----------
- Veach, E. (1997). Robust Monte Carlo Methods for Light Transport Simulation. PhD
  thesis, Stanford University, chapter 9 (Multiple Importance Sampling).
- Veach, E. and Guibas, L. J. (1995). Optimally Combining Sampling Techniques for
  Monte Carlo Rendering. SIGGRAPH 95.
- Karlik, O., Sik, M., Vevoda, P., Skrivan, T. and Krivanek, J. (2019). MIS
  Compensation: Optimizing Sampling Techniques in Multiple Importance Sampling.
  ACM Transactions on Graphics 38(6) (why a compensated table is valid only inside MIS).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from envsample.core.color import luminance
from envsample.core.compat import renamed_keywords, warn_renamed
from envsample.core.limits import check_memory
from envsample.estimation.heuristics import heuristic_name, mis_weights, sample_counts
from envsample.sampling.frames import Frame, make_frame
from envsample.sampling.ggx import GGXReflection
from envsample.sampling.strategies import CosineHemisphere, TableStrategy, UniformHemisphere, UniformSphere
from envsample.sampling.sun import SunLight

__all__ = [
    "Combination",
    "EstimatorSamples",
    "Integrand",
    "RENAMED_ESTIMATORS",
    "estimator_name",
    "estimate",
    "estimate_glossy",
    "estimate_irradiance",
    "estimators",
    "firefly_index",
]

#: Samples per processing chunk (normals x spp); bounds memory to tens of MB.
DEFAULT_CHUNK_SAMPLES = 1 << 17
#: Bytes one sample of a chunk holds at once (uniforms, directions, pdfs and weights of every
#: strategy, radiance): an upper estimate for envsample.core.limits.check_memory.
_BYTES_PER_SAMPLE = 256


# --- heuristics ----------------------------------------------------------------


# --- estimator registry ----------------------------------------------------------


@dataclass(frozen=True)
class _Spec:
    kind: str  # "single" | "multi" | "one-sample"
    roles: tuple[str, ...]
    heuristic: str | None = None
    glossy_only: bool = False


def _build_registry() -> dict[str, _Spec]:
    reg = {
        "cosine": _Spec("single", ("cosine",)),
        "uniform-hemisphere": _Spec("single", ("uniform-hemisphere",)),
        "uniform-sphere": _Spec("single", ("uniform-sphere",)),
        "table": _Spec("single", ("table",)),
        "bsdf": _Spec("single", ("bsdf",)),
        "bsdf-ggx": _Spec("single", ("ggx",), glossy_only=True),
    }
    pairs = (("balance", "balance"), ("power", "power"), ("maximum", "max"), ("cutoff", "cutoff"))
    for model, prefix in (("multi", "mis"), ("one-sample", "one-sample")):
        for h, short in pairs:
            reg[f"{prefix}-{short}"] = _Spec(model, ("table", "bsdf"), h)
            reg[f"sun-{prefix}-{short}"] = _Spec(model, ("sun", "table", "bsdf"), h)
    return reg


_ESTIMATORS = _build_registry()

#: Former estimator names, accepted for one more version with a DeprecationWarning: they did
#: not say what they sample (the hemisphere above the normal, or the whole sphere).
RENAMED_ESTIMATORS = {"uniform": "uniform-hemisphere", "sphere": "uniform-sphere"}


def estimator_name(name: str) -> str:
    """The current name of an estimator: a former name (:data:`RENAMED_ESTIMATORS`) warns and is translated."""
    new = RENAMED_ESTIMATORS.get(name)
    if new is None:
        return name
    warn_renamed(name, new, what="estimator name", stacklevel=5)
    return new


def estimators(kind: str | None = "irradiance", *, sun: bool = False) -> tuple[str, ...]:
    """Names of the estimators valid for ``kind``: "irradiance" (the default, the names
    :func:`estimate_irradiance` accepts), "glossy" (:func:`estimate_glossy`), or None for every name
    of either kind.

    ``bsdf`` samples the "BSDF" of the integrand: the clamped cosine (cosine density)
    for irradiance, GGX visible normals for glossy.  ``mis-*`` combine the table and
    the BSDF strategy with multi-sample MIS, ``one-sample-*`` with one-sample MIS;
    ``fractions`` sets the share of table samples (or the table's selection probability).
    ``sun-mis-*`` and ``sun-one-sample-*`` add the sun's disk as a third strategy (they
    need ``sun=``); their ``fractions`` are (sun, table, bsdf) shares.  They are listed
    only with ``sun=True`` (a scene with an analytic sun).
    """
    if kind not in (None, "irradiance", "glossy"):
        raise ValueError(f"unknown integrand kind {kind!r}; valid names: irradiance, glossy")
    return tuple(n for n, s in _ESTIMATORS.items()
                 if not (s.glossy_only and kind == "irradiance") and (sun or "sun" not in s.roles))


def _spec(name: str, kind: str) -> _Spec:
    spec = _ESTIMATORS.get(name)
    if spec is None or (spec.glossy_only and kind == "irradiance"):
        raise ValueError(f"unknown {kind} estimator {name!r}; valid names: {', '.join(estimators(kind, sun=True))}")
    return spec


def _strategy_for(role: str, kind: str, table, table_method: str, sun=None):
    if role == "table":
        return TableStrategy(table, method=table_method)
    if role == "sun":
        return sun
    if role == "bsdf":
        role = "ggx" if kind == "glossy" else "cosine"
    return {"cosine": CosineHemisphere, "uniform-hemisphere": UniformHemisphere,
            "uniform-sphere": UniformSphere, "ggx": GGXReflection}[role]()


def _fractions(fractions, k: int) -> np.ndarray:
    if fractions is None:
        return np.full(k, 1.0 / k)
    f = np.atleast_1d(np.asarray(fractions, dtype=np.float64))
    if f.size == 1 and k == 2:
        f = np.array([f[0], 1.0 - f[0]])
    if f.size != k or not np.all(np.isfinite(f)) or np.any(f <= 0.0) or abs(f.sum() - 1.0) > 1e-9:
        raise ValueError(
            f"fractions must be one table share in (0, 1) or {k} positive numbers summing to 1, got {fractions!r}"
        )
    return f / f.sum()


# --- per-sample results ----------------------------------------------------------


def firefly_index(contributions, axis=None) -> np.ndarray:
    """Largest sample contribution divided by the mean contribution (``axis=None``: over all samples).

    A diagnostic (common practice): large values mean rare, very bright samples.
    Returns 0 where the mean is 0.
    """
    c = np.asarray(contributions, dtype=np.float64)
    mx = np.max(c, axis=axis)
    mean = np.mean(c, axis=axis)
    return np.divide(mx, mean, out=np.zeros_like(np.asarray(mean, dtype=np.float64)), where=np.asarray(mean) > 0)


@dataclass
class EstimatorSamples:
    """Per-sample contributions of an estimate, for variance and firefly diagnostics.

    ``contributions`` (N, spp) float64 are luminances (same primaries as the table)
    of the per-sample terms f w / p, scaled so their mean over axis 1 is the
    luminance of the estimate: in multi-sample MIS a sample of strategy i carries
    (spp / n_i) w_i f / p_i.  ``strategy`` (N, spp) int8 names the strategy each
    sample came from (index into ``strategies``).
    """

    estimator: str
    kind: str
    strategies: tuple[str, ...]
    contributions: np.ndarray
    strategy: np.ndarray
    counts: tuple[int, ...] | None = None
    fractions: tuple[float, ...] | None = None
    seed: object = None
    heuristic: str | None = None
    params: dict = field(default_factory=dict)

    @property
    def spp(self) -> int:
        return self.contributions.shape[1]

    def variance(self) -> np.ndarray:
        """Estimated variance (N,) of each normal's luminance estimate.

        Single-strategy and one-sample MIS: samples are i.i.d., so s^2 / spp.
        Multi-sample MIS: the strata add, sum_i n_i s_i^2 / spp^2 (the multi-sample
        estimator is a sum of independent per-strategy means).  If some n_i < 2, the pooled s^2 / spp is used,
        which never underestimates the stratified variance in expectation.
        """
        c = self.contributions
        spp = c.shape[1]
        if spp < 2:
            return np.full(c.shape[0], np.nan)
        if self.kind == "multi" and self.counts and min(self.counts) >= 2:
            total = np.zeros(c.shape[0])
            start = 0
            for n in self.counts:
                total += n * np.var(c[:, start:start + n], axis=1, ddof=1)
                start += n
            return total / spp**2
        return np.var(c, axis=1, ddof=1) / spp

    def standard_error(self) -> np.ndarray:
        """sqrt(variance()), (N,)."""
        return np.sqrt(self.variance())

    def firefly_index(self, axis=None):
        """:func:`firefly_index` of the contributions (pooled over all normals by default)."""
        return firefly_index(self.contributions, axis=axis)


# --- the estimator engine --------------------------------------------------------


def _check_spp(spp) -> int:
    if isinstance(spp, bool) or int(spp) != spp or spp < 1:
        raise ValueError(f"spp must be a positive integer, got {spp!r}")
    return int(spp)


def _check_table(table) -> None:
    for attr in ("sample", "pdf", "eval"):
        if not callable(getattr(table, attr, None)):
            raise ValueError(f"table has no {attr}() method; pass an EnvTable from envsample.build_table or load_table")


def _safe_ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    # A sample drawn with zero density (measure-zero edges) contributes nothing.
    return np.divide(num, den, out=np.zeros_like(num), where=den > 0.0)


@dataclass(frozen=True)
class Combination:
    """How an estimator draws and weights its samples.

    ``strategies`` the strategy objects; ``kind`` "single", "multi" (multi-sample MIS
    with ``counts`` samples of each strategy per normal) or "one-sample" (strategy
    ``i`` chosen with probability ``fractions[i]``); ``heuristic`` and ``params`` the
    MIS weighting (:mod:`envsample.estimation.heuristics`).
    """

    strategies: tuple
    kind: str
    fractions: np.ndarray
    counts: tuple[int, ...] | None
    heuristic: str
    params: dict

    @classmethod
    def make(cls, strategies, *, kind: str, spp: int, fractions=None, heuristic: str = "balance",
             params: dict | None = None) -> Combination:
        """Check the combination and derive its per-strategy sample counts (multi-sample MIS)."""
        strategies = tuple(strategies)
        if kind not in ("single", "multi", "one-sample"):
            raise ValueError(f"unknown estimator kind {kind!r}; valid names: single, multi, one-sample")
        if kind == "single" and len(strategies) != 1:
            raise ValueError(f"a single-strategy estimator takes exactly one strategy, got {len(strategies)}")
        if not strategies:
            raise ValueError("no strategies given; pass at least one")
        if all(getattr(s, "compensated", False) for s in strategies):
            raise ValueError(
                "a compensated table is valid only inside MIS: combine it with a strategy that covers the whole "
                "integrand (e.g. estimator 'mis-balance') or build the table with compensate=False"
            )
        heuristic = heuristic_name(heuristic)
        params = dict(params or {})
        k = len(strategies)
        frac = _fractions(fractions, k) if kind != "single" else np.ones(1)
        if kind != "single":
            mis_weights(np.ones((k, 1)), frac, method=heuristic, **params)  # validates params up front
        counts = sample_counts(spp, frac) if kind == "multi" else None
        return cls(strategies, kind, frac, counts, heuristic, params)

    @property
    def dims(self) -> int:
        """Uniform numbers per sample: two for the direction, one more to choose the strategy (one-sample MIS)."""
        return 3 if self.kind == "one-sample" else 2

    def weight_and_radiance(self, i: int, d, p_own, frame, f: Integrand, shares):
        """MIS weight of strategy ``i`` for its samples ``d``, and the scene's radiance there.

        The table's pdf and the map radiance share one direction-to-(u, v) conversion
        (:meth:`EnvTable.lookup`) when the table is one of the other strategies.
        """
        table = f.table
        rad = None
        pdfs = []
        for k, other in enumerate(self.strategies):
            if k == i:
                pdfs.append(p_own)
            elif rad is None and isinstance(other, TableStrategy) and other.table is table and hasattr(table, "lookup"):
                p, rad = table.lookup(d)
                pdfs.append(np.asarray(p, dtype=np.float64))
            else:
                pdfs.append(other.pdf(d, frame))
        w = mis_weights(np.stack(pdfs), shares, method=self.heuristic, **self.params)[i]
        return w, f.radiance(d, rad)


@dataclass(frozen=True)
class Integrand:
    """``L(w) factor(w)`` at a shading frame: the scene's radiance times a non-negative factor.

    The radiance is the map (``table.eval``) plus each of ``lights`` (objects with
    ``eval(directions) -> (M, 3)``, e.g. a :class:`SunLight`).  ``factor(directions, frame)
    -> (M,)`` is ``max(0, n.w)`` for irradiance, ``f max(0, n.w)`` for a BSDF; ``primaries``
    name the luminance of the per-sample contributions.
    """

    table: object
    factor: object
    primaries: str
    lights: tuple = ()

    def radiance(self, d, map_radiance=None) -> np.ndarray:
        """RGB radiance (M, 3) float64 in directions ``d``; ``map_radiance`` is the map's if already looked up."""
        rad = np.array(self.table.eval(d) if map_radiance is None else map_radiance, dtype=np.float64)
        for light in self.lights:
            rad += light.eval(d)
        return rad


@dataclass
class _Tally:
    """Where a chunk writes its per-sample luminance contributions and strategy indices (or nothing)."""

    contributions: np.ndarray | None = None
    strategy: np.ndarray | None = None

    def record(self, shape, scale, rad, primaries, sel=None) -> None:
        if self.contributions is not None:
            self.contributions[:] = (scale * luminance(rad, primaries)).reshape(shape)
            if sel is not None:
                self.strategy[:] = sel.reshape(shape)


def _multi_chunk(combo: Combination, f: Integrand, frame, u, tally: _Tally):
    m, spp = u.shape[0], u.shape[1]
    est = np.zeros((m, 3))
    start = 0
    for i, (s, n) in enumerate(zip(combo.strategies, combo.counts)):
        fr = frame.repeat(n)
        d, p_own = s.sample(u[:, start:start + n, :2].reshape(-1, 2), fr)
        w, rad = combo.weight_and_radiance(i, d, p_own, fr, f, combo.counts)
        scale = _safe_ratio(w * f.factor(d, fr), p_own) * (spp / n)
        est += (scale[:, None] * rad).reshape(m, n, 3).sum(axis=1)
        if tally.contributions is not None:
            tally.contributions[:, start:start + n] = (scale * luminance(rad, f.primaries)).reshape(m, n)
        start += n
    return est / spp


def _one_sample_chunk(combo: Combination, f: Integrand, frame, u, tally: _Tally):
    m, spp = u.shape[0], u.shape[1]
    flat_u = u.reshape(-1, 3)
    sel = np.searchsorted(np.cumsum(combo.fractions)[:-1], flat_u[:, 2], side="right")
    fr_all = frame.repeat(spp)
    scale = np.zeros(m * spp)
    rad = np.zeros((m * spp, 3))
    for i, s in enumerate(combo.strategies):
        idx = np.nonzero(sel == i)[0]
        if idx.size == 0:
            continue
        fr = fr_all.take(idx)
        d, p_own = s.sample(flat_u[idx, :2], fr)
        w, rad[idx] = combo.weight_and_radiance(i, d, p_own, fr, f, combo.fractions)
        scale[idx] = _safe_ratio(w * f.factor(d, fr), combo.fractions[i] * p_own)
    tally.record((m, spp), scale, rad, f.primaries, sel)
    return (scale[:, None] * rad).reshape(m, spp, 3).mean(axis=1)


def _single_chunk(combo: Combination, f: Integrand, frame, u, tally: _Tally):
    m, spp = u.shape[0], u.shape[1]
    fr = frame.repeat(spp)
    d, p = combo.strategies[0].sample(u.reshape(-1, 2), fr)
    scale = _safe_ratio(f.factor(d, fr), p)
    rad = f.radiance(d)
    tally.record((m, spp), scale, rad, f.primaries)
    return (scale[:, None] * rad).reshape(m, spp, 3).mean(axis=1)


_CHUNKS = {"single": _single_chunk, "multi": _multi_chunk, "one-sample": _one_sample_chunk}


def estimate(table, frame: Frame, factor, strategies, *, kind: str = "single", fractions=None, spp: int,
             seed=None, heuristic: str = "balance", params: dict | None = None, name: str = "custom",
             return_samples: bool = False, max_chunk_samples: int = DEFAULT_CHUNK_SAMPLES, lights=()):
    """Generic Monte Carlo estimate of ``integral of L(w) factor(w) dw`` at every frame.

    ``factor(directions, frame) -> (M,)`` is the non-negative part of the integrand
    besides the radiance (``max(0, n.w)`` for irradiance); the radiance is ``table.eval``
    plus each of ``lights`` (``eval(directions) -> (M, 3)``).  ``strategies`` is a
    sequence of strategy objects; ``kind`` "single" (exactly one strategy), "multi"
    (multi-sample MIS with ``sample_counts(spp, fractions)`` samples each) or
    "one-sample" (selection probabilities ``fractions``); see :class:`Combination`.
    Returns (N, 3) float64 and, with ``return_samples``, an :class:`EstimatorSamples`.

    A compensated table strategy cannot be the only strategy (nor can all strategies
    be compensated): it is zero where the map is dimmer than its mean, so alone it is
    biased.  ValueError "valid only inside MIS".
    """
    spp = _check_spp(spp)
    n = len(frame)
    # A chunk holds at least one normal's spp samples; kept samples hold all of them.
    check_memory(max(int(max_chunk_samples), spp) * _BYTES_PER_SAMPLE + (n * spp * 9 if return_samples else 0),
                 what=f"estimating with spp={spp} for {n} normals", remedy="use fewer samples per normal (spp)")
    combo = Combination.make(strategies, kind=kind, spp=spp, fractions=fractions, heuristic=heuristic, params=params)
    f = Integrand(table, factor, getattr(table, "primaries", "bt709"), tuple(lights))
    rng = np.random.default_rng(seed)
    out = np.zeros((n, 3))
    tally = _Tally()
    if return_samples:
        tally = _Tally(np.zeros((n, spp)), np.zeros((n, spp), dtype=np.int8))
        if kind == "multi":
            tally.strategy[:] = np.repeat(np.arange(len(combo.strategies), dtype=np.int8), combo.counts)[None, :]
    chunk = _CHUNKS[kind]
    step = max(1, int(max_chunk_samples) // spp)
    for lo in range(0, n, step):
        hi = min(n, lo + step)
        # Drawn normal-major in one fixed order: the stream does not depend on ``step``.
        u = rng.random((hi - lo, spp, combo.dims))
        part = _Tally() if not return_samples else _Tally(tally.contributions[lo:hi], tally.strategy[lo:hi])
        out[lo:hi] = chunk(combo, f, frame.take(slice(lo, hi)), u, part)
    if not return_samples:
        return out
    samples = EstimatorSamples(
        estimator=name,
        kind=kind,
        strategies=tuple(getattr(s, "name", type(s).__name__) for s in combo.strategies),
        contributions=tally.contributions,
        strategy=tally.strategy,
        counts=combo.counts,
        fractions=None if kind == "single" else tuple(float(x) for x in combo.fractions),
        seed=seed,
        heuristic=None if kind == "single" else combo.heuristic,
        params=combo.params,
    )
    return out, samples


def _cosine_factor(d, frame: Frame) -> np.ndarray:
    return np.maximum(np.sum(d * frame.normals, axis=1), 0.0)


_GGX = GGXReflection()


def _glossy_factor(d, frame: Frame) -> np.ndarray:
    return _GGX.eval(d, frame) * _cosine_factor(d, frame)


def _heuristic_params(spec: _Spec, beta: float, cutoff: float) -> dict:
    if spec.heuristic == "power":
        return {"beta": beta}
    if spec.heuristic == "cutoff":
        return {"cutoff": cutoff}
    return {}


def _check_sun(sun, spec: _Spec, estimator: str):
    if sun is None:
        if "sun" in spec.roles:
            raise ValueError(f"estimator {estimator!r} samples the sun: pass sun=<SunLight> (e.g. from split_sun)")
        return ()
    if not (callable(getattr(sun, "eval", None)) and callable(getattr(sun, "sample", None))
            and callable(getattr(sun, "pdf", None))):
        raise ValueError("sun must be a SunLight (eval, sample and pdf methods); build one with SunLight.from_angles")
    return (sun,)


def _run(kind, table, frame, factor, estimator, spp, seed, fractions, table_method, beta, cutoff,
         return_samples, max_chunk_samples, sun=None):
    _check_table(table)
    estimator = estimator_name(estimator)
    spec = _spec(estimator, kind)
    lights = _check_sun(sun, spec, estimator)
    strategies = [_strategy_for(r, kind, table, table_method, sun) for r in spec.roles]
    return estimate(table, frame, factor, strategies, kind=spec.kind, fractions=fractions, spp=spp, seed=seed,
                    heuristic=spec.heuristic or "balance", params=_heuristic_params(spec, beta, cutoff),
                    name=estimator, return_samples=return_samples, max_chunk_samples=max_chunk_samples,
                    lights=lights)


@renamed_keywords(alpha="cutoff")
def estimate_irradiance(table, normals, *, estimator: str = "mis-balance", spp: int = 64, seed=0,
                        fractions=None, table_method: str = "alias", beta: float = 2.0, cutoff: float = 0.1,
                        return_samples: bool = False, max_chunk_samples: int = DEFAULT_CHUNK_SAMPLES,
                        sun: SunLight | None = None):
    """Monte Carlo irradiance E(n) = integral of L(w) max(0, n.w) dw for each unit normal.

    Parameters
    ----------
    table : EnvTable
        Supplies the radiance (``eval``) and the table strategy (``sample``/``pdf``).
    normals : array_like (N, 3) or (3,)
        World-space normals in the table's convention (normalised here).
    estimator : str
        One of :func:`estimators` ("irradiance"); default "mis-balance".
    spp : int
        Samples per normal.
    seed : int, SeedSequence or None
        Seed of ``numpy.random.default_rng``; the same seed gives the same result bit for bit.
    fractions : float or sequence, optional
        MIS estimators only: share of table samples (multi-sample) or the table's
        selection probability (one-sample); default 0.5.  A sequence gives
        (table, bsdf) shares summing to 1.
    table_method : {"alias", "inverse"}
        How the table picks cells.
    beta, cutoff : float
        Power-heuristic exponent (default 2) and the cutoff heuristic's threshold, a fraction
        of the largest weighted density (default 0.1; formerly ``alpha``).
    return_samples : bool
        Also return :class:`EstimatorSamples` (per-sample luminance contributions).
    sun : SunLight, optional
        An analytic sun lighting the scene beside the table's map (the radiance is
        ``table.eval + sun.eval``); the ``sun-*`` estimators also sample it.  Their
        ``fractions`` are (sun, table, bsdf) shares, default a third each.

    Returns
    -------
    float64 (N, 3): irradiance per normal, in map units x sr (an estimate, not a
    certified lighting calculation); plus the samples if requested.
    """
    frame = make_frame(normals)
    return _run("irradiance", table, frame, _cosine_factor, estimator, spp, seed, fractions, table_method,
                beta, cutoff, return_samples, max_chunk_samples, sun)


@renamed_keywords(alpha="cutoff")
def estimate_glossy(table, normals, wo, roughness, *, estimator: str = "mis-balance", spp: int = 64, seed=0,
                    fractions=None, table_method: str = "alias", beta: float = 2.0, cutoff: float = 0.1,
                    return_samples: bool = False, max_chunk_samples: int = DEFAULT_CHUNK_SAMPLES,
                    sun: SunLight | None = None):
    """Monte Carlo outgoing radiance of a GGX reflector lit by the map (and ``sun``), per shading point.

    ``L_o = integral of L(wi) f(wi, wo) max(0, n.wi) dwi`` with the GGX BSDF of
    :class:`envsample.strategies.GGXReflection` (F = 1, height-correlated G2).
    ``wo`` (N, 3) or (3,) are unit view directions pointing away from the surface;
    ``roughness`` is GGX alpha, scalar or (N,).  Other parameters as
    :func:`estimate_irradiance` (``sun=`` included); the "bsdf" strategy is GGX visible-normal sampling.
    Returns float64 (N, 3) in map units (radiance).
    """
    frame = make_frame(normals, wo, roughness)
    return _run("glossy", table, frame, _glossy_factor, estimator, spp, seed, fractions, table_method,
                beta, cutoff, return_samples, max_chunk_samples, sun)
