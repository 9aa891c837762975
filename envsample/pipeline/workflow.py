"""File-level steps shared by the command line, the demo and batch runs.

Public objects
--------------
- :func:`build_from_file`: read a map file, validate it, build its table and
  save it (``envsample build``).  Returns a :class:`BuildResult`.
- :func:`golden_vectors` / :func:`write_vectors`: reproducible sample records
  (uniforms in; direction, pdf, cell, radiance out) for checking another
  loader against this one (``envsample vectors``).
- :func:`map_facts` / :func:`table_facts`: JSON-ready facts about a map or a
  table (``envsample inspect``).

Conventions: directions follow :mod:`envsample.sphere` (radians inside; the
azimuth and elevation returned here are degrees because they are meant for
people).  Integrals are of radiance over the sphere, in the map's units times
steradians.  They are estimates for asset preparation, not certified lighting
calculations.

References
----------
- NumPy ``Generator`` / PCG64 (O'Neill 2014), the stream behind the uniforms of
  :func:`golden_vectors`: ``numpy.random.default_rng(seed).random((n, 2))``.
"""

from __future__ import annotations

import json
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from envsample._version import __version__
from envsample.core.color import canonical_primaries, luminance
from envsample.core.compat import renamed_keywords
from envsample.core.files import atomic_write_text, refuse_overwriting_inputs
from envsample.core.latlong import row_channel_sums
from envsample.core.schema import Schema
from envsample.core.sphere import direction_angles, row_solid_angles, uv_to_direction
from envsample.core.text import caution
from envsample.errors import EnvsampleError, MapValidationError, TableFormatError
from envsample.io.maps import file_sha256, read_map, validate_map
from envsample.io.tables import SCHEMA_VERSION as TABLE_FORMAT
from envsample.io.tables import array_checksums, read_bin_header, read_table_json, table_paths
from envsample.sampling.radiance import source_radiance
from envsample.sampling.table import load_table, plan_build, sampled_function, table_from_function
from envsample.validation.tuning import recommend

__all__ = [
    "BuildResult",
    "VECTORS_SCHEMA",
    "build_from_file",
    "check_output_folder",
    "golden_vectors",
    "write_vectors",
    "vectors_text",
    "map_facts",
    "table_facts",
    "map_integrals",
    "output_prefix",
]

#: Schema name of the golden-vector files.
VECTORS_SCHEMA = Schema("envsample.golden-vectors", 2)

#: Largest number of golden vectors per file: they check exactness, not statistics.
MAX_VECTORS = 100_000

#: Said wherever integrals are shown.

Progress = Callable[[str], None]


# --------------------------------------------------------------------------- angles


def _pixel_direction(row: int, col: int, height: int, width: int, *, up: str, rotation_deg: float) -> dict:
    d = uv_to_direction((col + 0.5) / width, (row + 0.5) / height, up=up, rotation_deg=rotation_deg)
    az, el = direction_angles(d, up=up, rotation_deg=rotation_deg)
    return {
        "azimuth_deg": round(float(az), 4),
        "elevation_deg": round(float(el), 4),
        "direction": [float(x) for x in d],
        "row": int(row),
        "col": int(col),
    }


# --------------------------------------------------------------------------- build


@dataclass
class BuildResult:
    """What :func:`build_from_file` did.

    ``image`` is the validated map (None with ``keep_map=False``), ``map_info`` its
    description (path, size, format, pixel type, sha256...), ``table`` the built
    table, ``notes`` the validation and build notes (repairs, clamped negatives...),
    ``paths`` the files written (JSON last) and ``seconds`` the time of the build alone.
    """

    image: object
    table: object
    notes: list[str]
    paths: list[Path]
    seconds: float
    prefix: Path
    map_info: dict | None = None


def _tick(progress: Progress | None, label: str) -> None:
    if progress is not None:
        progress(label)


