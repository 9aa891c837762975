"""Quality checks for equirectangular HDR environment maps, with profiles and reports.

Public objects
--------------
- :func:`check_map`: run every enabled check on a file or an in-memory map and
  return a :class:`Report`.
- :class:`Report`, :class:`CheckResult`, :class:`Source`: the results; ``Report.to_dict()``
  is the JSON report (schema :data:`REPORT_SCHEMA`), ``Report.exit_code()`` the CLI status.
- :func:`load_profile`, :class:`Profile`, :class:`ProfileError`: thresholds from TOML.
  ``envsample/profiles/default.toml`` holds every default, with its provenance.
- :data:`CHECKS`: the registry, check id -> function of a :class:`CheckContext`.
- :func:`format_report` (terminal table) and :func:`report_to_json` (many reports).

Adding a check: write ``def _check_name(ctx) -> CheckResult``, add ``"name": _check_name``
to :data:`CHECKS` and a ``[name]`` section (with ``enabled = true`` and its thresholds)
to ``profiles/default.toml``.  The profile loader derives the valid keys from that file.

Conventions
-----------
The map follows :mod:`envsample.sphere`: row 0 is the zenith, azimuth
``phi = 2*pi*(u - 0.5)`` (0 at the image centre, positive to the right, +-180 deg at
the seam), elevation ``90 deg - theta``.  Degrees appear only in messages and
report values; computations are in radians.  Solid angles are steradians (exact
per-pixel solid angles), luminance uses the profile's primaries, and integrals are
float64.  Photometric values (irradiance, lux) are estimates for asset
preparation, not certified lighting calculations.

Methods and sources
-------------------
- Pixel solid angles and the convention: :mod:`envsample.sphere`.
- Horizontal irradiance ``E = integral of L cos(theta) d omega`` over the upper
  hemisphere, exact per pixel row (cos-weighted solid angle of a latitude band,
  ``pi/W (sin^2 theta_1 - sin^2 theta_0)``; textbook calculus).  With luminance in
  cd/m2 this is illuminance in lux (CIE S 017/E:2020, ILV, terms 17-21-060 and
  17-21-050, from memory).
- Half-float limit 65504: IEEE 754-2008 binary16.
- sRGB decoding of 8/16-bit images: IEC 61966-2-1:1999.
- Connected components: ``scipy.ndimage.label`` (8-connectivity), joined across the
  left/right seam and around each pole.
- Test normals: the spherical Fibonacci lattice, Gonzalez, A. (2010). Measurement
  of areas on a sphere using Fibonacci and latitude-longitude lattices.
  Mathematical Geosciences 42(1), 49-64.
- Estimators and the balance heuristic: Veach, E. (1997). Robust Monte Carlo
  Methods for Light Transport Simulation. PhD thesis, Stanford University,
  chapter 9 (via :mod:`envsample.mis`).
- The sun's mean angular diameter 0.533 deg: :data:`envsample.constants.SUN_ANGULAR_DIAMETER_RAD`
  (from memory).
"""

from __future__ import annotations

import copy
import functools
import json
import math
import os
import tomllib
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np

from envsample.core.color import canonical_primaries, luminance
from envsample.core.constants import HALF_FLOAT_MAX, PRIMARIES, SUN_ANGULAR_DIAMETER_RAD, SUN_SOLID_ANGLE_SR
from envsample.core.latlong import row_channel_sums
from envsample.core.schema import Schema
from envsample.core.sphere import pixel_center_angles, row_cos_edges, row_solid_angles
from envsample.core.text import CAUTION, caution, number
from envsample.errors import EnvsampleError, MapReadError
from envsample.io.maps import MapImage, file_sha256, read_map

__all__ = [
    "SEVERITIES",
    "REPORT_SCHEMA",
    "REPORTS_SCHEMA",
    "RECOMMENDED_ESTIMATOR",
    "ProfileError",
    "Profile",
    "load_profile",
    "CheckResult",
    "Source",
    "Report",
    "CheckContext",
    "CHECKS",
    "check_map",
    "format_report",
    "report_to_json",
]

#: Severities from best to worst; a report's verdict is the worst of its checks.
SEVERITIES = ("pass", "warn", "fail")
_RANK = {s: i for i, s in enumerate(SEVERITIES)}

#: Name and version of the JSON report of one map (``Report.to_dict``).
REPORT_SCHEMA = Schema("envsample.qa-report", 2)
#: Name and version of the JSON document holding many reports (:func:`report_to_json`).
REPORTS_SCHEMA = Schema("envsample.qa-reports", 2)

_SUN_DIAMETER_DEG = math.degrees(SUN_ANGULAR_DIAMETER_RAD)

#: The MIS estimator the sampling check always reports (multi-sample, balance heuristic; Veach 1997, ch. 9).
RECOMMENDED_ESTIMATOR = "mis-balance"


# =============================================================================
# profiles
# =============================================================================


class ProfileError(EnvsampleError, ValueError):
    """A QA profile is missing, not valid TOML, or has an unknown section/key or a bad value."""


def _default_profile_text() -> str:
    return resources.files("envsample.qa").joinpath("profiles/default.toml").read_text(encoding="utf-8")


@functools.lru_cache(maxsize=1)
def _defaults() -> dict:
    return tomllib.loads(_default_profile_text())


@dataclass(frozen=True)
class Profile:
    """Thresholds of every check: ``sections[check_id][key]``, merged over the defaults.

    ``name`` comes from ``[profile] name``; ``path`` is the TOML file (None for the
    defaults or a mapping).  Use :func:`load_profile` to build one.
    """

    name: str
    path: str | None
    sections: dict

    def section(self, check_id: str) -> dict:
        """The settings of one check (a copy is not made: do not modify)."""
        return self.sections[check_id]

    @property
    def primaries(self) -> str:
        """Canonical luminance primaries of the maps checked with this profile."""
        return canonical_primaries(self.sections["profile"]["primaries"])

    def enabled(self, check_id: str) -> bool:
        return bool(self.sections.get(check_id, {}).get("enabled", True))

    def to_dict(self) -> dict:
        """JSON-ready name, path and every setting."""
        return {"name": self.name, "path": self.path, "settings": copy.deepcopy(self.sections)}


def _type_name(value) -> str:
    if isinstance(value, bool):
        return "true/false"
    if isinstance(value, int):
        return "an integer"
    if isinstance(value, float):
        return "a number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, list):
        return "a list of strings"
    return type(value).__name__


def _coerce(where: str, key: str, value, default):
    """Check ``value`` against the type of the default; ints are accepted where floats are."""
    ok = False
    if isinstance(default, bool):
        ok = isinstance(value, bool)
    elif isinstance(default, int):
        ok = isinstance(value, int) and not isinstance(value, bool)
    elif isinstance(default, float):
        ok = isinstance(value, (int, float)) and not isinstance(value, bool)
        if ok:
            value = float(value)
            ok = math.isfinite(value)
    elif isinstance(default, str):
        ok = isinstance(value, str)
    elif isinstance(default, list):
        ok = isinstance(value, list) and all(isinstance(v, str) for v in value)
    if not ok:
        raise ProfileError(f"{where}: {key} must be {_type_name(default)}, got {value!r}")
    return value


def _check_range(where: str, section: str, key: str, value) -> None:
    """Value checks that the type alone does not give (one-line messages with the remedy)."""
    full = f"[{section}] {key}"
    if key == "primaries":
        try:
            canonical_primaries(value)
        except ValueError as e:
            raise ProfileError(f"{where}: {full}: {e}") from None
    elif section == "sampling" and key == "estimator":
        from envsample.estimation.estimators import estimators

        if value not in estimators("irradiance"):
            raise ProfileError(f"{where}: {full}: unknown estimator {value!r}; valid names: "
                               f"{', '.join(estimators('irradiance'))}")
    elif key.endswith("_percentile"):
        if not 0.0 < value <= 100.0:
            raise ProfileError(f"{where}: {full} must be in (0, 100], got {value}")
    elif key.endswith(("_fraction", "_share")) or key == "plateau_relative_tolerance":
        if not 0.0 <= value <= 1.0:
            raise ProfileError(f"{where}: {full} must be in [0, 1], got {value}")
    elif isinstance(value, (int, float)) and not isinstance(value, bool) and key != "seed":
        if value < 0:
            raise ProfileError(f"{where}: {full} must be >= 0, got {value}")
    if key in ("spp", "repeats", "normals", "table_width", "table_height", "rows", "max_listed") and value < 1:
        raise ProfileError(f"{where}: {full} must be >= 1, got {value}")


