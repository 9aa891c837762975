"""Piecewise-constant 1D and 2D distributions: CDF inversion and alias tables.

Two ways to draw a cell from a discrete distribution:

* **CDF inversion** (marginal over rows, then the row's conditional CDF).  It is a
  monotone map of the uniform input, so stratified or low-discrepancy inputs keep
  their stratification (Pharr, Jakob & Humphreys, *Physically Based Rendering*,
  3rd ed., 2016, sec. 13.6.7 "Piecewise-constant 2D distributions").
* **Alias table** (Walker 1977; Vose 1991): O(1) per draw, not monotone.

Vose's construction is a sequential two-stack loop.  We build the same kind of
table with the *sweeping* construction of Hübschle-Schneider & Sanders (2022),
whose sequential sweep over "light" and "heavy" items is expressed here with
prefix sums and merges (``numpy.searchsorted`` on sorted keys), so it is fully
vectorised: the current heavy item when light item *i* is processed is the first
heavy *j* whose cumulative excess ``E_j`` reaches the cumulative deficit ``D_{i-1}``
of the lights before it, and heavy *j* becomes a bucket of its own, aliased to
heavy *j+1*, at the first light whose cumulative deficit passes ``E_j``.  The optional
compiled kernel (:mod:`envsample._accel`) runs the same sweep sequentially.

Dtype rule: weights may be float32; prefix sums are accumulated in float64; the
stored CDFs are float32, non-decreasing, with exact 0 and 1 at their ends.

References
----------
- Walker, A. J. (1977). An efficient method for generating discrete random
  variables with general distributions. ACM TOMS 3(3), 253-256.
- Vose, M. D. (1991). A linear algorithm for generating random numbers with a
  given distribution. IEEE Trans. Software Eng. 17(9), 972-975.
- Hübschle-Schneider, L. and Sanders, P. (2022). Parallel weighted random
  sampling. ACM TOMS 48(3), article 29.
- Pharr, M., Jakob, W. and Humphreys, G. (2016). Physically Based Rendering,
  3rd ed., sec. 13.6.7.
"""

from __future__ import annotations

import numpy as np

from envsample.sampling.kernels import kernels, threads

__all__ = [
    "build_cdf",
    "build_row_cdfs",
    "sample_cdf",
    "sample_row_cdfs",
    "build_alias",
    "sample_alias",
    "build_rows",
    "sample_row_alias",
    "alias_cell_probabilities",
    "check_cdf",
]

#: Rows of a 2D table processed at once: small enough to stay in cache, large enough to amortise numpy calls.
_CHUNK_CELLS = 1 << 18


def build_cdf(weights) -> tuple[np.ndarray, float]:
    """CDF of a 1D piecewise-constant distribution.

    Parameters
    ----------
    weights : array_like, shape (n,)
        Non-negative, finite weights.

    Returns
    -------
    cdf : float32 (n + 1,)
        ``cdf[0] == 0``, ``cdf[-1] == 1``, non-decreasing.  An all-zero input gives
        the uniform CDF.
    total : float
        Sum of the weights (float64 accumulation).
    """
    w = np.asarray(weights)
    if w.ndim != 1 or w.size == 0:
        raise ValueError(f"weights must be a non-empty 1D array, got shape {w.shape}")
    c = np.cumsum(w, dtype=np.float64)
    total = float(c[-1])
    out = np.empty(w.size + 1, dtype=np.float32)
    out[0] = 0.0
    if total > 0.0 and np.isfinite(total):
        out[1:] = c / total
    else:
        out[1:] = np.arange(1, w.size + 1) / w.size
    out[-1] = 1.0
    return out, total


