"""Building and loading importance-sampling tables of an equirectangular environment map.

The table is a piecewise-constant 2D distribution over the map's cells (or over a
coarser grid of cells, see ``size``).  The weight of cell (i, j) is its luminance
times its **exact** solid angle ``(cos theta_i - cos theta_{i+1}) * 2*pi / w``:
the sin-theta weighting of the lat-long parameterisation done exactly rather than
with sin(theta) at the cell centre.  :class:`~envsample.sampling.envtable.EnvTable`
draws cells by CDF inversion or with a two-level alias table and places the
direction within the cell by one of two in-cell mappings:

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
(Hesterberg 1995); MIS compensation (Karlík et al. 2019), which subtracts the
sphere's mean luminance so the table concentrates on the bright parts and must
only be used inside an MIS combination; and ``cell_choice`` to keep one method only.

Extreme maps have defined outcomes: an all-black map gives the uniform table (with
a warning); maps whose luminance is tiny (denormal) or huge (up to float32's
largest value) are scaled by a power of two before the table is built (exact, the
distribution does not depend on scale) and every sum is accumulated in float64.

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
- Walker (1977) and Vose (1991), see :mod:`envsample.sampling.distribution`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from envsample._version import __version__
from envsample.core.color import canonical_primaries, luminance
from envsample.core.compat import renamed_keywords
from envsample.core.constants import luminance_weights
from envsample.core.latlong import MAPPINGS, parse_size, reduce_power, row_channel_sums
from envsample.core.limits import MAX_TABLE_CELLS, MAX_TABLE_WIDTH, check_memory
from envsample.core.sphere import convention, row_solid_angles
from envsample.errors import EnvsampleWarning, MapValidationError, ResourceLimitError
from envsample.io.maps import map_pixels
from envsample.io.table_json import CELL_CHOICES
from envsample.io.tables import read_table
from envsample.sampling import distribution as dist
from envsample.sampling.checks import check_distribution
from envsample.sampling.envtable import SAMPLE_METHODS, EnvTable, Samples
from envsample.sampling.kernels import kernels, threads
from envsample.sampling.radiance import source_radiance

__all__ = ["SAMPLE_METHODS", "CELL_CHOICES", "EnvTable", "Samples", "BuildPlan", "SampledFunction", "build_table",
           "plan_build", "sampled_function", "table_from_function", "load_table", "build_memory_estimate"]

#: Luminance peaks outside [2**-100, 2**100] are scaled by a power of two before the build.
_SCALE_LOW, _SCALE_HIGH = 2.0**-100, 2.0**100


@dataclass(frozen=True)
class BuildPlan:
    """The checked options of one build (see :func:`plan_build`)."""

    map_size: tuple  # (W, H)
    size: tuple | None  # (w, h) or None = the map's size
    primaries: str
    mapping: str
    uniform_mix: float
    up: str
    rotation_deg: float
    compensate: bool
    cell_choice: str
    allow_aspect: bool


@dataclass
class SampledFunction:
    """What the table samples, per cell: ``values`` float32 (h, w) and the facts of the map it came from.

    ``rgb_integral`` and ``luminance_integral`` are of the full-resolution map (map
    units times steradians, float64 sums); ``scale`` is the power of two the values
    were multiplied by (1.0 for ordinary maps); ``notes`` say what was done.
    """

    values: np.ndarray
    rgb_integral: list
    luminance_integral: float
    scale: float
    notes: list
    image_size: tuple


def _integral(values: np.ndarray, row_sa: np.ndarray) -> float:
    """Integral over the sphere of a per-cell function (h, w): float64 row sums times row solid angles."""
    return float(np.dot(values.sum(axis=1, dtype=np.float64), row_sa))


def _check_grid(W: int, H: int, size, *, allow_aspect: bool) -> tuple[int, int]:
    """The table grid for a W x H map: refuses W != 2H, sizes above the map, not 2:1, or beyond the format."""
    if W != 2 * H and not allow_aspect:
        raise MapValidationError(f"map is {W}x{H}, not 2:1 as an equirectangular map must be; resample it, "
                                 "or pass allow_aspect=True if it is equirectangular all the same")
    w, h = (W, H) if size is None else size
    if size is not None:
        if w > W or h > H:
            raise ValueError(f"size {w}x{h} is larger than the {W}x{H} map; a table finer than its map adds "
                             f"nothing: choose at most {W}x{H}")
        if w != 2 * h and not allow_aspect:
            raise ValueError(f"size {w}x{h} is not 2:1 (width = 2 x height); e.g. {2 * h}x{h}, "
                             "or pass allow_aspect=True")
    if w > MAX_TABLE_WIDTH or w * h > MAX_TABLE_CELLS:
        raise ResourceLimitError(f"a {w}x{h} table exceeds the format's limits ({MAX_TABLE_WIDTH} cells per row, "
                                 f"{MAX_TABLE_CELLS} cells); choose a smaller size")
    return w, h


def build_memory_estimate(width: int, height: int, size=None, *, cell_choice: str = "both") -> int:
    """Bytes ``build_table`` allocates beyond the map for a ``width x height`` map and table ``size``.

    Luminance 4 B per pixel (8 more when the table is reduced, for the float64
    filter), then per cell 4 (cdf) + 6 (alias) + 4 (pdf).
    """
    w, h = (width, height) if size is None else size
    extra = 4 * width * height + (8 * width * height if (w, h) != (width, height) else 0)
    per_cell = 4 + (4 if cell_choice != "alias" else 0) + (6 if cell_choice != "inverse" else 0)
    return int(extra + per_cell * w * h)


def sampled_function(image: np.ndarray, plan: BuildPlan) -> SampledFunction:
    """The per-cell function a table samples: luminance, reduced to ``plan.size``, compensated and mixed.

    ``image`` float32 (H, W, 3), finite and non-negative (refused otherwise).  The
    first step of :func:`build_table`; split out so that a caller can release the map
    before the table's arrays are allocated (``build_from_file`` does).
    """
    H, W = image.shape[:2]
    if (W, H) != tuple(plan.map_size):
        raise ValueError(f"the plan is for a {plan.map_size[0]}x{plan.map_size[1]} map, got {W}x{H}")
    w, h = plan.size or (W, H)
    primaries, compensate, uniform_mix = plan.primaries, plan.compensate, plan.uniform_mix
    row_sa_full = row_solid_angles(H, W)
    lum, scale, row_sums = _luminance_and_row_sums(image, primaries)
    rgb_integral = [float(x) for x in (row_sums * row_sa_full[:, None]).sum(axis=0)]
    lum_integral_full = _integral(lum, row_sa_full) / scale
    if (w, h) != (W, H):
        lum = reduce_power(lum, (w, h))
    row_sa = row_solid_angles(h, w)
    notes = []
    if scale != 1.0:
        notes.append(f"luminance scaled by 2^{int(math.log2(scale))} internally (exact) to stay within float32's range")
    if compensate:
        mean = lum_integral_full * scale / (4.0 * math.pi)
        np.subtract(lum, np.float32(mean), out=lum)
        np.maximum(lum, 0.0, out=lum)
    total = _integral(lum, row_sa)
    if not total > 0.0:
        if compensate:
            notes.append("compensation removed every cell (a constant map): the table is uniform")
        else:
            warnings.warn("map is entirely black: the table samples the sphere uniformly", EnvsampleWarning,
                          stacklevel=3)
            notes.append("map is entirely black: uniform table")
        lum = np.ones((h, w), dtype=np.float32)
        total = _integral(lum, row_sa)
    if uniform_mix > 0.0:
        # Mixture density (1 - m) Y / total + m / (4 pi), still constant within a cell.
        lum *= np.float32((1.0 - uniform_mix) / total)
        lum += np.float32(uniform_mix / (4.0 * math.pi))
    # After mixing, the values are normalised and no longer carry the scale.
    return SampledFunction(lum, rgb_integral, lum_integral_full, scale if uniform_mix == 0.0 else 1.0, notes, (W, H))


def _luminance_and_row_sums(image: np.ndarray, primaries: str) -> tuple[np.ndarray, float, np.ndarray]:
    """The luminance (float32, scaled by a power of two if its peak is extreme), the scale, and the
    per-row per-channel float64 sums; refuses NaN/Inf and negative pixels.

    The compiled kernel does all of it in one pass over the map (rows split across threads);
    the numpy path in four.
    """
    k_mod = kernels()
    if k_mod is not None and image.dtype == np.float32 and image.flags.c_contiguous:

        H, W = image.shape[:2]
        mode = {"max": 1, "mean": 2}.get(primaries, 0)
        weights = (0.0, 0.0, 0.0) if mode else tuple(float(x) for x in luminance_weights(primaries))
        lum = np.empty((H, W), dtype=np.float32)
        row_sums = np.empty((H, 3), dtype=np.float64)
        lowest, bad = k_mod.luminance_rows(image, H, W, mode, weights, lum, row_sums, threads())
    else:
        row_sums = row_channel_sums(image)
        bad = 0 if np.isfinite(row_sums).all() else 1
        lowest = float(image.min()) if not bad else 0.0
        lum = None
    if bad:
        raise MapValidationError("map has NaN or Inf pixels; repair them first (read with validate_map(repair=True))")
    if lowest < 0:
        raise MapValidationError("map has negative pixels; clamp them first (validate_map does)")
    lum, scale = _scaled_luminance(image, primaries, lum)
    return lum, scale, row_sums


def _scaled_luminance(image: np.ndarray, primaries: str, lum=None) -> tuple[np.ndarray, float]:
    """Luminance (float32) and the power of two it was scaled by to lie well inside float32's range."""
    lum = luminance(image, primaries) if lum is None else lum
    peak = float(lum.max())
    if _SCALE_LOW <= peak <= _SCALE_HIGH:
        return lum, 1.0
    if peak == 0.0:
        top = float(image.max())
        if top == 0.0:
            return lum, 1.0  # truly black
        peak = top  # every luminance underflowed: denormal pixels
    scale = 2.0 ** (-math.frexp(peak)[1])  # peak * scale in [0.5, 1)
    return luminance((image.astype(np.float64) * scale), primaries), scale