def _merge(where: str, user: Mapping) -> dict:
    defaults = _defaults()
    merged = copy.deepcopy(defaults)
    for section, values in user.items():
        if section not in defaults:
            valid = ", ".join(sorted(defaults))
            raise ProfileError(f"{where}: unknown section [{section}]; valid sections: {valid}")
        if not isinstance(values, Mapping):
            raise ProfileError(f"{where}: [{section}] must be a table of settings, got {values!r}")
        for key, value in values.items():
            if key not in defaults[section]:
                valid = ", ".join(sorted(defaults[section]))
                raise ProfileError(f"{where}: unknown key {section}.{key}; valid keys in [{section}]: {valid}")
            value = _coerce(where, f"[{section}] {key}", value, defaults[section][key])
            _check_range(where, section, key, value)
            merged[section][key] = value
    dr = merged["dynamic-range"]
    if dr["low_percentile"] >= dr["high_percentile"]:
        raise ProfileError(f"{where}: [dynamic-range] low_percentile must be below high_percentile")
    for section, lo, hi in (("negative", "warn_above_fraction", "fail_above_fraction"),
                            ("seam", "warn_share", "fail_share"), ("poles", "warn_cv", "fail_cv"),
                            ("sampling", "warn_rmse", "fail_rmse"),
                            ("resolution", "fail_below_width", "warn_below_width")):
        if merged[section][lo] > merged[section][hi]:
            raise ProfileError(f"{where}: [{section}] {lo} must not exceed {hi}")
    return merged


def load_profile(path_or_none=None) -> Profile:
    """Read a QA profile (TOML) and merge it over the defaults.

    Parameters
    ----------
    path_or_none : str, PathLike, Mapping or None
        ``None`` (or ``"default"``) gives the defaults of ``profiles/default.toml``;
        a path reads that TOML file; a mapping ``{section: {key: value}}`` is
        validated like a file.  A profile lists only what it changes.

    Raises
    ------
    ProfileError
        Missing or unreadable file, invalid TOML, unknown section or key (the
        message names it and lists the valid ones), or a value of the wrong type
        or out of range.
    """
    if isinstance(path_or_none, Profile):
        return path_or_none
    if path_or_none is None or (isinstance(path_or_none, str) and path_or_none == "default"):
        sections = _merge("default profile", {})
        return Profile(name=sections["profile"]["name"], path=None, sections=sections)
    if isinstance(path_or_none, Mapping):
        sections = _merge("profile", path_or_none)
        return Profile(name=sections["profile"]["name"], path=None, sections=sections)
    if not isinstance(path_or_none, (str, os.PathLike)):
        raise TypeError(f"profile must be a path, a mapping, a Profile or None, got {type(path_or_none).__name__}")
    p = Path(path_or_none)
    where = f"profile {p}"
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ProfileError(f"{where}: file not found; pass an existing TOML file or omit it for the defaults") from None
    except (OSError, UnicodeDecodeError) as e:
        raise ProfileError(f"{where}: cannot be read ({e.__class__.__name__}: {e}); check the file") from None
    try:
        user = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise ProfileError(f"{where}: not valid TOML ({e}); fix the syntax") from None
    sections = _merge(where, user)
    return Profile(name=sections["profile"]["name"], path=str(p), sections=sections)


# =============================================================================
# results
# =============================================================================


def _jsonable(x):
    """Plain JSON values: numpy scalars to Python, non-finite floats to None, tuples to lists."""
    if isinstance(x, dict):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if isinstance(x, np.ndarray):
        return [_jsonable(v) for v in x.tolist()]
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        x = float(x)
        return x if math.isfinite(x) else None
    if x is None or isinstance(x, str):
        return x
    return str(x)


@dataclass
class CheckResult:
    """The outcome of one check.

    ``id`` is the stable check name; ``severity`` one of :data:`SEVERITIES`;
    ``value`` the measured quantity and ``threshold`` the limit it was compared with
    (numbers, strings or None; units in the message); ``message`` one line;
    ``remedy`` one line ("" when nothing is to be done); ``details`` JSON-ready extras.
    """

    id: str
    severity: str
    value: object = None
    threshold: object = None
    message: str = ""
    remedy: str = ""
    details: dict = field(default_factory=dict)

    def __post_init__(self):
        if self.severity not in _RANK:
            raise ValueError(f"severity must be one of {', '.join(SEVERITIES)}, got {self.severity!r}")

    def to_dict(self) -> dict:
        return {
            "id": self.id,
            "severity": self.severity,
            "value": _jsonable(self.value),
            "threshold": _jsonable(self.threshold),
            "message": self.message,
            "remedy": self.remedy,
            "details": _jsonable(self.details),
        }


@dataclass(frozen=True)
class Source:
    """Where a map came from: ``path`` (str or None), ``sha256`` of the file bytes, ``size`` in bytes."""

    path: str | None = None
    sha256: str | None = None
    size: int | None = None

    def to_dict(self) -> dict:
        return {"path": self.path, "sha256": self.sha256, "size": self.size}


@dataclass
class Report:
    """All check results for one map.

    Attributes
    ----------
    source : Source
    checks : list of CheckResult, in registry order
    skipped : list of {"id", "reason"} for checks that were disabled or could not run
    profile : str, the profile's name; profile_path : str or None
    image : dict or None, the map's metadata (``MapImage.describe()``), None if unreadable
    readable : bool, False when the file could not be read (then only ``read`` is present)
    """

    source: Source
    checks: list
    skipped: list = field(default_factory=list)
    profile: str = "default"
    profile_path: str | None = None
    image: dict | None = None
    readable: bool = True

    @property
    def verdict(self) -> str:
        """The worst severity of the checks ("pass" when there are none)."""
        worst = max((_RANK[c.severity] for c in self.checks), default=0)
        return SEVERITIES[worst]

    def counts(self) -> dict:
        """Number of checks per severity."""
        out = {s: 0 for s in SEVERITIES}
        for c in self.checks:
            out[c.severity] += 1
        return out

    def get(self, check_id: str) -> CheckResult | None:
        """The result of one check, or None if it did not run."""
        for c in self.checks:
            if c.id == check_id:
                return c
        return None

    def __getitem__(self, check_id: str) -> CheckResult:
        found = self.get(check_id)
        if found is None:
            raise KeyError(check_id)
        return found

    def ids(self, severity: str) -> list[str]:
        """Ids of the checks with the given severity."""
        return [c.id for c in self.checks if c.severity == severity]

    def exit_code(self, strict: bool = False) -> int:
        """CLI status: 2 unreadable input, 1 any failure (or any warning when ``strict``), else 0."""
        if not self.readable:
            return 2
        v = self.verdict
        if v == "fail" or (strict and v == "warn"):
            return 1
        return 0

    def to_dict(self) -> dict:
        """The JSON report (schema :data:`REPORT_SCHEMA`); keys are stable within a schema version."""
        return {
            **REPORT_SCHEMA.header(),
            "source": self.source.to_dict(),
            "readable": self.readable,
            "verdict": self.verdict,
            "counts": self.counts(),
            "profile": {"name": self.profile, "path": self.profile_path},
            "image": _jsonable(self.image),
            "checks": [c.to_dict() for c in self.checks],
            "skipped": _jsonable(self.skipped),
            "caution": caution("photometric values"),
        }


# =============================================================================
# context shared by the checks
# =============================================================================


def _srgb_decode(v: np.ndarray) -> np.ndarray:
    """sRGB code values in [0, 1] to linear (IEC 61966-2-1:1999, the piecewise EOTF)."""
    v = np.clip(v, 0.0, 1.0)
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4).astype(np.float32)


class _RowWeightedSample:
    """Exact quantiles of a non-negative (H, W) image whose pixels weigh their row's solid angle.

    For non-negative floats the float32 bit pattern is monotone in the value, so the
    top 16 bits split the pixels into 65536 ordered buckets.  One weighted histogram
    of those buckets (O(n)) locates the bucket that holds a quantile; only that
    bucket's pixels are then sorted.  Exact, and several times faster than sorting
    every pixel of a multi-megapixel map.
    """

    def __init__(self, values: np.ndarray, row_weights: np.ndarray):
        v = np.ascontiguousarray(np.where(values > 0, values, 0), dtype=np.float32)  # also turns -0.0 into 0.0
        self._bits = v.view(np.uint32)
        self._bucket = (self._bits >> np.uint32(16)).astype(np.int32)
        self._row_weights = np.asarray(row_weights, dtype=np.float64)
        weights = np.repeat(self._row_weights, v.shape[1]) if v.ndim == 2 else self._row_weights
        hist = np.bincount(self._bucket.ravel(), weights=weights, minlength=1 << 16)
        self._cumulative = np.cumsum(hist)
        self.size = v.size

    def quantile(self, q: float) -> float:
        """The smallest value whose weighted CDF reaches ``q`` in [0, 1]."""
        total = self._cumulative[-1] if self.size else 0.0
        if not total > 0:
            return 0.0
        target = q * total
        b = int(np.searchsorted(self._cumulative, target, side="left"))
        b = min(b, self._cumulative.size - 1)
        below = float(self._cumulative[b - 1]) if b > 0 else 0.0
        rows, cols = np.nonzero(self._bucket == b)
        if rows.size == 0:  # only reachable through rounding at the very top: the largest value
            return float(self._bits.max().view(np.float32))
        bits = self._bits[rows, cols]
        order = np.argsort(bits, kind="stable")
        cum = below + np.cumsum(self._row_weights[rows[order]])
        k = int(np.searchsorted(cum, target, side="left"))
        return float(bits[order[min(k, order.size - 1)]].view(np.float32))


