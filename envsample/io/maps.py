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
- Kainz, F., Bogart, R., Stanczyk, P. and Hillman, P. *Technical Introduction to
  OpenEXR*. Industrial Light & Magic / Academy Software Foundation (OpenEXR
  documentation): channel naming ``layer.R``, multi-part files, the
  ``chromaticities`` and ``envmap`` attributes, compression methods (from memory).
- IEEE 754-2008, *Standard for Floating-Point Arithmetic*: binary16 ("half")
  has an 11-bit significand (relative rounding error at most 2**-11 for normal
  numbers) and a largest finite value of 65504.
- Ward, G. (1991). Real Pixels. In J. Arvo (ed.), *Graphics Gems II*,
  pp. 80-83. Academic Press: the shared-exponent RGBE encoding.
- Ward Larson, G. and Shakespeare, R. (1998). *Rendering with Radiance*. Morgan
  Kaufmann: the Radiance picture header (``#?RADIANCE``, ``FORMAT=``,
  ``EXPOSURE=``, ``PRIMARIES=``, the ``-Y H +X W`` resolution line) and its
  run-length encoded scanlines (from memory).
- IEC 61966-2-1:1999, sRGB: the encoding that 8-bit images usually carry.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import os
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from envsample.core.files import file_mode, temporary_path
from envsample.errors import EnvsampleError, EnvsampleWarning, MapReadError, MapValidationError, MapWriteError

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

_CHROMATICITY_KEYS = ("red", "green", "blue", "white")

# OpenEXR files start with this magic number (OpenEXR file layout documentation).
_EXR_MAGIC = b"\x76\x2f\x31\x01"
# Radiance pictures start with "#?" followed by the program name (usually RADIANCE or RGBE).
_RADIANCE_MAGIC = b"#?"
_RADIANCE_HEADER_LIMIT = 1 << 16
_HASH_CHUNK = 1 << 20


@dataclass(eq=False)
class MapImage:
    """An environment map in memory: pixels plus what the file said about them.

    Attributes
    ----------
    rgb : ndarray, float32, shape (H, W, 3)
        Pixel values, row 0 at the top (zenith).  Linear for HDR files;
        sRGB-encoded code values scaled to [0, 1] for LDR files (not linearised).
    path : Path or None
        The file it came from (None for an in-memory map).
    format : str
        ``"exr"``, ``"hdr"``, ``"png"``, ``"jpeg"``, ``"tiff"`` or ``"array"``.
    channels : list of str
        Source channel names that were read, e.g. ``["sky.R", "sky.G", "sky.B"]`` or ``["Y"]``.
    pixel_type : str
        ``"half"``, ``"float"``, ``"uint"`` (EXR), ``"rgbe"`` (Radiance), ``"uint8"`` or ``"uint16"`` (LDR).
    compression : str or None
        EXR compression name (``"zip"``, ``"piz"``...), ``"rle"`` or ``"flat"`` for Radiance files.
    chromaticities : dict or None
        CIE 1931 xy of the primaries and white point:
        ``{"red": (x, y), "green": (x, y), "blue": (x, y), "white": (x, y)}``.
    sha256 : str or None
        Hex SHA-256 of the file bytes (None for an in-memory map).
    is_hdr : bool
        False for 8/16-bit integer images, which cannot hold scene radiance.
    alpha : ndarray, float32, shape (H, W), or None
        The alpha channel if the file had one.
    """

    rgb: np.ndarray
    path: Path | None = None
    format: str = "array"
    channels: list[str] = field(default_factory=lambda: ["R", "G", "B"])
    pixel_type: str = "float"
    compression: str | None = None
    chromaticities: dict | None = None
    sha256: str | None = None
    is_hdr: bool = True
    alpha: np.ndarray | None = None

    @property
    def height(self) -> int:
        """Number of rows H."""
        return int(self.rgb.shape[0])

    @property
    def width(self) -> int:
        """Number of columns W."""
        return int(self.rgb.shape[1])

    @classmethod
    def from_array(cls, rgb, *, alpha=None, chromaticities=None) -> "MapImage":
        """Wrap an in-memory ``(H, W, 3)`` array (converted to float32, not copied if already float32)."""
        arr = map_pixels(rgb)
        a = None if alpha is None else _as_alpha(alpha, arr.shape[:2])
        chroma = None if chromaticities is None else _check_chromaticities(chromaticities)
        return cls(rgb=arr, alpha=a, chromaticities=chroma)

    def describe(self) -> dict:
        """JSON-ready metadata (no pixels) for tables and reports."""
        chroma = None
        if self.chromaticities is not None:
            chroma = {k: [float(v) for v in self.chromaticities[k]] for k in _CHROMATICITY_KEYS}
        return {
            "path": None if self.path is None else str(self.path),
            "format": self.format,
            "width": self.width,
            "height": self.height,
            "channels": list(self.channels),
            "pixel_type": self.pixel_type,
            "compression": self.compression,
            "chromaticities": chroma,
            "sha256": self.sha256,
            "is_hdr": bool(self.is_hdr),
            "has_alpha": self.alpha is not None,
            "encoding": "linear" if self.is_hdr else "sRGB-encoded code values scaled to [0, 1] (not linearised)",
        }

    def __repr__(self) -> str:
        where = "in memory" if self.path is None else str(self.path)
        return (
            f"MapImage({where}, {self.width}x{self.height}, format={self.format!r}, "
            f"pixel_type={self.pixel_type!r}, channels={self.channels!r}, is_hdr={self.is_hdr})"
        )


