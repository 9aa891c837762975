"""EnvTable: importance-sampling tables of an equirectangular environment map.

The table is a piecewise-constant 2D distribution over the map's cells (or over a
coarser grid of cells, see ``size``).  The weight of cell (i, j) is its luminance
times its **exact** solid angle ``(cos theta_i - cos theta_{i+1}) * 2*pi / w``:
the sin-theta weighting of the lat-long parameterisation done exactly rather than
with sin(theta) at the cell centre.

Sampling draws a cell (by CDF inversion over the marginal and conditional CDFs,
or with an alias table) and then a direction within it by one of two in-cell
mappings:

* ``equal-area`` (default): azimuth uniform within the column and cos(theta)
  uniform within the row band, so the solid-angle pdf is constant within a cell:
  ``pdf = Y_ij / sum(Y * dOmega)`` per steradian.  A grey map is then sampled
  exactly in proportion to its radiance and the estimate of the integral of L has
  zero variance.
* ``uv-linear``: v uniform within the row, the convention of renderers that warp
  (u, v) linearly; ``pdf = p(u, v) / (2 * pi**2 * sin(theta))`` with ``p(u, v)``
  the density in the unit square (Pharr, Jakob & Humphreys 2016, sec. 14.2.4).

Options: a coarser table grid by area-weighted box filtering (power preserved,
no bright pixel lost); a defensive mixture with uniform sphere sampling
(Hesterberg 1995); and MIS compensation (Karlík et al. 2019), which subtracts the
sphere's mean luminance so the table concentrates on the bright parts and must
only be used inside an MIS combination.

References
----------
- Pharr, M., Jakob, W. and Humphreys, G. (2016). Physically Based Rendering,
  3rd ed., sec. 13.6.7 (2D piecewise-constant distributions), sec. 14.2.4
  (infinite area lights).
- Hesterberg, T. (1995). Weighted average importance sampling and defensive
  mixture distributions. Technometrics 37(2), 185-194.
- Karlík, O., Šik, M., Vévoda, P., Skřivan, T. and Křivánek, J. (2019). MIS
  compensation: optimizing sampling techniques in multiple importance sampling.
  ACM TOG 38(6), article 151.
- Vose, M. D. (1991), see :mod:`envsample.distribution`.
"""

from __future__ import annotations

import functools
import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from envsample.core.color import canonical_primaries, luminance
from envsample.core.compat import renamed_keywords, warn_renamed
from envsample.core.latlong import MAPPINGS, parse_size, reduce_power, row_channel_sums
from envsample.core.sphere import _frame, convention, direction_to_uv, row_cos_edges, row_solid_angles
from envsample.errors import EnvsampleWarning, MapValidationError, TableFormatError
from envsample.io.maps import map_pixels
from envsample.io.tables import read_table, save_table
from envsample.sampling import distribution as dist
from envsample.sampling.kernels import kernels

__all__ = ["SAMPLE_METHODS", "EnvTable", "Samples", "build_table", "load_table"]

#: Cell-selection methods of :meth:`EnvTable.sample`.
SAMPLE_METHODS = ("inverse", "alias")