@dataclass
class Emitter:
    """A connected bright region: power share, solid angle (sr), direction and size."""

    label: int
    pixels: int
    solid_angle_sr: float
    share: float
    azimuth_deg: float
    elevation_deg: float
    diameter_deg: float
    pixel_diameter_deg: float
    peak: float

    @property
    def resolved(self) -> bool:
        """Wider than two pixels: its measured size says something about the source."""
        return self.diameter_deg > 2.0 * self.pixel_diameter_deg

    def to_dict(self) -> dict:
        return {
            "azimuth_deg": round(self.azimuth_deg, 3),
            "elevation_deg": round(self.elevation_deg, 3),
            "solid_angle_sr": self.solid_angle_sr,
            "share": self.share,
            "pixels": self.pixels,
            "diameter_deg": round(self.diameter_deg, 4),
            "sun_diameter_ratio": self.diameter_deg / _SUN_DIAMETER_DEG,
            "resolved": self.resolved,
            "peak_luminance": self.peak,
        }


def _cap_diameter(omega) -> np.ndarray:
    """Angular diameter (radians) of the spherical cap of solid angle ``omega`` (sr): 2 acos(1 - omega / 2 pi)."""
    return 2.0 * np.arccos(np.clip(1.0 - np.asarray(omega, dtype=np.float64) / (2.0 * math.pi), -1.0, 1.0))


def label_wrapped(mask: np.ndarray) -> tuple[np.ndarray, int]:
    """Connected components of a lat-long mask (8-connectivity) that wrap at the seam and the poles.

    Pixels in column 0 touch those in column W-1 (rows i-1..i+1), and all pixels of
    the first row (and of the last) meet at the pole.  Returns ``(labels, count)``
    like :func:`scipy.ndimage.label`: int32 labels 1..count, 0 for background.
    """
    from scipy import ndimage, sparse
    from scipy.sparse.csgraph import connected_components

    H, W = mask.shape
    rows = np.nonzero(mask.any(axis=1))[0]
    if rows.size == 0:
        return np.zeros(mask.shape, dtype=np.int32), 0
    # Label only the band of rows that holds the mask: emitters are small on big maps.
    lo, hi = int(rows[0]), int(rows[-1]) + 1
    band, n = ndimage.label(mask[lo:hi], structure=np.ones((3, 3), dtype=bool))
    labels = np.zeros(mask.shape, dtype=np.int32)
    labels[lo:hi] = band
    if n <= 1:
        return labels, int(n)
    a_parts, b_parts = [], []
    left, right = labels[:, 0], labels[:, W - 1]
    for shift in (-1, 0, 1):
        lo, hi = max(0, -shift), H - max(0, shift)
        a_parts.append(left[lo:hi])
        b_parts.append(right[lo + shift:hi + shift])
    for row in (labels[0], labels[H - 1]):
        present = np.unique(row[row > 0])
        if present.size > 1:
            a_parts.append(present[:-1])
            b_parts.append(present[1:])
    a = np.concatenate(a_parts)
    b = np.concatenate(b_parts)
    keep = (a > 0) & (b > 0) & (a != b)
    if not keep.any():
        return labels.astype(np.int32), int(n)
    graph = sparse.coo_matrix((np.ones(int(keep.sum())), (a[keep], b[keep])), shape=(n + 1, n + 1))
    count, comp = connected_components(graph, directed=False)
    # Renumber so that background stays 0 and components are 1..m in order of first label.
    _, first = np.unique(comp[1:], return_index=True)
    order = np.argsort(first)
    remap = np.zeros(count, dtype=np.int64)
    remap[np.unique(comp[1:])[order]] = np.arange(1, order.size + 1)
    table = np.concatenate([[0], remap[comp[1:]]]).astype(np.int32)
    return table[labels], int(order.size)


class CheckContext:
    """What every check may use; expensive quantities are computed once, on first use.

    Attributes
    ----------
    image : MapImage (as read; ``image.rgb`` may hold NaN, Inf, negatives)
    raw : float32 (H, W, 3) ``image.rgb``
    rgb : float32 (H, W, 3) linear radiance with non-finite values set to 0 and
        negatives clamped to 0 (8/16-bit images are sRGB-decoded first), so that a
        defect reported by one check does not break the others
    luminance : float32 (H, W) of ``rgb`` with the profile's primaries
    row_solid_angles : float64 (H,) steradians of one pixel in each row
    solid_angles : float64 (H, W) read-only broadcast of it
    profile : Profile
    """

    def __init__(self, image: MapImage, profile: Profile):
        self.image = image
        self.profile = profile
        self.raw = image.rgb
        self.height, self.width = int(self.raw.shape[0]), int(self.raw.shape[1])
        self.row_solid_angles = row_solid_angles(self.height, self.width)
        self.solid_angles = np.broadcast_to(self.row_solid_angles[:, None], (self.height, self.width))

    def settings(self, check_id: str) -> dict:
        return self.profile.section(check_id)

    @functools.cached_property
    def finite(self) -> np.ndarray:
        """bool (H, W, 3): finite channels."""
        return np.isfinite(self.raw)

    @functools.cached_property
    def all_finite(self) -> bool:
        """No NaN or Inf anywhere: one float64 sum, which any of them poisons (no boolean image)."""
        with np.errstate(invalid="ignore", over="ignore"):
            return bool(np.isfinite(np.sum(self.raw, dtype=np.float64)))

    @functools.cached_property
    def clean(self) -> bool:
        """Finite and non-negative everywhere (the common case, decided in two passes)."""
        return self.all_finite and float(self.raw.min()) >= 0.0

    @functools.cached_property
    def rgb(self) -> np.ndarray:
        rgb = self.raw
        if not self.image.is_hdr:
            rgb = _srgb_decode(rgb)
        elif self.clean:
            return rgb
        bad = ~self.finite
        if bad.any() or (rgb < 0).any():
            rgb = np.where(bad | (rgb < 0), np.float32(0.0), rgb).astype(np.float32)
        return rgb

    @functools.cached_property
    def luminance(self) -> np.ndarray:
        return luminance(self.rgb, self.profile.primaries)

    @functools.cached_property
    def row_power(self) -> np.ndarray:
        """float64 (H,): integral of luminance over each row, map units x sr."""
        return self.luminance.sum(axis=1, dtype=np.float64) * self.row_solid_angles

    @functools.cached_property
    def total_power(self) -> float:
        """Integral of luminance over the sphere, map units x sr."""
        return float(self.row_power.sum())

    @functools.cached_property
    def _sorted_luminance(self) -> _RowWeightedSample:
        return _RowWeightedSample(self.luminance, self.row_solid_angles)

    @functools.cached_property
    def median_luminance(self) -> float:
        """Solid-angle-weighted median luminance."""
        return self.quantile(0.5)

    def quantile(self, q: float) -> float:
        """Solid-angle-weighted quantile of luminance, ``q`` in [0, 1]."""
        return self._sorted_luminance.quantile(q)

    @functools.cached_property
    def max_channel(self) -> np.ndarray:
        """float32 (H, W): the largest channel of ``rgb`` (clipping happens per channel)."""
        return luminance(self.rgb, "max")

    @functools.cached_property
    def constant_rows(self) -> np.ndarray:
        """bool (H,): rows whose pixels all have the same largest channel."""
        m = self.max_channel
        return m.max(axis=1) == m.min(axis=1)

    @functools.cached_property
    def emitter_labels(self) -> tuple[np.ndarray, int]:
        """Wrapped connected components of the emitter mask (see :func:`_emitter_level`)."""
        return label_wrapped(self.luminance > _emitter_level(self))

    @functools.cached_property
    def pixel_directions(self) -> tuple[np.ndarray, np.ndarray]:
        """(theta (H,), phi (W,)) of pixel centres, radians."""
        theta = (np.arange(self.height) + 0.5) * (math.pi / self.height)
        phi = (np.arange(self.width) + 0.5) * (2.0 * math.pi / self.width) - math.pi
        return theta, phi

    @functools.cached_property
    def emitters(self) -> list[Emitter]:
        """Bright connected regions, by decreasing power (see the ``[sun]`` profile section)."""
        return _find_emitters(self)


def _emitter_level(ctx: CheckContext) -> float:
    """Luminance above which a pixel belongs to an emitter (``[sun]`` thresholds)."""
    s = ctx.settings("sun")
    peak = float(ctx.luminance.max()) if ctx.luminance.size else 0.0
    return max(s["threshold_median_multiple"] * ctx.median_luminance, s["threshold_max_fraction"] * peak)


