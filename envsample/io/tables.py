"""Reading and writing sampling tables: ``PREFIX.npz`` + ``PREFIX.json`` (+ ``PREFIX.bin``).

The schema is our own, documented in ``docs/table-format.md``:

* ``PREFIX.json`` — schema name and version, source file and sha256, image and
  table sizes, primaries, direction convention, in-cell mapping, options,
  integrals, tool version, and for every array its name, dtype, shape, byte
  order, sha256 (and, with a raw file, its byte offset and length).
* ``PREFIX.npz`` — the arrays, uncompressed (numpy's NPZ container).
* ``PREFIX.bin`` (optional) — the same arrays as little-endian C-order bytes at
  64-byte aligned offsets, so C++ or GPU loaders need no numpy.

Every file is written to a temporary name in the target folder and renamed into
place, the JSON last: an interrupted save never leaves a half-written table that
loads.  :func:`read_table` checks the schema, dtypes, shapes and checksums (the
container); :func:`envsample.sampling.table.load_table` then checks what the arrays
mean (monotone CDFs, alias index range, finite pdf).  Both refuse with a
:class:`TableFormatError` that names the file and the problem.
"""

from __future__ import annotations

import hashlib
import json
import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from envsample.core.files import atomic_write
from envsample.core.latlong import MAPPINGS
from envsample.errors import TableFormatError

__all__ = ["SCHEMA_NAME", "SCHEMA_VERSION", "ARRAY_DTYPES", "StoredTable", "save_table", "read_table", "table_paths",
           "read_table_json", "array_checksums"]

SCHEMA_NAME = "envsample.sampling-table"
SCHEMA_VERSION = 1
_ALIGN = 64

#: dtype of every stored array (little-endian).
ARRAY_DTYPES = {
    "marginal_cdf": "<f4",
    "conditional_cdf": "<f4",
    "alias_probability": "<f4",
    "alias_index": "<i4",
    "cell_pdf": "<f4",
    "radiance": "<f4",
}

USAGE = {
    "cell_choice_inverse": (
        "row i: largest i with marginal_cdf[i] <= u0; column j: largest j with conditional_cdf[i, j] <= u1; "
        "fractions fv = (u0 - marginal_cdf[i]) / (marginal_cdf[i+1] - marginal_cdf[i]) and likewise fu"
    ),
    "cell_choice_alias": (
        "k = floor(u0 * n), f = u0 * n - k; if f < alias_probability[k] keep cell k and fu = f / p, "
        "else cell alias_index[k] and fu = (f - p) / (1 - p); fv = u1; row, col = divmod(cell, table width)"
    ),
    "equal-area": (
        "phi = 2*pi*(col + fu)/w - pi + rotation; cos(theta) = c_i - fv*(c_i - c_{i+1}) with c_i = cos(pi*i/h); "
        "pdf per steradian = cell_pdf[row, col]"
    ),
    "uv-linear": (
        "phi as equal-area; theta = pi*(row + fv)/h; "
        "pdf per steradian = cell_pdf[row, col] * dOmega_row * h * w / (2*pi^2*sin(theta)), "
        "dOmega_row = (c_row - c_{row+1}) * 2*pi / w"
    ),
}


def table_paths(prefix_or_path) -> dict[str, Path]:
    """The json/npz/bin paths of a table given its prefix or any of its files."""
    p = Path(prefix_or_path)
    if p.suffix.lower() in (".json", ".npz", ".bin"):
        p = p.with_suffix("")
    return {"json": p.with_name(p.name + ".json"), "npz": p.with_name(p.name + ".npz"), "bin": p.with_name(p.name + ".bin")}


def _le(a: np.ndarray, dtype: str) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.dtype(dtype))


def _sha(a: np.ndarray) -> str:
    return hashlib.sha256(memoryview(np.ascontiguousarray(a)).cast("B")).hexdigest()


def _stored_arrays(table) -> dict[str, np.ndarray]:
    """The table's arrays as they are stored: little-endian, C order, the dtypes of ARRAY_DTYPES."""
    return {name: _le(a, ARRAY_DTYPES[name]) for name, a in table.arrays().items()}


def array_checksums(table) -> dict[str, str]:
    """SHA-256 of every stored array's bytes, as written in ``PREFIX.json`` (``arrays.NAME.sha256``)."""
    return {name: _sha(a) for name, a in _stored_arrays(table).items()}