#: Position within a cell is kept this far (relative) from the cell's edges, so that a
#: sampled direction maps back into the cell it was drawn from despite rounding.
_EDGE = 1e-7


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
    """Sampling tables of one environment map; build with :func:`build_table`, load with :func:`load_table`.

    Attributes
    ----------
    image : float32 (H, W, 3) radiance used by :meth:`eval` (full resolution).
    height, width : image size.  table_height, table_width : cell grid size.
    up, rotation_deg : direction convention (see :mod:`envsample.sphere`).
    mapping : ``"equal-area"`` or ``"uv-linear"``.  primaries : luminance primaries.
    uniform_mix : weight of uniform sphere sampling in the mixture (0 = none).
    compensated : True for an MIS-compensated table (valid only inside MIS).
    marginal_cdf : float32 (h + 1,).  conditional_cdf : float32 (h, w + 1).
    alias_probability : float32 (h * w,).  alias_index : int32 (h * w,).
    cell_pdf : float32 (h, w): solid-angle pdf of each cell for the equal-area
        mapping (per steradian); ``cell_probability`` is ``cell_pdf * dOmega``.
    integrals : dict, ``"rgb"`` = per-channel integral of L over the sphere and
        ``"luminance"`` = integral of the luminance, in map units times steradians.
    metadata : JSON-ready dict (options, source, recommendation...).
    """

    def __init__(
        self,
        *,
        image: np.ndarray,
        marginal_cdf: np.ndarray,
        conditional_cdf: np.ndarray,
        alias_probability: np.ndarray,
        alias_index: np.ndarray,
        cell_pdf: np.ndarray,
        metadata: dict,
    ):
        self.image = image
        self.marginal_cdf = marginal_cdf
        self.conditional_cdf = conditional_cdf
        self.alias_probability = alias_probability
        self.alias_index = alias_index
        self.cell_pdf = cell_pdf
        self.metadata = metadata
        self.height, self.width = int(image.shape[0]), int(image.shape[1])
        self.table_height, self.table_width = (int(s) for s in cell_pdf.shape)
        conv = metadata["convention"]
        self.up = conv["up_axis"]
        self.rotation_deg = float(conv["rotation_deg"])
        opts = metadata["options"]
        self.mapping = opts["mapping"]
        self.primaries = opts["primaries"]
        self.uniform_mix = float(opts["uniform_mix"])
        self.compensated = bool(opts.get("compensate", False))
        self.integrals = metadata["integrals"]
        self._row_sa = row_solid_angles(self.table_height, self.table_width)
        self._cos_edges = row_cos_edges(self.table_height)
        self._rot = math.radians(self.rotation_deg)
        self._frame = _frame(self.up)
        self._axes = _axis_map(self._frame)
        self._flat_pdf = self.cell_pdf.reshape(-1)

    # ------------------------------------------------------------------ facts
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

    def __repr__(self) -> str:
        return (
            f"EnvTable(image={self.width}x{self.height}, table={self.table_width}x{self.table_height}, "
            f"mapping={self.mapping!r}, primaries={self.primaries!r}, up={self.up!r})"
        )

    # --------------------------------------------------------------- sampling
    def sample(self, u, *, method: str = "inverse", backend: str = "auto") -> Samples:
        """Draw directions from the table.

        Parameters
        ----------
        u : array_like (N, 2)
            Uniform numbers in [0, 1).  ``method="inverse"`` maps them monotonically
            (u[:, 0] picks the row band, u[:, 1] the column), preserving stratification.
            ``method="alias"`` picks the cell in O(1) from u[:, 0] (whose leftover
            fraction then places the sample in azimuth) and uses u[:, 1] within the row band.

        Returns
        -------
        Samples with float64 directions (N, 3) and pdf per steradian (N,).
        The same ``u`` always gives bit-identical output on one installation;
        ``backend`` picks the compiled kernel or the numpy code (:mod:`envsample._accel`),
        which agree to the last bits of the trigonometric functions.
        """
        u = np.asarray(u, dtype=np.float64)
        if u.ndim != 2 or u.shape[1] != 2:
            raise ValueError(f"u must have shape (N, 2), got {u.shape}")
        if method not in SAMPLE_METHODS:
            raise ValueError(f"unknown sampling method {method!r}; valid: {', '.join(SAMPLE_METHODS)}")
        k_mod = kernels(backend)
        if k_mod is not None:
            return self._sample_compiled(k_mod, u, method)
        if method == "inverse":
            row, fv = dist.sample_cdf(self.marginal_cdf, u[:, 0])
            col, fu = dist.sample_row_cdfs(self.conditional_cdf, row, u[:, 1])
        else:
            cell, fu = dist.sample_alias(self.alias_probability, self.alias_index, u[:, 0])
            row, col = np.divmod(cell, self.table_width)
            fv = np.clip(u[:, 1], 0.0, 1.0)
        np.clip(fu, _EDGE, 1.0 - _EDGE, out=fu)
        fv = np.clip(fv, _EDGE, 1.0 - _EDGE)
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
        k_mod.sample_table(
            u, 0 if method == "inverse" else 1,
            self._c["marginal"], self._c["conditional"], self._c["prob"], self._c["alias"], self._c["pdf"],
            self._cos_edges, self._row_sa, self.table_height, self.table_width, self._rot,
            0 if self.mapping == "equal-area" else 1, axes, d, pdf, cells, _EDGE,
        )
        return Samples(directions=d, pdf=pdf, cells=cells, _table=self)

    @functools.cached_property
    def _c(self) -> dict:
        """C-contiguous, native-dtype views of the arrays the compiled sampler reads."""
        return {
            "marginal": np.ascontiguousarray(self.marginal_cdf, dtype=np.float32),
            "conditional": np.ascontiguousarray(self.conditional_cdf, dtype=np.float32),
            "prob": np.ascontiguousarray(self.alias_probability, dtype=np.float32),
            "alias": np.ascontiguousarray(self.alias_index, dtype=np.int32),
            "pdf": np.ascontiguousarray(self.cell_pdf, dtype=np.float32).reshape(-1),
        }

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
        row = np.minimum((v * self.height).astype(np.int64), self.height - 1)
        col = np.minimum((u * self.width).astype(np.int64), self.width - 1)
        return self.image[row, col]

    # ------------------------------------------------------------------- disk
    def save(self, prefix, *, raw: bool = False) -> list[Path]:
        """Write ``PREFIX.npz`` and ``PREFIX.json`` (and ``PREFIX.bin`` with ``raw=True``) atomically."""
        return save_table(self, prefix, raw=raw)

    def arrays(self) -> dict[str, np.ndarray]:
        """The arrays stored on disk, by name (see docs/table-format.md)."""
        return {
            "marginal_cdf": self.marginal_cdf,
            "conditional_cdf": self.conditional_cdf,
            "alias_probability": self.alias_probability,
            "alias_index": self.alias_index,
            "cell_pdf": self.cell_pdf,
            "radiance": self.image,
        }


