"""Reading and writing sampling tables (format v2): ``PREFIX.json`` + ``PREFIX.npz`` (+ ``PREFIX.bin``).

The format is our own, documented byte by byte in ``docs/table-format.md``:

* ``PREFIX.json`` — the facts for people and pipelines: schema and version, source
  map (path, sha256), sizes, convention, options, integrals, a summary, and for
  every array its dtype, shape and XXH64 checksum (and its offset in ``PREFIX.bin``).
  Checked by the strict reader :mod:`envsample.io.table_json` before any array is read.
* ``PREFIX.npz`` — the arrays, numpy's uncompressed NPZ container.
* ``PREFIX.bin`` (``raw=True``) — self-describing for loaders without numpy or a
  JSON parser: a fixed 576-byte little-endian header (magic, version, grids,
  mapping, convention, an 8-slot array directory with offsets, sizes and XXH64
  checksums, and the header's own checksum), then the arrays at 64-byte aligned offsets.

No copy of the map is stored by default: radiance comes from the recorded source
map, re-read and verified on demand (:mod:`envsample.sampling.table`), or from an
opt-in embedded ``radiance`` array.  A table's files are written as one unit
(:func:`envsample.core.files.atomic_write_group`, the JSON last): a failed save
leaves the previous table whole.  Every file is verified where it is read: sizes
before any data is read, then the checksum of every array (hashed on a second
thread while the next array is read).  Errors are one-line
:class:`~envsample.errors.TableFormatError` messages naming the file.

Checksums are XXH64 (seed 0): an integrity check against corruption and truncation
at several GB/s, not a defence against deliberate forgery (files that must be
authenticated are signed or hashed with SHA-256 by the pipeline that ships them).

References
----------
- Collet, Y. xxHash fast digest algorithm, XXH64 specification, version 0.1.1
  (2018), github.com/Cyan4973/xxHash/blob/dev/doc/xxhash_spec.md.
- PKWARE APPNOTE.TXT (ZIP file format specification), version 6.3: local file
  headers, the "stored" method and ZIP64, which numpy's NPZ uses.
"""

from __future__ import annotations

import json
import os
import struct
import zipfile
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xxhash

from envsample.core.files import atomic_write_group
from envsample.core.limits import check_memory
from envsample.errors import TableFormatError
from envsample.io.table_json import RADIANCE_KINDS, SCHEMA_NAME, SCHEMA_VERSION, parse_table_json

__all__ = ["SCHEMA_NAME", "SCHEMA_VERSION", "ARRAY_DTYPES", "SLOTS", "MAGIC", "HEADER_BYTES", "StoredTable",
           "BinHeader", "save_table", "read_table", "read_table_json", "read_bin_header", "table_paths",
           "array_checksums", "table_arrays_bytes"]

#: dtype of every array a table can store (little-endian), in the order of the .bin's slots.
ARRAY_DTYPES = {
    "marginal_cdf": "<f4",
    "conditional_cdf": "<f4",
    "row_alias_probability": "<f4",
    "row_alias_index": "<u4",
    "alias_probability": "<f4",
    "alias_index": "<u2",
    "cell_pdf": "<f4",
    "radiance": "<f4",
}
SLOTS = tuple(ARRAY_DTYPES)
#: Arrays each cell-choice method needs (cell_pdf is always stored).
METHOD_ARRAYS = {
    "inverse": ("marginal_cdf", "conditional_cdf"),
    "alias": ("row_alias_probability", "row_alias_index", "alias_probability", "alias_index"),
}
MAGIC = b"\x89ENVTBL\n"
HEADER_BYTES = 576
_ALIGN = 64
_FIXED = struct.Struct("<8sIIQIIIIIIdIIdII48x")  # 128 bytes
_SLOT = struct.Struct("<IIIIIIQQQ")  # 48 bytes: dtype, ndim, shape[3], reserved, offset, nbytes, xxh64
_DIR_END = _FIXED.size + len(SLOTS) * _SLOT.size  # 512: the header's own XXH64 (u64) follows
_DTYPE_CODES = {"<f4": 1, "<u2": 2, "<u4": 3}
_MAPPING_CODES = {"equal-area": 0, "uv-linear": 1}
_UP_CODES = {"y": 0, "z": 1}
_FLAG_MIS_ONLY, _FLAG_RADIANCE = 1, 2
_CHUNK = 64 << 20