def table_from_function(f: SampledFunction, plan: BuildPlan, *, image=None, radiance_source=None,
                        source=None) -> EnvTable:
    """The table's arrays and metadata from the sampled function (its values become ``cell_pdf`` in place).

    ``image`` is the map to keep in memory (or None), ``radiance_source`` a function
    that returns it on demand, ``source`` the JSON-ready description of the map file.
    """
    cell_choice = plan.cell_choice
    lum = f.values
    h, w = lum.shape
    row_sa = row_solid_angles(h, w)
    want_inverse, want_alias = cell_choice in ("both", "inverse"), cell_choice in ("both", "alias")
    conditional, a_prob, a_index, row_totals = dist.build_rows(lum, row_scale=row_sa, cdf=want_inverse,
                                                               alias=want_alias)
    total = float(row_totals.sum())
    arrays = {}
    if want_inverse:
        arrays["marginal_cdf"], _ = dist.build_cdf(row_totals)
        arrays["conditional_cdf"] = conditional
    if want_alias:
        r_prob, r_index = dist.build_alias(row_totals)
        arrays.update(row_alias_probability=r_prob, row_alias_index=r_index.astype(np.uint32),
                      alias_probability=a_prob, alias_index=a_index)
    arrays["cell_pdf"] = _pdf_in_place(lum, total)
    metadata = _metadata(f, total, plan, source)
    return EnvTable(arrays=arrays, metadata=metadata, image=image, image_size=f.image_size,
                    radiance_source=radiance_source)