def _finite_directions(directions) -> np.ndarray:
    d = np.asarray(directions, dtype=np.float64)
    if d.ndim != 2 or d.shape[1] != 3:
        raise ValueError(f"directions must have shape (N, 3), got {d.shape}")
    if not np.isfinite(d).all():
        raise ValueError("directions contain NaN or Inf; every direction must be a finite vector")
    return d


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


def _integral(values: np.ndarray, row_sa: np.ndarray) -> float:
    """Integral over the sphere of a per-cell function (h, w): float64 row sums times row solid angles."""
    return float(np.dot(values.sum(axis=1, dtype=np.float64), row_sa))


def _as_image(rgb):
    """Accept a MapImage-like object (with ``.rgb``) or an array; return (float32 (H,W,3), source dict)."""
    source = rgb.describe() if hasattr(rgb, "describe") else None
    return map_pixels(rgb, name="map"), source


@renamed_keywords(rotate_deg="rotation_deg")
def build_table(
    rgb,
    *,
    size=None,
    primaries: str = "bt709",
    mapping: str = "equal-area",
    uniform_mix: float = 0.0,
    up: str = "y",
    rotation_deg: float = 0.0,
    compensate: bool = False,
) -> EnvTable:
    """Build the sampling tables of an equirectangular map.

    Parameters
    ----------
    rgb : MapImage or array_like (H, W, 3)
        Linear radiance, row 0 at the zenith.  Must be finite and non-negative
        (validate files with :func:`envsample.io.validate_map` first).
    size : (width, height) or "WxH", optional
        Table grid; the map is reduced by an area-weighted box filter (power
        preserved).  Default: the map's own resolution.
    primaries : str
        Luminance weights: ``bt709`` (default; alias ``srgb``), ``bt2020``,
        ``acescg``, ``aces2065-1``, ``max`` or ``mean``.
    mapping : {"equal-area", "uv-linear"}
        In-cell mapping (module docstring).
    uniform_mix : float in [0, 1)
        Weight of uniform sphere sampling mixed into the table (Hesterberg 1995).
    up : {"y", "z"}; rotation_deg : float (degrees)
        Direction convention, see :mod:`envsample.sphere`.
    compensate : bool
        Subtract the sphere-mean luminance and clamp at zero (Karlík et al. 2019).
        Such a table is valid only inside MIS.

    Returns
    -------
    EnvTable
        Its ``image`` is the caller's array when that is already float32 (no copy,
        to keep memory low for large maps): do not modify it afterwards.
    """
    image, source = _as_image(rgb)
    H, W = image.shape[:2]
    # One float64 pass gives the per-channel integrals and detects NaN/Inf (they
    # poison their row's sum); float32 data cannot overflow a float64 sum.
    row_sa_full = row_solid_angles(H, W)
    row_sums = row_channel_sums(image)
    if not np.isfinite(row_sums).all():
        raise MapValidationError("map has NaN or Inf pixels; repair them first (read with validate_map(repair=True))")
    if image.min() < 0:
        raise MapValidationError("map has negative pixels; clamp them first (validate_map does)")
    rgb_integral = (row_sums * row_sa_full[:, None]).sum(axis=0)
    primaries = canonical_primaries(primaries)
    if mapping not in MAPPINGS:
        raise ValueError(f"unknown mapping {mapping!r}; valid: {', '.join(MAPPINGS)}")
    uniform_mix = float(uniform_mix)
    if not 0.0 <= uniform_mix < 1.0:
        raise ValueError(f"uniform_mix must be in [0, 1), got {uniform_mix}")
    size = parse_size(size)
    conv = convention(up, rotation_deg)

    lum = luminance(image, primaries)
    lum_integral_full = _integral(lum, row_sa_full)
    if size is not None and size != (W, H):
        lum = reduce_power(lum, size)
    h, w = lum.shape
    row_sa = row_solid_angles(h, w)

    notes = []
    if compensate:
        mean = lum_integral_full / (4.0 * math.pi)
        np.subtract(lum, np.float32(mean), out=lum)
        np.maximum(lum, 0.0, out=lum)
    # The sampled function's integral decides the black-map and mixture cases before the
    # CDFs are built, so they are built once.  For the plain full-size table it is the
    # luminance integral already at hand.
    plain = not compensate and lum.shape == (H, W)
    total = lum_integral_full if plain else _integral(lum, row_sa)
    if not total > 0.0:
        if compensate:
            notes.append("compensation removed every cell (a constant map): the table is uniform")
        else:
            warnings.warn(
                "map is entirely black: the table samples the sphere uniformly", EnvsampleWarning, stacklevel=2
            )
            notes.append("map is entirely black: uniform table")
        lum = np.ones((h, w), dtype=np.float32)
        total = _integral(lum, row_sa)
    if uniform_mix > 0.0:
        # Mixture density (1 - m) Y / total + m / (4 pi), still constant within a cell.
        lum *= np.float32((1.0 - uniform_mix) / total)
        lum += np.float32(uniform_mix / (4.0 * math.pi))
    conditional, row_totals = dist.build_row_cdfs(lum, row_scale=row_sa)
    total = float(row_totals.sum())
    marginal, _ = dist.build_cdf(row_totals)
    a_prob, a_index = dist.build_alias(lum, row_scale=row_sa)
    # lum becomes the cell pdf in place: pdf = f / integral(f) per steradian.
    lum *= np.float32(1.0 / total)
    cell_pdf = lum

    from envsample._version import __version__

    metadata = {
        "convention": conv,
        "options": {
            "size": None if size is None else [int(size[0]), int(size[1])],
            "primaries": primaries,
            "mapping": mapping,
            "uniform_mix": uniform_mix,
            "compensate": bool(compensate),
        },
        "integrals": {
            "rgb": [float(x) for x in rgb_integral],
            "luminance": lum_integral_full,
            "units": "map radiance units times steradians",
        },
        "sampled_integral": total,
        "source": source,
        "notes": notes,
        "tool_version": __version__,
    }
    if compensate:
        metadata["valid_only_inside_mis"] = True
    return EnvTable(
        image=image,
        marginal_cdf=marginal,
        conditional_cdf=conditional,
        alias_probability=a_prob,
        alias_index=a_index,
        cell_pdf=cell_pdf,
        metadata=metadata,
    )


