"""The strict typed reader of a table's JSON document (schema ``envsample.sampling-table`` v2).

Every key a reader relies on is checked for presence, type and range **before any
array is read**, so hand-edited, hostile or foreign JSON is refused with one
:class:`~envsample.errors.TableFormatError` line naming the file and the key
(never a ``KeyError``, ``RecursionError`` or ``OverflowError``).  The file is at
most :data:`MAX_JSON_BYTES` long; nesting deeper than Python's parser allows is
refused as such.  Version 1 tables are refused with the command that rebuilds them.

The document's fields are listed in ``docs/table-format.md``.
"""

from __future__ import annotations

import json
import math
import shlex
from pathlib import Path

from envsample.core.latlong import MAPPINGS
from envsample.core.limits import MAX_TABLE_CELLS, MAX_TABLE_WIDTH
from envsample.errors import TableFormatError

__all__ = ["SCHEMA_NAME", "SCHEMA_VERSION", "MAX_JSON_BYTES", "CELL_CHOICES", "RADIANCE_KINDS", "parse_table_json",
           "check_table_doc"]

SCHEMA_NAME = "envsample.sampling-table"
SCHEMA_VERSION = 2
#: A table's JSON is a few kilobytes; anything above this is not one of ours.
MAX_JSON_BYTES = 16 << 20
#: Cell-choice methods a table can hold (``"both"`` = both of them).
CELL_CHOICES = ("both", "inverse", "alias")
#: Where a table's radiance comes from: the recorded source map, an embedded copy, or nowhere.
RADIANCE_KINDS = ("source", "embedded", "none")
#: Largest image side recorded in a table (the map readers refuse larger headers anyway).
_MAX_IMAGE_SIDE = 1 << 20


class _Fields:
    """Typed access to one JSON object; every failure is a one-line TableFormatError."""

    def __init__(self, obj, where: str, path: Path):
        self.path = path
        self.where = where
        if not isinstance(obj, dict):
            self.fail(where, f"must be an object, got {_kind(obj)}")
        self.obj = obj

    def fail(self, key: str, problem: str):
        raise TableFormatError(f"{self.path}: {key} {problem}; rebuild the table")

    def _name(self, key: str) -> str:
        return f"{self.where}.{key}" if self.where else key

    def get(self, key: str, *, optional: bool = False):
        if key not in self.obj:
            if optional:
                return None
            self.fail(self._name(key), "is missing")
        return self.obj[key]

    def sub(self, key: str, *, optional: bool = False) -> "_Fields | None":
        value = self.get(key, optional=optional)
        if value is None and optional:
            return None
        return _Fields(value, self._name(key), self.path)

    def int(self, key: str, lo: int, hi: int, *, optional: bool = False):
        v = self.get(key, optional=optional)
        if v is None and optional:
            return None
        if isinstance(v, bool) or not isinstance(v, int) or not lo <= v <= hi:
            self.fail(self._name(key), f"must be an integer in [{lo}, {hi}], got {_short(v)}")
        return v

    def num(self, key: str, lo: float = -math.inf, hi: float = math.inf, *, optional: bool = False):
        v = self.get(key, optional=optional)
        if v is None and optional:
            return None
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or not lo <= v <= hi:
            self.fail(self._name(key), f"must be a finite number in [{lo:g}, {hi:g}], got {_short(v)}")
        return float(v)

    def str(self, key: str, choices=None, *, optional: bool = False):
        v = self.get(key, optional=optional)
        if v is None and optional:
            return None
        if not isinstance(v, str) or (choices is not None and v not in choices):
            want = "a string" if choices is None else "one of " + ", ".join(choices)
            self.fail(self._name(key), f"must be {want}, got {_short(v)}")
        return v

    def bool(self, key: str, *, optional: bool = False):
        v = self.get(key, optional=optional)
        if v is None and optional:
            return None
        if not isinstance(v, bool):
            self.fail(self._name(key), f"must be true or false, got {_short(v)}")
        return v

    def strings(self, key: str):
        v = self.get(key)
        if not isinstance(v, list) or not all(isinstance(x, str) for x in v):
            self.fail(self._name(key), f"must be a list of strings, got {_short(v)}")
        return v

    def numbers(self, key: str, count: int, lo: float = -math.inf, hi: float = math.inf):
        v = self.get(key)
        ok = isinstance(v, list) and len(v) == count and all(
            not isinstance(x, bool) and isinstance(x, (int, float)) and math.isfinite(x) and lo <= x <= hi for x in v)
        if not ok:
            self.fail(self._name(key), f"must be a list of {count} finite numbers in [{lo:g}, {hi:g}], got {_short(v)}")
        return [float(x) for x in v]


