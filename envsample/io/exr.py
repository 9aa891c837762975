"""OpenEXR reading (layers, parts, channels, chromaticities) and writing, through the official bindings.

References
----------
- Kainz, F., Bogart, R., Stanczyk, P. and Hillman, P. *Technical Introduction to
  OpenEXR*. Industrial Light & Magic / Academy Software Foundation (OpenEXR
  documentation): channel naming ``layer.R``, multi-part files, the
  ``chromaticities`` and ``envmap`` attributes, compression methods (from memory).
- IEEE 754-2008: binary16 ("half") has a largest finite value of 65504.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from envsample.errors import EnvsampleError, MapReadError
from envsample.io.image import _CHROMATICITY_KEYS, MapImage, _chromaticities_from_flat, _file_start, _one_line

# OpenEXR files start with this magic number (OpenEXR file layout documentation).
_EXR_MAGIC = b"\x76\x2f\x31\x01"


def _openexr():
    try:
        import OpenEXR
    except ImportError as e:  # pragma: no cover - declared dependency
        raise EnvsampleError("the OpenEXR Python bindings are missing; install them with 'pip install OpenEXR'") from e
    return OpenEXR


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
        try:
            parts = list(f.parts)
            if not parts:
                # The bindings drop every part whose pixel data fails to decode (e.g. a cut-off file).
                raise MapReadError(f"{p}: truncated or corrupt OpenEXR file (no pixel data could be decoded); "
                                   "re-export or re-copy it")
            for part in parts:
                _check_exr_part(p, part)
            chosen = _select_layer(p, _exr_layers(parts), layer, parts)
            return _exr_image(p, parts[chosen.part], chosen)
        except UnicodeError as e:  # the bindings decode attribute and channel names as UTF-8
            raise MapReadError(f"{p}: corrupt OpenEXR header (a name is not valid text: {_one_line(e)}); "
                               "re-export or re-copy it") from e


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
    # Each channel is converted straight into its place in one float32 (H, W, 3) array, so the
    # peak is the file's own planes plus the map (no float32 planes, no stacking copy).
    rgb = np.empty((height, width, 3), dtype=np.float32)
    for k in range(3):
        rgb[..., k] = _exr_plane(p, part, names[k if chosen.kind == "rgb" else 0], height, width, copy=False)
    alpha = None
    if "A" in chosen.names:
        names.append(chosen.names["A"])
        alpha = _exr_plane(p, part, chosen.names["A"], height, width)
    types = {part.channels[n].type().name.lower() for n in names[: len(bases)]}
    pixel_type = types.pop() if len(types) == 1 else ("float" if "float" in types else "+".join(sorted(types)))
    compression = part.compression().name.removesuffix("_COMPRESSION").lower()
    chroma = part.header.get("chromaticities")
    return MapImage(
        rgb=rgb,
        format="exr",
        channels=names,
        pixel_type=pixel_type,
        compression="none" if compression == "no" else compression,
        chromaticities=None if chroma is None else _chromaticities_from_flat(chroma),
        is_hdr=True,
        alpha=alpha,
    )


def _exr_plane(p: Path, part, name: str, height: int, width: int, *, copy: bool = True) -> np.ndarray:
    """One channel's pixels (H, W): a float32 copy we own, or (``copy=False``) the bindings' own array."""
    pixels = part.channels[name].pixels
    if pixels is None or pixels.shape != (height, width):
        shape = None if pixels is None else pixels.shape
        raise MapReadError(
            f"{p}: channel {name!r} has shape {shape}, expected ({height}, {width}) "
            "(subsampled channels are not supported); re-export it without subsampling"
        )
    return np.array(pixels, dtype=np.float32) if copy else pixels  # a copy is independent of the file object


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