def _find_emitters(ctx: CheckContext) -> list[Emitter]:
    lum = ctx.luminance
    total = ctx.total_power
    if not total > 0.0 or not float(lum.max()) > 0.0:
        return []
    labels, n = ctx.emitter_labels
    if n == 0:
        return []
    rows, cols = np.nonzero(labels)
    lab = labels[rows, cols]
    y = lum[rows, cols].astype(np.float64)
    omega_px = ctx.row_solid_angles[rows]
    p = y * omega_px
    theta, phi = ctx.pixel_directions
    st = np.sin(theta[rows])

    def per_label(weights):
        return np.bincount(lab, weights=weights, minlength=n + 1)[1:]

    power = per_label(p)
    omega = per_label(omega_px)
    count = per_label(None)
    peaks = np.zeros(n + 1)
    np.maximum.at(peaks, lab, y)
    # Power-weighted mean direction; a component around a pole or across the seam averages correctly.
    dx = per_label(p * st * np.cos(phi[cols]))
    dy = per_label(p * st * np.sin(phi[cols]))
    dz = per_label(p * np.cos(theta[rows]))
    mean_row = per_label(p * rows) / np.maximum(power, 1e-300)
    out = []
    for k in np.argsort(-power, kind="stable"):
        norm = math.sqrt(dx[k] ** 2 + dy[k] ** 2 + dz[k] ** 2)
        if norm > 0:
            elev = math.degrees(math.asin(max(-1.0, min(1.0, dz[k] / norm))))
            az = math.degrees(math.atan2(dy[k], dx[k]))
        else:
            elev, az = 0.0, 0.0
        row = int(min(ctx.height - 1, max(0, round(mean_row[k]))))
        out.append(Emitter(
            label=int(k + 1),
            pixels=int(count[k]),
            solid_angle_sr=float(omega[k]),
            share=float(power[k] / total),
            azimuth_deg=az,
            elevation_deg=elev,
            diameter_deg=math.degrees(float(_cap_diameter(omega[k]))),
            pixel_diameter_deg=math.degrees(float(_cap_diameter(ctx.row_solid_angles[row]))),
            peak=float(peaks[k + 1]),
        ))
    return out


# =============================================================================
# checks
# =============================================================================


def _fmt(x, digits: int = 3) -> str:
    """A number for a message: ``digits`` significant digits, no exponent for ordinary sizes."""
    if x is None:
        return "-"
    if isinstance(x, np.integer):
        x = int(x)
    return number(x, digits)


def _deg(x: float) -> str:
    """An angle in degrees for a message, to 0.1 deg (0.01 deg below 1 deg)."""
    x = float(x)
    text = f"{x:.2f}" if abs(x) < 1.0 else f"{x:.1f}"
    return "0" if float(text) == 0.0 else text


def _pct(fraction: float) -> str:
    p = 100.0 * fraction
    if 0.0 < p < 1e-3:
        return "<0.001%"  # rounding residue of a black region; more digits would only mislead
    return f"{p:.2g}%" if p < 1 else f"{p:.3g}%"


def _check_read(ctx: CheckContext) -> CheckResult:
    im = ctx.image
    fmt = im.format
    extra = ", ".join(x for x in (im.pixel_type, im.compression) if x)
    return CheckResult("read", "pass", value=fmt, threshold=None,
                       message=f"read {ctx.width}x{ctx.height} {fmt}" + (f" ({extra})" if extra else ""))


def _check_hdr(ctx: CheckContext) -> CheckResult:
    im = ctx.image
    if ctx.all_finite:
        peak = float(ctx.raw.max()) if ctx.raw.size else None
    else:
        finite = ctx.raw[ctx.finite]
        peak = float(finite.max()) if finite.size else None
    if im.is_hdr:
        return CheckResult("hdr", "pass", value=True, threshold=True,
                           message=f"high dynamic range data ({im.pixel_type}), brightest value {_fmt(peak)}")
    return CheckResult(
        "hdr", "fail", value=False, threshold=True,
        message=f"{im.pixel_type} {im.format} holds display-referred values that stop at 1.0: light sources are clipped",
        remedy="supply a linear HDR capture (.exr or .hdr); an LDR image cannot light a scene correctly",
        details={"max_code_value": peak},
    )