def build_row_cdfs(weights, *, row_scale=None, out=None, backend: str = "auto") -> tuple[np.ndarray, np.ndarray]:
    """Conditional CDFs of every row of a 2D table, and the row totals.

    ``weights`` (h, w) may be float32; each row's running sum is accumulated in
    float64 in cache-sized chunks.  ``row_scale`` (h,) multiplies each row (e.g. the
    row's pixel solid angle) before summing.  Rows whose total is zero get the uniform
    CDF (they are never chosen by the marginal).

    Returns ``(cdf float32 (h, w + 1), totals float64 (h,))``.
    """
    w = np.asarray(weights)
    if w.ndim != 2 or w.size == 0:
        raise ValueError(f"weights must be a non-empty 2D array, got shape {w.shape}")
    h, n = w.shape
    if out is None:
        out = np.empty((h, n + 1), dtype=np.float32)
    totals = np.empty(h, dtype=np.float64)
    scale = None if row_scale is None else np.asarray(row_scale, dtype=np.float64)
    k_mod = kernels(backend)
    if k_mod is not None and w.dtype == np.float32 and w.flags.c_contiguous and out.flags.c_contiguous:
        s = np.ones(h) if scale is None else np.ascontiguousarray(scale, dtype=np.float64)
        k_mod.row_cdfs(w, s, out, totals, h, n)
        return out, totals
    step = max(1, min(h, _CHUNK_CELLS // n))
    buf = np.empty((step, n), dtype=np.float64)
    uniform = (np.arange(n + 1) / n).astype(np.float32)
    for r0 in range(0, h, step):
        r1 = min(h, r0 + step)
        c = buf[: r1 - r0]
        np.cumsum(w[r0:r1], axis=1, dtype=np.float64, out=c)
        last = c[:, -1].copy()
        totals[r0:r1] = last if scale is None else last * scale[r0:r1]
        bad = ~(last > 0.0)
        if bad.any():
            last[bad] = 1.0
        c *= (1.0 / last)[:, None]
        dst = out[r0:r1]
        dst[:, 0] = 0.0
        dst[:, 1:] = c
        if bad.any():
            dst[bad] = uniform
        dst[:, -1] = 1.0
    return out, totals


def check_cdf(cdf, *, axis=-1) -> str | None:
    """Return a description of what is wrong with a stored CDF, or None if it is valid."""
    c = np.asarray(cdf)
    first = np.take(c, 0, axis=axis)
    last = np.take(c, -1, axis=axis)
    if not np.all(np.isfinite(c)):
        return "contains non-finite values"
    if np.any(first != 0.0):
        return "does not start at exactly 0"
    if np.any(last != 1.0):
        return "does not end at exactly 1"
    if np.any(np.diff(c, axis=axis) < 0.0):
        return "is not non-decreasing"
    return None


def _clip_unit(u) -> np.ndarray:
    u = np.asarray(u, dtype=np.float64)
    # u == 1 would select past the last cell; the largest double below 1 keeps the warp monotone.
    return np.clip(u, 0.0, np.nextafter(1.0, 0.0))


def sample_cdf(cdf, u) -> tuple[np.ndarray, np.ndarray]:
    """Invert a 1D CDF: the cell index (int64) and the position within the cell in [0, 1) (float64).

    Monotone in ``u``.  Cells of zero width are never returned.
    """
    cdf = np.asarray(cdf)
    u = _clip_unit(u)
    n = cdf.size - 1
    idx = np.searchsorted(cdf, u, side="right") - 1
    np.clip(idx, 0, n - 1, out=idx)
    lo = cdf[idx].astype(np.float64)
    hi = cdf[idx + 1].astype(np.float64)
    width = hi - lo
    frac = np.divide(u - lo, width, out=np.zeros_like(u), where=width > 0)
    return idx.astype(np.int64, copy=False), np.clip(frac, 0.0, 1.0)


def sample_row_cdfs(cdf2d, rows, u) -> tuple[np.ndarray, np.ndarray]:
    """Invert each sample's own row CDF; vectorised bisection (no Python loop over samples).

    ``cdf2d`` (h, w + 1) float32, ``rows`` (N,) int, ``u`` (N,).  Returns the column
    (int64) and the position within the cell in [0, 1) (float64).  Monotone in ``u``
    within a row.
    """
    cdf2d = np.asarray(cdf2d)
    rows = np.asarray(rows, dtype=np.int64)
    u = _clip_unit(u)
    stride = cdf2d.shape[1]
    n = stride - 1
    flat = cdf2d.reshape(-1)
    base = rows * stride
    # Invariant: cdf[lo] <= u < cdf[hi]; cdf[0] = 0 <= u < 1 = cdf[n].
    lo = np.zeros(u.shape, dtype=np.int64)
    hi = np.full(u.shape, n, dtype=np.int64)
    uf = u
    # Lanes with hi - lo == 1 are fixed points (mid == lo and cdf[lo] <= u), so
    # ceil(log2(n)) rounds converge every lane without masking.
    for _ in range(max(1, int(n - 1).bit_length())):
        mid = (lo + hi) >> 1
        go_right = flat[base + mid] <= uf
        lo = np.where(go_right, mid, lo)
        hi = np.where(go_right, hi, mid)
    a = flat[base + lo].astype(np.float64)
    b = flat[base + lo + 1].astype(np.float64)
    width = b - a
    frac = np.divide(uf - a, width, out=np.zeros_like(uf), where=width > 0)
    return lo, np.clip(frac, 0.0, 1.0)


def build_alias(weights, *, row_scale=None, backend: str = "auto") -> tuple[np.ndarray, np.ndarray]:
    """Alias table over the flattened cells of ``weights`` (vectorised sweeping construction).

    Parameters
    ----------
    weights : array_like, (n,) or (h, w)
        Non-negative finite weights, any float dtype.
    row_scale : array_like (h,), optional
        Per-row factor for 2D weights (e.g. pixel solid angle); cell weight is
        ``weights[i, j] * row_scale[i]``.

    Returns
    -------
    prob : float32 (n,)
        Probability of keeping bucket ``k`` itself when it is chosen.
    alias : int32 (n,)
        The other cell of bucket ``k``.

    A draw picks bucket ``k = floor(u * n)`` uniformly and keeps ``k`` with
    probability ``prob[k]``, else returns ``alias[k]``.  An all-zero input gives the
    uniform table; a cell of zero weight is never kept (``prob`` exactly 0).  See the
    module docstring for the construction (Vose 1991; Hübschle-Schneider & Sanders
    2022).  ``backend`` chooses the compiled sweep (O(n), over lists of light and heavy
    cells, 4 bytes of scratch per cell) or the vectorised numpy version (see
    :mod:`envsample.sampling.kernels`); both encode the same probabilities to float32 rounding.
    """
    w = np.asarray(weights)
    if w.ndim not in (1, 2) or w.size == 0:
        raise ValueError(f"weights must be a non-empty 1D or 2D array, got shape {w.shape}")
    if w.size >= 2**31:
        raise ValueError(f"alias tables hold at most 2**31 - 1 cells, got {w.size}")
    w2 = w.reshape(1, -1) if w.ndim == 1 else w
    scale = np.ones(w2.shape[0]) if row_scale is None else np.asarray(row_scale, dtype=np.float64)
    # numpy's pairwise sums keep the total exact to ~1e-16 relative; a naive running
    # sum over 33 M cells would drift by ~1e-12, which the sweep hands (times n) to
    # the last heavy cell.
    total = float(np.dot(w2.sum(axis=1, dtype=np.float64), scale))
    k_mod = kernels(backend)
    if k_mod is not None:
        return _alias_compiled(k_mod, w2, scale, total)
    return _alias_numpy(w2, scale, total)


def _alias_compiled(k_mod, w2: np.ndarray, scale: np.ndarray, total: float) -> tuple[np.ndarray, np.ndarray]:
    wc = w2 if w2.dtype in (np.float32, np.float64) else w2.astype(np.float64)
    wc = np.ascontiguousarray(wc)
    prob = np.empty(wc.size, dtype=np.float32)
    alias = np.empty(wc.size, dtype=np.int32)
    k_mod.alias_sweep(wc, int(wc.dtype == np.float64), np.ascontiguousarray(scale), wc.shape[1], total, prob, alias)
    return prob, alias


def _alias_numpy(w2: np.ndarray, scale: np.ndarray, total: float) -> tuple[np.ndarray, np.ndarray]:
    """The vectorised sweep: heavies and their cumulative excess, then the lights chunk by chunk."""
    h, ncol = w2.shape
    n = w2.size
    prob = np.ones(n, dtype=np.float32)
    alias = np.arange(n, dtype=np.int32)
    if not (total > 0.0 and np.isfinite(total)):
        return prob, alias
    step = max(1, _CHUNK_CELLS // ncol)
    chunks = [(r0, min(h, r0 + step)) for r0 in range(0, h, step)]

    def scaled(r0, r1):
        # p = n * weight / total (mean 1), in float64: float32 rounding of p would
        # pile up on the last cells of the sweep.
        return (w2[r0:r1] * (scale[r0:r1, None] * (n / total))).reshape(-1)

    heavy, excess, c = _heavies(chunks, scaled, ncol, n)
    if heavy.size == 0:  # cannot happen for a finite positive total, but keep the table valid
        return prob, alias
    # Heavies start as buckets of their own (prob 1, alias self), which is also the
    # right ending for any last heavy that rounding leaves unresolved.
    d_before = 0.0
    drift = [0.0]
    for r0, r1 in chunks:
        d_before = _serve_lights(scaled(r0, r1), r0 * ncol, c, heavy, excess, d_before, drift, prob, alias)
    return prob, alias


def _heavies(chunks, scaled, ncol: int, n: int) -> tuple[np.ndarray, np.ndarray, float]:
    """Pass 1: heavy cells (p >= 1) in index order, their cumulative excess E_j, and the normaliser c."""
    heavy_idx, heavy_p = [], []
    psum = 0.0
    for r0, r1 in chunks:
        p = scaled(r0, r1)
        psum += float(p.sum(dtype=np.float64))
        k = np.flatnonzero(p >= 1.0)
        heavy_idx.append((k + r0 * ncol).astype(np.int32))
        heavy_p.append(p[k])
    c = n / psum
    heavy = np.concatenate(heavy_idx)
    excess = np.concatenate(heavy_p)
    excess *= c
    excess -= 1.0
    np.maximum(excess, 0.0, out=excess)
    np.cumsum(excess, out=excess)
    return heavy, excess, c


def _serve_lights(p, offset, c, heavy, excess, d_before, drift, prob, alias) -> float:
    """Pass 2 on one chunk: its lights (p < 1) in index order with their cumulative deficit D_i.

    Writes the lights' and the finished heavies' entries; returns the deficit after the chunk.
    """
    nh = heavy.size
    k = np.flatnonzero(p < 1.0)
    if k.size == 0:
        return d_before
    # Book the deficit of the float32 probability actually stored, so a heavy that
    # serves many lights does not gather their rounding errors; the stored values
    # are rounded so that the global drift the last heavy absorbs stays within
    # about one float32 ulp.
    pl = _stored_float32(p[k] * c, drift)
    d_end = np.cumsum(np.maximum(1.0 - pl, 0.0))
    d_end += d_before
    # Heavies j < jlo have E_j < D before this chunk; j >= jhi are not reached in it.
    jlo = int(np.searchsorted(excess, d_before, side="left"))
    jhi = int(np.searchsorted(excess, d_end[-1], side="left"))
    # pos_j: the first light of the chunk whose cumulative deficit passes E_j.  Heavy j
    # becomes a bucket there, and every later light is served by a later heavy.
    e = excess[jlo:jhi]
    pos = np.searchsorted(d_end, e, side="right")
    # Light i is served by the first heavy whose E_j reaches D_{i-1}:
    # j(i) = jlo + #{window heavies with pos_j <= i - 1}.
    served = np.empty(k.size, dtype=np.int64)
    served[0] = jlo
    if k.size > 1:
        np.cumsum(np.bincount(pos, minlength=k.size)[: k.size - 1], out=served[1:])
        served[1:] += jlo
    np.minimum(served, nh - 1, out=served)
    cells = k + offset
    prob[cells] = pl
    alias[cells] = heavy[served]
    if jhi > jlo:
        # Heavy j keeps what is left of it and is aliased to the next heavy.
        hj = heavy[jlo:jhi]
        prob[hj] = np.clip(e - d_end[pos] + 1.0, 0.0, 1.0)
        alias[hj] = heavy[jlo + 1 : min(nh, jhi + 1)] if jhi < nh else np.append(heavy[jlo + 1 : nh], heavy[nh - 1])
    return float(d_end[-1])


def build_rows(weights, *, row_scale=None, cdf: bool = True, alias: bool = True, backend: str = "auto"):
    """The per-row parts of a 2D table in one pass: conditional CDFs and per-row alias tables.

    ``weights`` (h, w), ``w <= 65536``, non-negative and finite.  Each row gets its
    conditional CDF (``cdf``; as :func:`build_row_cdfs`) and its own alias table over
    its columns (``alias``; as :func:`build_alias` on the row alone, column indices as
    uint16): the second level of a two-level alias table whose first level is
    :func:`build_alias` over the row totals (Walker 1977; Vose 1991).  Each row's
    sweep stays in cache, and the compiled kernel splits the rows across
    :func:`envsample.sampling.kernels.threads` threads (any count gives the same bits).

    Returns ``(cdf float32 (h, w + 1) or None, prob float32 (h, w) or None,
    alias uint16 (h, w) or None, totals float64 (h,))`` where ``totals`` are the row
    sums times ``row_scale``.  Zero-weight cells have ``prob`` exactly 0; a row of zero
    total gets the uniform CDF and the identity alias table (the first level never
    chooses it).
    """
    w = np.asarray(weights)
    if w.ndim != 2 or w.size == 0:
        raise ValueError(f"weights must be a non-empty 2D array, got shape {w.shape}")
    h, n = w.shape
    if n > 65536:
        raise ValueError(f"rows hold at most 65536 cells (uint16 column indices), got {n}")
    scale = np.ones(h) if row_scale is None else np.ascontiguousarray(row_scale, dtype=np.float64)
    out_cdf = np.empty((h, n + 1), dtype=np.float32) if cdf else None
    prob = np.empty((h, n), dtype=np.float32) if alias else None
    idx = np.empty((h, n), dtype=np.uint16) if alias else None
    k_mod = kernels(backend)
    if k_mod is not None and w.dtype == np.float32 and w.flags.c_contiguous:

        totals = np.empty(h, dtype=np.float64)
        empty = np.empty(0, dtype=np.uint8)
        k_mod.build_rows(w, scale, h, n, empty if out_cdf is None else out_cdf, empty if prob is None else prob,
                         empty if idx is None else idx, totals, threads())
        return out_cdf, prob, idx, totals
    if cdf:
        out_cdf, totals = build_row_cdfs(w, row_scale=scale, out=out_cdf, backend="numpy")
    else:
        totals = w.sum(axis=1, dtype=np.float64) * scale
    if alias:
        for r in range(h):
            row = w[r]
            p, a = _alias_numpy(row.reshape(1, -1), np.ones(1), float(row.sum(dtype=np.float64)))
            prob[r] = p
            idx[r] = a
    return out_cdf, prob, idx, totals


def _stored_float32(p: np.ndarray, drift: list) -> np.ndarray:
    """float32-representable values (as float64) for light probabilities ``p`` in [0, 1), drift-limited.

    Each value is rounded to float32; the running sum of the rounding errors
    (``drift[0]``, carried across chunks) is then worked off in steps of one ulp of
    [0.5, 1) (2**-24) on values in that range whose own rounding went the same way, so
    every value stays within about one ulp of ``p`` and the total drift, which the sweep
    would hand to its last heavy cell, stays below half an ulp.
    """
    s = p.astype(np.float32).astype(np.float64)
    err = s - p
    d = drift[0] + float(err.sum())
    q = 2.0**-24
    m = int(round(d / q))
    if m:
        sign = 1.0 if m > 0 else -1.0
        movable = (s >= 0.5) & (s < 1.0 - q)
        first = np.flatnonzero(movable & (err * sign > 0))
        pick = first[: abs(m)]
        if pick.size < abs(m):
            rest = np.flatnonzero(movable & ~(err * sign > 0))
            pick = np.concatenate([pick, rest[: abs(m) - pick.size]])
        s[pick] -= sign * q
        d -= sign * q * pick.size
    drift[0] = d
    return s


def sample_alias(prob, alias, u) -> tuple[np.ndarray, np.ndarray]:
    """Draw cells from an alias table: the cell (int64) and a fresh uniform in [0, 1) (float64).

    ``u`` in [0, 1) selects the bucket with its integer part after scaling by n; the
    fraction decides between the bucket and its alias and is then rescaled to a new
    uniform number for use within the cell (one uniform buys both decisions).
    """
    prob = np.asarray(prob)
    alias = np.asarray(alias)
    n = prob.size
    x = _clip_unit(u) * n
    k = x.astype(np.int64)
    np.minimum(k, n - 1, out=k)
    frac = x - k
    p = prob[k].astype(np.float64)
    keep = frac < p
    cell = np.where(keep, k, alias[k].astype(np.int64))
    q = np.where(keep, p, 1.0 - p)
    rest = np.where(keep, frac, frac - p)
    fresh = np.divide(rest, q, out=np.zeros_like(rest), where=q > 0)
    return cell, np.clip(fresh, 0.0, np.nextafter(1.0, 0.0))


def sample_row_alias(prob2d, alias2d, rows, u) -> tuple[np.ndarray, np.ndarray]:
    """The second level of a two-level alias draw: a column of each sample's own row.

    ``prob2d`` float32 (h, w) and ``alias2d`` (h, w) are the per-row tables of
    :func:`build_rows`; ``rows`` (N,) int and ``u`` (N,) in [0, 1).  The same
    arithmetic as :func:`sample_alias` within the row: returns the column (int64) and
    the leftover fraction rescaled to [0, 1) (float64).
    """
    prob2d = np.asarray(prob2d)
    rows = np.asarray(rows, dtype=np.int64)
    w = prob2d.shape[1]
    x = _clip_unit(u) * w
    k = x.astype(np.int64)
    np.minimum(k, w - 1, out=k)
    frac = x - k
    flat = rows * w + k
    p = prob2d.reshape(-1)[flat].astype(np.float64)
    keep = frac < p
    col = np.where(keep, k, np.asarray(alias2d).reshape(-1)[flat].astype(np.int64))
    q = np.where(keep, p, 1.0 - p)
    rest = np.where(keep, frac, frac - p)
    fresh = np.divide(rest, q, out=np.zeros_like(rest), where=q > 0)
    return col, np.clip(fresh, 0.0, np.nextafter(1.0, 0.0))


def alias_cell_probabilities(prob, alias) -> np.ndarray:
    """The cell probabilities an alias table encodes, float64 (n,): for tests and table checks."""
    prob = np.asarray(prob, dtype=np.float64)
    alias = np.asarray(alias)
    n = prob.size
    out = prob / n
    np.add.at(out, alias, (1.0 - prob) / n)
    return out
