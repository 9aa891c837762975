"""Read, validate and write equirectangular environment maps.

Public objects
--------------
- :class:`MapImage`: pixels (float32 ``(H, W, 3)``, linear for HDR files) plus
  the file's metadata (format, channels, pixel type, compression,
  chromaticities, SHA-256 of the file bytes).
- :func:`read_map`: ``.exr`` through the official OpenEXR bindings, Radiance
  ``.hdr`` through imageio's OpenCV plugin, and 8/16-bit ``.png``, ``.jpg``,
  ``.jpeg``, ``.tif``, ``.tiff`` (marked ``is_hdr=False`` so that validation and
  QA can reject them).
- :func:`validate_map`: the boundary check of pixels and shape (LDR, NaN/Inf,
  aspect, size, negative values).
- :func:`write_map`: atomic ``.exr`` / ``.hdr`` writer.
- :func:`supported_extensions`, :data:`LOSSLESS_COMPRESSIONS`,
  :data:`PIXEL_TYPES`, :class:`MapWriteError`.

The codecs are split by concern: :mod:`envsample.io.image` (MapImage and shared
helpers), :mod:`envsample.io.exr`, :mod:`envsample.io.radiance` and
:mod:`envsample.io.ldr`; this module is the entry point and keeps every public name.

Conventions
-----------
Row 0 of every array is the top row of the image (the zenith of an
equirectangular map, see :mod:`envsample.sphere`).  Pixel values are the file's
values converted to float32 without any scaling, except for integer (LDR)
images, whose code values are divided by 255 or 65535; those stay
sRGB-*encoded* (they are not linearised), which is one more reason they are not
accepted as environment maps.  Colour is whatever the file's primaries are:
``chromaticities`` reports them when the file says so (EXR ``chromaticities``
attribute, Radiance ``PRIMARIES=`` header line); ``None`` means unspecified.

References
----------
The formats' references are in the codec modules: :mod:`envsample.io.exr` (OpenEXR,
IEEE 754 binary16), :mod:`envsample.io.radiance` (Ward 1991; Ward Larson &
Shakespeare 1998) and :mod:`envsample.io.ldr` (IEC 61966-2-1, sRGB).
"""

from __future__ import annotations

import contextlib
import dataclasses
import os
import warnings
from pathlib import Path

import numpy as np

from envsample.core.files import file_mode, temporary_path
from envsample.errors import EnvsampleError, EnvsampleWarning, MapReadError, MapValidationError, MapWriteError
from envsample.io.exr import _exr_writer, _read_exr
from envsample.io.image import (  # noqa: F401  (re-exported: envsample.io.maps is the public module)
    MapImage,
    _as_alpha,
    _check_chromaticities,
    _one_line,
    file_sha256,
    map_pixels,
)
from envsample.io.ldr import _read_ldr
from envsample.io.radiance import _hdr_writer, _read_hdr

__all__ = [
    "MapImage",
    "MapWriteError",
    "read_map",
    "validate_map",
    "write_map",
    "supported_extensions",
    "map_pixels",
    "file_sha256",
    "LOSSLESS_COMPRESSIONS",
    "PIXEL_TYPES",
]


_EXR_EXTENSIONS = (".exr",)


_HDR_EXTENSIONS = (".hdr",)


_LDR_FORMATS = {".png": "png", ".jpg": "jpeg", ".jpeg": "jpeg", ".tif": "tiff", ".tiff": "tiff"}


#: EXR compressions write_map accepts: the lossless ones (the others quantise pixels).
LOSSLESS_COMPRESSIONS = ("none", "rle", "zip", "zips", "piz")


#: EXR pixel types write_map accepts.
PIXEL_TYPES = ("half", "float")


def supported_extensions(*, write: bool = False) -> tuple[str, ...]:
    """File extensions (lower case, with the dot) that :func:`read_map` reads, or with ``write=True`` that :func:`write_map` writes."""
    if write:
        return _EXR_EXTENSIONS + _HDR_EXTENSIONS
    return _EXR_EXTENSIONS + _HDR_EXTENSIONS + tuple(_LDR_FORMATS)