def supported_extensions(*, write: bool = False) -> tuple[str, ...]:
    """File extensions (lower case, with the dot) that :func:`read_map` reads, or with ``write=True`` that :func:`write_map` writes."""
    if write:
        return _EXR_EXTENSIONS + _HDR_EXTENSIONS
    return _EXR_EXTENSIONS + _HDR_EXTENSIONS + tuple(_LDR_FORMATS)


# --------------------------------------------------------------------------- reading


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


def file_sha256(path) -> str:
    """Hex SHA-256 of a file's bytes, read in 1 MiB blocks; MapReadError names the file if it cannot be read."""
    p = Path(path)
    h = hashlib.sha256()
    try:
        with open(p, "rb") as fh:
            for chunk in iter(lambda: fh.read(_HASH_CHUNK), b""):
                h.update(chunk)
    except OSError as e:
        raise MapReadError(f"{p}: cannot be read ({e.strerror}); check the file's permissions") from e
    return h.hexdigest()


def _file_start(p: Path, n: int) -> bytes:
    with open(p, "rb") as fh:
        return fh.read(n)


def _one_line(error: BaseException) -> str:
    text = " ".join(str(error).split())
    return text if len(text) <= 160 else text[:157] + "..."


def _openexr():
    try:
        import OpenEXR
    except ImportError as e:  # pragma: no cover - declared dependency
        raise EnvsampleError("the OpenEXR Python bindings are missing; install them with 'pip install OpenEXR'") from e
    return OpenEXR


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


# ---- OpenEXR


@dataclass
class _Layer:
    label: str
    part: int
    part_name: str
    prefix: str
    kind: str  # "rgb" or "y"
    names: dict  # upper-case base name ("R", "Y", "A"...) -> full channel name


def _read_exr(p: Path, layer: str | None) -> MapImage:
    head = _file_start(p, 4)
    if head != _EXR_MAGIC:
        raise MapReadError(
            f"{p}: not an OpenEXR file (it does not start with the EXR magic number, it starts with {head!r}); "
            "check what the file really is and re-export it as .exr"
        )
    exr = _openexr()
    try:
        f = exr.File(str(p), separate_channels=True)
    except Exception as e:
        raise MapReadError(f"{p}: truncated or corrupt OpenEXR file ({_one_line(e)}); re-export or re-copy it") from e
    with f:
        parts = list(f.parts)
        if not parts:
            # The bindings drop every part whose pixel data fails to decode (e.g. a cut-off file).
            raise MapReadError(f"{p}: truncated or corrupt OpenEXR file (no pixel data could be decoded); re-export or re-copy it")
        for part in parts:
            _check_exr_part(p, part)
        chosen = _select_layer(p, _exr_layers(parts), layer, parts)
        return _exr_image(p, parts[chosen.part], chosen)


def _part_name(part, index: int) -> str:
    name = part.header.get("name")
    return str(name) if name else f"part{index}"


def _check_exr_part(p: Path, part) -> None:
    storage = getattr(part.type(), "name", str(part.type()))
    if "deep" in storage.lower():
        raise MapReadError(f"{p}: holds deep data ({storage}), not a flat image; flatten it before use")
    envmap = part.header.get("envmap")
    if envmap is not None and "CUBE" in getattr(envmap, "name", str(envmap)).upper():
        raise MapReadError(
            f"{p}: is a cube map (envmap attribute); envsample reads latitude-longitude maps, convert it to equirectangular"
        )
    declared = {c.name for c in part.header.get("channels", [])}
    if declared - set(part.channels):
        missing = ", ".join(sorted(declared - set(part.channels)))
        raise MapReadError(
            f"{p}: truncated or corrupt OpenEXR file (channels {missing} could not be decoded); re-export or re-copy it"
        )