def output_prefix(prefix, map_path) -> Path:
    """The table prefix for ``-o PREFIX``: an existing folder (or a path ending in '/') gets the map's stem."""
    text = str(prefix)
    p = Path(prefix)
    if p.is_dir() or text.endswith(("/", "\\")):
        return p / Path(map_path).stem
    if p.suffix.lower() in (".json", ".npz", ".bin"):
        return p.with_suffix("")
    return p


def check_output_folder(path) -> None:
    """Refuse an output path whose folder (or a parent of it) exists but is not a folder, before any work is done."""
    p = Path(path).absolute()
    for parent in p.parents:
        if parent.exists():
            if not parent.is_dir():
                raise EnvsampleError(f"{path}: {parent} is a file, not a folder; choose another output path")
            return


def build_from_file(
    map_path,
    prefix,
    *,
    raw: bool = False,
    repair: bool = False,
    allow_aspect: bool = False,
    layer: str | None = None,
    make_dirs: bool = True,
    tune: bool = False,
    keep_map: bool = True,
    embed_radiance: bool = False,
    max_memory=None,
    progress: Progress | None = None,
    **build_options,
) -> BuildResult:
    """Read, validate, build and save: the whole of ``envsample build``.

    Parameters
    ----------
    map_path : path of an ``.exr`` / ``.hdr`` map (see :func:`envsample.io.read_map`).
    prefix : table prefix (see :func:`output_prefix`); ``PREFIX.npz`` and
        ``PREFIX.json`` (and ``PREFIX.bin`` with ``raw``) are written.  A prefix whose
        files would replace the map is refused before anything is read.
    repair, allow_aspect : passed to :func:`envsample.io.validate_map` (and the build).
    layer : EXR layer, passed to :func:`envsample.io.read_map`.
    make_dirs : create the prefix's folder if it is missing.  It is created only
        after the map was read, validated and its table built, so bad input
        writes nothing at all.
    tune : also run the one-sample MIS tuning pilot (:func:`envsample.validation.tuning.recommend`)
        and store its result in the table's metadata under ``"recommendation"``.
    keep_map : keep the decoded map in memory (``result.image``, ``table.image``).
        With False the pixels are released as soon as the luminance is computed, so
        the build's peak memory stays near the decoded map's; ``table.image`` then
        re-reads the file if asked.
    embed_radiance : store a float32 copy of the map in the table (``--embed-radiance``).
    max_memory : memory limit of the build (:mod:`envsample.core.limits`).
    progress : called with a short label before each stage.
    build_options : passed to :func:`envsample.sampling.table.plan_build` (size,
        primaries, mapping, uniform_mix, up, rotation_deg, compensate, cell_choice).
    """

    out = output_prefix(prefix, map_path)
    check_output_folder(out)
    refuse_overwriting_inputs(list(table_paths(out).values()), [map_path], option="the table prefix (-o)")
    _tick(progress, "read")
    image = read_map(map_path, layer=layer)
    _tick(progress, "check")
    image, notes = validate_map(image, repair=repair, allow_aspect=allow_aspect)
    _tick(progress, "build")
    start = time.perf_counter()
    plan = plan_build((image.width, image.height), allow_aspect=allow_aspect, max_memory=max_memory, **build_options)
    info = image.describe()
    source = {**info, "layer": layer, "repair": bool(repair)}
    f = sampled_function(image.rgb, plan)
    keep = keep_map or tune or embed_radiance
    if not keep:
        image = None  # the pixels go before the table's arrays are allocated
    doc = {"source": source, "image": {"width": info["width"], "height": info["height"]}}
    table = table_from_function(f, plan, image=image.rgb if keep else None, source=source,
                                radiance_source=source_radiance(doc, Path(map_path).absolute()))
    seconds = time.perf_counter() - start
    notes = list(notes) + [n for n in table.metadata.get("notes", []) if n not in notes]
    if tune:

        _tick(progress, "tune")
        table.metadata["recommendation"] = recommend(table)
    _tick(progress, "save")
    if make_dirs and not out.parent.exists():
        out.parent.mkdir(parents=True)
    paths = table.save(out, raw=raw, embed_radiance=embed_radiance)
    return BuildResult(image=image if keep_map else None, table=table, notes=notes, paths=paths, seconds=seconds,
                       prefix=out, map_info=info)


