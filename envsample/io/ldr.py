"""8/16-bit integer images (PNG, JPEG, TIFF): read so that validation and QA can name and refuse them.

References
----------
- IEC 61966-2-1:1999, sRGB: the encoding that 8-bit images usually carry.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from envsample.errors import MapReadError
from envsample.io.image import MapImage, _one_line
from envsample.io.radiance import _opencv, _quiet_opencv


def _read_ldr(p: Path, fmt: str) -> MapImage:
    cv2, iio = _opencv()
    try:
        with _quiet_opencv(cv2):
            # The opencv plugin keeps 16-bit samples (Pillow reduces 16-bit RGB PNG to 8 bits).
            arr = iio.imread(p, plugin="opencv", flags=cv2.IMREAD_UNCHANGED, index=0)
    except Exception as e:
        raise MapReadError(
            f"{p}: cannot be decoded as {fmt} (truncated, corrupt or not really a {fmt} file: {_one_line(e)}); re-export it"
        ) from e
    if arr.ndim == 3 and arr.shape[2] == 1:
        arr = arr[..., 0]
    layouts = {2: ["Y"], 3: {2: ["Y", "A"], 3: ["R", "G", "B"], 4: ["R", "G", "B", "A"]}}
    channels = layouts.get(arr.ndim)
    if arr.ndim == 3:
        channels = channels.get(arr.shape[2])
    if channels is None:
        raise MapReadError(f"{p}: decoded to an array of shape {arr.shape}, not a single image; save one RGB image per file")
    full_scale, pixel_type, is_hdr = _ldr_sample_type(p, arr.dtype)
    values = arr.astype(np.float32)
    if full_scale != 1:
        values /= np.float32(full_scale)  # a division keeps the top code value at exactly 1.0
    if arr.ndim == 2:
        rgb, alpha = np.repeat(values[..., None], 3, axis=-1), None
    elif channels[0] == "Y":
        rgb, alpha = np.repeat(values[..., :1], 3, axis=-1), values[..., 1].copy()
    else:
        rgb = values[..., :3]
        alpha = values[..., 3].copy() if len(channels) == 4 else None
    return MapImage(
        rgb=np.ascontiguousarray(rgb),
        format=fmt,
        channels=channels,
        pixel_type=pixel_type,
        compression=None,
        is_hdr=is_hdr,
        alpha=alpha,
    )


def _ldr_sample_type(p: Path, dtype) -> tuple[int, str, bool]:
    """(full-scale code value, pixel_type, is_hdr) of a decoded sample type."""
    if dtype == np.uint8:
        return 255, "uint8", False
    if dtype == np.uint16:
        return 65535, "uint16", False
    if dtype == np.float16:
        return 1, "half", True
    if dtype in (np.float32, np.float64):
        return 1, "float", True  # a floating-point TIFF holds real HDR values
    raise MapReadError(f"{p}: unsupported sample type {dtype}; save it as 8/16-bit integer or float")