def read_map(path, *, layer: str | None = None) -> MapImage:
    """Read an environment map file into a :class:`MapImage`.

    Parameters
    ----------
    path : str or PathLike
        An ``.exr``, ``.hdr``, ``.png``, ``.jpg``, ``.jpeg``, ``.tif`` or ``.tiff`` file.
    layer : str, optional
        EXR only: which layer to read when the file has several (channel prefix
        such as ``"sky"`` for ``sky.R``/``sky.G``/``sky.B``, or a part name of a
        multi-part file; ``""`` is the unprefixed layer).  By default the
        unprefixed RGB layer is read; if there is none and the choice is not
        unique, the error lists the layers.

    Returns
    -------
    MapImage
        Pixels are not checked here (NaN, negative values, aspect): that is
        :func:`validate_map`.

    Raises
    ------
    MapReadError
        Missing, empty, truncated or corrupt file, unknown extension, a file
        whose content does not match its extension, or an unknown/ambiguous layer.
    """
    p = Path(path)
    ext = p.suffix.lower()
    if ext not in supported_extensions():
        shown = repr(ext) if ext else "(none)"
        raise MapReadError(
            f"{p}: unsupported file extension {shown}; supported: {', '.join(supported_extensions())}"
        )
    _check_readable(p)
    if layer is not None and ext not in _EXR_EXTENSIONS:
        raise MapReadError(f"{p}: layer={layer!r} applies to OpenEXR files only; omit it for {ext} files")
    digest = file_sha256(p)
    if ext in _EXR_EXTENSIONS:
        image = _read_exr(p, layer)
    elif ext in _HDR_EXTENSIONS:
        image = _read_hdr(p)
    else:
        image = _read_ldr(p, _LDR_FORMATS[ext])
    return dataclasses.replace(image, path=p, sha256=digest)


def _check_readable(p: Path) -> None:
    if not p.exists():
        raise MapReadError(f"{p}: file not found; check the path")
    if p.is_dir():
        raise MapReadError(f"{p}: is a directory, not a map file; pass the path of a map file")
    try:
        size = p.stat().st_size
    except OSError as e:
        raise MapReadError(f"{p}: cannot be read ({e.strerror}); check the file's permissions") from e
    if size == 0:
        raise MapReadError(f"{p}: file is empty (0 bytes); the export or copy probably failed, re-export it")


def validate_map(
    image,
    *,
    repair: bool = False,
    allow_aspect: bool = False,
    min_size: tuple[int, int] = (8, 4),
    source: str | None = None,
) -> tuple[MapImage, list[str]]:
    """Check that a map can be used as an environment map; return a clean copy and notes.

    ``image`` is a :class:`MapImage` or an ``(H, W, 3)`` array (wrapped with
    :meth:`MapImage.from_array`).

    Checks, in order: shape ``(H, W, 3)``; HDR (LDR images are rejected);
    at least ``min_size = (width, height)`` pixels; aspect 2:1 (W = 2H) unless
    ``allow_aspect``; no NaN/Inf (with ``repair=True`` they are replaced by 0
    and counted in the notes); negative values are clamped to 0 with a note and
    an :class:`~envsample.errors.EnvsampleWarning` (common practice: radiance
    is non-negative, negative values come from colour-space conversions or
    filtering and cannot be sampled).

    ``source`` names the map in messages (default: the image's path).  The
    input image and its arrays are never modified: a new :class:`MapImage`
    (``dataclasses.replace``) is returned.

    Raises
    ------
    MapValidationError
        With a one-line message naming the map, the problem and the remedy.
    """
    if not isinstance(image, MapImage):  # an array (or anything with .rgb): wrap it, checked by map_pixels
        image = MapImage.from_array(image)
    name = source or (str(image.path) if image.path is not None else "in-memory map")
    rgb = np.asarray(image.rgb)
    notes: list[str] = []
    if rgb.ndim != 3 or rgb.shape[2] != 3:
        raise MapValidationError(f"{name}: pixels have shape {rgb.shape}, expected (H, W, 3); pass an RGB image")
    if not image.is_hdr:
        bits = {"uint8": "8-bit", "uint16": "16-bit"}.get(image.pixel_type, "integer")
        raise MapValidationError(
            f"{name}: is an {bits} LDR image; environment maps must be HDR (.exr or .hdr), export the linear float map"
        )
    height, width = rgb.shape[:2]
    min_w, min_h = (int(x) for x in min_size)
    if width < min_w or height < min_h:
        raise MapValidationError(f"{name}: map is {width}x{height} pixels, smaller than the minimum {min_w}x{min_h}; use a larger map")
    if width != 2 * height:
        if not allow_aspect:
            raise MapValidationError(
                f"{name}: map is {width}x{height}, not 2:1 as an equirectangular map must be (width = 2 x height); "
                "resample it, or pass allow_aspect=True if it is equirectangular all the same"
            )
        notes.append(f"aspect {width}x{height} is not 2:1; accepted because allow_aspect=True")
    out = rgb if rgb.dtype == np.float32 else rgb.astype(np.float32)
    owned = out is not rgb
    finite = np.isfinite(out)
    if not finite.all():
        bad = ~finite
        n_nan = int(np.isnan(out).sum())
        n_pos = int(np.isposinf(out).sum())
        n_neg = int(np.isneginf(out).sum())
        n_bad = n_nan + n_pos + n_neg
        n_pix = int(bad.any(axis=-1).sum())
        detail = f"{n_bad} non-finite values ({n_nan} NaN, {n_pos} +Inf, {n_neg} -Inf) in {n_pix} pixels"
        if not repair:
            raise MapValidationError(f"{name}: {detail}; fix the source map or pass repair=True to replace them with 0")
        out = np.where(finite, out, np.float32(0.0))
        owned = True
        notes.append(f"replaced {detail} with 0 (repair=True)")
    negative = out < 0
    n_negative = int(negative.sum())
    if n_negative:
        lowest = float(out.min())
        out = np.maximum(out, np.float32(0.0), out=out if owned else None)
        message = f"clamped {n_negative} negative values (lowest {lowest:.6g}) to 0"
        notes.append(message)
        warnings.warn(f"{name}: {message}", EnvsampleWarning, stacklevel=2)
    if image.alpha is not None:
        notes.append("alpha channel present; it is ignored for sampling")
    return dataclasses.replace(image, rgb=out), notes