# --------------------------------------------------------------------------- golden vectors

_METHODS = ("inverse", "alias")

_VECTOR_FIELDS = {
    "u": "input: two uniforms in [0, 1), float64; row k of numpy.random.default_rng(seed).random((count, 2))",
    "direction": "output: unit vector (x, y, z), float64, in the table's direction convention",
    "pdf": "output: solid-angle density of the direction, per steradian, float64",
    "cell": "output: flat index of the chosen table cell, row * table_width + col",
    "radiance": "output: RGB radiance of the full-resolution map in that direction (float32 values)",
    "methods": "inverse = marginal/conditional CDF inversion, alias = alias-table cell choice; "
    "the table JSON's 'usage' spells out both",
    "comparing": "a loader that follows docs/table-format.md (float32 arrays, double arithmetic) gives the same "
    "cells and directions and pdfs to the last bits of sin/cos (the reference C loader: identical); its test "
    "accepts 1e-5 for directions (absolute) and pdfs (relative). Float32 arithmetic is not enough (measured in "
    "docs/table-format.md)",
}


def _methods(method) -> tuple[str, ...]:
    if isinstance(method, str):
        if method == "both":
            return _METHODS
        method = (method,)
    method = tuple(method)
    bad = [m for m in method if m not in _METHODS]
    if bad or not method:
        raise ValueError(f"unknown sampling method {bad[0] if bad else method!r}; valid: inverse, alias, both")
    return method


def golden_vectors(table, *, count: int = 256, seed: int = 0, method="both", table_json=None) -> dict:
    """Reproducible sample records of a table, as a JSON-ready dict.

    ``u = numpy.random.default_rng(seed).random((count, 2))``, then
    ``table.sample(u, method=m)`` for each method (``"inverse"``, ``"alias"``
    or ``"both"`` = every method the table holds).  Floats are Python floats, whose
    JSON text round-trips exactly, so a loaded file reproduces ``table.sample`` bit
    for bit.  ``table_json`` (the table's JSON path) adds its name and sha256.  The
    radiance comes from :attr:`EnvTable.image` (the source map, verified, or the
    embedded copy); a table that has neither gets no radiance fields.
    """
    count = int(count)
    if not 1 <= count <= MAX_VECTORS:
        raise ValueError(f"count must be between 1 and {MAX_VECTORS}, got {count}")
    seed = int(seed)
    if seed < 0:
        raise ValueError(f"seed must be a non-negative integer, got {seed}")
    methods = tuple(table.methods) if method == "both" else _methods(method)
    u = np.random.default_rng(seed).random((count, 2))
    with_radiance = table.has_image or table._radiance_source is not None
    outputs = {}
    for m in methods:
        s = table.sample(u, method=m)
        rad = s.radiance.tolist() if with_radiance else None
        outputs[m] = (s.directions.tolist(), s.pdf.tolist(), s.cells.tolist(), rad)
    records = []
    for k, uk in enumerate(u.tolist()):
        rec = {"u": uk}
        for m, (d, p, c, r) in outputs.items():
            rec[m] = {"direction": d[k], "pdf": p[k], "cell": c[k]}
            if r is not None:
                rec[m]["radiance"] = r[k]
        records.append(rec)

    info = {
        "format_version": TABLE_FORMAT,
        "image": {"width": table.width, "height": table.height},
        "table": {"width": table.table_width, "height": table.table_height},
        "mapping": table.mapping,
        "primaries": table.primaries,
        "up": table.up,
        "rotation_deg": table.rotation_deg,
        "uniform_mix": table.uniform_mix,
        "array_xxh64": array_checksums(table),
    }
    if table_json is not None:
        path = Path(table_json)
        info = {"json": path.name, "json_sha256": file_sha256(path), **info}
    return {
        **VECTORS_SCHEMA.header(),
        "tool": {"name": "envsample", "version": __version__},
        "fields": {k: v for k, v in _VECTOR_FIELDS.items() if with_radiance or k != "radiance"},
        "seed": seed,
        "count": count,
        "generator": "numpy.random.default_rng(seed).random((count, 2)), float64",
        "methods": list(methods),
        "table": info,
        "vectors": records,
    }