def _pdf_in_place(values: np.ndarray, total: float) -> np.ndarray:
    """``values / total`` (per steradian), divided in float64 row blocks so tiny or huge totals cannot round to 0/inf."""
    inv = 1.0 / total
    if 1e-30 < inv < 1e30:  # float32 holds 1/total with full precision: one multiplication in place
        np.multiply(values, np.float32(inv), out=values)
        return values
    step = max(1, (1 << 18) // values.shape[1])
    for r0 in range(0, values.shape[0], step):
        block = values[r0:r0 + step]
        block[...] = block / total
    return values


def _metadata(f: SampledFunction, total: float, plan: BuildPlan, source) -> dict:

    size = plan.size

    metadata = {
        "convention": convention(plan.up, plan.rotation_deg),
        "options": {
            "size": None if size is None else [int(size[0]), int(size[1])],
            "primaries": plan.primaries,
            "mapping": plan.mapping,
            "uniform_mix": plan.uniform_mix,
            "compensate": bool(plan.compensate),
            "cell_choice": plan.cell_choice,
        },
        "integrals": {
            "rgb": f.rgb_integral,
            "luminance": f.luminance_integral,
            "units": "map radiance units times steradians",
        },
        "sampled_integral": total / f.scale,
        "source": source,
        "notes": list(f.notes),
        "tool_version": __version__,
    }
    if plan.compensate:
        metadata["valid_only_inside_mis"] = True
    return metadata


def plan_build(map_size, *, size=None, primaries: str = "bt709", mapping: str = "equal-area",
               uniform_mix: float = 0.0, up: str = "y", rotation_deg: float = 0.0, compensate: bool = False,
               cell_choice: str = "both", allow_aspect: bool = False, max_memory=None) -> BuildPlan:
    """Check the options of a build for a map of ``map_size = (W, H)`` before anything is allocated.

    Refuses (ValueError, :class:`MapValidationError` or :class:`ResourceLimitError`
    with one line) unknown names, a non-finite rotation, a map or size that is not 2:1
    (unless ``allow_aspect``), a size above the map's or a fractional one, and a build
    whose memory estimate (:func:`build_memory_estimate`) exceeds the limit.
    """
    primaries = canonical_primaries(primaries)
    if mapping not in MAPPINGS:
        raise ValueError(f"unknown mapping {mapping!r}; valid: {', '.join(MAPPINGS)}")
    uniform_mix = float(uniform_mix)
    if not 0.0 <= uniform_mix < 1.0:
        raise ValueError(f"uniform_mix must be in [0, 1), got {uniform_mix}")
    if str(up).lower() not in ("y", "z"):
        raise ValueError(f"unknown up axis {up!r}; valid: y, z")
    rotation_deg = float(rotation_deg)
    if not math.isfinite(rotation_deg):
        raise ValueError(f"rotation_deg must be a finite number of degrees, got {rotation_deg}")
    if cell_choice not in CELL_CHOICES:
        raise ValueError(f"unknown cell_choice {cell_choice!r}; valid: {', '.join(CELL_CHOICES)}")
    W, H = (int(x) for x in map_size)
    size = parse_size(size)
    w, h = _check_grid(W, H, size, allow_aspect=allow_aspect)
    check_memory(build_memory_estimate(W, H, size, cell_choice=cell_choice),
                 what=f"a table of the {W}x{H} map" + (f" at {w}x{h}" if size else ""), limit=max_memory,
                 remedy="choose a smaller size")
    return BuildPlan((W, H), None if size is None or (w, h) == (W, H) else (w, h), primaries, mapping, uniform_mix,
                     str(up).lower(), rotation_deg, bool(compensate), cell_choice, bool(allow_aspect))


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
    cell_choice: str = "both",
    allow_aspect: bool = False,
    max_memory=None,
) -> EnvTable:
    """Build the sampling tables of an equirectangular map.

    Parameters
    ----------
    rgb : MapImage or array_like (H, W, 3)
        Linear radiance, row 0 at the zenith, W = 2H (else ``allow_aspect``).  Must be
        finite and non-negative (validate files with :func:`envsample.io.validate_map`).
    size : (width, height) or "WxH", optional
        Table grid, whole numbers, at most the map's size and 2:1; the map is reduced
        by an area-weighted box filter (power preserved).  Default: the map's own size.
    primaries : str
        Luminance weights: ``bt709`` (default; alias ``srgb``), ``bt2020``,
        ``acescg``, ``aces2065-1``, ``max`` or ``mean``.
    mapping : {"equal-area", "uv-linear"}
        In-cell mapping (module docstring).
    uniform_mix : float in [0, 1)
        Weight of uniform sphere sampling mixed into the table (Hesterberg 1995).
    up : {"y", "z"}; rotation_deg : float (finite, degrees)
        Direction convention, see :mod:`envsample.core.sphere`.
    compensate : bool
        Subtract the sphere-mean luminance and clamp at zero (Karlík et al. 2019).
        Such a table is valid only inside MIS.
    cell_choice : {"both", "inverse", "alias"}
        Which cell-choice methods the table holds: both (14 bytes per cell on disk),
        ``inverse`` only (8) or ``alias`` only (10).
    allow_aspect : bool
        Accept a map, or a ``size``, that is not 2:1.
    max_memory : size, optional
        Memory limit of the build (see :mod:`envsample.core.limits`); the estimate
        is checked before anything is allocated.

    Returns
    -------
    EnvTable
        Its ``image`` is the caller's array when that is already float32 (no copy,
        to keep memory low for large maps): do not modify it afterwards.
    """
    source = rgb.describe() if hasattr(rgb, "describe") else None
    image = map_pixels(rgb, name="map")
    plan = plan_build((image.shape[1], image.shape[0]), size=size, primaries=primaries, mapping=mapping,
                      uniform_mix=uniform_mix, up=up, rotation_deg=rotation_deg, compensate=compensate,
                      cell_choice=cell_choice, allow_aspect=allow_aspect, max_memory=max_memory)
    return table_from_function(sampled_function(image, plan), plan, image=image, source=source)


