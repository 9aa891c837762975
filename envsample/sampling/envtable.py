"""EnvTable: a built or loaded sampling table of an equirectangular map, and the directions drawn from it.

The table is a piecewise-constant 2D distribution over cells of the map (or of a
coarser grid).  Two cell-choice methods draw a cell from two uniforms:

* ``inverse``: the marginal CDF over rows, then the row's conditional CDF; a monotone
  map of ``u`` that keeps stratification (Pharr, Jakob & Humphreys 2016, sec. 13.6.7).
* ``alias``: a two-level alias table, O(1) per draw: ``u0`` picks the row from an
  alias table over the rows, ``u1`` the column from that row's own alias table
  (Walker 1977; Vose 1991); each leftover fraction places the sample within the cell.

Both choose every cell with the same probability.  The direction within the cell
follows the table's in-cell ``mapping`` (see :mod:`envsample.sampling.table`).  The
exact arithmetic, which a loader in another language must reproduce, is written out
in ``docs/table-format.md``.

References
----------
- Pharr, M., Jakob, W. and Humphreys, G. (2016). Physically Based Rendering, 3rd ed.,
  sec. 13.6.7 (2D piecewise-constant distributions), sec. 14.2.4 (infinite area lights).
- Walker, A. J. (1977). ACM TOMS 3(3), 253-256.  Vose, M. D. (1991). IEEE TSE 17(9), 972-975.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from envsample.core.compat import warn_renamed
from envsample.core.sphere import _frame, as_vectors, direction_to_uv, row_cos_edges, row_solid_angles
from envsample.errors import EnvsampleError
from envsample.io.tables import save_table, table_paths
from envsample.sampling import distribution as dist
from envsample.sampling.checks import check_distribution
from envsample.sampling.kernels import kernels

__all__ = ["SAMPLE_METHODS", "EnvTable", "Samples"]

#: Cell-selection methods of :meth:`EnvTable.sample`.
SAMPLE_METHODS = ("inverse", "alias")

#: Position within a cell is kept this far (relative) from the cell's edges, so that a
#: sampled direction maps back into the cell it was drawn from despite rounding.
EDGE = 1e-7
_EDGE = EDGE

_METHOD_ARRAYS = {
    "inverse": ("marginal_cdf", "conditional_cdf"),
    "alias": ("row_alias_probability", "row_alias_index", "alias_probability", "alias_index"),
}
_ARRAY_NAMES = ("marginal_cdf", "conditional_cdf", "row_alias_probability", "row_alias_index",
                "alias_probability", "alias_index", "cell_pdf")


@dataclass
class Samples:
    """Directions drawn from a table.

    Attributes
    ----------
    directions : float64 (N, 3) unit vectors in the table's convention.
    pdf : float64 (N,) solid-angle density, per steradian.
    cells : int64 (N,) flat cell index ``row * table_width + col``.
    radiance : float32 (N, 3), the map's radiance in each direction (computed on first access).
    """

    directions: np.ndarray
    pdf: np.ndarray
    cells: np.ndarray
    _table: "EnvTable" = field(repr=False, default=None)

    @functools.cached_property
    def radiance(self) -> np.ndarray:
        return self._table.eval(self.directions)

    def __len__(self) -> int:
        return int(self.pdf.shape[0])


class EnvTable:
    """Sampling tables of one environment map; build with ``build_table``, load with ``load_table``.

    Attributes
    ----------
    image : float32 (H, W, 3) radiance used by :meth:`eval` (full resolution): the map
        the table was built from, an embedded copy, or the source map re-read and
        verified on first access (see ``load_table``).
    height, width : image size.  table_height, table_width : cell grid size.
    up, rotation_deg : direction convention (see :mod:`envsample.core.sphere`).
    mapping : ``"equal-area"`` or ``"uv-linear"``.  primaries : luminance primaries.
    methods : the cell-choice methods the table holds (``("inverse", "alias")`` by default).
    uniform_mix : weight of uniform sphere sampling in the mixture (0 = none).
    compensated : True for an MIS-compensated table (valid only inside MIS).
    marginal_cdf : float32 (h + 1,).  conditional_cdf : float32 (h, w + 1).  (inverse)
    row_alias_probability : float32 (h,).  row_alias_index : uint32 (h,).
    alias_probability : float32 (h, w).  alias_index : uint16 (h, w), columns.  (alias)
    cell_pdf : float32 (h, w): solid-angle pdf of each cell for the equal-area
        mapping (per steradian); ``cell_probability`` is ``cell_pdf * dOmega``.
    integrals : dict, ``"rgb"`` = per-channel integral of L over the sphere and
        ``"luminance"`` = integral of the luminance, in map units times steradians.
    metadata : JSON-ready dict (options, source, recommendation...).
    """

    def __init__(self, *, arrays: dict, metadata: dict, image=None, image_size=None, radiance_source=None):
        for name in _ARRAY_NAMES:
            setattr(self, name, arrays.get(name))
        self.metadata = metadata
        self._image = image
        self._radiance_source = radiance_source
        if image is not None:
            self.height, self.width = int(image.shape[0]), int(image.shape[1])
        else:
            self.width, self.height = (int(s) for s in image_size)
        self.table_height, self.table_width = (int(s) for s in self.cell_pdf.shape)
        conv = metadata["convention"]
        self.up = conv["up"]
        self.rotation_deg = float(conv["rotation_deg"])
        opts = metadata["options"]
        self.mapping = opts["mapping"]
        self.primaries = opts["primaries"]
        self.uniform_mix = float(opts["uniform_mix"])
        self.compensated = bool(opts.get("compensate", False))
        choice = opts.get("cell_choice", "both")
        self.methods = SAMPLE_METHODS if choice == "both" else (choice,)
        self.integrals = metadata["integrals"]
        self._row_sa = row_solid_angles(self.table_height, self.table_width)
        self._cos_edges = row_cos_edges(self.table_height)
        self._rot = math.radians(self.rotation_deg)
        self._axes = _axis_map(_frame(self.up))
        self._flat_pdf = self.cell_pdf.reshape(-1)

    # ------------------------------------------------------------------ facts
    @property
    def image(self) -> np.ndarray:
        """The map's radiance, float32 (H, W, 3); re-read from the source map on first access if needed."""
        if self._image is None:
            if self._radiance_source is None:
                raise EnvsampleError(
                    "this table has no radiance: it was built from an in-memory map and saved without it; "
                    "save it with embed_radiance=True (envsample build --embed-radiance) to carry it"
                )
            self._image = self._radiance_source()
        return self._image

    @property
    def has_image(self) -> bool:
        """True when the radiance is in memory (no file needs to be read for :attr:`image`)."""
        return self._image is not None

    @property
    def rotate_deg(self) -> float:
        """Former name of :attr:`rotation_deg` (deprecated)."""
        warn_renamed("EnvTable.rotate_deg", "EnvTable.rotation_deg", what="attribute")
        return self.rotation_deg

    @property
    def cell_probability(self) -> np.ndarray:
        """Probability of drawing each cell, float64 (h, w), summing to 1."""
        return self.cell_pdf.astype(np.float64) * self._row_sa[:, None]

    @property
    def luminance(self) -> np.ndarray:
        """The sampled function per cell (luminance, or compensated/mixed luminance), float32 (h, w).

        Reconstructed from the pdf: ``cell_pdf * integral``; for a plain table this is
        the (area-weighted) luminance of the map's cells.
        """
        return (self.cell_pdf * np.float32(self.metadata["sampled_integral"])).astype(np.float32)

    def summary(self) -> dict:
        """Facts stored in the JSON so ``inspect`` needs no array: nonzero cells, the largest cell."""
        nonzero = 0
        best, best_flat = -1.0, 0
        h, w = self.table_height, self.table_width
        step = max(1, (1 << 20) // w)
        for r0 in range(0, h, step):
            block = self.cell_pdf[r0:r0 + step].astype(np.float64) * self._row_sa[r0:r0 + step, None]
            nonzero += int(np.count_nonzero(block > 0))
            k = int(np.argmax(block))
            if block.flat[k] > best:
                best, best_flat = float(block.flat[k]), r0 * w + k
        row, col = divmod(best_flat, w)
        return {"nonzero_cells": nonzero, "largest_cell": {"row": row, "col": col, "probability": best,
                                                           "pdf_per_sr": float(self.cell_pdf[row, col])}}

    def __repr__(self) -> str:
        return (
            f"EnvTable(image={self.width}x{self.height}, table={self.table_width}x{self.table_height}, "
            f"mapping={self.mapping!r}, primaries={self.primaries!r}, up={self.up!r}, methods={self.methods!r})"
        )

    # --------------------------------------------------------------- sampling
    def sample(self, u, *, method: str = "inverse", backend: str = "auto") -> Samples:
        """Draw directions from the table.

        Parameters
        ----------
        u : array_like (N, 2)
            Uniform numbers in [0, 1) (values outside are clamped; NaN or Inf is refused
            with a ValueError that counts them).  ``method="inverse"`` maps them
            monotonically (u[:, 0] picks the row band, u[:, 1] the column), preserving
            stratification.  ``method="alias"`` picks the row from u[:, 0] and the column
            from u[:, 1] with the two alias levels in O(1); each leftover fraction places
            the sample within the cell.

        Returns
        -------
        Samples with float64 directions (N, 3) and pdf per steradian (N,).
        The same ``u`` always gives bit-identical output on one installation;
        ``backend`` picks the compiled kernel or the numpy code
        (:mod:`envsample.sampling.kernels`), which agree to the last bits of the
        trigonometric functions.
        """
        u = np.asarray(u, dtype=np.float64)
        if u.ndim != 2 or u.shape[1] != 2:
            raise ValueError(f"u must have shape (N, 2), got {u.shape}")
        if method not in SAMPLE_METHODS:
            raise ValueError(f"unknown sampling method {method!r}; valid: {', '.join(SAMPLE_METHODS)}")
        if method not in self.methods:
            raise ValueError(f"this table holds only the {self.methods[0]} cell choice (built with "
                             f"cell_choice={self.methods[0]!r}); rebuild it with cell_choice='both' to sample by {method}")
        k_mod = kernels(backend)
        if k_mod is not None:
            return self._sample_compiled(k_mod, u, method)  # the kernel counts non-finite u itself
        _refuse_non_finite(u.size - int(np.count_nonzero(np.isfinite(u))), u.size)
        if method == "inverse":
            row, fv = dist.sample_cdf(self.marginal_cdf, u[:, 0])
            col, fu = dist.sample_row_cdfs(self.conditional_cdf, row, u[:, 1])
        else:
            row, fv = dist.sample_alias(self.row_alias_probability, self.row_alias_index, u[:, 0])
            col, fu = dist.sample_row_alias(self.alias_probability, self.alias_index, row, u[:, 1])
        return self._place(row, col, fu, fv)

    def _place(self, row, col, fu, fv_raw) -> Samples:
        np.clip(fu, _EDGE, 1.0 - _EDGE, out=fu)
        fv = np.clip(fv_raw, _EDGE, 1.0 - _EDGE)
        h, w = self.table_height, self.table_width
        cells = row * w + col
        phi = col + fu
        phi *= 2.0 * math.pi / w
        phi += self._rot - math.pi
        pdf = self._flat_pdf[cells].astype(np.float64)
        if self.mapping == "equal-area":
            c0 = self._cos_edges[row]
            cos_t = self._cos_edges[row + 1] - c0
            cos_t *= fv
            cos_t += c0
            sin_t = np.sqrt(np.maximum(0.0, (1.0 - cos_t) * (1.0 + cos_t)))
        else:
            theta = (math.pi / h) * (row + fv)
            cos_t, sin_t = np.cos(theta), np.sin(theta)
            pdf *= self._row_sa[row] * (h * w / (2.0 * math.pi**2))
            pdf /= sin_t
        d = _directions(sin_t * np.cos(phi), sin_t * np.sin(phi), cos_t, self._axes)
        return Samples(directions=d, pdf=pdf, cells=cells, _table=self)

    def _sample_compiled(self, k_mod, u, method) -> Samples:
        n = u.shape[0]
        u = np.ascontiguousarray(u)
        d = np.empty((n, 3), dtype=np.float64)
        pdf = np.empty(n, dtype=np.float64)
        cells = np.empty(n, dtype=np.int64)
        axes = tuple(v for i, sign in self._axes for v in (i, int(sign)))
        c = self._c
        bad = k_mod.sample_table(
            u, 0 if method == "inverse" else 1, c["marginal_cdf"], c["conditional_cdf"], c["row_alias_probability"],
            c["row_alias_index"], c["alias_probability"], c["alias_index"], c["cell_pdf"],
            self._cos_edges, self._row_sa, self.table_height, self.table_width, self._rot,
            0 if self.mapping == "equal-area" else 1, axes, d, pdf, cells, _EDGE,
        )
        _refuse_non_finite(bad, u.size)
        return Samples(directions=d, pdf=pdf, cells=cells, _table=self)

    @functools.cached_property
    def _c(self) -> dict:
        """C-contiguous, native-dtype views of the arrays the compiled sampler reads (empty when absent)."""
        dtypes = {"row_alias_index": np.uint32, "alias_index": np.uint16}
        out = {}
        for name in _ARRAY_NAMES:
            a = getattr(self, name)
            dt = dtypes.get(name, np.float32)
            out[name] = np.empty(0, dt) if a is None else np.ascontiguousarray(a, dtype=dt).reshape(-1)
        return out

    # ---------------------------------------------------------------- lookups
    def cells_of(self, directions) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Row, column (int64) of the table cell containing each direction, and sin(theta)."""
        u, v = self._uv(directions)
        row, col = self._cell(u, v)
        return row, col, np.sin(math.pi * v)

    def pdf(self, directions) -> np.ndarray:
        """Solid-angle pdf (per steradian, float64 (N,)) of drawing ``directions`` (N, 3) from this table."""
        return self._pdf_at(*self._uv(directions))

    def eval(self, directions) -> np.ndarray:
        """Radiance of the full-resolution map in ``directions`` (N, 3): float32 (N, 3), nearest pixel."""
        return self._radiance_at(*self._uv(directions))

    def lookup(self, directions) -> tuple[np.ndarray, np.ndarray]:
        """``(pdf(directions), eval(directions))`` with one direction-to-(u, v) conversion for both.

        MIS evaluates both for every sample drawn by another strategy; the
        conversion (two arctangents) is the expensive part.
        """
        u, v = self._uv(directions)
        return self._pdf_at(u, v), self._radiance_at(u, v)

    def _uv(self, directions) -> tuple[np.ndarray, np.ndarray]:
        return direction_to_uv(_finite_directions(directions), up=self.up, rotation_deg=self.rotation_deg)

    def _cell(self, u, v) -> tuple[np.ndarray, np.ndarray]:
        h, w = self.table_height, self.table_width
        return np.minimum((v * h).astype(np.int64), h - 1), np.minimum((u * w).astype(np.int64), w - 1)

    def _pdf_at(self, u, v) -> np.ndarray:
        row, col = self._cell(u, v)
        pdf = self.cell_pdf[row, col].astype(np.float64)
        if self.mapping == "equal-area":
            return pdf
        h, w = self.table_height, self.table_width
        sin_t = np.sin(math.pi * v)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = pdf * self._row_sa[row] * (h * w) / (2.0 * math.pi**2 * sin_t)
        return np.where(sin_t > 0, out, 0.0)

    def _radiance_at(self, u, v) -> np.ndarray:
        image = self.image
        row = np.minimum((v * self.height).astype(np.int64), self.height - 1)
        col = np.minimum((u * self.width).astype(np.int64), self.width - 1)
        return image[row, col]

    # ------------------------------------------------------------------- disk
    def save(self, prefix, *, raw: bool = False, embed_radiance: bool = False) -> list[Path]:
        """Write ``PREFIX.npz`` and ``PREFIX.json`` (and ``PREFIX.bin`` with ``raw=True``) as one unit.

        Missing folders are created.  ``embed_radiance`` stores a float32 copy of the
        map (12 bytes per pixel); by default the table records the source map's path
        and sha256 instead.  See :func:`envsample.io.tables.save_table`.
        """

        name = f"{table_paths(prefix)['json'].with_suffix('')} (table to be written)"
        # A table that would not load is refused before any of its files is replaced; the check
        # runs while the files are written.
        return save_table(self, prefix, raw=raw, embed_radiance=embed_radiance,
                          check=lambda arrays: check_distribution(arrays, name))

    def arrays(self) -> dict[str, np.ndarray]:
        """The arrays stored on disk, by name (see docs/table-format.md); absent methods are left out."""
        return {name: getattr(self, name) for name in _ARRAY_NAMES if getattr(self, name) is not None}


def _refuse_non_finite(bad: int, total: int) -> None:
    if bad:
        raise ValueError(f"u has {bad} NaN or Inf values of {total}; uniforms must be finite numbers in [0, 1)")


def _finite_directions(directions) -> np.ndarray:
    d = np.asarray(directions, dtype=np.float64)
    if d.ndim != 2 or d.shape[1] != 3:
        raise ValueError(f"directions must have shape (N, 3), got {d.shape}")
    return as_vectors(d, "directions")[0]


def _axis_map(frame) -> list[tuple[int, float]]:
    """For each world axis, which of (forward, right, up) lies along it and with which sign.

    The supported frames are axis-aligned, so a direction is assembled by placing
    its three frame components, not by a 3x3 product.
    """
    out = []
    for k in range(3):
        which = [i for i in range(3) if frame[i][k] != 0.0]
        if len(which) != 1:
            raise ValueError("frame is not axis-aligned")
        out.append((which[0], float(frame[which[0]][k])))
    return out


def _directions(cf, cr, ca, axes) -> np.ndarray:
    comps = (cf, cr, ca)
    out = np.empty(cf.shape + (3,), dtype=np.float64)
    for k, (i, sign) in enumerate(axes):
        if sign > 0:
            out[:, k] = comps[i]
        else:
            np.negative(comps[i], out=out[:, k])
    return out