def write_map(path, rgb, *, pixel_type: str = "half", compression: str = "zip", chromaticities=None, alpha=None,
              attributes=None) -> Path:
    """Write an environment map atomically to ``.exr`` or ``.hdr``; return the path.

    Parameters
    ----------
    path : str or PathLike
        Target file; its directory must exist (it is not created).
    rgb : array_like, shape (H, W, 3)
        Linear pixel values, row 0 at the top (zenith).
    pixel_type : {"half", "float"}
        EXR pixel type.  ``"half"`` (IEEE 754 binary16) keeps about 3 decimal
        digits and values up to 65504: larger values raise ValueError (write
        ``"float"`` instead).  Ignored for ``.hdr`` (always RGBE).
    compression : {"none", "rle", "zip", "zips", "piz"}
        EXR compression; lossy methods are refused so that a written map reads
        back bit for bit.  Ignored for ``.hdr`` (OpenCV writes run-length
        encoded scanlines).
    chromaticities : dict, optional
        ``{"red": (x, y), "green": (x, y), "blue": (x, y), "white": (x, y)}``;
        stored as the EXR ``chromaticities`` attribute or the Radiance
        ``PRIMARIES=`` header line.
    alpha : array_like, shape (H, W), optional
        EXR only: written as an RGBA image.
    attributes : mapping of str to str, optional
        EXR only: extra string attributes of the header (e.g. the record of ``envsample fix``);
        ignored for ``.hdr``.

    The file is first written to a temporary file in the same directory and
    then renamed over the target (``os.replace``), so readers never see a
    partial file; on failure the temporary file is removed and an existing
    target is left untouched.  EXR files carry ``envmap = latlong``.

    Raises
    ------
    ValueError
        Bad arguments (shape, pixel type, compression, non-finite or negative
        values for ``.hdr``, half-float overflow).
    MapWriteError
        The directory is missing or the write/rename failed.
    """
    p = Path(path)
    ext = p.suffix.lower()
    if ext not in supported_extensions(write=True):
        raise ValueError(f"{p}: cannot write {ext or 'files without extension'}; write_map writes {', '.join(supported_extensions(write=True))}")
    if pixel_type not in PIXEL_TYPES:
        raise ValueError(f"unknown pixel_type {pixel_type!r}; valid names: {', '.join(PIXEL_TYPES)}")
    if compression not in LOSSLESS_COMPRESSIONS:
        raise ValueError(f"unknown or lossy compression {compression!r}; valid names: {', '.join(LOSSLESS_COMPRESSIONS)}")
    arr = map_pixels(rgb)
    a = None if alpha is None else _as_alpha(alpha, arr.shape[:2])
    chroma = None if chromaticities is None else _check_chromaticities(chromaticities)
    if ext in _EXR_EXTENSIONS:
        extra = {"attributes": attributes} if attributes else {}
        writer = _exr_writer(p, arr, pixel_type, compression, chroma, a, **extra)
    else:
        writer = _hdr_writer(p, arr, chroma, a)
    parent = p.parent
    if not parent.is_dir():
        raise MapWriteError(f"{p}: directory {parent} does not exist; create it first (write_map does not create directories)")
    _atomic_write(p, ext, writer)
    return p


def _atomic_write(p: Path, ext: str, write) -> None:
    # The codecs write by file name, so this is envsample._files.atomic_write with a path
    # instead of a file object (and the extension kept, for OpenCV's format choice).
    try:
        tmp = temporary_path(p, suffix=f".tmp{ext}")
    except OSError as e:
        raise MapWriteError(f"{p}: cannot create a file in {p.parent} ({e.strerror}); check the directory's permissions") from e
    try:
        mode = file_mode(p)
        write(tmp)
        os.chmod(tmp, mode)
        os.replace(tmp, p)
    except BaseException as e:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        if isinstance(e, (EnvsampleError, ValueError)) or not isinstance(e, Exception):
            raise
        raise MapWriteError(f"{p}: writing failed ({_one_line(e)}); nothing was written, check the path and disk space") from e