def load_table(prefix_or_path) -> EnvTable:
    """Load and verify a table written by :meth:`EnvTable.save`.

    Accepts the prefix or any of its files.  :func:`envsample.io.tables.read_table`
    verifies the files (schema, shapes, sha256); this checks that the arrays form a
    valid distribution (CDFs start at 0, end at 1 and never decrease; alias indices
    and probabilities in range; a finite, non-negative pdf).  Raises
    :class:`TableFormatError` naming the file and the problem.
    """
    stored = read_table(prefix_or_path)
    _check_distribution(stored.arrays, stored.paths["npz"])
    a = stored.arrays
    try:
        return EnvTable(
            image=a["radiance"],
            marginal_cdf=a["marginal_cdf"],
            conditional_cdf=a["conditional_cdf"],
            alias_probability=a["alias_probability"],
            alias_index=a["alias_index"],
            cell_pdf=a["cell_pdf"],
            metadata=stored.metadata,
        )
    except (KeyError, IndexError, TypeError, AttributeError, ValueError) as exc:
        # Valid JSON of the wrong structure (hand-edited, or another tool's file).
        raise TableFormatError(
            f"{stored.paths['json']}: malformed table metadata ({type(exc).__name__}: {exc}); rebuild the table"
        ) from None


def _check_distribution(arrays: dict, path) -> None:
    """The stored arrays form a valid distribution; TableFormatError names ``path`` otherwise."""
    for name in ("marginal_cdf", "conditional_cdf"):
        problem = dist.check_cdf(arrays[name])
        if problem:
            raise TableFormatError(f"{path}: {name} {problem}; rebuild the table")
    n = arrays["cell_pdf"].size
    a_idx = arrays["alias_index"]
    if a_idx.size and (a_idx.min() < 0 or a_idx.max() >= n):
        raise TableFormatError(f"{path}: alias_index has entries outside [0, {n}); rebuild the table")
    a_p = arrays["alias_probability"]
    if not (np.isfinite(a_p).all() and a_p.min() >= 0.0 and a_p.max() <= 1.0):
        raise TableFormatError(f"{path}: alias_probability has values outside [0, 1]; rebuild the table")
    pdf = arrays["cell_pdf"]
    if not (np.isfinite(pdf).all() and pdf.min() >= 0.0):
        raise TableFormatError(f"{path}: cell_pdf has negative or non-finite values; rebuild the table")
