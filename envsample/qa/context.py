"""What every check may use (:class:`CheckContext`): one scan of the map (luminance, row sums and
maxima, a weighted log-luminance histogram, see :mod:`envsample.qa.scan`), exact solid angles,
quantiles, a subsample for level counts and the emitters, each computed on first use.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from envsample.core.sphere import row_solid_angles
from envsample.io.maps import MapImage
from envsample.lights.finder import find_sun
from envsample.qa.emitters import Emitter, emitter_level, find_emitters, label_wrapped
from envsample.qa.profile import Profile
from envsample.qa.scan import MapScan, scan_map, srgb_decode

#: Largest number of values per channel in :attr:`CheckContext.subsample` (level counts, medians).
SUBSAMPLE_SIZE = 1 << 18


class CheckContext:
    """What every check may use; expensive quantities are computed once, on first use.

    Attributes
    ----------
    image : MapImage (as read; ``image.rgb`` may hold NaN, Inf, negatives)
    raw : float32 (H, W, 3) ``image.rgb``
    scan : MapScan, the one pass over the map (cleaned as ``rgb`` is)
    rgb : float32 (H, W, 3) linear radiance with non-finite values set to 0 and
        negatives clamped to 0 (8/16-bit images are sRGB-decoded first), so that a
        defect reported by one check does not break the others (built on first use only)
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
    def scan(self) -> MapScan:
        """The one pass over the map (see :func:`envsample.qa.scan.scan_map`)."""
        s = self.profile.section("sampling")
        size = (min(s["table_width"], self.width), min(s["table_height"], self.height))
        return scan_map(self.raw, primaries=self.profile.primaries, is_hdr=self.image.is_hdr, reduce_to=size)

    @functools.cached_property
    def finite(self) -> np.ndarray:
        """bool (H, W, 3): finite channels (a full-size pass: only for maps that have NaN or Inf)."""
        return np.isfinite(self.raw)

    @property
    def all_finite(self) -> bool:
        """No NaN or Inf anywhere."""
        return self.scan.finite

    @property
    def clean(self) -> bool:
        """Finite and non-negative everywhere (the common case)."""
        return self.scan.finite and self.scan.nonnegative

    @functools.cached_property
    def rgb(self) -> np.ndarray:
        """float32 (H, W, 3) cleaned linear radiance (a full-size copy unless the map is already clean)."""
        rgb = self.raw
        if not self.image.is_hdr:
            return srgb_decode(np.where(np.isfinite(rgb), rgb, 0.0))
        if self.clean:
            return rgb
        with np.errstate(invalid="ignore"):
            return np.where(np.isfinite(rgb) & (rgb > 0), rgb, np.float32(0.0)).astype(np.float32)

    @property
    def luminance(self) -> np.ndarray:
        """float32 (H, W) luminance of ``rgb`` with the profile's primaries, clamped at 0."""
        return self.scan.luminance

    @functools.cached_property
    def row_power(self) -> np.ndarray:
        """float64 (H,): integral of luminance over each row, map units x sr."""
        return self.scan.row_luminance_sum * self.row_solid_angles

    @functools.cached_property
    def total_power(self) -> float:
        """Integral of luminance over the sphere, map units x sr."""
        return float(self.row_power.sum())

    @functools.cached_property
    def peak_luminance(self) -> float:
        return float(self.scan.row_luminance_max.max()) if self.height else 0.0

    @functools.cached_property
    def median_luminance(self) -> float:
        """Solid-angle-weighted median luminance."""
        return self.quantile(0.5)

    def quantile(self, q: float, *, lit: bool = False) -> float:
        """Solid-angle-weighted quantile of luminance, ``q`` in [0, 1], to 0.4 % (``lit``: of pixels above 0)."""
        return self.scan.histogram.quantile(q, lit=lit)

    @functools.cached_property
    def subsample(self) -> np.ndarray:
        """float32 (n, 3): raw values of at most :data:`SUBSAMPLE_SIZE` pixels on a regular grid."""
        step = max(1, math.ceil(math.sqrt(self.height * self.width / SUBSAMPLE_SIZE)))
        return np.ascontiguousarray(self.raw[step // 2::step, step // 2::step]).reshape(-1, 3)

    @functools.cached_property
    def channel_medians(self) -> np.ndarray:
        """float64 (3,): median of each cleaned channel over the subsample (not weighted)."""
        v = self.subsample
        if not self.image.is_hdr:
            v = srgb_decode(np.where(np.isfinite(v), v, 0.0))
        with np.errstate(invalid="ignore"):
            v = np.where(np.isfinite(v) & (v > 0), v, 0.0)
        return np.median(v, axis=0) if v.size else np.zeros(3)

    @functools.cached_property
    def emitter_labels(self) -> tuple[np.ndarray, int]:
        """Wrapped connected components of the emitter mask (see :func:`emitter_level`)."""
        mask = np.zeros((self.height, self.width), dtype=bool)
        rows = self.emitter_rows
        if rows.size:
            mask[rows] = self.luminance[rows] > np.float64(emitter_level(self))
        return label_wrapped(mask)

    @functools.cached_property
    def emitter_rows(self) -> np.ndarray:
        """int (n,): rows that hold a pixel above the emitter level (ascending)."""
        return np.nonzero(self.scan.row_luminance_max > np.float64(emitter_level(self)))[0]

    @functools.cached_property
    def pixel_directions(self) -> tuple[np.ndarray, np.ndarray]:
        """(theta (H,), phi (W,)) of pixel centres, radians."""
        theta = (np.arange(self.height) + 0.5) * (math.pi / self.height)
        phi = (np.arange(self.width) + 0.5) * (2.0 * math.pi / self.width) - math.pi
        return theta, phi

    @functools.cached_property
    def sun(self):
        """The dominant sun measured by the shared finder (:func:`envsample.lights.finder.find_sun`), or None."""
        s, c = self.settings("sun"), self.settings("clipping")
        # The finder's own test of a clipped core (envsample.lights.plateau) takes the profile's tolerance,
        # pixel count and shoulder; its size and contrast limits keep the finder's defaults.
        clipping = {"plateau_relative_tolerance": c["plateau_relative_tolerance"], "min_pixels": c["plateau_min_pixels"],
                    "min_shoulder": c["plateau_min_shoulder"]}
        return find_sun(self.rgb, primaries=self.profile.primaries, emitters=self.emitters, labels=self.emitter_labels,
                        luminance=self.luminance, median_luminance=self.median_luminance, clipping=clipping,
                        min_share=s["min_share"], compact_max_deg=s["compact_max_deg"],
                        median_multiple=s["threshold_median_multiple"], max_fraction=s["threshold_max_fraction"])

    @functools.cached_property
    def emitters(self) -> list[Emitter]:
        """Bright connected regions, by decreasing power (see the ``[sun]`` profile section)."""
        return find_emitters(self)