def save_table(table, prefix, *, raw: bool = False) -> list[Path]:
    """Write a table's files atomically; returns the paths written (JSON last)."""
    paths = table_paths(prefix)
    arrays = _stored_arrays(table)
    entries = {}
    offset = 0
    for name, a in arrays.items():
        entries[name] = {
            "dtype": a.dtype.str,
            "byte_order": "little",
            "shape": list(a.shape),
            "sha256": _sha(a),
        }
        if raw:
            offset = -(-offset // _ALIGN) * _ALIGN
            entries[name]["offset"] = offset
            entries[name]["nbytes"] = int(a.nbytes)
            offset += a.nbytes
    meta = dict(table.metadata)
    doc = {
        "schema": SCHEMA_NAME,
        "schema_version": SCHEMA_VERSION,
        "tool": {"name": "envsample", "version": meta.get("tool_version")},
        "source": meta.get("source"),
        "image": {"width": table.width, "height": table.height},
        "table": {"width": table.table_width, "height": table.table_height},
        "convention": meta["convention"],
        "options": meta["options"],
        "mapping": meta["options"]["mapping"],
        "primaries": meta["options"]["primaries"],
        "integrals": meta["integrals"],
        "sampled_integral": meta["sampled_integral"],
        "valid_only_inside_mis": bool(meta.get("valid_only_inside_mis", False)),
        "notes": meta.get("notes", []),
        "usage": {k: USAGE[k] for k in ("cell_choice_inverse", "cell_choice_alias", meta["options"]["mapping"])},
        "files": {"npz": paths["npz"].name, "raw": paths["bin"].name if raw else None},
        "arrays": entries,
    }
    if "recommendation" in meta:
        doc["recommendation"] = meta["recommendation"]
    if meta.get("lights"):
        # Analytic lights that go with this table (a split map's sun): a renderer loads both.
        doc["lights"] = meta["lights"]

    def write_npz(f):
        np.savez(f, **arrays)

    atomic_write(paths["npz"], write_npz)
    written = [paths["npz"]]
    if raw:

        def write_bin(f):
            pos = 0
            for name, a in arrays.items():
                pad = entries[name]["offset"] - pos
                f.write(b"\0" * pad)
                f.write(memoryview(a).cast("B"))
                pos = entries[name]["offset"] + a.nbytes

        atomic_write(paths["bin"], write_bin)
        written.append(paths["bin"])
    text = json.dumps(doc, indent=2, sort_keys=False) + "\n"
    atomic_write(paths["json"], lambda f: f.write(text.encode("utf-8")))  # through the module name: tests patch it
    written.append(paths["json"])
    if not raw and paths["bin"].exists():
        # A raw file from an earlier save no longer matches this table: remove it so a
        # loader cannot pair it with the new JSON (which says "raw": null).
        paths["bin"].unlink()
    return written


def read_table_json(prefix_or_path) -> dict:
    """Read and check the JSON document of a table (schema name and version); no arrays."""
    path = table_paths(prefix_or_path)["json"]
    if not path.exists():
        raise TableFormatError(f"{path}: table metadata file not found; build the table with 'envsample build'")
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise TableFormatError(f"{path}: not valid JSON ({exc}); rebuild the table") from None
    if not isinstance(doc, dict) or doc.get("schema") != SCHEMA_NAME:
        raise TableFormatError(f"{path}: not an envsample table (schema {doc.get('schema') if isinstance(doc, dict) else None!r})")
    version = doc.get("schema_version")
    if version != SCHEMA_VERSION:
        raise TableFormatError(
            f"{path}: table schema version {version!r}, this envsample reads version {SCHEMA_VERSION}; "
            "rebuild the table with this version"
        )
    for key in ("image", "table", "convention", "options", "integrals", "arrays", "sampled_integral"):
        if key not in doc:
            raise TableFormatError(f"{path}: missing key {key!r}; rebuild the table")
    return doc


@dataclass
class StoredTable:
    """A table's files as read and verified by :func:`read_table`: the JSON document and the arrays.

    ``arrays`` maps each name of :data:`ARRAY_DTYPES` to its array (little-endian,
    the stored dtype); ``metadata`` is the part of the document that
    :class:`envsample.sampling.table.EnvTable` keeps; ``paths`` the files.
    """

    paths: dict
    doc: dict
    arrays: dict

    @property
    def metadata(self) -> dict:
        doc = self.doc
        metadata = {
            "convention": doc["convention"],
            "options": doc["options"],
            "integrals": doc["integrals"],
            "sampled_integral": float(doc["sampled_integral"]),
            "source": doc.get("source"),
            "notes": doc.get("notes", []),
            "tool_version": doc.get("tool", {}).get("version"),
        }
        if doc.get("valid_only_inside_mis"):
            metadata["valid_only_inside_mis"] = True
        if "recommendation" in doc:
            metadata["recommendation"] = doc["recommendation"]
        if doc.get("lights"):
            metadata["lights"] = doc["lights"]
        return metadata


def read_table(prefix_or_path) -> StoredTable:
    """Read a table's files and verify the container: schema, dtypes, shapes and sha256 of every array.

    Accepts the prefix or any of its files.  Raises :class:`TableFormatError`
    (naming the file and the problem) for a missing, corrupt, truncated, tampered
    or other-version table.  What the arrays mean (CDFs, alias table, pdf) is
    checked by :func:`envsample.sampling.table.load_table`.
    """
    paths = table_paths(prefix_or_path)
    doc = read_table_json(prefix_or_path)
    try:
        return StoredTable(paths=paths, doc=doc, arrays=_read_arrays(paths, doc))
    except (KeyError, IndexError, TypeError, AttributeError, ValueError) as exc:
        # Valid JSON of the wrong structure (hand-edited, or another tool's file).
        raise TableFormatError(
            f"{paths['json']}: malformed table metadata ({type(exc).__name__}: {exc}); rebuild the table"
        ) from None


def _read_arrays(paths: dict, doc: dict) -> dict:
    npz_path = paths["npz"]
    if not npz_path.exists():
        raise TableFormatError(f"{npz_path}: table array file not found (the JSON names it); rebuild the table")
    arrays = {}
    try:
        with np.load(npz_path, allow_pickle=False) as z:
            for name, dtype in ARRAY_DTYPES.items():
                if name not in z.files:
                    raise TableFormatError(f"{npz_path}: array {name!r} missing; rebuild the table")
                arrays[name] = z[name]
    except TableFormatError:
        raise
    except (zipfile.BadZipFile, OSError, ValueError, EOFError):
        raise TableFormatError(f"{npz_path}: corrupt or truncated (not a readable NPZ archive); rebuild the table") from None
    for name, a in arrays.items():
        entry = doc["arrays"].get(name)
        if entry is None:
            raise TableFormatError(f"{paths['json']}: no entry for array {name!r}; rebuild the table")
        if a.dtype.str != entry["dtype"] or a.dtype.str != ARRAY_DTYPES[name]:
            raise TableFormatError(f"{npz_path}: array {name!r} has dtype {a.dtype.str}, expected {ARRAY_DTYPES[name]}")
        if list(a.shape) != list(entry["shape"]):
            raise TableFormatError(f"{npz_path}: array {name!r} has shape {list(a.shape)}, JSON says {entry['shape']}")
        if _sha(a) != entry["sha256"]:
            raise TableFormatError(f"{npz_path}: array {name!r} fails its sha256 check (modified or corrupt); rebuild the table")
    _check_shapes(arrays, doc, npz_path)
    return arrays


def _check_shapes(arrays: dict, doc: dict, path: Path) -> None:
    h, w = int(doc["table"]["height"]), int(doc["table"]["width"])
    H, W = int(doc["image"]["height"]), int(doc["image"]["width"])
    expected = {
        "marginal_cdf": (h + 1,),
        "conditional_cdf": (h, w + 1),
        "alias_probability": (h * w,),
        "alias_index": (h * w,),
        "cell_pdf": (h, w),
        "radiance": (H, W, 3),
    }
    for name, shape in expected.items():
        if arrays[name].shape != shape:
            raise TableFormatError(f"{path}: array {name!r} has shape {arrays[name].shape}, expected {shape} for a {w}x{h} table")
    mapping = doc["options"].get("mapping")
    if mapping not in MAPPINGS:
        raise TableFormatError(f"{path}: unknown in-cell mapping {mapping!r}")
