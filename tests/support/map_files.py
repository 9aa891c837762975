"""Map files for the io tests: invented pixel data, and files written byte by byte or with the OpenEXR
bindings directly (not through envsample.io), so that reading them checks io against the official
library and the published formats.

- IEEE 754-2008 binary16: round-to-nearest has a relative error of at most 2**-11 for normal numbers.
- ITU-R BT.709-6, items 1.3/1.4: primaries and D65 white point, CIE 1931 xy.
- Radiance picture header layout (Ward Larson & Shakespeare 1998, Rendering with Radiance, from
  memory): "#?RADIANCE", FORMAT=, blank line, resolution line "-Y H +X W", then scanlines.
"""

from __future__ import annotations

import numpy as np
import OpenEXR

#: The size of the small test maps (rows, columns).
H, W = 32, 64

# IEEE 754 binary16 relative rounding bound (round to nearest, normal range).
HALF_REL_ERROR = 2.0**-11

# ITU-R BT.709-6, item 1.3/1.4: primaries and D65 white point, CIE 1931 xy.
BT709 = {"red": (0.640, 0.330), "green": (0.300, 0.600), "blue": (0.150, 0.060), "white": (0.3127, 0.3290)}


def random_map(seed=0, h=H, w=W, low=1e-3, high=6e4) -> np.ndarray:
    """Log-uniform positive values covering the normal half-float range (invented test data)."""
    rng = np.random.default_rng(seed)
    return np.exp(rng.uniform(np.log(low), np.log(high), size=(h, w, 3))).astype(np.float32)


def exr_header(compression=OpenEXR.ZIP_COMPRESSION) -> dict:
    """A scanline OpenEXR header for the bindings (``OpenEXR.File``)."""
    return {"compression": compression, "type": OpenEXR.scanlineimage}


def write_exr_direct(path, channels: dict, header=None) -> None:
    """Write a file with the OpenEXR bindings only (no envsample code involved)."""
    fresh = {k: np.ascontiguousarray(v) for k, v in channels.items()}
    with OpenEXR.File(header or exr_header(), fresh) as f:
        f.write(str(path))


def radiance_bytes(height, width, pixels: bytes, extra_header: bytes = b"") -> bytes:
    """A Radiance picture with flat (not run-length encoded) RGBE scanlines, byte by byte."""
    head = b"#?RADIANCE\n" + extra_header + b"FORMAT=32-bit_rle_rgbe\n\n" + b"-Y %d +X %d\n" % (height, width)
    return head + pixels


def leftovers(directory) -> list[str]:
    """The names in ``directory`` (a failed write must leave no temporary file)."""
    return sorted(p.name for p in directory.iterdir())
