"""What every check may use (:class:`CheckContext`): the map cleaned once, luminance, exact solid
angles, weighted quantiles and the emitters, each computed on first use.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from envsample.core.color import luminance
from envsample.core.latlong import RowWeightedSample
from envsample.core.sphere import row_solid_angles
from envsample.io.maps import MapImage
from envsample.lights.finder import find_sun
from envsample.qa.emitters import Emitter, emitter_level, find_emitters, label_wrapped
from envsample.qa.profile import Profile


def srgb_decode(v: np.ndarray) -> np.ndarray:
    """sRGB code values in [0, 1] to linear (IEC 61966-2-1:1999, the piecewise EOTF)."""
    v = np.clip(v, 0.0, 1.0)
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4).astype(np.float32)


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
            rgb = srgb_decode(rgb)
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
    def _sorted_luminance(self) -> RowWeightedSample:
        return RowWeightedSample(self.luminance, self.row_solid_angles)

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
        """Wrapped connected components of the emitter mask (see :func:`emitter_level`)."""
        return label_wrapped(self.luminance > emitter_level(self))

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
        clipping = {"plateau_relative_tolerance": c["plateau_relative_tolerance"], "min_pixels": c["plateau_min_pixels"],
                    "min_sun_multiple": c["plateau_min_sun_multiple"], "min_contrast": c["plateau_min_contrast"],
                    "min_shoulder": c["plateau_min_shoulder"]}
        return find_sun(self.rgb, primaries=self.profile.primaries, emitters=self.emitters, labels=self.emitter_labels,
                        luminance=self.luminance, median_luminance=self.median_luminance, clipping=clipping,
                        min_share=s["min_share"], compact_max_deg=s["compact_max_deg"],
                        median_multiple=s["threshold_median_multiple"], max_fraction=s["threshold_max_fraction"])

    @functools.cached_property
    def emitters(self) -> list[Emitter]:
        """Bright connected regions, by decreasing power (see the ``[sun]`` profile section)."""
        return find_emitters(self)
