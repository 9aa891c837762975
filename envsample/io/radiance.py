"""Radiance RGBE (``.hdr``) reading and writing, through imageio's OpenCV plugin, and the header parser.

References
----------
- Ward, G. (1991). Real Pixels. In J. Arvo (ed.), *Graphics Gems II*,
  pp. 80-83. Academic Press: the shared-exponent RGBE encoding.
- Ward Larson, G. and Shakespeare, R. (1998). *Rendering with Radiance*. Morgan
  Kaufmann: the Radiance picture header (``#?RADIANCE``, ``FORMAT=``,
  ``EXPOSURE=``, ``PRIMARIES=``, the ``-Y H +X W`` resolution line) (from memory).
"""

from __future__ import annotations

import contextlib
import os
import re
import warnings
from pathlib import Path

import numpy as np

from envsample.errors import EnvsampleError, EnvsampleWarning, MapReadError, MapWriteError
from envsample.io.image import _CHROMATICITY_KEYS, MapImage, _chromaticities_from_flat, _file_start, _one_line

# Radiance pictures start with "#?" followed by the program name (usually RADIANCE or RGBE).
_RADIANCE_MAGIC = b"#?"


_RADIANCE_HEADER_LIMIT = 1 << 16


def _opencv():
    try:
        import cv2
        import imageio.v3 as iio
    except ImportError as e:  # pragma: no cover - declared dependency
        raise EnvsampleError(
            "imageio and OpenCV are needed for .hdr and LDR files; install 'imageio' and 'opencv-python-headless'"
        ) from e
    return cv2, iio


@contextlib.contextmanager
def _quiet_opencv(cv2):
    """Silence OpenCV's own log lines while we turn its failures into one-line errors."""
    logging = getattr(getattr(cv2, "utils", None), "logging", None)
    if logging is None:  # pragma: no cover - depends on the OpenCV build
        yield
        return
    old = logging.getLogLevel()
    logging.setLogLevel(logging.LOG_LEVEL_SILENT)
    try:
        yield
    finally:
        logging.setLogLevel(old)


_RESOLUTION = re.compile(rb"^([-+])([XY]) (\d+) ([-+])([XY]) (\d+)$")


def _radiance_header(p: Path) -> dict:
    """Parse the Radiance header ourselves: OpenCV's errors are vague and it ignores PRIMARIES/EXPOSURE."""
    data = _file_start(p, _RADIANCE_HEADER_LIMIT)
    if not data.startswith(_RADIANCE_MAGIC):
        raise MapReadError(
            f"{p}: not a Radiance RGBE file (it does not start with '#?', it starts with {data[:10]!r}); "
            "check what the file really is and re-export it as .hdr"
        )
    end = data.find(b"\n\n")
    if end < 0:
        raise MapReadError(f"{p}: Radiance header is incomplete (no blank line ends it); the file is truncated or corrupt, re-export it")
    lines = data[:end].split(b"\n")
    info = {"format": None, "exposure": 1.0, "primaries": None}
    for line in lines[1:]:
        key, sep, value = line.partition(b"=")
        if not sep:
            continue
        key = key.strip().upper()
        try:
            if key == b"FORMAT":
                info["format"] = value.strip().decode("ascii", "replace")
            elif key == b"EXPOSURE":
                info["exposure"] *= float(value)  # EXPOSURE lines are cumulative (Radiance convention)
            elif key == b"PRIMARIES":
                nums = [float(x) for x in value.split()]
                if len(nums) == 8:
                    info["primaries"] = _chromaticities_from_flat(nums)
        except ValueError:
            raise MapReadError(f"{p}: malformed Radiance header line {line[:60]!r}; re-export the file") from None
    fmt = info["format"]
    if fmt is not None and fmt.lower() != "32-bit_rle_rgbe":
        if "xyze" in fmt.lower():
            raise MapReadError(f"{p}: is a Radiance XYZE picture (FORMAT={fmt}); envsample reads RGBE only, convert it to RGB")
        raise MapReadError(f"{p}: unknown Radiance FORMAT={fmt}; expected 32-bit_rle_rgbe, re-export the file")
    res_end = data.find(b"\n", end + 2)
    res_line = data[end + 2 : res_end if res_end >= 0 else len(data)].strip()
    match = _RESOLUTION.match(res_line)
    if res_end < 0 or match is None:
        raise MapReadError(f"{p}: Radiance resolution line is missing or malformed ({res_line[:40]!r}); the file is truncated or corrupt")
    if (match.group(1), match.group(2), match.group(4), match.group(5)) != (b"-", b"Y", b"+", b"X"):
        raise MapReadError(
            f"{p}: Radiance orientation {res_line.decode('ascii')!r} is not supported; "
            "re-save it with the standard orientation '-Y H +X W' (top row first)"
        )
    height, width = int(match.group(3)), int(match.group(6))
    start = res_end + 1
    first = data[start : start + 4]
    # Ward's run-length scanlines begin with 2, 2 and the width as two bytes (widths 8..32767 only).
    rle = len(first) == 4 and first[0] == 2 and first[1] == 2 and ((first[2] << 8) | first[3]) == width and 8 <= width <= 32767
    info.update(height=height, width=width, data_offset=start, compression="rle" if rle else "flat")
    return info