USAGE = {
    "cell_choice_inverse": (
        "row i: largest i with marginal_cdf[i] <= u0, fv = (u0 - marginal_cdf[i]) / (marginal_cdf[i+1] - marginal_cdf[i]); "
        "column j: largest j with conditional_cdf[i, j] <= u1, fu likewise (all in double precision)"
    ),
    "cell_choice_alias": (
        "two levels, in double precision: x = u0 * h, k = min(floor(x), h - 1), f = x - k, p = row_alias_probability[k]; "
        "row i = k and fv = f / p if f < p, else i = row_alias_index[k] and fv = (f - p) / (1 - p); "
        "then the same with u1, w and row i's alias_probability[i] / alias_index[i] gives column j and fu"
    ),
    "equal-area": (
        "phi = 2*pi*(j + fu)/w - pi + rotation; cos(theta) = c_i - fv*(c_i - c_{i+1}) with c_i = cos(pi*i/h); "
        "pdf per steradian = cell_pdf[i, j]"
    ),
    "uv-linear": (
        "phi as equal-area; theta = pi*(i + fv)/h; "
        "pdf per steradian = cell_pdf[i, j] * dOmega_i * h * w / (2*pi^2*sin(theta)), "
        "dOmega_i = (c_i - c_{i+1}) * 2*pi / w"
    ),
}


def table_paths(prefix_or_path) -> dict[str, Path]:
    """The json/npz/bin paths of a table given its prefix or any of its files."""
    text = os.fspath(prefix_or_path) if not isinstance(prefix_or_path, str) else prefix_or_path
    if not str(text).strip():
        raise TableFormatError("'': empty table path; give the table's prefix or its .json/.npz/.bin file")
    p = Path(text)
    if p.suffix.lower() in (".json", ".npz", ".bin"):
        p = p.with_suffix("")
    if p.is_dir() or not p.name or p.name in (".", ".."):
        raise TableFormatError(f"{text}: is a folder; give the table's prefix (folder/name) or one of its files")
    return {"json": p.with_name(p.name + ".json"), "npz": p.with_name(p.name + ".npz"), "bin": p.with_name(p.name + ".bin")}


def _digest(a) -> str:
    """XXH64 (seed 0) of an array's C-order bytes, as 16 hex digits (the canonical, big-endian spelling)."""
    data = a if isinstance(a, (bytes, bytearray, memoryview)) else memoryview(np.ascontiguousarray(a)).cast("B")
    return xxhash.xxh64(data).hexdigest()


def _stored_arrays(table, *, embed_radiance: bool = False) -> dict[str, np.ndarray]:
    """The table's arrays as stored: little-endian, C order, the dtypes of ARRAY_DTYPES, in slot order."""
    arrays = table.arrays()
    if embed_radiance:
        arrays["radiance"] = table.image
    return {name: np.ascontiguousarray(arrays[name], dtype=np.dtype(ARRAY_DTYPES[name]))
            for name in SLOTS if arrays.get(name) is not None}


def array_checksums(table) -> dict[str, str]:
    """XXH64 of every stored array's bytes, as written in ``PREFIX.json`` (``arrays.NAME.xxh64``)."""
    return {name: _digest(a) for name, a in _stored_arrays(table).items()}