def load_table(prefix_or_path, *, source=None) -> EnvTable:
    """Load and verify a table written by :meth:`EnvTable.save`.

    Accepts the prefix or any of its files (a ``.bin`` path reads the binary, else
    the NPZ).  :func:`envsample.io.tables.read_table` checks the JSON with a strict
    typed reader, every size before any array data is read, and the sha256 of every
    array; :func:`envsample.sampling.checks.check_distribution` then checks that the
    arrays form one valid distribution (see there for the tolerances).  The radiance
    (:attr:`EnvTable.image`) is the embedded copy if the table has one, else the
    source map — or the map file ``source`` — read on first access and verified
    against the recorded sha256.  Raises :class:`TableFormatError` naming the file.
    """

    stored = read_table(prefix_or_path)
    check_distribution(stored.arrays, stored.array_path)
    doc = stored.doc
    metadata = {
        "convention": doc["convention"],
        "options": doc["options"],
        "integrals": doc["integrals"],
        "sampled_integral": float(doc["sampled_integral"]),
        "source": doc.get("source"),
        "notes": doc.get("notes", []),
        "tool_version": doc["tool"]["version"],
    }
    if doc.get("valid_only_inside_mis"):
        metadata["valid_only_inside_mis"] = True
    if "recommendation" in doc:
        metadata["recommendation"] = doc["recommendation"]
    if doc.get("lights"):
        metadata["lights"] = doc["lights"]
    arrays = dict(stored.arrays)
    image = arrays.pop("radiance", None)
    loader = None
    if image is None and (doc["radiance"] == "source" or source is not None):
        loader = source_radiance(doc, stored.paths["json"], override=source)
    return EnvTable(arrays=arrays, metadata=metadata, image=image,
                    image_size=(doc["image"]["width"], doc["image"]["height"]), radiance_source=loader)