def _exr_layers(parts) -> list[_Layer]:
    multi = len(parts) > 1
    layers = []
    for index, part in enumerate(parts):
        pname = _part_name(part, index)
        groups: dict[str, dict[str, str]] = {}
        for full in sorted(part.channels):
            prefix, _, base = full.rpartition(".")
            groups.setdefault(prefix, {}).setdefault(base.upper(), full)
        for prefix, names in groups.items():
            if {"R", "G", "B"} <= names.keys():
                kind = "rgb"
            elif "Y" in names and not ({"RY", "BY"} & names.keys()):
                kind = "y"
            else:
                continue
            label = ".".join(x for x in ((pname if multi else ""), prefix) if x)
            layers.append(_Layer(label, index, pname, prefix, kind, names))
    return layers


def _layer_list(layers: list[_Layer]) -> str:
    return ", ".join(repr(g.label) + (" (unprefixed)" if not g.label else "") for g in layers)


def _select_layer(p: Path, layers: list[_Layer], layer: str | None, parts) -> _Layer:
    if not layers:
        found = sorted({name for part in parts for name in part.channels})
        if {"RY", "BY"} & {n.rpartition(".")[2].upper() for n in found}:
            raise MapReadError(
                f"{p}: stores luminance/chroma channels (Y, RY, BY), which envsample does not decode; re-save it as RGB"
            )
        raise MapReadError(
            f"{p}: has no R, G, B or Y channels (found: {', '.join(found) or 'none'}); re-export it with colour channels"
        )
    if layer is None:
        root = [g for g in layers if g.prefix == ""]
        pick = [g for g in root if g.kind == "rgb"] or [g for g in root if g.kind == "y"]
        if not pick and len(layers) == 1:
            pick = layers
        if len(pick) == 1:
            return pick[0]
        raise MapReadError(
            f"{p}: has several layers ({_layer_list(layers)}); choose one with layer=NAME"
        )
    pick = [g for g in layers if g.label == layer]
    if not pick:
        pick = [g for g in layers if g.prefix == layer and g.prefix]
    if not pick:
        in_part = [g for g in layers if g.part_name == layer]
        pick = [g for g in in_part if g.prefix == ""] or in_part
    if len(pick) == 1:
        return pick[0]
    problem = f"layer {layer!r} is ambiguous" if pick else f"has no layer {layer!r}"
    raise MapReadError(f"{p}: {problem}; layers in this file: {_layer_list(layers)}; pass one of them as layer=")


def _exr_image(p: Path, part, chosen: _Layer) -> MapImage:
    height, width = int(part.height()), int(part.width())
    bases = ("R", "G", "B") if chosen.kind == "rgb" else ("Y",)
    names = [chosen.names[b] for b in bases]
    planes = [_exr_plane(p, part, n, height, width) for n in names]
    if chosen.kind == "rgb":
        rgb = np.stack(planes, axis=-1)
    else:
        rgb = np.repeat(planes[0][..., None], 3, axis=-1)
    alpha = None
    if "A" in chosen.names:
        names.append(chosen.names["A"])
        alpha = _exr_plane(p, part, chosen.names["A"], height, width)
    types = {part.channels[n].type().name.lower() for n in names[: len(bases)]}
    pixel_type = types.pop() if len(types) == 1 else ("float" if "float" in types else "+".join(sorted(types)))
    compression = part.compression().name.removesuffix("_COMPRESSION").lower()
    chroma = part.header.get("chromaticities")
    return MapImage(
        rgb=np.ascontiguousarray(rgb, dtype=np.float32),
        format="exr",
        channels=names,
        pixel_type=pixel_type,
        compression="none" if compression == "no" else compression,
        chromaticities=None if chroma is None else _chromaticities_from_flat(chroma),
        is_hdr=True,
        alpha=alpha,
    )


def _exr_plane(p: Path, part, name: str, height: int, width: int) -> np.ndarray:
    pixels = part.channels[name].pixels
    if pixels is None or pixels.shape != (height, width):
        shape = None if pixels is None else pixels.shape
        raise MapReadError(
            f"{p}: channel {name!r} has shape {shape}, expected ({height}, {width}) "
            "(subsampled channels are not supported); re-export it without subsampling"
        )
    return np.array(pixels, dtype=np.float32)  # a copy we own, independent of the file object


def _chromaticities_from_flat(values) -> dict:
    # Stored as float32: keep the shortest decimal that maps back to the same float32 (0.64, not 0.6399999856).
    v = [float(str(np.float32(x))) for x in values]
    return {k: (v[2 * i], v[2 * i + 1]) for i, k in enumerate(_CHROMATICITY_KEYS)}