def vectors_text(doc: dict) -> str:
    """The JSON text of a golden-vector document: the header indented, one vector per line."""
    head = {k: v for k, v in doc.items() if k != "vectors"}
    text = json.dumps(head, indent=2)
    lines = [text[:-2] + ',\n  "vectors": [']
    body = ",\n".join("    " + json.dumps(r, separators=(", ", ": ")) for r in doc["vectors"])
    return lines[0] + "\n" + body + "\n  ]\n}\n"


def write_vectors(path, doc: dict, *, make_dirs: bool = True) -> Path:
    """Write a golden-vector document atomically (temporary file, then rename); return the path."""

    p = Path(path)
    check_output_folder(p)
    text = vectors_text(doc)
    if make_dirs and not p.parent.exists():
        p.parent.mkdir(parents=True)
    atomic_write_text(p, text)
    return p


# --------------------------------------------------------------------------- facts


def map_integrals(rgb: np.ndarray, primaries: str = "bt709") -> tuple[list[float], float, np.ndarray]:
    """Per-channel and luminance integrals of L over the sphere (map units x sr, float64 sums), and the luminance.

    Each pixel weighs its exact solid angle (:func:`envsample.sphere.row_solid_angles`).
    Returns ``([R, G, B], Y, luminance float32 (H, W))``.
    """

    h, w = rgb.shape[:2]
    sa = row_solid_angles(h, w)
    per_rgb = (row_channel_sums(rgb) * sa[:, None]).sum(axis=0)
    lum = luminance(rgb, primaries)
    return [float(x) for x in per_rgb], float(np.dot(lum.sum(axis=1, dtype=np.float64), sa)), lum


@renamed_keywords(rotate_deg="rotation_deg")
def map_facts(image, *, primaries: str = "bt709", up: str = "y", rotation_deg: float = 0.0) -> dict:
    """JSON-ready facts about a map as read (a :class:`envsample.io.MapImage`).

    Size, format, pixel type, channels, compression, chromaticities, sha256;
    per-channel value range over the finite pixels; counts of NaN/Inf and
    negative values; per-channel and luminance integrals of L over the sphere
    (map units times steradians, non-finite values counted as 0, negatives as
    they are); the brightest pixel by luminance and its direction (azimuth,
    elevation in degrees, unit vector for ``up``); and whether ``envsample
    build`` would accept the map as it is (``validate_map``).
    """

    primaries = canonical_primaries(primaries)
    rgb = np.asarray(image.rgb, dtype=np.float32)
    h, w = rgb.shape[:2]
    finite = np.isfinite(rgb)
    n_bad = int(rgb.size - np.count_nonzero(finite))
    clean = rgb if n_bad == 0 else np.where(finite, rgb, np.float32(0.0))
    per_rgb, lum_int, lum = map_integrals(clean, primaries)
    row, col = divmod(int(np.argmax(lum)), w)
    brightest = _pixel_direction(row, col, h, w, up=up, rotation_deg=rotation_deg)
    brightest["luminance"] = float(lum[row, col])
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            _, notes = validate_map(image)
        usable = {"ok": True, "notes": notes}
    except MapValidationError as e:
        usable = {"ok": False, "problem": str(e)}
    desc = image.describe() if hasattr(image, "describe") else {}
    path = getattr(image, "path", None)
    return {
        "kind": "map",
        "path": None if path is None else str(path),
        "file_bytes": Path(path).stat().st_size if path is not None and Path(path).exists() else None,
        "format": desc.get("format"),
        "width": w,
        "height": h,
        "pixel_type": desc.get("pixel_type"),
        "channels": desc.get("channels"),
        "compression": desc.get("compression"),
        "chromaticities": desc.get("chromaticities"),
        "is_hdr": desc.get("is_hdr", True),
        "has_alpha": desc.get("has_alpha", False),
        "sha256": desc.get("sha256"),
        "range": {
            "min": [float(x) for x in clean.min(axis=(0, 1))],
            "max": [float(x) for x in clean.max(axis=(0, 1))],
        },
        "non_finite_values": n_bad,
        "negative_values": int(np.count_nonzero(clean < 0)),
        "integrals": {
            "rgb": per_rgb,
            "luminance": lum_int,
            "primaries": primaries,
            "units": "map radiance units times steradians",
        },
        "brightest": brightest,
        "convention": {"up": up, "rotation_deg": float(rotation_deg)},
        "build": usable,
        "caution": caution("integrals"),
    }


