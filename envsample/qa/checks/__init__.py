"""The QA checks by family, and :data:`CHECKS`: check id -> function, in the order they run and are reported.

A check is one function of a :class:`~envsample.qa.context.CheckContext` returning a
:class:`~envsample.qa.results.CheckResult`; each id has a section in ``profiles/default.toml``.
"""

from __future__ import annotations

from collections.abc import Callable

from envsample.qa.checks.clipping import check_clipping
from envsample.qa.checks.container import check_channels, check_chromaticities, check_pixel_type, check_read
from envsample.qa.checks.content import check_hdr
from envsample.qa.checks.geometry import (
    check_aspect,
    check_hemisphere,
    check_orientation,
    check_poles,
    check_resolution,
    check_seam,
)
from envsample.qa.checks.light import check_dynamic_range, check_exposure, check_light_level, check_sun
from envsample.qa.checks.pixels import check_inf, check_nan, check_negative, check_value_range
from envsample.qa.checks.sampling import check_sampling
from envsample.qa.context import CheckContext
from envsample.qa.results import CheckResult

__all__ = ["CHECKS"]

#: The checks, by id, in the order they run and are reported.  Each takes a
#: :class:`CheckContext` and returns a :class:`CheckResult`; each id has a profile section.
CHECKS: dict[str, Callable[[CheckContext], CheckResult]] = {
    "read": check_read,
    "hdr": check_hdr,
    "pixel-type": check_pixel_type,
    "channels": check_channels,
    "aspect": check_aspect,
    "resolution": check_resolution,
    "nan": check_nan,
    "inf": check_inf,
    "negative": check_negative,
    "value-range": check_value_range,
    "dynamic-range": check_dynamic_range,
    "clipping": check_clipping,
    "seam": check_seam,
    "poles": check_poles,
    "orientation": check_orientation,
    "hemisphere": check_hemisphere,
    "sun": check_sun,
    "sampling": check_sampling,
    "light-level": check_light_level,
    "exposure": check_exposure,
    "chromaticities": check_chromaticities,
}
