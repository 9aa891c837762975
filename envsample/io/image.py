"""The in-memory map (:class:`MapImage`) and the helpers every map codec shares.

:class:`MapImage` holds float32 ``(H, W, 3)`` pixels, row 0 at the zenith, and what
the file said about them; :func:`map_pixels` is the one boundary check of in-memory
maps; :func:`file_sha256` the one file hash.  The codecs live in
:mod:`envsample.io.exr`, :mod:`envsample.io.radiance` and :mod:`envsample.io.ldr`;
:mod:`envsample.io.maps` is the public entry point.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from envsample.errors import MapReadError, MapValidationError

_CHROMATICITY_KEYS = ("red", "green", "blue", "white")


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


def _chromaticities_from_flat(values) -> dict:
    # Stored as float32: keep the shortest decimal that maps back to the same float32 (0.64, not 0.6399999856).
    v = [float(str(np.float32(x))) for x in values]
    return {k: (v[2 * i], v[2 * i + 1]) for i, k in enumerate(_CHROMATICITY_KEYS)}
