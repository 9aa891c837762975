"""``verify`` on files: load or build the table of what the user gave, render, write the report.

:func:`verify_map` is :func:`load_source` + :func:`envsample.validation.render.render_validation`
+ :func:`envsample.reports.validation.write_validation`.  The numbers are Monte Carlo
estimates for asset preparation, not certified lighting calculations.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np

from envsample.io.maps import MapImage, read_map, supported_extensions, validate_map
from envsample.pipeline.split import find_split, verify_split
from envsample.reports.validation import write_validation
from envsample.sampling.table import EnvTable, build_table, load_table
from envsample.validation.render import Progress, check_roughness, render_validation
from envsample.validation.streams import check_normals, check_seed, check_spp

__all__ = ["load_source", "verify_map"]


def load_source(source, *, table_size=None) -> tuple:
    """Turn what the user gave into ``(EnvTable, info)``; ``info`` is a JSON-ready description.

    ``source`` is an :class:`~envsample.table.EnvTable`; a MapImage or an ``(H, W, 3)``
    array (validated, then built with ``size=table_size``); or a path.  A path with a
    map extension (``.exr``, ``.hdr``, and the LDR ones, which validation refuses with
    a clear message) is read as a map, anything else as a table prefix or table file
    (``.json``/``.npz``/``.bin``).  ``table_size`` applies to maps only.
    """
    if isinstance(source, EnvTable):
        if table_size is not None:
            raise ValueError("table_size applies to maps; a table is verified at its own size (rebuild it to change that)")
        return source, {"kind": "table", "path": None, "table_source": source.metadata.get("source")}
    if isinstance(source, (str, Path)):
        p = Path(source)
        if p.suffix.lower() in supported_extensions():
            image, notes = validate_map(read_map(p))
            table = build_table(image, size=table_size)
            return table, {"kind": "map", "path": str(p), "sha256": image.sha256, "format": image.format,
                           "width": image.width, "height": image.height, "validation_notes": notes}
        if table_size is not None:
            raise ValueError(f"{p}: table_size applies to maps; a table is verified at its own size")
        table = load_table(p)
        return table, {"kind": "table", "path": str(p), "table_source": table.metadata.get("source")}
    if isinstance(source, MapImage):
        image = source
    else:
        image = MapImage.from_array(source)
    image, notes = validate_map(image)
    table = build_table(image, size=table_size)
    info = {"kind": "map", "path": None if image.path is None else str(image.path), "sha256": image.sha256,
            "format": image.format, "width": image.width, "height": image.height, "validation_notes": notes}
    if image.sha256 is None:
        info["array_sha256"] = hashlib.sha256(np.ascontiguousarray(image.rgb, dtype="<f4").tobytes()).hexdigest()
    return table, info


def verify_map(source, outdir, *, spp: int = 64, normals=(128, 64), estimators=None, roughness=None,
               seed: int | None = 0, table_size=None, sphere: bool = True,
               progress: Progress | None = None) -> dict:
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
    """
    # Option values are checked before any file is read.
    spp, normals, seed = check_spp(spp), check_normals(normals), check_seed(seed)
    roughness = check_roughness(roughness)
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