# ---- Radiance RGBE

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


# ---- LDR (and float TIFF)


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


# --------------------------------------------------------------------------- validation


def validate_map(
    image: MapImage,
    *,
    repair: bool = False,
    allow_aspect: bool = False,
    min_size: tuple[int, int] = (8, 4),
    source: str | None = None,
) -> tuple[MapImage, list[str]]:
    """Check that a map can be used as an environment map; return a clean copy and notes.

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


# --------------------------------------------------------------------------- writing


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


def map_pixels(rgb, *, name: str = "rgb", keep_float64: bool = False) -> np.ndarray:
    """The pixels of a map given as an array or as a :class:`MapImage` (anything with ``.rgb``).

    The one boundary check of in-memory maps: shape ``(H, W, 3)`` with H, W >= 1 and
    real numbers.  Returns float32 (no copy when the input already is float32), or
    float64 input unchanged with ``keep_float64``.  Pixel values are not judged here
    (see :func:`validate_map`).  Raises :class:`MapValidationError` naming ``name``.
    """
    arr = np.asarray(rgb.rgb if hasattr(rgb, "rgb") else rgb)
    if arr.ndim != 3 or arr.shape[2] != 3 or arr.shape[0] < 1 or arr.shape[1] < 1:
        raise MapValidationError(f"{name} must be an (H, W, 3) RGB array, of shape (H, W, 3) with H, W >= 1; got {arr.shape}")
    if not (np.issubdtype(arr.dtype, np.floating) or np.issubdtype(arr.dtype, np.integer)):
        raise MapValidationError(f"{name} must hold real numbers, got dtype {arr.dtype}")
    if keep_float64 and arr.dtype == np.float64:
        return arr
    return arr.astype(np.float32, copy=False)


def _as_alpha(alpha, shape) -> np.ndarray:
    a = np.asarray(alpha)
    if a.shape != tuple(shape) or not np.issubdtype(a.dtype, np.number) or np.iscomplexobj(a):
        raise ValueError(f"alpha must be a real array of shape {tuple(shape)} (H, W), got {a.dtype} {a.shape}")
    return a.astype(np.float32, copy=False)


def _check_chromaticities(chroma) -> dict:
    if not isinstance(chroma, dict) or set(chroma) != set(_CHROMATICITY_KEYS):
        got = sorted(chroma) if isinstance(chroma, dict) else type(chroma).__name__
        raise ValueError(f"chromaticities must be a dict with keys {', '.join(_CHROMATICITY_KEYS)} of (x, y) pairs, got {got}")
    out = {}
    for key in _CHROMATICITY_KEYS:
        xy = np.asarray(chroma[key], dtype=np.float64)
        if xy.shape != (2,) or not np.isfinite(xy).all():
            raise ValueError(f"chromaticities[{key!r}] must be a finite (x, y) pair, got {chroma[key]!r}")
        out[key] = (float(xy[0]), float(xy[1]))
    return out


def _exr_writer(p: Path, arr: np.ndarray, pixel_type: str, compression: str, chroma, alpha, attributes=None):
    exr = _openexr()
    dtype = np.float16 if pixel_type == "half" else np.float32
    # ascontiguousarray: the bindings ignore strides and would write the parent buffer of a view.
    with np.errstate(over="ignore"):  # overflow to +Inf is detected and reported just below
        data = np.ascontiguousarray(arr, dtype=dtype)
    if pixel_type == "half":
        overflow = int((np.isfinite(arr) & ~np.isfinite(data)).sum())
        if overflow:
            raise ValueError(
                f"{p}: {overflow} values exceed the half-float maximum 65504 (IEEE 754 binary16); "
                "write with pixel_type='float' or scale the map"
            )
    if alpha is not None:
        name, data = "RGBA", np.ascontiguousarray(np.concatenate([data, alpha.astype(dtype)[..., None]], axis=-1))
    else:
        name = "RGB"
    comp = getattr(exr, "NO_COMPRESSION" if compression == "none" else f"{compression.upper()}_COMPRESSION")

    def write(tmp: str) -> None:
        header = {str(k): str(v) for k, v in (attributes or {}).items()}
        header.update({"compression": comp, "type": exr.scanlineimage, "envmap": exr.ENVMAP_LATLONG})
        if chroma is not None:
            header["chromaticities"] = tuple(float(v) for k in _CHROMATICITY_KEYS for v in chroma[k])
        # A fresh dict each time: the bindings replace the arrays in the dict they are given.
        with exr.File(header, {name: data}) as f:
            f.write(tmp)

    return write


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