def _check_pixel_type(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("pixel-type")
    t = ctx.image.pixel_type
    if t in s["accept"]:
        return CheckResult("pixel-type", "pass", value=t, threshold=list(s["accept"]), message=f"{t} samples")
    if t in s["warn"]:
        levels = {"uint8": 256, "uint16": 65536}.get(t)
        what = f"{levels} levels per channel: gradients band" if levels else "quantised samples"
        return CheckResult("pixel-type", "warn", value=t, threshold=list(s["accept"]),
                           message=f"{t} integer samples, {what}",
                           remedy="store radiance as half or float (OpenEXR) or rgbe (.hdr)")
    return CheckResult("pixel-type", "fail", value=t, threshold=list(s["accept"]),
                       message=f"{t} samples do not hold radiance (accepted: {', '.join(s['accept'])})",
                       remedy="write the colour channels as half or float")


def _base_channel(name: str) -> str:
    return name.rsplit(".", 1)[-1].upper()


def _check_channels(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("channels")
    names = list(ctx.image.channels or [])
    bases = [_base_channel(n) for n in names]
    details = {"channels": names}
    if {"R", "G", "B"} <= set(bases):
        colour = "RGB"
    elif "Y" in bases:
        return CheckResult("channels", "warn", value=",".join(names), threshold="R,G,B",
                           message="greyscale (Y only): the light has no colour",
                           remedy="export the R, G and B channels", details=details)
    else:
        return CheckResult("channels", "fail", value=",".join(names), threshold="R,G,B",
                           message=f"no R, G, B or Y channels among {', '.join(names) or 'none'}",
                           remedy="export the colour channels as R, G, B", details=details)
    alpha = ctx.image.alpha
    if alpha is not None and s["warn_on_alpha"]:
        a = alpha[np.isfinite(alpha)]
        transparent = float(np.mean(a < 1.0)) if a.size else 0.0
        details["alpha_below_one_fraction"] = transparent
        if transparent > 0:
            return CheckResult("channels", "warn", value=",".join(names), threshold="R,G,B",
                               message=f"{colour} with alpha below 1 in {_pct(transparent)} of pixels; alpha is ignored",
                               remedy="remove alpha, or un-premultiply the colour if it was premultiplied",
                               details=details)
    return CheckResult("channels", "pass", value=",".join(names), threshold="R,G,B",
                       message=f"{colour}" + (" + alpha" if alpha is not None else ""), details=details)


def _check_aspect(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("aspect")
    ratio = ctx.width / ctx.height
    ok = abs(ratio / s["ratio"] - 1.0) <= s["tolerance"] + 1e-12
    msg = f"{ctx.width}x{ctx.height} is {_fmt(ratio, 4)}:1"
    if ok:
        return CheckResult("aspect", "pass", value=ratio, threshold=s["ratio"], message=msg)
    return CheckResult("aspect", "fail", value=ratio, threshold=s["ratio"],
                       message=f"{msg}, not the {_fmt(s['ratio'])}:1 of an equirectangular map",
                       remedy="re-project to equirectangular (2:1); convert cube maps or mirror balls first")


def _check_resolution(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("resolution")
    w = ctx.width
    step = 360.0 / w
    msg = f"{w}x{ctx.height}: one pixel spans {_fmt(step)} deg (the sun {_SUN_DIAMETER_DEG:.3f} deg)"
    if w < s["fail_below_width"]:
        return CheckResult("resolution", "fail", value=w, threshold=s["fail_below_width"],
                           message=f"{msg}; below {s['fail_below_width']} px wide",
                           remedy="supply a larger map")
    if w < s["warn_below_width"]:
        return CheckResult("resolution", "warn", value=w, threshold=s["warn_below_width"],
                           message=f"{msg}; below {s['warn_below_width']} px wide, reflections will be blurry",
                           remedy="use this map for diffuse lighting only, or supply a larger one")
    return CheckResult("resolution", "pass", value=w, threshold=s["warn_below_width"], message=msg)


def _count_check(ctx: CheckContext, check_id: str, bad: np.ndarray, what: str) -> CheckResult:
    s = ctx.settings(check_id)
    count = int(bad.sum())
    if count <= s["max_pixels"]:
        return CheckResult(check_id, "pass", value=count, threshold=s["max_pixels"],
                           message=f"no {what} pixels" if count == 0 else f"{count} {what} pixels (allowed)")
    r, c = np.argwhere(bad)[0]
    frac = count / bad.size
    return CheckResult(
        check_id, "fail", value=count, threshold=s["max_pixels"],
        message=(f"{count} pixel{'s' if count > 1 else ''} ({_pct(frac)}) "
                 f"{'have' if count > 1 else 'has'} a {what} channel, first at row {r}, column {c}"),
        remedy="fix them at the source, or repair them to 0 (envsample build --repair; validate_map(repair=True) in Python)",
        details={"first_row": int(r), "first_column": int(c), "fraction": frac},
    )


def _no_bad_pixels(ctx: CheckContext, check_id: str, what: str) -> CheckResult:
    s = ctx.settings(check_id)
    return CheckResult(check_id, "pass", value=0, threshold=s["max_pixels"], message=f"no {what} pixels")


def _check_nan(ctx: CheckContext) -> CheckResult:
    if ctx.all_finite:  # the common case costs one pass instead of a full boolean image
        return _no_bad_pixels(ctx, "nan", "NaN")
    return _count_check(ctx, "nan", np.isnan(ctx.raw).any(axis=2), "NaN")


def _check_inf(ctx: CheckContext) -> CheckResult:
    if ctx.all_finite:
        return _no_bad_pixels(ctx, "inf", "infinite")
    return _count_check(ctx, "inf", np.isinf(ctx.raw).any(axis=2), "infinite")


def _check_negative(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("negative")
    if ctx.clean:
        return CheckResult("negative", "pass", value=0.0, threshold=s["warn_above_fraction"],
                           message="no negative values")
    with np.errstate(invalid="ignore"):
        neg = (ctx.raw < 0).any(axis=2)
    frac = float((neg * ctx.solid_angles).sum() / (4.0 * math.pi))
    if not neg.any():
        return CheckResult("negative", "pass", value=0.0, threshold=s["warn_above_fraction"],
                           message="no negative values")
    low = float(np.min(np.where(ctx.finite, ctx.raw, 0.0)))
    details = {"pixels": int(neg.sum()), "most_negative": low}
    msg = f"negative values over {_pct(frac)} of the sphere ({int(neg.sum())} pixels, down to {_fmt(low)})"
    if frac > s["fail_above_fraction"]:
        return CheckResult("negative", "fail", value=frac, threshold=s["fail_above_fraction"], message=msg,
                           remedy="redo the colour conversion (negatives are out-of-gamut colours); clamp only a few",
                           details=details)
    if frac > s["warn_above_fraction"]:
        return CheckResult("negative", "warn", value=frac, threshold=s["warn_above_fraction"], message=msg,
                           remedy="clamp them to 0 (validate_map does) or convert to a wider gamut",
                           details=details)
    return CheckResult("negative", "pass", value=frac, threshold=s["warn_above_fraction"], message=msg,
                       details=details)


def _check_dynamic_range(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("dynamic-range")
    hi = ctx.quantile(s["high_percentile"] / 100.0)
    lo = ctx.quantile(s["low_percentile"] / 100.0)
    peak = float(ctx.luminance.max())
    details = {"high": hi, "low": lo, "max": peak,
               "high_percentile": s["high_percentile"], "low_percentile": s["low_percentile"]}
    names = f"p{_fmt(s['high_percentile'], 4)}/p{_fmt(s['low_percentile'], 4)}"
    if not hi > 0.0:
        return CheckResult("dynamic-range", "warn", value=None, threshold=s["warn_below_stops"],
                           message=f"luminance is zero up to the {names.split('/')[0]}: the map is (nearly) black",
                           remedy="check the exposure of the export", details=details)
    if not lo > 0.0:
        return CheckResult("dynamic-range", "pass", value=None, threshold=s["warn_below_stops"],
                           message=f"{_fmt(s['low_percentile'])}% of the sphere or more is black; {names} undefined",
                           details=details)
    stops = math.log2(hi / lo)
    details["max_stops"] = math.log2(peak / lo)
    msg = f"{_fmt(stops)} stops between {names} of luminance ({_fmt(details['max_stops'])} to the maximum)"
    if stops < s["warn_below_stops"]:
        return CheckResult("dynamic-range", "warn", value=stops, threshold=s["warn_below_stops"],
                           message=msg + ": a flat map, its light has no direction",
                           remedy="check that this is the HDR capture and not a flat placeholder", details=details)
    return CheckResult("dynamic-range", "pass", value=stops, threshold=s["warn_below_stops"], message=msg,
                       details=details)


def _ring(mask: np.ndarray) -> np.ndarray:
    """Pixels 8-adjacent to ``mask`` (wrapping at the seam), not in it."""
    padded = np.concatenate([mask[:, -1:], mask, mask[:, :1]], axis=1)
    grown = padded.copy()
    grown[1:] |= padded[:-1]
    grown[:-1] |= padded[1:]
    g2 = grown.copy()
    g2[:, 1:] |= grown[:, :-1]
    g2[:, :-1] |= grown[:, 1:]
    return g2[:, 1:-1] & ~mask


def _plateau(ctx: CheckContext, region: np.ndarray | None, s: dict) -> dict | None:
    """The largest plateau at the maximum of ``region`` (whole map if None); its size, contrast and shoulder."""
    m = ctx.max_channel
    values = m if region is None else np.where(region, m, -np.inf)
    level = float(values.max())
    if not level > 0.0:
        return None
    mask = values >= level * (1.0 - s["plateau_relative_tolerance"])
    # Rows of identical pixels are an azimuth-independent sky (and pole rows image one
    # direction): equal values there are not clipping.
    mask &= ~ctx.constant_rows[:, None]
    if not mask.any():
        return None
    labels, n = label_wrapped(mask)
    # Work in the band of rows that holds the mask (plus the shoulder's margin): plateaus
    # are small, and full-size passes would dominate the check on big maps.
    hit = np.nonzero(mask.any(axis=1))[0]
    lo, hi = max(0, int(hit[0]) - 3), min(ctx.height, int(hit[-1]) + 4)
    lab = labels[lo:hi]
    rows, _ = np.nonzero(lab)
    omega = np.bincount(lab[lab > 0], weights=ctx.row_solid_angles[rows + lo], minlength=n + 1)[1:]
    k = int(np.argmax(omega)) + 1
    comp = lab == k
    # The shoulder: pixels two steps out from the plateau.  A clipped smooth source
    # (sun with glare, a blown-out sky) still rises towards the plateau there; a
    # sharp-edged uniform emitter (a synthetic area light) is back to its background.
    inner = comp | _ring(comp)
    ring2 = _ring(inner)
    lum = ctx.luminance[lo:hi]
    top = float(lum[comp].mean())
    bg = ctx.median_luminance
    if ring2.any() and top > bg:
        shoulder = float(np.median(np.clip((lum[ring2] - bg) / (top - bg), 0.0, 1.0)))
    else:
        shoulder = 0.0
    row_idx = np.nonzero(comp.any(axis=1))[0] + lo
    return {
        "level": level,
        "pixels": int(comp.sum()),
        "solid_angle_sr": float(omega[k - 1]),
        "sun_multiple": float(omega[k - 1] / SUN_SOLID_ANGLE_SR),
        "contrast": top / bg if bg > 0 else math.inf,
        "shoulder": shoulder,
        "rows": [int(row_idx.min()), int(row_idx.max())],
    }


def _plateau_is_clipped(p: dict, s: dict, *, shoulder: bool = True) -> bool:
    """Large, bright and (with ``shoulder``) still rising just outside: the signs of clipping."""
    big = (p["pixels"] >= s["plateau_min_pixels"] and p["sun_multiple"] >= s["plateau_min_sun_multiple"]
           and p["contrast"] >= s["plateau_min_contrast"])
    return big and (not shoulder or p["shoulder"] >= s["plateau_min_shoulder"])


def _check_clipping(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("clipping")
    with np.errstate(invalid="ignore"):
        at_half = (ctx.raw == np.float32(HALF_FLOAT_MAX)).any(axis=2)
    n_half = int(at_half.sum())
    if n_half >= s["half_max_pixels"] and n_half > 0:
        return CheckResult(
            "clipping", "fail", value=n_half, threshold=s["half_max_pixels"],
            message=f"{n_half} pixels hold {HALF_FLOAT_MAX:g}, the largest half float: values were clamped when written",
            remedy="write float32, or scale the map down before writing half (and record the scale)",
            details={"half_max_pixels": n_half},
        )
    candidates = []
    whole = _plateau(ctx, None, s)
    if whole is not None:
        candidates.append(("maximum", whole))
    if ctx.emitters:
        region = _emitter_mask(ctx, ctx.emitters[0])
        if region is not None:
            flat = _plateau(ctx, region, s)
            if flat is not None and (whole is None or flat["level"] != whole["level"]):
                candidates.append(("brightest emitter", flat))
    for where, p in candidates:
        if _plateau_is_clipped(p, s):
            shape = "flat-topped sun" if where == "brightest emitter" else "plateau at the maximum"
            return CheckResult(
                "clipping", "fail", value=p["pixels"], threshold=s["plateau_min_pixels"],
                message=(f"{shape}: {p['pixels']} pixels ({_fmt(p['sun_multiple'])}x the sun's solid angle) "
                         f"equal {_fmt(p['level'])}, {_fmt(p['contrast'])}x the median"),
                remedy="recapture or re-merge the brightest source with shorter exposures; or replace it by an analytic light",
                details={"plateau": p, "where": where},
            )
    note = "no plateau at the maximum"
    details = {}
    for where, p in candidates:
        details["plateau"] = p
        note = (f"largest plateau at the maximum: {p['pixels']} px, {_fmt(p['sun_multiple'])}x the sun's solid angle "
                "(not clipped)")
        if _plateau_is_clipped(p, s, shoulder=False):
            note = (f"{p['pixels']} pixels share the maximum inside a sharp-edged emitter "
                    "(a uniform area light; a capture would show noise)")
        break
    value = details.get("plateau", {}).get("pixels", 0)
    return CheckResult("clipping", "pass", value=value, threshold=s["plateau_min_pixels"], message=note,
                       details=details)


def _emitter_mask(ctx: CheckContext, e: Emitter) -> np.ndarray | None:
    region = ctx.emitter_labels[0] == e.label
    return region if region.any() else None


def _check_seam(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("seam")
    cap = ctx.quantile(s["clamp_percentile"] / 100.0)
    lc = np.minimum(ctx.luminance, np.float32(cap))
    edge = np.abs(lc[:, 0] - lc[:, -1]).astype(np.float64)
    if ctx.width > 1:
        # The typical neighbouring-column step of a row: the median over at most 1024
        # evenly spread column pairs estimates it as well as all of them, at a fraction of the cost.
        cols = np.unique(np.linspace(0, ctx.width - 2, min(ctx.width - 1, 1024)).astype(np.int64))
        typical = np.median(np.abs(lc[:, cols + 1] - lc[:, cols]), axis=1).astype(np.float64)
    else:
        typical = np.zeros(ctx.height)
    row_mean = lc.mean(axis=1, dtype=np.float64)
    scale = np.maximum(typical, s["relative_floor"] * row_mean)
    steps = edge > s["step_ratio"] * scale
    power = row_mean * ctx.row_solid_angles
    total = float(power.sum())
    share = float(power[steps].sum() / total) if total > 0 else 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        ratios = np.where(scale > 0, edge / scale, 0.0)
    details = {"stepping_rows": int(steps.sum()), "max_row_ratio": float(ratios.max()) if ratios.size else 0.0,
               "step_ratio": s["step_ratio"]}
    msg = (f"the left and right edges step apart in rows holding {_pct(share)} of the light "
           f"({int(steps.sum())} of {ctx.height} rows)")
    if share >= s["fail_share"]:
        sev = "fail"
    elif share >= s["warn_share"]:
        sev = "warn"
    else:
        return CheckResult("seam", "pass", value=share, threshold=s["warn_share"], message=msg, details=details)
    details["worst_row"] = int(np.argmax(np.where(steps, ratios * power, 0.0)))
    return CheckResult("seam", sev, value=share, threshold=s[f"{sev}_share"],
                       message=msg + ": a visible seam",
                       remedy="re-stitch or blend the wrap-around (the left edge must continue the right edge)",
                       details=details)


def _check_poles(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("poles")
    lum = ctx.luminance.astype(np.float64)
    k = min(s["rows"], max(1, ctx.height // 2))
    tiny = 1e-9 * max(float(lum.mean()), 1e-30)

    def cv(rows: np.ndarray) -> float:
        m = rows.mean(axis=1)
        sd = rows.std(axis=1)
        return float(np.max(np.where(m > tiny, sd / np.maximum(m, tiny), 0.0)))

    top, bottom = cv(lum[:k]), cv(lum[-k:])
    worst = max(top, bottom)
    which = "top (zenith)" if top >= bottom else "bottom (nadir)"
    details = {"top_cv": top, "bottom_cv": bottom, "rows": k}
    msg = f"pole rows vary by {_fmt(top)} (top) and {_fmt(bottom)} (bottom), std/mean of luminance"
    if worst >= s["fail_cv"]:
        sev = "fail"
    elif worst >= s["warn_cv"]:
        sev = "warn"
    else:
        return CheckResult("poles", "pass", value=worst, threshold=s["warn_cv"], message=msg, details=details)
    return CheckResult("poles", sev, value=worst, threshold=s[f"{sev}_cv"],
                       message=msg + f": the {which} row images one direction but is not constant",
                       remedy="patch the pole (fill the first/last rows with their mean) or check the projection",
                       details=details)


def _upper_fraction_rows(height: int) -> np.ndarray:
    """Fraction of each row's solid angle above the horizon (exact in cos theta)."""
    c = row_cos_edges(height)
    hi, lo = c[:-1], c[1:]
    return (np.clip(hi, 0.0, None) - np.clip(lo, 0.0, None)) / (hi - lo)


def _check_orientation(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("orientation")
    total = ctx.total_power
    if not total > 0.0:
        return CheckResult("orientation", "pass", value=None, threshold=s["warn_below_upper_share"],
                           message="the map is black: no orientation to check")
    upper = float(ctx.row_power @ _upper_fraction_rows(ctx.height))
    share = upper / total
    brightest_row, brightest_col = np.unravel_index(np.argmax(ctx.luminance), ctx.luminance.shape)
    _, el = pixel_center_angles(int(brightest_row), int(brightest_col), ctx.height, ctx.width)
    details = {"upper_share": share, "brightest_elevation_deg": el}
    msg = f"upper hemisphere holds {_pct(share)} of the light (brightest pixel at elevation {_deg(el)} deg)"
    # A relative margin keeps an exactly even split (a uniform map) on the passing side despite rounding.
    if share < s["warn_below_upper_share"] * (1.0 - 1e-9):
        return CheckResult("orientation", "warn", value=share, threshold=s["warn_below_upper_share"],
                           message=msg + ": the map looks upside down",
                           remedy="flip it vertically (row 0 must be the zenith) or check the up axis of the export",
                           details=details)
    return CheckResult("orientation", "pass", value=share, threshold=s["warn_below_upper_share"], message=msg,
                       details=details)


def _check_sun(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("sun")
    listed = [e for e in ctx.emitters if e.share >= s["min_share"]][: s["max_listed"]]
    sunlike = [e for e in listed if e.diameter_deg <= s["compact_max_deg"]]
    details = {"emitters": [e.to_dict() | {"sun_like": e.diameter_deg <= s["compact_max_deg"]} for e in listed],
               "sun_diameter_deg": _SUN_DIAMETER_DEG}
    if not sunlike:
        if listed:
            e = listed[0]
            msg = (f"no sun-like emitter; brightest region at azimuth {_deg(e.azimuth_deg)} deg, elevation "
                   f"{_deg(e.elevation_deg)} deg is {_deg(e.diameter_deg)} deg across with {_pct(e.share)} of the light")
        else:
            msg = "no compact emitter stands out (diffuse light)"
        return CheckResult("sun", "pass", value=None, threshold=s["warn_diameter_deg"], message=msg, details=details)
    e = sunlike[0]
    if e.resolved:
        size = (f"{_deg(e.diameter_deg)} deg across, {_fmt(e.diameter_deg / _SUN_DIAMETER_DEG)}x the sun's "
                f"{_SUN_DIAMETER_DEG:.3f} deg")
    else:
        size = (f"unresolved in {e.pixels} px (one pixel is {_deg(e.pixel_diameter_deg)} deg, "
                f"the sun {_SUN_DIAMETER_DEG:.3f} deg)")
    msg = (f"sun-like emitter at azimuth {_deg(e.azimuth_deg)} deg, elevation {_deg(e.elevation_deg)} deg: "
           f"{_pct(e.share)} of the light, {_fmt(e.solid_angle_sr)} sr, {size}")
    if e.resolved and e.diameter_deg > s["warn_diameter_deg"]:
        return CheckResult("sun", "warn", value=e.diameter_deg, threshold=s["warn_diameter_deg"],
                           message=msg + ": glare, bloom or blur spread it",
                           remedy="expect soft shadows; separate the sun into an analytic light of 0.533 deg for sharp ones",
                           details=details)
    return CheckResult("sun", "pass", value=e.diameter_deg, threshold=s["warn_diameter_deg"], message=msg,
                       details=details)


def _fibonacci_normals(n: int) -> np.ndarray:
    """``n`` unit vectors on the spherical Fibonacci lattice (Gonzalez 2010), float64 (n, 3), y up."""
    i = np.arange(n) + 0.5
    y = 1.0 - 2.0 * i / n
    r = np.sqrt(np.maximum(0.0, 1.0 - y * y))
    golden = math.pi * (3.0 - math.sqrt(5.0))
    phi = golden * i
    return np.column_stack([r * np.cos(phi), y, r * np.sin(phi)])


def _estimate_errors(table, normals, ref, *, estimator, spp, repeats, seed, primaries) -> dict:
    """Relative RMSE and peak sample share of one estimator over ``repeats`` independent estimates per normal.

    Both are pooled over the normals and scaled by the mean reference irradiance, so a
    normal facing black ground (E ~ 0) does not make them meaningless:

    * relative RMSE = sqrt(mean over normals and repeats of (E_est - E_ref)^2) / mean(E_ref);
    * peak sample share = largest single-sample term of one estimate (contribution / spp)
      divided by mean(E_ref): above 1, one sample alone outshines a typical pixel;
    * firefly index = largest sample / mean sample, pooled (:func:`envsample.mis.firefly_index`,
      the same figure ``envsample verify`` reports).
    """
    from envsample.estimation.estimators import estimate_irradiance, firefly_index

    n = normals.shape[0]
    est, samples = estimate_irradiance(table, np.repeat(normals, repeats, axis=0), estimator=estimator, spp=spp,
                                       seed=seed, return_samples=True)
    y = luminance(est.astype(np.float32), primaries).astype(np.float64).reshape(n, repeats)
    mse = np.mean((y - ref[:, None]) ** 2, axis=1)
    scale = float(ref.mean())
    return {
        "relative_rmse": float(math.sqrt(mse.mean()) / scale),
        "peak_sample_share": float(np.max(samples.contributions) / spp / scale),
        "firefly_index": float(firefly_index(samples.contributions)),
        "worst_normal": int(np.argmax(mse)),
    }


def _min_table_width(e: Emitter) -> int:
    """Narrowest table (2:1) whose cell at the emitter's elevation is at most 4x the emitter's solid angle.

    A cell of a w x w/2 table spans about (2 pi / w)(2 pi / w) cos(el) sr; below this
    width the sun shares its cell with so much sky that table samples mostly miss it.
    """
    omega = max(e.solid_angle_sr, SUN_SOLID_ANGLE_SR)
    c = max(math.cos(math.radians(e.elevation_deg)), 1e-3)
    return int(math.ceil(2.0 * math.pi * math.sqrt(c / (4.0 * omega))))


def _check_sampling(ctx: CheckContext) -> CheckResult:
    """Noise of cosine-only, table-only and MIS irradiance estimates on a reduced copy of the map.

    The map and its table are reduced together (power-preserving box filter of
    :func:`envsample.table.reduce_power`): the table then matches its map, as the
    default full-resolution table matches the full map, and the cost does not grow
    with the map.  References are exact (:func:`envsample.reference.reference_irradiance`).
    """
    from envsample.core.latlong import reduce_power
    from envsample.reference.irradiance import reference_irradiance
    from envsample.sampling.table import build_table

    s = ctx.settings("sampling")
    prim = ctx.profile.primaries
    size = (min(s["table_width"], ctx.width), min(s["table_height"], ctx.height))
    if not ctx.total_power > 0.0:
        return CheckResult("sampling", "pass", value=None, threshold=s["warn_rmse"],
                           message="the map is black: nothing to sample")
    small = ctx.rgb if size == (ctx.width, ctx.height) else reduce_power(ctx.rgb, size)
    table = build_table(small, primaries=prim)
    normals = _fibonacci_normals(s["normals"])
    ref = luminance(reference_irradiance(small, normals).astype(np.float32), prim).astype(np.float64)
    graded = s["estimator"]
    names = list(dict.fromkeys(["cosine", "table", RECOMMENDED_ESTIMATOR, graded]))
    seeds = np.random.SeedSequence(s["seed"]).spawn(len(names))
    errors = {name: _estimate_errors(table, normals, ref, estimator=name, spp=s["spp"], repeats=s["repeats"],
                                     seed=seed, primaries=prim)
              for name, seed in zip(names, seeds)}
    rec = errors[graded]
    advice = []
    mis = errors[RECOMMENDED_ESTIMATOR]
    if graded != RECOMMENDED_ESTIMATOR and mis["relative_rmse"] < 0.5 * rec["relative_rmse"]:
        advice.append(f"sample with MIS ({RECOMMENDED_ESTIMATOR}): its error is "
                      f"{_fmt(rec['relative_rmse'] / max(mis['relative_rmse'], 1e-300))}x smaller than {graded}'s")
    sunlike = [e for e in ctx.emitters if e.diameter_deg <= ctx.settings("sun")["compact_max_deg"]]
    if sunlike and sunlike[0].share >= ctx.settings("sun")["min_share"]:
        e = sunlike[0]
        wmin = _min_table_width(e)
        if wmin < ctx.width:
            advice.append(f"keep the sampling table at least {wmin}x{max(1, wmin // 2)} "
                          f"(full size {ctx.width}x{ctx.height}): coarser cells blur the sun into the sky")
        if e.share >= s["analytic_light_share"]:
            advice.append(f"separate the sun ({_pct(e.share)} of the light) into an analytic light "
                          f"of {_SUN_DIAMETER_DEG:.3f} deg and remove it from the map")
    details = {"spp": s["spp"], "repeats": s["repeats"], "normals": s["normals"], "seed": s["seed"],
               "table_size": list(size), "estimator": graded,
               "mean_reference": float(ref.mean()), "estimators": errors, "advice": advice}
    summary = ", ".join(f"{k} {_fmt(v['relative_rmse'])}" for k, v in errors.items())
    ff = ", ".join(f"{k} {_fmt(v['firefly_index'])}" for k, v in errors.items())
    ps = ", ".join(f"{k} {_fmt(v['peak_sample_share'])}" for k, v in errors.items())
    msg = (f"{s['spp']} spp on the map reduced to {size[0]}x{size[1]}: relative RMSE {summary}; "
           f"firefly index (largest / mean sample) {ff}; peak sample share (largest sample / mean E) {ps}")
    value = rec["relative_rmse"]
    if value > s["fail_rmse"]:
        sev, limit = "fail", s["fail_rmse"]
    elif value > s["warn_rmse"]:
        sev, limit = "warn", s["warn_rmse"]
    elif rec["peak_sample_share"] > s["warn_peak_share"]:
        sev, limit = "warn", s["warn_peak_share"]
        msg += f" ({graded} has fireflies)"
    else:
        sev, limit = "pass", s["warn_rmse"]
    remedy = "; ".join(advice) if sev != "pass" else ""
    return CheckResult("sampling", sev, value=value, threshold=limit, message=msg, remedy=remedy, details=details)


def _cos_weights(height: int, width: int) -> np.ndarray:
    """Integral of cos(theta) over one pixel of each row above the horizon, sr (H,): pi/W (sin^2 b - sin^2 a)."""
    edges = np.minimum(np.pi * np.arange(height + 1) / height, math.pi / 2.0)
    s2 = np.sin(edges) ** 2
    return (math.pi / width) * np.diff(s2)


def _check_light_level(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("light-level")
    cw = _cos_weights(ctx.height, ctx.width)
    e = float(ctx.luminance.sum(axis=1, dtype=np.float64) @ cw) * s["scale"]
    e_rgb = (row_channel_sums(ctx.rgb) * cw[:, None]).sum(axis=0) * s["scale"]
    details = {"irradiance_up": e, "irradiance_up_rgb": e_rgb.tolist(), "calibrated": s["calibrated"],
               "caution": caution("light levels")}
    if not e > 0.0:
        return CheckResult("light-level", "warn", value=e, threshold=None,
                           message="no light reaches an up-facing surface: the upper hemisphere is black",
                           remedy="check the exposure and the orientation of the map", details=details)
    if not s["calibrated"]:
        return CheckResult("light-level", "pass", value=e, threshold=None,
                           message=(f"irradiance on an up-facing surface {_fmt(e)} (map units x sr; "
                                    f"{CAUTION})"),
                           details=details)
    details["unit"] = "lx"
    msg = f"about {_fmt(e)} lux on an up-facing surface ({CAUTION})"
    lo, hi = s["warn_below_lux"], s["warn_above_lux"]
    if e < lo or e > hi:
        return CheckResult("light-level", "warn", value=e, threshold=lo if e < lo else hi,
                           message=msg + f": outside {_fmt(lo)}..{_fmt(hi)} lux",
                           remedy="check the calibration scale (cd/m2 per map unit) in the profile",
                           details=details)
    return CheckResult("light-level", "pass", value=e, threshold=[lo, hi], message=msg, details=details)


_CHROMA_KEYS = (("red", "r"), ("green", "g"), ("blue", "b"), ("white", "w"))


def _chroma_distance(file_chroma: dict, name: str) -> float:
    p = PRIMARIES[name]
    return max(math.dist(tuple(file_chroma[a]), p[b]) for a, b in _CHROMA_KEYS)


def _check_chromaticities(ctx: CheckContext) -> CheckResult:
    s = ctx.settings("chromaticities")
    assumed = ctx.profile.primaries
    chroma = ctx.image.chromaticities
    if chroma is None:
        basis = "OpenEXR's default" if ctx.image.format == "exr" else "no primaries in the file"
        return CheckResult("chromaticities", "pass", value=None, threshold=s["tolerance"],
                           message=f"no chromaticities stored ({basis}); assuming {assumed}")
    named = {n: _chroma_distance(chroma, n) for n in PRIMARIES}
    best = min(named, key=named.get)
    match = best if named[best] <= s["tolerance"] else None
    details = {"file": {k: list(v) for k, v in chroma.items()}, "matches": match, "assumed": assumed}
    if assumed not in PRIMARIES:
        return CheckResult("chromaticities", "pass", value=match, threshold=s["tolerance"],
                           message=f"file primaries {match or 'unnamed'}; luminance uses the channel {assumed}",
                           details=details)
    d = named[assumed]
    if d <= s["tolerance"]:
        return CheckResult("chromaticities", "pass", value=d, threshold=s["tolerance"],
                           message=f"file primaries match the assumed {assumed}", details=details)
    said = match or "unnamed primaries"
    return CheckResult("chromaticities", "warn", value=d, threshold=s["tolerance"],
                       message=f"file says {said} but luminance assumes {assumed} (xy off by {_fmt(d)})",
                       remedy=(f"set [profile] primaries = \"{match}\"" if match else
                               "convert the map to a known RGB space, or set [profile] primaries"),
                       details=details)


#: The checks, by id, in the order they run and are reported.  Each takes a
#: :class:`CheckContext` and returns a :class:`CheckResult`; each id has a profile section.
CHECKS: dict[str, Callable[[CheckContext], CheckResult]] = {
    "read": _check_read,
    "hdr": _check_hdr,
    "pixel-type": _check_pixel_type,
    "channels": _check_channels,
    "aspect": _check_aspect,
    "resolution": _check_resolution,
    "nan": _check_nan,
    "inf": _check_inf,
    "negative": _check_negative,
    "dynamic-range": _check_dynamic_range,
    "clipping": _check_clipping,
    "seam": _check_seam,
    "poles": _check_poles,
    "orientation": _check_orientation,
    "sun": _check_sun,
    "sampling": _check_sampling,
    "light-level": _check_light_level,
    "chromaticities": _check_chromaticities,
}


# =============================================================================
# the entry point
# =============================================================================


def _file_sha256(p: Path) -> str | None:
    """The file's SHA-256, or None when it cannot be read (the report says why elsewhere)."""
    try:
        return file_sha256(p)
    except MapReadError:
        return None


def _file_size(p: Path) -> int | None:
    try:
        return int(p.stat().st_size) if p.is_file() else None
    except OSError:
        return None


def check_map(path_or_image, *, profile=None, checks: Iterable[str] | None = None) -> Report:
    """Run the QA checks on one map.

    Parameters
    ----------
    path_or_image : str, PathLike, MapImage or array_like (H, W, 3)
        A file (read with :func:`envsample.io.read_map`), a map already read, or
        linear RGB radiance in memory (row 0 at the zenith).
    profile : Profile, str, PathLike, Mapping or None
        Thresholds (see :func:`load_profile`); None uses the defaults.
    checks : iterable of str, optional
        Only these check ids (``read`` always runs); default all enabled ones.

    Returns
    -------
    Report
        An unreadable file gives a report with a failing ``read`` check and
        ``readable=False`` (exit code 2); nothing is raised for it.

    Raises
    ------
    TypeError
        ``path_or_image`` is of an unsupported type.
    ProfileError
        The profile is invalid.  ValueError: an unknown id in ``checks``.
    """
    prof = load_profile(profile)
    wanted = None
    if checks is not None:
        wanted = set(checks)
        unknown = sorted(wanted - set(CHECKS))
        if unknown:
            raise ValueError(f"unknown check id(s) {', '.join(unknown)}; valid ids: {', '.join(CHECKS)}")
    base = {"profile": prof.name, "profile_path": prof.path}
    if isinstance(path_or_image, (str, os.PathLike)):
        p = Path(path_or_image)
        try:
            image = read_map(p)
        except MapReadError as e:
            result = CheckResult("read", "fail", value=None, threshold=None, message=str(e),
                                 remedy="check the path, or re-export the file (EXR, HDR)")
            skipped = [{"id": cid, "reason": "the file could not be read"} for cid in CHECKS if cid != "read"]
            return Report(source=Source(str(p), _file_sha256(p) if p.is_file() else None, _file_size(p)),
                          checks=[result], skipped=skipped, readable=False, **base)
        source = Source(str(p), image.sha256 or _file_sha256(p), _file_size(p))
    elif isinstance(path_or_image, MapImage):
        image = path_or_image
        path = None if image.path is None else str(image.path)
        source = Source(path, image.sha256, None if image.path is None else _file_size(Path(image.path)))
    elif isinstance(path_or_image, np.ndarray) or isinstance(path_or_image, (list, tuple)):
        image = MapImage.from_array(path_or_image)
        source = Source(None, None, None)
    else:
        raise TypeError(
            f"path_or_image must be a path, a MapImage or an (H, W, 3) array, got {type(path_or_image).__name__}"
        )
    ctx = CheckContext(image, prof)
    results, skipped = [], []
    for cid, fn in CHECKS.items():
        if cid != "read" and wanted is not None and cid not in wanted:
            skipped.append({"id": cid, "reason": "not requested"})
            continue
        if cid != "read" and not prof.enabled(cid):
            skipped.append({"id": cid, "reason": "disabled in the profile"})
            continue
        try:
            results.append(fn(ctx))
        except EnvsampleError as e:
            # A lower layer refused this map on purpose (one-line message); report it, keep the others.
            results.append(CheckResult(cid, "fail", message=f"could not run: {e}",
                                       remedy="fix the problems reported by the other checks first"))
    return Report(source=source, checks=results, skipped=skipped, image=image.describe(), **base)


# =============================================================================
# formatting
# =============================================================================

_COLOURS = {"pass": "32", "warn": "33", "fail": "1;31"}


def _paint(text: str, severity: str, color: bool) -> str:
    return f"\x1b[{_COLOURS[severity]}m{text}\x1b[0m" if color else text


def _cell(x, width: int) -> str:
    if isinstance(x, list):
        text = ",".join(_fmt(v) if not isinstance(v, str) else v for v in x)
    elif isinstance(x, bool):
        text = "yes" if x else "no"
    elif isinstance(x, str):
        text = x
    else:
        text = _fmt(x)
    return text if len(text) <= width else text[: width - 1] + "~"


def format_report(report, *, color: bool = False) -> str:
    """A compact plain-text table of one report (or several, one block each).

    One header line per file (verdict, counts, size, the start of the SHA-256),
    then one line per check: severity, id, value, limit and message; warnings and
    failures get a second line with the remedy.  ANSI colour only when ``color``.
    """
    if isinstance(report, Report):
        reports = [report]
    else:
        reports = list(report)
    blocks = []
    for r in reports:
        c = r.counts()
        name = r.source.path or "<in memory>"
        head = [name, _paint(r.verdict.upper(), r.verdict, color),
                f"{c['fail']} fail, {c['warn']} warn, {c['pass']} pass"]
        if r.image:
            head.append(f"{r.image['width']}x{r.image['height']} {r.image['format']}")
        if r.source.size is not None:
            head.append(f"{r.source.size} bytes")
        if r.source.sha256:
            head.append(f"sha256 {r.source.sha256[:12]}")
        lines = ["  ".join(head)]
        idw = max([len(x.id) for x in r.checks] + [5])
        vals = [_cell(x.value, 20) for x in r.checks]
        lims = [_cell(x.threshold, 20) for x in r.checks]
        vw = max([len(v) for v in vals] + [5])
        lw = max([len(v) for v in lims] + [5])
        lines.append(f"  {'':4}  {'check':<{idw}}  {'value':>{vw}}  {'limit':>{lw}}  message")
        for x, v, lim in zip(r.checks, vals, lims):
            sev = _paint(f"{x.severity:<4}", x.severity, color)
            lines.append(f"  {sev}  {x.id:<{idw}}  {v:>{vw}}  {lim:>{lw}}  {x.message}")
            if x.severity != "pass" and x.remedy:
                lines.append(f"  {'':4}  {'':<{idw}}  {'':>{vw}}  {'':>{lw}}  -> {x.remedy}")
        if r.skipped:
            ids = ", ".join(s["id"] for s in r.skipped)
            lines.append(f"  skipped: {ids}")
        blocks.append("\n".join(lines))
    return "\n\n".join(blocks)


def report_to_json(reports, *, indent: int | None = 2) -> str:
    """JSON text of one or many reports (schema :data:`REPORTS_SCHEMA`), with a summary."""
    if isinstance(reports, Report):
        reports = [reports]
    reports = list(reports)
    summary = {"files": len(reports), "unreadable": sum(not r.readable for r in reports)}
    for sev in SEVERITIES:
        summary[sev] = sum(r.verdict == sev and r.readable for r in reports)
    doc = {**REPORTS_SCHEMA.header(), "summary": summary, "reports": [r.to_dict() for r in reports]}
    return json.dumps(doc, indent=indent, allow_nan=False)
