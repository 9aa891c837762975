"""What a loaded table's arrays must satisfy to be one valid distribution, and the tolerances.

:func:`check_distribution` runs after the container checks of
:mod:`envsample.io.tables` (sizes, dtypes, sha256) and before a table is used or
written.  With ``n_i = sum_j cell_pdf[i, j]`` and ``m_i = n_i * dOmega_i`` (the row's
probability):

* every value is finite; ``cell_pdf >= 0``; ``sum_i m_i = 1`` within ``TOTAL_TOLERANCE``;
* inverse: both CDFs start at exactly 0, end at exactly 1 and never decrease;
  ``marginal_cdf[i+1] - marginal_cdf[i]`` equals ``m_i`` and
  ``conditional_cdf[i, j+1] - conditional_cdf[i, j]`` equals ``cell_pdf[i, j] / n_i``
  within ``ABS_TOLERANCE + REL_TOLERANCE * value``;
* alias: probabilities in [0, 1], row indices below h, column indices below w; the
  probabilities the two levels encode (``alias_cell_probabilities``) equal the same
  row and column probabilities within the same tolerance;
* a cell (or row) of zero pdf is never chosen: its CDF step and its encoded alias
  probability are exactly 0.

The tolerances allow the float32 rounding of the stored values (a CDF entry near 1
has a spacing of 2**-24) with a margin of four; anything larger means the arrays
do not describe one distribution (common practice, not a standard).
"""

from __future__ import annotations

import numpy as np

from envsample.core.sphere import row_solid_angles
from envsample.errors import TableFormatError
from envsample.sampling import distribution as dist
from envsample.sampling.kernels import kernels, threads

__all__ = ["ABS_TOLERANCE", "REL_TOLERANCE", "TOTAL_TOLERANCE", "check_distribution"]

#: Absolute tolerance of a probability: four float32 spacings at 1.
ABS_TOLERANCE = 4 * 2.0**-24
#: Relative tolerance of a probability.
REL_TOLERANCE = 1e-5
#: Tolerance of the pdf's integral over the sphere.
TOTAL_TOLERANCE = 1e-5
_BLOCK = 1 << 18


def _fail(path, problem: str):
    raise TableFormatError(f"{path}: {problem}; rebuild the table")


def _close(got: np.ndarray, want: np.ndarray) -> np.ndarray:
    """Where ``got`` differs from ``want`` by more than the tolerance, or is nonzero where ``want`` is 0."""
    bad = np.abs(got - want) > ABS_TOLERANCE + REL_TOLERANCE * np.abs(want)
    bad |= (want == 0) & (got != 0)
    return bad


def _fail_row(path, problem: int, rows: np.ndarray, r0: int = 0) -> None:
    """Fail with the text of ``problem`` and the first row (offset ``r0``) where ``rows`` is True: as the kernel does."""
    _fail(path, f"{_ROW_PROBLEMS[problem]} (row {r0 + int(np.argmax(rows))})")


_ROW_PROBLEMS = {
    1: "cell_pdf has negative or non-finite values",
    2: "conditional_cdf is not a CDF (it must start at exactly 0, end at exactly 1 and never decrease)",
    3: "conditional_cdf does not match cell_pdf (cell probabilities differ beyond the tolerance)",
    4: "alias_probability has values outside [0, 1]",
    5: "alias_index has entries outside the row",
    6: "alias tables do not match cell_pdf (cell probabilities differ beyond the tolerance)",
}