def table_facts(prefix_or_path, *, verify: bool | None = None) -> dict:
    """JSON-ready facts about a saved table.

    The JSON is always read with the strict reader, and the array files' sizes are
    checked against it (a ``.bin``'s header is read and verified).  The arrays
    themselves are read only when verifying: ``verify=True``, or ``None`` (the
    default) when ``prefix_or_path`` is the ``.npz`` or ``.bin`` file itself; then
    every checksum and the distribution are checked (:func:`envsample.sampling.table.load_table`).
    Image and table sizes, mapping, primaries, convention, options, integrals, the
    number of cells with nonzero probability, the largest cell probability and the
    direction of that cell's centre (from the JSON's summary), notes, and the files
    with their sizes.
    """

    paths = table_paths(prefix_or_path)
    suffix = Path(prefix_or_path).suffix.lower()
    if verify is None:
        verify = suffix in (".npz", ".bin")
    doc = read_table_json(prefix_or_path)
    files = []
    for key, name in (("json", "json"), ("npz", "npz"), ("bin", "raw")):
        p = paths[key]
        if key != "json" and doc["files"][name] is None:
            continue
        if not p.exists():
            raise TableFormatError(f"{p}: table file not found (the JSON names it); rebuild the table")
        files.append({"path": str(p), "bytes": p.stat().st_size})
    if doc["files"]["raw"] is not None:
        read_bin_header(paths["bin"])
    if verify:
        load_table(prefix_or_path)
    summary = doc["summary"]
    big = summary["largest_cell"]
    w, h = doc["table"]["width"], doc["table"]["height"]
    conv = doc["convention"]
    largest = _pixel_direction(big["row"], big["col"], h, w, up=conv["up"], rotation_deg=conv["rotation_deg"])
    largest["probability"] = big["probability"]
    largest["pdf_per_sr"] = big["pdf_per_sr"]
    opts = doc["options"]
    return {
        "kind": "table",
        "path": str(paths["json"]),
        "schema": f"{doc['schema']} v{doc['schema_version']}",
        "tool_version": doc["tool"]["version"],
        "source": doc.get("source"),
        "radiance": doc["radiance"],
        "image": doc["image"],
        "table": doc["table"],
        "mapping": opts["mapping"],
        "primaries": opts["primaries"],
        "convention": {"up": conv["up"], "rotation_deg": conv["rotation_deg"], "handedness": conv["handedness"]},
        "options": opts,
        "integrals": doc["integrals"],
        "cells": w * h,
        "nonzero_cells": summary["nonzero_cells"],
        "largest_cell": largest,
        "valid_only_inside_mis": bool(doc["valid_only_inside_mis"]),
        "recommendation": doc.get("recommendation"),
        "notes": doc["notes"],
        "files": files,
        "verified": bool(verify),
        "caution": caution("integrals"),
    }