def table_arrays_bytes(width: int, height: int, *, cell_choice: str = "both") -> int:
    """Bytes of the arrays of a ``width x height`` table holding ``cell_choice`` (no embedded radiance).

    Per cell: 4 (cell_pdf) + 4 (conditional_cdf, inverse) + 6 (alias_probability and
    alias_index, alias): 14 bytes with both methods, 8 or 10 with one.
    """
    w, h = int(width), int(height)
    total = 4 * w * h
    if cell_choice in ("both", "inverse"):
        total += 4 * h * (w + 1) + 4 * (h + 1)
    if cell_choice in ("both", "alias"):
        total += 6 * w * h + 8 * h
    return total


# ---------------------------------------------------------------------------------------------- writing


def _layout(arrays: dict) -> dict[str, tuple[int, int]]:
    """Offsets (64-byte aligned, after the header) and byte counts of the arrays in PREFIX.bin."""
    out, offset = {}, HEADER_BYTES
    for name, a in arrays.items():
        out[name] = (offset, int(a.nbytes))
        offset = -(-(offset + a.nbytes) // _ALIGN) * _ALIGN
    return out


def _bin_header(doc: dict, arrays: dict, hashes: dict, layout: dict) -> bytes:
    opts, conv = doc["options"], doc["convention"]
    choice = {"both": 3, "inverse": 1, "alias": 2}[opts["cell_choice"]]
    flags = (_FLAG_MIS_ONLY if doc["valid_only_inside_mis"] else 0) | (_FLAG_RADIANCE if "radiance" in arrays else 0)
    end = max((off + n for off, n in layout.values()), default=HEADER_BYTES)
    fixed = _FIXED.pack(MAGIC, SCHEMA_VERSION, HEADER_BYTES, end, doc["table"]["width"], doc["table"]["height"],
                        doc["image"]["width"], doc["image"]["height"], _MAPPING_CODES[opts["mapping"]],
                        _UP_CODES[conv["up"]], float(conv["rotation_deg"]), choice, flags,
                        float(doc["sampled_integral"]), len(SLOTS), _SLOT.size)
    slots = b""
    for name in SLOTS:
        if name in arrays:
            a = arrays[name]
            shape = list(a.shape) + [0] * (3 - a.ndim)
            off, n = layout[name]
            slots += _SLOT.pack(_DTYPE_CODES[ARRAY_DTYPES[name]], a.ndim, *shape, 0, off, n, int(hashes[name], 16))
        else:
            slots += _SLOT.pack(0, 0, 0, 0, 0, 0, 0, 0, 0)
    head = fixed + slots
    head += struct.pack("<Q", xxhash.xxh64_intdigest(head))
    return head + b"\0" * (HEADER_BYTES - len(head))


def _npy_header(a: np.ndarray) -> bytes:
    """The .npy (format 1.0) header of an array, as numpy writes it."""
    import io

    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(buf, np.lib.format.header_data_from_array_1_0(a))
    return buf.getvalue()


def _crc32(header: bytes, a: np.ndarray) -> int:
    crc = zlib.crc32(header)
    view = memoryview(a).cast("B")
    for start in range(0, len(view), _CHUNK):
        crc = zlib.crc32(view[start:start + _CHUNK], crc)
    return crc


def _write_npz(f, arrays: dict, crcs: dict | None = None) -> None:
    """numpy's NPZ: a ZIP64 archive of stored (uncompressed) .npy members (PKWARE APPNOTE 6.3).

    Written without copying the arrays.  ``crcs`` maps each name to a future of the
    member's CRC-32 (computed on another thread while the data is written); each
    local header's CRC is patched in once it is known.
    """
    entries = []
    for name, a in arrays.items():
        header = _npy_header(a)
        size = len(header) + a.nbytes
        fname = f"{name}.npy".encode()
        offset = f.tell()
        extra = struct.pack("<HHQQ", 1, 16, size, size)
        f.write(struct.pack("<IHHHHHIIIHH", 0x04034B50, 45, 0, 0, 0, 0x21, 0, 0xFFFFFFFF, 0xFFFFFFFF, len(fname),
                            len(extra)) + fname + extra)
        f.write(header)
        view = memoryview(a).cast("B")
        for start in range(0, len(view), _CHUNK):
            f.write(view[start:start + _CHUNK])
        crc = crcs[name].result() if crcs is not None else _crc32(header, a)
        end = f.tell()
        f.seek(offset + 14)
        f.write(struct.pack("<I", crc))
        f.seek(end)
        entries.append((fname, crc, size, offset))
    cd_start = f.tell()
    for fname, crc, size, offset in entries:
        extra = struct.pack("<HHQQQ", 1, 24, size, size, offset)
        f.write(struct.pack("<IHHHHHHIIIHHHHHII", 0x02014B50, 45, 45, 0, 0, 0, 0x21, crc, 0xFFFFFFFF, 0xFFFFFFFF,
                            len(fname), len(extra), 0, 0, 0, 0, 0xFFFFFFFF) + fname + extra)
    cd_end = f.tell()
    n = len(entries)
    f.write(struct.pack("<IQHHIIQQQQ", 0x06064B50, 44, 45, 45, 0, 0, n, n, cd_end - cd_start, cd_start))
    f.write(struct.pack("<IIQI", 0x07064B50, 0, cd_end, 1))
    f.write(struct.pack("<IHHHHIIH", 0x06054B50, 0, 0, 0xFFFF, 0xFFFF, 0xFFFFFFFF, 0xFFFFFFFF, 0))


def _write_bin(f, header: bytes, arrays: dict, layout: dict) -> None:
    f.write(header)
    pos = HEADER_BYTES
    for name, a in arrays.items():
        off, n = layout[name]
        f.write(b"\0" * (off - pos))
        f.write(memoryview(a).cast("B"))
        pos = off + n


def _source_doc(source, json_path: Path):
    if source is None:
        return None
    src = {k: v for k, v in source.items() if k not in ("width", "height", "encoding")}
    if src.get("path"):
        absolute = Path(src["path"]).absolute()
        src["path"] = str(absolute)
        src["relative_path"] = os.path.relpath(absolute, json_path.absolute().parent)
    return src


def table_doc(table, paths: dict, arrays: dict, hashes: dict, *, raw: bool) -> dict:
    """The JSON document of a table whose stored arrays are ``arrays`` (see docs/table-format.md)."""
    meta = table.metadata
    layout = _layout(arrays) if raw else {}
    entries = {}
    for name, a in arrays.items():
        entries[name] = {"dtype": a.dtype.str, "shape": list(a.shape), "xxh64": hashes[name]}
        if raw:
            entries[name]["offset"], entries[name]["nbytes"] = layout[name]
    mapping = meta["options"]["mapping"]
    methods = ("inverse", "alias") if meta["options"]["cell_choice"] == "both" else (meta["options"]["cell_choice"],)
    radiance = "embedded" if "radiance" in arrays else ("source" if (meta.get("source") or {}).get("path") else "none")
    assert radiance in RADIANCE_KINDS
    doc = {
        "schema": SCHEMA_NAME,
        "schema_version": SCHEMA_VERSION,
        "tool": {"name": "envsample", "version": str(meta.get("tool_version"))},
        "source": _source_doc(meta.get("source"), paths["json"]),
        "radiance": radiance,
        "image": {"width": table.width, "height": table.height},
        "table": {"width": table.table_width, "height": table.table_height},
        "convention": meta["convention"],
        "options": meta["options"],
        "integrals": meta["integrals"],
        "sampled_integral": meta["sampled_integral"],
        "valid_only_inside_mis": bool(meta.get("valid_only_inside_mis", False)),
        "notes": list(meta.get("notes", [])),
        "summary": table.summary(),
        "usage": {**{f"cell_choice_{m}": USAGE[f"cell_choice_{m}"] for m in methods}, mapping: USAGE[mapping]},
        "files": {"npz": paths["npz"].name, "raw": paths["bin"].name if raw else None},
        "arrays": entries,
    }
    if "recommendation" in meta:
        doc["recommendation"] = meta["recommendation"]
    if meta.get("lights"):
        # Analytic lights that go with this table (a split map's sun): a renderer loads both.
        doc["lights"] = meta["lights"]
    return doc


def save_table(table, prefix, *, raw: bool = False, embed_radiance: bool = False, check=None) -> list[Path]:
    """Write a table's files as one unit; returns the paths written (JSON last).

    Missing folders are created.  ``raw`` adds ``PREFIX.bin``; ``embed_radiance``
    stores a float32 copy of the map (12 bytes per pixel) for tables whose source
    map will not travel with them.  ``check(arrays)``, if given, runs while the files
    are written and may raise to refuse the table: nothing is then renamed into place
    (the temporaries are removed).  The checksums and the NPZ's CRC-32 are computed on
    other threads while the data is written.  A stale ``PREFIX.bin`` of an earlier save
    is removed when ``raw`` is off, after the new JSON is in place.
    """
    paths = table_paths(prefix)
    arrays = _stored_arrays(table, embed_radiance=embed_radiance)
    paths["json"].parent.mkdir(parents=True, exist_ok=True)
    with ThreadPoolExecutor(max_workers=2) as pool:
        checked = pool.submit(check, arrays) if check is not None else None
        crcs, futures = {}, {}
        for name, a in arrays.items():  # in the order the writer needs them
            crcs[name] = pool.submit(_crc32, _npy_header(a), a)
            futures[name] = pool.submit(_digest, a)
        state = {}

        def finish():
            if "doc" not in state:
                state["hashes"] = {name: fut.result() for name, fut in futures.items()}
                state["doc"] = table_doc(table, paths, arrays, state["hashes"], raw=raw)
            return state["hashes"], state["doc"]

        def write_bin(f):
            hashes, doc = finish()
            _write_bin(f, _bin_header(doc, arrays, hashes, _layout(arrays)), arrays, _layout(arrays))

        def write_json(f):
            _, doc = finish()
            if checked is not None:
                checked.result()  # a refused table raises here, before any file is renamed into place
            f.write((json.dumps(doc, indent=2) + "\n").encode("utf-8"))

        items = [(paths["npz"], lambda f: _write_npz(f, arrays, crcs))]
        items += [(paths["bin"], write_bin)] if raw else []
        written = atomic_write_group(items + [(paths["json"], write_json)])
    if not raw and paths["bin"].exists():
        # A raw file from an earlier save no longer matches this table: remove it so a
        # loader cannot pair it with the new JSON (which says "raw": null).
        paths["bin"].unlink()
    return written


# ---------------------------------------------------------------------------------------------- reading


def read_table_json(prefix_or_path) -> dict:
    """Read and check a table's JSON document with the strict typed reader; no arrays are read."""
    return parse_table_json(table_paths(prefix_or_path)["json"])


@dataclass(frozen=True)
class BinHeader:
    """The fixed header of ``PREFIX.bin`` (see docs/table-format.md), verified by :func:`read_bin_header`."""

    version: int
    file_bytes: int
    table_width: int
    table_height: int
    image_width: int
    image_height: int
    mapping: str
    up: str
    rotation_deg: float
    cell_choice: str
    valid_only_inside_mis: bool
    has_radiance: bool
    sampled_integral: float
    slots: dict  # name -> (shape tuple, offset, nbytes, xxh64 hex)


def _refuse(path, problem: str):
    raise TableFormatError(f"{path}: {problem}; rebuild the table")


def read_bin_header(path) -> BinHeader:
    """Read and verify the 576-byte header of a ``.bin`` file against the file's size; no array is read."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            head = fh.read(HEADER_BYTES)
            size = os.fstat(fh.fileno()).st_size
    except FileNotFoundError:
        raise TableFormatError(f"{path}: table binary not found (the JSON names it); rebuild the table with --raw") from None
    except OSError as exc:
        raise TableFormatError(f"{path}: cannot read ({exc.strerror}); check the path") from None
    if len(head) < HEADER_BYTES or head[:8] != MAGIC:
        _refuse(path, "not an envsample table binary (bad magic or shorter than its header)")
    if struct.pack("<Q", xxhash.xxh64_intdigest(head[:_DIR_END])) != head[_DIR_END:_DIR_END + 8]:
        _refuse(path, "header fails its checksum (modified or corrupt)")
    f = _FIXED.unpack_from(head)
    (_, version, header_bytes, file_bytes, w, h, W, H, mapping, up, rot, choice, flags, integral, nslots, slot_bytes) = f
    if version != SCHEMA_VERSION or header_bytes != HEADER_BYTES or nslots != len(SLOTS) or slot_bytes != _SLOT.size:
        _refuse(path, f"binary format version {version} (header {header_bytes} bytes, {nslots} slots), "
                      f"this envsample reads version {SCHEMA_VERSION}")
    if size != file_bytes:
        _refuse(path, f"file is {size} bytes, its header says {file_bytes} (truncated or padded)")
    codes = {v: k for k, v in _DTYPE_CODES.items()}
    inv_map, inv_up = {v: k for k, v in _MAPPING_CODES.items()}, {v: k for k, v in _UP_CODES.items()}
    if mapping not in inv_map or up not in inv_up or choice not in (1, 2, 3) or w < 1 or h < 1:
        _refuse(path, "header has an unknown mapping, up axis or cell choice, or an empty grid")
    slots = {}
    for k, name in enumerate(SLOTS):
        code, ndim, s0, s1, s2, _, off, n, digest = _SLOT.unpack_from(head, _FIXED.size + k * _SLOT.size)
        if code == 0:
            continue
        shape = (s0, s1, s2)[:ndim]
        if codes.get(code) != ARRAY_DTYPES[name] or not 1 <= ndim <= 3:
            _refuse(path, f"array {name} has dtype code {code}, expected {_DTYPE_CODES[ARRAY_DTYPES[name]]}")
        itemsize = np.dtype(ARRAY_DTYPES[name]).itemsize
        if n != int(np.prod(shape, dtype=np.int64)) * itemsize or off % _ALIGN or off < HEADER_BYTES or off + n > size:
            _refuse(path, f"array {name} has offset {off} and {n} bytes, outside the file or not its shape {list(shape)}")
        slots[name] = (shape, off, n, f"{digest:016x}")
    return BinHeader(version, file_bytes, w, h, W, H, inv_map[mapping], inv_up[up], rot,
                     {1: "inverse", 2: "alias", 3: "both"}[choice], bool(flags & _FLAG_MIS_ONLY),
                     bool(flags & _FLAG_RADIANCE), integral, slots)


@dataclass
class StoredTable:
    """A table's files as read and verified by :func:`read_table`: the JSON document and the arrays.

    ``arrays`` maps each stored name of :data:`ARRAY_DTYPES` to its array
    (little-endian, the stored dtype); ``container`` is ``"npz"`` or ``"bin"``,
    the file the arrays came from; ``paths`` the files.
    """

    paths: dict
    doc: dict
    arrays: dict
    container: str

    @property
    def array_path(self) -> Path:
        return self.paths[self.container]


def expected_shapes(doc: dict) -> dict[str, tuple]:
    """The shape of every array a table of this document stores, by name."""
    h, w = doc["table"]["height"], doc["table"]["width"]
    H, W = doc["image"]["height"], doc["image"]["width"]
    choice = doc["options"]["cell_choice"]
    shapes = {"cell_pdf": (h, w)}
    if choice in ("both", "inverse"):
        shapes.update(marginal_cdf=(h + 1,), conditional_cdf=(h, w + 1))
    if choice in ("both", "alias"):
        shapes.update(row_alias_probability=(h,), row_alias_index=(h,), alias_probability=(h, w), alias_index=(h, w))
    if doc["radiance"] == "embedded":
        shapes["radiance"] = (H, W, 3)
    return {name: shapes[name] for name in SLOTS if name in shapes}


def _check_entries(doc: dict, path: Path) -> dict[str, tuple]:
    """The JSON's array entries name exactly the arrays of its options, with their shapes and dtypes."""
    shapes = expected_shapes(doc)
    entries = doc["arrays"]
    if set(entries) != set(shapes):
        extra, missing = sorted(set(entries) - set(shapes)), sorted(set(shapes) - set(entries))
        _refuse(path, f"arrays do not match the options (missing {missing}, unexpected {extra})")
    for name, shape in shapes.items():
        e = entries[name]
        if e["dtype"] != ARRAY_DTYPES[name]:
            _refuse(path, f"array {name!r} is declared {e['dtype']!r}, the format stores {ARRAY_DTYPES[name]!r}")
        if tuple(e["shape"]) != shape:
            _refuse(path, f"array {name!r} is declared {e['shape']}, expected {list(shape)} for this table")
    return shapes


def read_table(prefix_or_path, *, container: str | None = None, max_memory=None) -> StoredTable:
    """Read a table's files and verify the container: schema, sizes, dtypes, shapes and checksum of every array.

    Accepts the prefix or any of its files; a ``.bin`` path (or ``container="bin"``)
    reads the arrays from the binary, anything else from the NPZ.  The JSON is read
    and checked first; every size is checked before the array's data is read.
    What the arrays mean (CDFs, alias tables, pdf) is checked by
    :func:`envsample.sampling.table.load_table`.  A table larger than the memory
    limit (:mod:`envsample.core.limits`, ``max_memory``) is refused before any array
    is allocated.
    """
    paths = table_paths(prefix_or_path)
    if container is None:
        container = "bin" if Path(prefix_or_path).suffix.lower() == ".bin" else "npz"
    doc = read_table_json(prefix_or_path)
    shapes = _check_entries(doc, paths["json"])
    check_memory(sum(int(np.prod(s, dtype=np.int64)) * np.dtype(ARRAY_DTYPES[n]).itemsize for n, s in shapes.items()),
                 what=f"{paths['json']}: loading this table", limit=max_memory, remedy="use a machine with more memory")
    with ThreadPoolExecutor(max_workers=1) as pool:
        digests = {}

        def hash_later(name, a):  # hashed on the second thread while the next array is read
            digests[name] = pool.submit(_digest, a)

        if container == "bin":
            if doc["files"]["raw"] is None:
                _refuse(paths["json"], "the table has no .bin file (built without --raw)")
            arrays = _read_bin_arrays(paths["bin"], doc, shapes, hash_later)
        else:
            if doc["files"]["npz"] is None:
                _refuse(paths["json"], "the table has no .npz file")
            arrays = _read_npz_arrays(paths["npz"], shapes, hash_later)
        for name in arrays:
            if digests[name].result() != doc["arrays"][name]["xxh64"]:
                _refuse(paths[container], f"array {name!r} fails its checksum (modified or corrupt)")
    return StoredTable(paths=paths, doc=doc, arrays=arrays, container=container)


def _read_into(fh, offset: int, a: np.ndarray, path: Path, name: str) -> None:
    fh.seek(offset)
    view = memoryview(a).cast("B")
    got = 0
    while got < len(view):
        n = fh.readinto(view[got:got + _CHUNK])
        if not n:
            _refuse(path, f"array {name!r} is truncated")
        got += n


def _read_bin_arrays(path: Path, doc: dict, shapes: dict, on_array) -> dict:
    header = read_bin_header(path)
    expect = (doc["table"]["width"], doc["table"]["height"], doc["image"]["width"], doc["image"]["height"],
              doc["options"]["mapping"], doc["convention"]["up"], doc["options"]["cell_choice"])
    got = (header.table_width, header.table_height, header.image_width, header.image_height, header.mapping,
           header.up, header.cell_choice)
    if got != expect or header.rotation_deg != doc["convention"]["rotation_deg"]:
        _refuse(path, "header does not describe the table its JSON describes (a binary of another table?)")
    if set(header.slots) != set(shapes):
        _refuse(path, f"holds arrays {sorted(header.slots)}, the JSON lists {sorted(shapes)}")
    arrays = {}
    with open(path, "rb") as fh:
        for name, shape in shapes.items():
            slot_shape, off, _, digest = header.slots[name]
            entry = doc["arrays"][name]
            if tuple(slot_shape) != shape or digest != entry["xxh64"] or off != entry.get("offset"):
                _refuse(path, f"array {name!r}: header and JSON disagree (shape, offset or checksum)")
            a = np.empty(shape, dtype=np.dtype(ARRAY_DTYPES[name]))
            _read_into(fh, off, a, path, name)
            arrays[name] = a
            on_array(name, a)
    return arrays


def _npz_member_start(fh, info: zipfile.ZipInfo, path: Path) -> int:
    """Offset of a stored member's data in the archive (after its local header)."""
    fh.seek(info.header_offset)
    local = fh.read(30)
    if len(local) != 30 or local[:4] != b"PK\x03\x04":
        _refuse(path, f"member {info.filename!r} has no valid local header (corrupt archive)")
    name_len, extra_len = struct.unpack("<HH", local[26:30])
    return info.header_offset + 30 + name_len + extra_len


def _read_npz_arrays(path: Path, shapes: dict, on_array) -> dict:
    arrays = {}
    try:
        with open(path, "rb") as fh, zipfile.ZipFile(fh) as zf:
            infos = {i.filename: i for i in zf.infolist()}
            for name, shape in shapes.items():
                info = infos.get(name + ".npy")
                if info is None:
                    _refuse(path, f"array {name!r} missing")
                dtype = np.dtype(ARRAY_DTYPES[name])
                nbytes = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
                if info.compress_type != zipfile.ZIP_STORED or not nbytes <= info.file_size <= nbytes + 65536:
                    _refuse(path, f"array {name!r} is compressed or of the wrong size ({info.file_size} bytes stored)")
                with zf.open(info) as m:
                    version = np.lib.format.read_magic(m)
                    if version != (1, 0):
                        _refuse(path, f"array {name!r} has .npy format version {version}, expected (1, 0)")
                    got_shape, fortran, got_dtype = np.lib.format.read_array_header_1_0(m, max_header_size=4096)
                    data_pos = m.tell()
                if fortran or got_dtype.str != dtype.str or tuple(got_shape) != shape:
                    _refuse(path, f"array {name!r} has dtype {got_dtype.str} and shape {list(got_shape)}, "
                                  f"expected {dtype.str} and {list(shape)}")
                if info.file_size != data_pos + nbytes:
                    _refuse(path, f"array {name!r} holds {info.file_size - data_pos} data bytes, expected {nbytes}")
                a = np.empty(shape, dtype=dtype)
                _read_into(fh, _npz_member_start(fh, info, path) + data_pos, a, path, name)
                arrays[name] = a
                on_array(name, a)
    except FileNotFoundError:
        raise TableFormatError(f"{path}: table array file not found (the JSON names it); rebuild the table") from None
    except (zipfile.BadZipFile, zipfile.LargeZipFile, OSError, ValueError, EOFError, struct.error, NotImplementedError,
            RuntimeError):  # zipfile raises the last two for unknown versions and encrypted members
        raise TableFormatError(f"{path}: corrupt or truncated (not a readable NPZ archive); rebuild the table") from None
    return arrays
