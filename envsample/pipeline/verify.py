"""``verify`` on files: load or build the table of what the user gave, render, write the report.

:func:`verify_map` is :func:`load_source` + :func:`envsample.validation.render.render_validation`
+ :func:`envsample.reports.validation.write_validation`.  The numbers are Monte Carlo
estimates for asset preparation, not certified lighting calculations.
"""

from __future__ import annotations

import hashlib
import math
from pathlib import Path

import numpy as np

from envsample.core.latlong import parse_size
from envsample.core.limits import check_memory
from envsample.io.maps import MapImage, read_map, supported_extensions, validate_map
from envsample.pipeline.split import find_split, verify_split
from envsample.reports.validation import write_validation
from envsample.sampling.table import EnvTable, build_table, load_table
from envsample.validation.render import DEFAULT_ESTIMATORS, Progress, check_roughness, render_validation
from envsample.validation.streams import check_normals, check_render_size, check_seed, check_spp

__all__ = ["SCALE_RANGE", "TABLE_BYTES_PER_CELL", "load_source", "verify_map"]

#: Maps whose largest value lies outside [2^-64, 2^64] are rendered scaled by a power of two (exact in
#: binary floating point) so that sums, squares and float32 images stay in range; the report says so.
SCALE_RANGE = (2.0 ** -64, 2.0 ** 64)

#: Memory of a table per cell (bytes): CDFs, pdf, alias probability and index, the reduced image.
TABLE_BYTES_PER_CELL = 48


def _scaled(image_rgb: np.ndarray) -> tuple[np.ndarray, dict | None]:
    """The pixels times 2^k so that the largest value is near 1 when it lies outside :data:`SCALE_RANGE`."""
    top = float(np.max(image_rgb)) if image_rgb.size else 0.0
    if not top > 0.0 or SCALE_RANGE[0] <= top <= SCALE_RANGE[1]:
        return image_rgb, None
    k = -int(round(math.log2(top)))
    scaled = np.ldexp(np.asarray(image_rgb, dtype=np.float64), k).astype(np.float32)
    return scaled, {"factor": 2.0 ** k, "exponent": k, "largest_value": top,
                    "why": (f"the map's largest value {top:.3g} lies outside [2^-64, 2^64]: it was rendered times "
                            f"2^{k} (exact), so irradiance in the images and figures in map units are times that "
                            "factor; relative errors do not change")}


def _rescaled(table) -> tuple:
    """A table whose radiance lies outside :data:`SCALE_RANGE` rebuilt from its image times 2^k (same options).

    The pdf does not change with a scale (luminance over its integral); the radiance the
    estimators evaluate does, and must stay within float range.
    """
    rgb, scale = _scaled(table.image)
    if scale is None:
        return table, None
    opts = table.metadata.get("options") or {}
    rebuilt = build_table(rgb, size=(table.table_width, table.table_height), primaries=table.primaries,
                          mapping=table.mapping, uniform_mix=table.uniform_mix, up=table.up,
                          rotation_deg=table.rotation_deg, compensate=bool(opts.get("compensate", False)))
    rebuilt.metadata.update({k: v for k, v in table.metadata.items() if k in ("recommendation", "source")})
    return rebuilt, scale


def _map_table(image, table_size) -> tuple:
    """Validate, scale if needed, build; (table, notes, scale)."""
    image, notes = validate_map(image)
    rgb, scale = _scaled(image.rgb)
    table = build_table(image if scale is None else rgb, size=table_size)
    return table, image, notes, scale