def _kind(v) -> str:
    return {dict: "an object", list: "a list", str: "a string", bool: "a boolean", type(None): "null"}.get(
        type(v), "a number")


def _short(v) -> str:
    text = json.dumps(v) if isinstance(v, (str, bool, type(None))) else repr(v) if not isinstance(v, (dict, list)) else _kind(v)
    return text if len(text) <= 40 else text[:37] + "..."


def parse_table_json(path: Path) -> dict:
    """Read ``path`` (bounded size), parse it, and check it is a v2 table document (see :func:`check_table_doc`)."""
    try:
        size = path.stat().st_size
    except FileNotFoundError:
        raise TableFormatError(f"{path}: table metadata file not found; build the table with 'envsample build'") from None
    except OSError as exc:
        raise TableFormatError(f"{path}: cannot read ({exc.strerror}); check the path") from None
    if not path.is_file():
        raise TableFormatError(f"{path}: not a regular file; give the table's prefix or its .json/.npz/.bin file")
    if size > MAX_JSON_BYTES:
        raise TableFormatError(f"{path}: {size} bytes, far larger than a table's metadata; not an envsample table")
    try:
        with open(path, "rb") as fh:
            doc = json.loads(fh.read(MAX_JSON_BYTES + 1).decode("utf-8"))
    except RecursionError:
        raise TableFormatError(f"{path}: JSON nested too deeply; not an envsample table") from None
    except (UnicodeDecodeError, ValueError) as exc:
        raise TableFormatError(f"{path}: not valid JSON ({str(exc).splitlines()[0]}); rebuild the table") from None
    except OSError as exc:
        raise TableFormatError(f"{path}: cannot read ({exc.strerror}); check the path") from None
    check_table_doc(doc, path)
    return doc


def _check_version(doc, path: Path) -> None:
    if not isinstance(doc, dict) or doc.get("schema") != SCHEMA_NAME:
        name = doc.get("schema") if isinstance(doc, dict) else None
        raise TableFormatError(f"{path}: not an envsample table (schema {_short(name)})")
    version = doc.get("schema_version")
    if version == SCHEMA_VERSION:
        return
    if version == 1:
        src = doc.get("source") if isinstance(doc.get("source"), dict) else {}
        map_path = src.get("path") if isinstance(src.get("path"), str) else "MAP"
        prefix = str(path.with_suffix(""))
        raise TableFormatError(
            f"{path}: a version 1 table; this envsample reads version {SCHEMA_VERSION} only: rebuild it with "
            f"envsample build {shlex.quote(map_path)} -o {shlex.quote(prefix)}"
        )
    raise TableFormatError(
        f"{path}: table schema version {_short(version)}, this envsample reads version {SCHEMA_VERSION}; "
        "rebuild the table with this version"
    )