def check_distribution(arrays: dict, path, *, backend: str = "auto") -> None:
    """Raise :class:`TableFormatError` (naming ``path``) unless the arrays form one valid distribution.

    ``backend`` picks the compiled per-row checks (one pass, rows split across
    threads) or the numpy ones; both apply the same rules and tolerances.
    """
    pdf = arrays["cell_pdf"]
    h, w = pdf.shape
    k_mod = kernels(backend)
    if k_mod is not None:
        sums = _compiled_row_checks(k_mod, arrays, path)
    else:  # the same per-row rules, in the same order, with numpy
        sums = _pdf_row_sums(pdf, path)
        if "conditional_cdf" in arrays:
            _check_conditional(arrays, sums, path)
        if "alias_probability" in arrays:
            _check_column_alias(arrays, sums, path)
    row_p = sums * row_solid_angles(h, w)
    total = float(row_p.sum())
    if not abs(total - 1.0) <= TOTAL_TOLERANCE:
        _fail(path, f"cell_pdf integrates to {total:.9g} over the sphere, not 1 (tolerance {TOTAL_TOLERANCE:g})")
    if "marginal_cdf" in arrays:
        _check_marginal(arrays["marginal_cdf"], row_p, path)
    if "row_alias_probability" in arrays:
        _check_row_alias(arrays, row_p, path)
    radiance = arrays.get("radiance")
    if radiance is not None:
        step = max(1, _BLOCK // (3 * radiance.shape[1]))
        for r0 in range(0, radiance.shape[0], step):
            block = radiance[r0:r0 + step]
            if not (np.isfinite(block).all() and block.min() >= 0.0):
                _fail(path, "radiance has negative or non-finite values")


def _pdf_row_sums(pdf: np.ndarray, path) -> np.ndarray:
    h, w = pdf.shape
    sums = np.empty(h, dtype=np.float64)
    step = max(1, _BLOCK // w)
    for r0 in range(0, h, step):
        block = pdf[r0:r0 + step]
        if not np.isfinite(block).all() or block.min() < 0.0:
            with np.errstate(invalid="ignore"):
                _fail_row(path, 1, (~np.isfinite(block) | (block < 0.0)).any(axis=1), r0)
        sums[r0:r0 + step] = block.sum(axis=1, dtype=np.float64)
    return sums


def _compiled_row_checks(k_mod, arrays: dict, path) -> np.ndarray:
    """The per-row checks in the compiled kernel; returns the row sums of cell_pdf (float64)."""

    pdf = np.ascontiguousarray(arrays["cell_pdf"], dtype=np.float32)
    h, w = pdf.shape
    empty = np.empty(0, dtype=np.uint8)

    def given(name, dtype):
        a = arrays.get(name)
        return empty if a is None else np.ascontiguousarray(a, dtype=dtype)

    sums = np.empty(h, dtype=np.float64)
    status = np.empty(h, dtype=np.int32)
    k_mod.check_rows(pdf, h, w, given("conditional_cdf", np.float32), given("alias_probability", np.float32),
                     given("alias_index", np.uint16), ABS_TOLERANCE, REL_TOLERANCE, sums, status, threads())
    bad = np.flatnonzero(status)
    if bad.size:
        _fail(path, f"{_ROW_PROBLEMS[int(status[bad[0]])]} (row {int(bad[0])})")
    return sums


def _check_marginal(marginal: np.ndarray, row_p: np.ndarray, path) -> None:
    problem = dist.check_cdf(marginal)
    if problem:
        _fail(path, f"marginal_cdf {problem}")
    if _close(np.diff(marginal.astype(np.float64)), row_p).any():
        _fail(path, "marginal_cdf does not match cell_pdf (row probabilities differ beyond the tolerance)")


def _check_conditional(arrays: dict, sums: np.ndarray, path) -> None:
    conditional, pdf = arrays["conditional_cdf"], arrays["cell_pdf"]
    h, w = pdf.shape
    step = max(1, _BLOCK // w)
    for r0 in range(0, h, step):
        block = conditional[r0:r0 + step]
        if dist.check_cdf(block):
            with np.errstate(invalid="ignore"):
                not_cdf = (~np.isfinite(block).all(axis=1) | (block[:, 0] != 0.0) | (block[:, -1] != 1.0)
                           | (np.diff(block, axis=1) < 0.0).any(axis=1))
            _fail_row(path, 2, not_cdf, r0)
        s = sums[r0:r0 + step]
        live = s > 0
        if not live.any():
            continue
        q = pdf[r0:r0 + step][live].astype(np.float64) / s[live, None]
        off = _close(np.diff(block[live].astype(np.float64), axis=1), q).any(axis=1)
        if off.any():
            _fail(path, f"{_ROW_PROBLEMS[3]} (row {r0 + int(np.flatnonzero(live)[np.argmax(off)])})")


def _check_row_alias(arrays: dict, row_p: np.ndarray, path) -> None:
    r_prob, r_idx = arrays["row_alias_probability"], arrays["row_alias_index"]
    h = r_prob.shape[0]
    if not (np.isfinite(r_prob).all() and r_prob.min() >= 0.0 and r_prob.max() <= 1.0):
        _fail(path, "row_alias_probability has values outside [0, 1]")
    if r_idx.max() >= h:
        _fail(path, f"row_alias_index has entries outside [0, {h})")
    if _close(dist.alias_cell_probabilities(r_prob, r_idx), row_p).any():
        _fail(path, "row alias table does not match cell_pdf (row probabilities differ beyond the tolerance)")


def _check_column_alias(arrays: dict, sums: np.ndarray, path) -> None:
    prob, idx, pdf = arrays["alias_probability"], arrays["alias_index"], arrays["cell_pdf"]
    h, w = pdf.shape
    if not (np.isfinite(prob).all() and prob.min() >= 0.0 and prob.max() <= 1.0):
        with np.errstate(invalid="ignore"):
            _fail_row(path, 4, (~np.isfinite(prob) | (prob < 0.0) | (prob > 1.0)).any(axis=1))
    if idx.max() >= w:
        _fail_row(path, 5, (idx >= w).any(axis=1))
    step = max(1, _BLOCK // w)
    for r0 in range(0, h, step):
        p = prob[r0:r0 + step].astype(np.float64)
        n = p.shape[0]
        target = idx[r0:r0 + step].astype(np.int64) + (np.arange(n, dtype=np.int64) * w)[:, None]
        enc = p / w
        enc += np.bincount(target.reshape(-1), weights=((1.0 - p) / w).reshape(-1), minlength=n * w).reshape(n, w)
        s = sums[r0:r0 + step]
        live = s > 0
        if not live.any():
            continue
        q = pdf[r0:r0 + step][live].astype(np.float64) / s[live, None]
        off = _close(enc[live], q).any(axis=1)
        if off.any():
            _fail(path, f"{_ROW_PROBLEMS[6]} (row {r0 + int(np.flatnonzero(live)[np.argmax(off)])})")