def load_source(source, *, table_size=None) -> tuple:
    """Turn what the user gave into ``(EnvTable, info)``; ``info`` is a JSON-ready description.

    ``source`` is an :class:`~envsample.table.EnvTable`; a MapImage or an ``(H, W, 3)``
    array (validated, then built with ``size=table_size``); or a path.  A path with a
    map extension (``.exr``, ``.hdr``, and the LDR ones, which validation refuses with
    a clear message) is read as a map, anything else as a table prefix or table file
    (``.json``/``.npz``/``.bin``).  ``table_size`` applies to maps only.  A map whose
    largest value lies outside :data:`SCALE_RANGE` is built scaled by a power of two
    (``info["scale"]`` says by what and why): an all-3e38 or an all-denormal map then
    gets a report instead of an overflow.
    """
    if isinstance(source, EnvTable):
        if table_size is not None:
            raise ValueError("table_size applies to maps; a table is verified at its own size (rebuild it to change that)")
        table, scale = _rescaled(source)
        return table, {"kind": "table", "path": None, "table_source": source.metadata.get("source"), "scale": scale}
    if isinstance(source, (str, Path)):
        p = Path(source)
        if p.suffix.lower() in supported_extensions():
            table, image, notes, scale = _map_table(read_map(p), table_size)
            return table, {"kind": "map", "path": str(p), "sha256": image.sha256, "format": image.format,
                           "width": image.width, "height": image.height, "validation_notes": notes,
                           "scale": scale}
        if table_size is not None:
            raise ValueError(f"{p}: table_size applies to maps; a table is verified at its own size")
        table, scale = _rescaled(load_table(p))
        return table, {"kind": "table", "path": str(p), "table_source": table.metadata.get("source"), "scale": scale}
    if isinstance(source, MapImage):
        image = source
    else:
        image = MapImage.from_array(source)
    table, image, notes, scale = _map_table(image, table_size)
    info = {"kind": "map", "path": None if image.path is None else str(image.path), "sha256": image.sha256,
            "format": image.format, "width": image.width, "height": image.height, "validation_notes": notes,
            "scale": scale}
    if image.sha256 is None:
        info["array_sha256"] = hashlib.sha256(np.ascontiguousarray(image.rgb, dtype="<f4").tobytes()).hexdigest()
    return table, info


def verify_map(source, outdir, *, spp: int = 64, normals=(128, 64), estimators=None, roughness=None,
               seed: int | None = 0, table_size=None, sphere: bool = True,
               progress: Progress | None = None, max_memory=None) -> dict:
    """Render irradiance over a grid of normals with each estimator, compare with the exact reference, write a report.

    Parameters
    ----------
    source : path, MapImage, array (H, W, 3) or EnvTable
        A map file (``.exr``/``.hdr``; read, validated and built with ``table_size``),
        a table prefix or file, or objects in memory (see :func:`load_source`).
    outdir : path
        Output folder, created if missing; every file is written atomically, ``metrics.json`` last.
    spp, normals, estimators, roughness, seed
        As :func:`envsample.validation.render.render_validation` (defaults: 64 spp,
        128 x 64 normals, every default estimator, no glossy check, seed 0).
    table_size : (width, height) or "WxH", optional
        Table grid when ``source`` is a map.
    sphere : bool
        Also write ``sphere.png`` (reference and recommended estimate on a white sphere).
    progress : callable(str), optional
        Called with a short label before each step.

    Returns
    -------
    dict
        The content of ``metrics.json`` (:mod:`envsample.validation.render`), with ``"outdir"`` added.

    Requests that would need more than the memory limit (normals x spp x estimators, or a
    ``table_size`` of too many cells; :func:`envsample.core.limits.max_memory`, raised on purpose
    with ``max_memory=``) are refused with one line (ResourceLimitError) before any file is read
    or folder made.  The folder appears
    only when every file is written (:func:`envsample.reports.validation.write_validation`).
    """
    # Option values are checked before any file is read.
    spp, normals, seed = check_spp(spp), check_normals(normals), check_seed(seed)
    roughness = check_roughness(roughness)
    count = len(DEFAULT_ESTIMATORS) + 1 if estimators is None else (
        len([e for e in estimators.split(",") if e.strip()]) if isinstance(estimators, str) else len(estimators)) + 1
    check_render_size(normals, spp, count, limit=max_memory)
    _check_table_size(table_size, max_memory)
    if progress is not None:
        progress("load")
    split = find_split(source)  # a split's folder or sky table: also compared with its original map
    table, source_info = load_source(source if split is None else split.table, table_size=table_size)
    result = render_validation(table, spp=spp, normals=normals, estimators=estimators, roughness=roughness,
                               seed=seed, progress=progress)
    if progress is not None:
        progress("pictures")
    doc = write_validation(result, outdir, source=source_info, sphere=sphere)
    if split is not None:
        if progress is not None:
            progress("split")
        doc["split"] = verify_split(split, table, outdir, spp=spp, normals=normals, seed=seed)
    doc["outdir"] = str(outdir)
    return doc


def _check_table_size(table_size, limit=None) -> None:
    try:
        size = parse_size(table_size)
    except (TypeError, ValueError) as e:
        raise ValueError(f"table_size must be (width, height) or 'WxH', e.g. 512x256 ({e})") from None
    if size is None:
        return
    check_memory(size[0] * size[1] * TABLE_BYTES_PER_CELL, what=f"verify --table-size {size[0]}x{size[1]}",
                 limit=limit, remedy="choose a smaller table size")