def check_table_doc(doc, path: Path) -> None:
    """Check every field a reader uses: types, ranges, mutual consistency of sizes and options.

    Raises :class:`TableFormatError` naming ``path`` and the field.  Array entries are
    checked for shape and dtype by :mod:`envsample.io.tables`, which knows the layout.
    """
    _check_version(doc, path)
    top = _Fields(doc, "", path)
    tool = top.sub("tool")
    tool.str("name")
    tool.str("version")
    image, table = top.sub("image"), top.sub("table")
    W, H = image.int("width", 1, _MAX_IMAGE_SIDE), image.int("height", 1, _MAX_IMAGE_SIDE)
    w, h = table.int("width", 1, MAX_TABLE_WIDTH), table.int("height", 1, MAX_TABLE_CELLS)
    if w * h > MAX_TABLE_CELLS:
        top.fail("table", f"has {w}x{h} cells, more than {MAX_TABLE_CELLS}")
    del W, H
    _check_convention(top.sub("convention"))
    _check_options(top.sub("options"))
    integ = top.sub("integrals")
    integ.numbers("rgb", 3, 0.0)
    integ.num("luminance", 0.0)
    top.num("sampled_integral", 0.0)
    top.bool("valid_only_inside_mis")
    top.strings("notes")
    top.str("radiance", RADIANCE_KINDS)
    src = top.get("source")
    if src is not None:
        _check_source(top.sub("source"))
    elif doc["radiance"] == "source":
        top.fail("source", "is null although radiance is 'source'")
    if top.get("recommendation", optional=True) is not None:
        top.sub("recommendation")
    lights = top.get("lights", optional=True)
    if lights is not None:
        if not isinstance(lights, list):
            top.fail("lights", f"must be a list of light entries, got {_short(lights)}")
        for k, light in enumerate(lights):
            entry = _Fields(light, f"lights[{k}]", path)
            entry.str("kind")
            entry.str("file")
            entry.str("schema")
            entry.int("schema_version", 1, 1 << 20)
    summary = top.sub("summary")
    summary.int("nonzero_cells", 0, w * h)
    cell = summary.sub("largest_cell")
    cell.int("row", 0, h - 1)
    cell.int("col", 0, w - 1)
    cell.num("probability", 0.0, 1.0)
    cell.num("pdf_per_sr", 0.0)
    files = top.sub("files")
    for key in ("npz", "raw"):
        if files.get(key) is not None:
            files.str(key)
    if files.get("npz") is None and files.get("raw") is None:
        top.fail("files", "names neither an .npz nor a .bin file")
    arrays = top.sub("arrays")
    for name in arrays.obj:
        entry = arrays.sub(name)
        entry.str("dtype")
        checksum = entry.str("xxh64")
        if len(checksum) != 16 or any(c not in "0123456789abcdef" for c in checksum):
            entry.fail(f"arrays.{name}.xxh64", f"must be 16 lower-case hex digits, got {_short(checksum)}")
        shape = entry.get("shape")
        if not (isinstance(shape, list) and 1 <= len(shape) <= 3 and all(
                isinstance(s, int) and not isinstance(s, bool) and 0 <= s <= MAX_TABLE_CELLS for s in shape)):
            entry.fail(f"arrays.{name}.shape", f"must be a list of 1 to 3 sizes, got {_short(shape)}")
        if files.get("raw") is not None:
            entry.int("offset", 0, 1 << 50)
            entry.int("nbytes", 0, 1 << 50)


def _check_convention(conv: _Fields) -> None:
    conv.str("projection", ("equirectangular",))
    conv.str("up", ("y", "z"))
    for key in ("up_vector", "forward_vector", "right_vector"):
        conv.numbers(key, 3, -1.0, 1.0)
    conv.str("handedness", ("right",))
    conv.num("rotation_deg", -1e6, 1e6)


def _check_options(opts: _Fields) -> None:
    size = opts.get("size")
    if size is not None:
        opts.numbers("size", 2, 1, MAX_TABLE_CELLS)
    opts.str("primaries")
    opts.str("mapping", MAPPINGS)
    opts.num("uniform_mix", 0.0, 1.0)
    opts.bool("compensate")
    opts.str("cell_choice", CELL_CHOICES)


def _check_source(src: _Fields) -> None:
    for key in ("path", "relative_path", "sha256", "layer"):
        if src.get(key, optional=True) is not None:
            src.str(key)
    src.bool("repair", optional=True)