def _read_hdr(p: Path) -> MapImage:
    info = _radiance_header(p)
    height, width = info["height"], info["width"]
    if info["compression"] == "flat" and p.stat().st_size < info["data_offset"] + 4 * height * width:
        raise MapReadError(f"{p}: truncated Radiance file (fewer pixel bytes than {width}x{height} needs); re-export or re-copy it")
    cv2, iio = _opencv()
    try:
        with _quiet_opencv(cv2):
            # Without IMREAD_UNCHANGED OpenCV returns tone-mapped 8-bit data.
            arr = iio.imread(p, plugin="opencv", flags=cv2.IMREAD_UNCHANGED, index=0)
    except Exception as e:
        raise MapReadError(f"{p}: truncated or corrupt Radiance file ({_one_line(e)}); re-export or re-copy it") from e
    if arr.dtype != np.float32 or arr.shape != (height, width, 3):
        raise MapReadError(
            f"{p}: decoded as {arr.dtype} {arr.shape}, expected float32 ({height}, {width}, 3); the file is corrupt, re-export it"
        )
    if info["exposure"] != 1.0:
        warnings.warn(
            f"{p}: Radiance header has EXPOSURE={info['exposure']:g}; pixel values are kept as stored "
            f"(divide by {info['exposure']:g} to undo that exposure)",
            EnvsampleWarning,
            stacklevel=3,
        )
    return MapImage(
        rgb=np.ascontiguousarray(arr),
        format="hdr",
        channels=["R", "G", "B"],
        pixel_type="rgbe",
        compression=info["compression"],
        chromaticities=info["primaries"],
        is_hdr=True,
    )


def _hdr_writer(p: Path, arr: np.ndarray, chroma, alpha):
    if alpha is not None:
        raise ValueError(f"{p}: Radiance .hdr files have no alpha channel; write .exr to keep alpha")
    n_bad = int((~np.isfinite(arr)).sum())
    if n_bad:
        raise ValueError(f"{p}: {n_bad} non-finite values; RGBE cannot store NaN/Inf, repair them first (validate_map(repair=True))")
    n_neg = int((arr < 0).sum())
    if n_neg:
        raise ValueError(f"{p}: {n_neg} negative values; RGBE cannot store them, clamp them first (validate_map does)")
    cv2, iio = _opencv()
    data = np.ascontiguousarray(arr, dtype=np.float32)

    def write(tmp: str) -> None:
        with _quiet_opencv(cv2):
            iio.imwrite(tmp, data, plugin="opencv")
        if os.path.getsize(tmp) == 0:
            raise MapWriteError(f"{p}: OpenCV wrote an empty file; check the disk and the pixel values")
        if chroma is not None:
            _insert_radiance_primaries(tmp, chroma)

    return write


def _insert_radiance_primaries(tmp: str, chroma: dict) -> None:
    with open(tmp, "rb") as fh:
        content = fh.read()
    end = content.find(b"\n\n")
    if end < 0:
        raise MapWriteError(f"{tmp}: OpenCV wrote no Radiance header; cannot add PRIMARIES")
    values = " ".join(f"{v:.6g}" for k in _CHROMATICITY_KEYS for v in chroma[k])
    with open(tmp, "wb") as fh:
        fh.write(content[: end + 1] + f"PRIMARIES= {values}\n".encode("ascii") + content[end + 1 :])
