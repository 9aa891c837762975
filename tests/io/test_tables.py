"""Tests of envsample.io.tables: the NPZ + JSON (+ self-describing .bin) table files, format v2.

External references used here:
- numpy's NPZ/NPY container (numpy.lib.format) and ``numpy.frombuffer`` with explicit
  little-endian dtypes ('<f4', '<i4') read the raw file independently of envsample.
- xxhash.xxh64 (the reference binding of Collet's XXH64) over the C-order bytes recomputes every
  checksum the JSON and the binary header list.
- The JSON schema, the binary header and the drawing recipe are our own, documented in
  docs/table-format.md; a from-scratch loader below follows that text (not envsample's code),
  parses the .bin header with struct alone (no JSON) and must reproduce EnvTable.sample, which
  is what a renderer developer's C++/GPU loader would do.
"""

from __future__ import annotations

import json
import math
import os
import struct
import zipfile
from bisect import bisect_right
from pathlib import Path

import numpy as np
import pytest
import xxhash
from support.table_files import names_file, rewrite_json, rewrite_npz_with_checksums, saved, table_test_map

from envsample.errors import TableFormatError
from envsample.io import tables as tableio
from envsample.io.tables import ARRAY_DTYPES, SCHEMA_NAME, SCHEMA_VERSION, read_table_json, table_paths
from envsample.sampling.table import build_table, load_table

#: Position within a cell is kept in [EDGE, 1 - EDGE] (docs/table-format.md).
EDGE = 1e-7


# ------------------------------------------------------------------ round trip
def test_round_trip_is_bit_exact(tmp_path, table, rng):
    """Every array (values, dtype, shape) and all metadata survive save/load exactly; the loaded table
    samples bit-identically."""
    prefix = tmp_path / "rooftop"
    written = table.save(prefix)
    assert [p.name for p in written] == ["rooftop.npz", "rooftop.json"]  # JSON last
    for source in (prefix, written[0], written[1], str(prefix) + ".json"):
        loaded = load_table(source)
        for name, a in table.arrays().items():
            b = loaded.arrays()[name]
            assert b.dtype == np.dtype(ARRAY_DTYPES[name]) and b.shape == a.shape, name
            np.testing.assert_array_equal(b, a, err_msg=name)
        for key in ("convention", "options", "integrals", "sampled_integral", "notes", "source", "recommendation"):
            assert loaded.metadata[key] == table.metadata[key], key
        for attr in ("height", "width", "table_height", "table_width", "up", "rotation_deg", "mapping",
                     "primaries", "uniform_mix", "compensated"):
            assert getattr(loaded, attr) == getattr(table, attr), attr
    u = rng.random((5000, 2))
    for method in ("inverse", "alias"):
        a, b = table.sample(u, method=method), loaded.sample(u, method=method)
        np.testing.assert_array_equal(a.directions, b.directions)
        np.testing.assert_array_equal(a.pdf, b.pdf)
        np.testing.assert_array_equal(a.cells, b.cells)


def test_round_trip_of_a_compensated_table(tmp_path):
    t = build_table(table_test_map(), compensate=True)
    prefix, _ = saved(tmp_path, t)
    loaded = load_table(prefix)
    assert loaded.compensated and loaded.metadata.get("valid_only_inside_mis") is True
    np.testing.assert_array_equal(loaded.cell_pdf, t.cell_pdf)


def test_json_describes_the_table(tmp_path, table):
    """The JSON names the schema and version, sizes, convention, mapping, and a recipe for its mapping."""
    _, paths = saved(tmp_path, table)
    doc = read_table_json(paths["json"])
    assert doc["schema"] == SCHEMA_NAME and doc["schema_version"] == SCHEMA_VERSION == 2
    assert doc["image"] == {"width": 32, "height": 16} and doc["table"] == {"width": 16, "height": 8}
    conv = doc["convention"]
    assert conv["up"] == "z" and conv["up_vector"] == [0.0, 0.0, 1.0] and conv["rotation_deg"] == 30.0
    assert conv["handedness"] == "right" and "up_axis" not in conv
    assert doc["options"]["mapping"] == "uv-linear" and "uv-linear" in doc["usage"] and "equal-area" not in doc["usage"]
    # One place for each fact: mapping and primaries only in options, sizes only in image/table.
    assert "mapping" not in doc and "primaries" not in doc
    assert doc["files"] == {"npz": "rooftop.npz", "raw": None}
    assert set(doc["arrays"]) == set(ARRAY_DTYPES) - {"radiance"}  # no copy of the map by default
    assert doc["radiance"] == "none"  # built from an in-memory array


def test_checksums_in_json_match_xxhash(tmp_path, table):
    """XXH64 (the xxhash package) of each array's C-order little-endian bytes equals the JSON entry."""
    _, paths = saved(tmp_path, table)
    doc = json.loads(paths["json"].read_text())
    with np.load(paths["npz"]) as z:
        for name, entry in doc["arrays"].items():
            a = np.ascontiguousarray(z[name], dtype=np.dtype(entry["dtype"]))
            assert xxhash.xxh64(a.tobytes()).hexdigest() == entry["xxh64"], name
            assert entry["dtype"] in ("<f4", "<u4", "<u2")


def test_raw_file_holds_the_arrays_at_the_json_offsets(tmp_path, table):
    """PREFIX.bin: each array at its JSON offset (64-byte aligned) as little-endian bytes, read with
    numpy.frombuffer, equals the NPZ array."""
    prefix = tmp_path / "rooftop"
    written = table.save(prefix, raw=True)
    assert [p.name for p in written] == ["rooftop.npz", "rooftop.bin", "rooftop.json"]
    paths = table_paths(prefix)
    doc = json.loads(paths["json"].read_text())
    assert doc["files"]["raw"] == "rooftop.bin"
    blob = paths["bin"].read_bytes()
    end = 0
    with np.load(paths["npz"]) as z:
        for name, entry in doc["arrays"].items():
            dtype = np.dtype(entry["dtype"])
            count = int(np.prod(entry["shape"]))
            assert entry["offset"] % 64 == 0 and entry["nbytes"] == count * dtype.itemsize
            a = np.frombuffer(blob, dtype=dtype, count=count, offset=entry["offset"]).reshape(entry["shape"])
            np.testing.assert_array_equal(a, z[name], err_msg=name)
            assert xxhash.xxh64(blob[entry["offset"] : entry["offset"] + entry["nbytes"]]).hexdigest() == entry["xxh64"]
            end = max(end, entry["offset"] + entry["nbytes"])
    assert len(blob) == end
    load_table(prefix)  # a raw table loads like any other
    load_table(paths["bin"])  # and from its binary


# ------------------------------------------------------------------ an independent loader
class _DocLoader:
    """A loader written from docs/table-format.md alone: the .bin header parsed with struct, no JSON."""

    SLOTS = ("marginal_cdf", "conditional_cdf", "row_alias_probability", "row_alias_index",
             "alias_probability", "alias_index", "cell_pdf", "radiance")
    DTYPES = {1: "<f4", 2: "<u2", 3: "<u4"}

    def __init__(self, path):
        blob = Path(path).read_bytes()
        assert blob[:8] == b"\x89ENVTBL\n"
        (version, header_bytes, file_bytes, self.w, self.h, _, _, mapping, up, rot_deg, _, _, _, nslots,
         slot_bytes) = struct.unpack_from("<IIQIIIIIIdIIdII", blob, 8)
        assert (version, header_bytes, file_bytes, nslots, slot_bytes) == (2, 576, len(blob), 8, 48)
        assert xxhash.xxh64_intdigest(blob[:512]) == struct.unpack_from("<Q", blob, 512)[0]
        self.arr = {}
        for k, name in enumerate(self.SLOTS):
            code, ndim, s0, s1, s2, _, off, n, digest = struct.unpack_from("<IIIIIIQQQ", blob, 128 + 48 * k)
            if code:
                assert xxhash.xxh64_intdigest(blob[off:off + n]) == digest
                self.arr[name] = np.frombuffer(blob, self.DTYPES[code], n // np.dtype(self.DTYPES[code]).itemsize,
                                               off).reshape((s0, s1, s2)[:ndim])
        self.f, self.r, self.a = {0: ((0, 0, -1), (1, 0, 0), (0, 1, 0)), 1: ((0, 1, 0), (1, 0, 0), (0, 0, 1))}[up]
        self.f, self.r, self.a = (np.array(v, dtype=np.float64) for v in (self.f, self.r, self.a))
        self.rot = rot_deg * (math.pi / 180.0)
        self.mapping = ("equal-area", "uv-linear")[mapping]

    @staticmethod
    def _alias(u, n, prob, alias):
        x = u * n
        k = min(int(x), n - 1)
        f = x - k
        p = float(prob[k])
        return (k, f / p) if f < p else (int(alias[k]), (f - p) / (1 - p))

    def sample(self, u0, u1, method):
        h, w = self.h, self.w
        if method == "inverse":
            m = [float(x) for x in self.arr["marginal_cdf"]]
            i = min(bisect_right(m, u0) - 1, h - 1)
            fv = (u0 - m[i]) / (m[i + 1] - m[i])
            c = [float(x) for x in self.arr["conditional_cdf"][i]]
            j = min(bisect_right(c, u1) - 1, w - 1)
            fu = (u1 - c[j]) / (c[j + 1] - c[j])
        else:
            i, fv = self._alias(u0, h, self.arr["row_alias_probability"], self.arr["row_alias_index"])
            j, fu = self._alias(u1, w, self.arr["alias_probability"][i], self.arr["alias_index"][i])
        cell = i * w + j
        fu = min(max(fu, EDGE), 1 - EDGE)
        fv = min(max(fv, EDGE), 1 - EDGE)
        phi = 2 * math.pi * (j + fu) / w - math.pi + self.rot
        ci, cn = math.cos(math.pi * i / h), math.cos(math.pi * (i + 1) / h)
        pdf = float(self.arr["cell_pdf"][i, j])
        if self.mapping == "equal-area":
            cos_t = ci - fv * (ci - cn)
            sin_t = math.sqrt(max(0.0, 1 - cos_t * cos_t))
        else:
            theta = math.pi * (i + fv) / h
            cos_t, sin_t = math.cos(theta), math.sin(theta)
            pdf *= (ci - cn) * 2 * math.pi / w * h * w / (2 * math.pi**2 * sin_t)
        d = sin_t * (math.cos(phi) * self.f + math.sin(phi) * self.r) + cos_t * self.a
        return d, pdf, cell


@pytest.mark.parametrize("mapping", ["equal-area", "uv-linear"])
@pytest.mark.parametrize("method", ["inverse", "alias"])
def test_documented_recipe_reproduces_sampling(tmp_path, rng, mapping, method):
    """docs/table-format.md is enough to write a loader: following its recipe on the raw file gives
    the cells, directions and pdf of EnvTable.sample (to the float rounding of the recipe)."""
    t = build_table(table_test_map(), mapping=mapping, up="z", rotation_deg=-40.0)
    prefix = tmp_path / "studio"
    t.save(prefix, raw=True)
    ref = _DocLoader(str(prefix) + ".bin")
    u = rng.random((300, 2))
    s = t.sample(u, method=method)
    for k in range(u.shape[0]):
        d, pdf, cell = ref.sample(float(u[k, 0]), float(u[k, 1]), method)
        assert cell == s.cells[k]
        np.testing.assert_allclose(d, s.directions[k], atol=1e-6)
        assert pdf == pytest.approx(s.pdf[k], rel=1e-6)


# ------------------------------------------------------------------ refused tables


def test_missing_npz_is_refused(tmp_path, table):
    _, paths = saved(tmp_path, table)
    paths["npz"].unlink()
    with pytest.raises(TableFormatError, match=names_file(paths["npz"]) + ".*not found"):
        load_table(paths["json"])


def _rewrite_npz(path, edit):
    with np.load(path) as z:
        arrays = {k: z[k].copy() for k in z.files}
    edit(arrays)
    with open(path, "wb") as f:
        np.savez(f, **arrays)


def test_tampered_value_is_refused(tmp_path, table):
    """One value changed in one array: its checksum no longer matches the JSON."""
    _, paths = saved(tmp_path, table)

    def tamper(a):
        a["cell_pdf"][2, 3] = np.nextafter(a["cell_pdf"][2, 3], np.float32(1e9))

    _rewrite_npz(paths["npz"], tamper)
    with pytest.raises(TableFormatError, match=names_file(paths["npz"]) + ".*'cell_pdf' fails its checksum"):
        load_table(paths["json"])


def test_wrong_dtype_and_missing_array_are_refused(tmp_path, table):
    _, paths = saved(tmp_path, table)
    _rewrite_npz(paths["npz"], lambda a: a.update(alias_index=a["alias_index"].astype(np.int64)))
    with pytest.raises(TableFormatError, match=names_file(paths["npz"]) + ".*'alias_index' has dtype <i8 .* expected <u2"):
        load_table(paths["json"])
    _rewrite_npz(paths["npz"], lambda a: a.pop("alias_index"))
    with pytest.raises(TableFormatError, match=names_file(paths["npz"]) + ".*'alias_index' missing"):
        load_table(paths["json"])


@pytest.mark.parametrize("keep", [0.5, 0.1, 0.0])
def test_truncated_npz_is_refused(tmp_path, table, keep):
    _, paths = saved(tmp_path, table)
    data = paths["npz"].read_bytes()
    paths["npz"].write_bytes(data[: int(len(data) * keep)])
    with pytest.raises(TableFormatError, match=names_file(paths["npz"]) + ".*corrupt or truncated"):
        load_table(paths["json"])


def test_npz_that_is_not_a_zip_is_refused(tmp_path, table):
    _, paths = saved(tmp_path, table)
    paths["npz"].write_text("this is not an archive\n" * 20)
    with pytest.raises(TableFormatError, match=names_file(paths["npz"]) + ".*corrupt or truncated"):
        load_table(paths["json"])


def test_mismatched_shapes_are_refused(tmp_path, table):
    """The JSON's array shape, or its table size, disagreeing with the arrays or with each other."""
    _, paths = saved(tmp_path, table)
    original = paths["json"].read_text()
    rewrite_json(paths["json"], lambda d: d["arrays"]["cell_pdf"].update(shape=[4, 32]))
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + r".*'cell_pdf' is declared \[4, 32\], expected \[8, 16\]"):
        load_table(paths["json"])
    paths["json"].write_text(original)
    rewrite_json(paths["json"], lambda d: d["table"].update(width=8, height=16))
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + ".*expected .* for this table"):
        load_table(paths["json"])
    paths["json"].write_text(original)
    rewrite_json(paths["json"], lambda d: d.update(radiance="embedded"))  # says it holds a map it has not
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + ".*missing \\['radiance'\\]"):
        load_table(paths["json"])


# ------------------------------------------------------------------ atomic writes
def _listing(folder):
    return sorted(p.name for p in Path(folder).iterdir())


def test_failed_save_leaves_no_files(tmp_path, table, monkeypatch):
    """The NPZ writer failing mid-save: the error propagates and no partial or temporary file remains."""

    def boom(*args, **kwargs):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(tableio, "_write_npz", boom)
    with pytest.raises(OSError, match="simulated"):
        table.save(tmp_path / "rooftop", raw=True)
    assert _listing(tmp_path) == []


@pytest.mark.parametrize("failing", ["_write_npz", "_write_bin"])
def test_failed_save_keeps_the_existing_table(tmp_path, table, monkeypatch, failing):
    """Issue 12, item 5: rebuilding over a table when the disk fills while writing the .npz or the
    .bin leaves the old table intact, byte for byte, and loadable (all files change as one unit)."""
    import errno

    prefix, paths = saved(tmp_path, table, raw=True)
    before = {k: p.read_bytes() for k, p in paths.items()}
    other = build_table(table_test_map(seed=9))
    real = getattr(tableio, failing)

    def disk_full(f, *args):
        real(f, *args)  # the bytes go out, then the device is full
        raise OSError(errno.ENOSPC, "No space left on device (simulated)")

    monkeypatch.setattr(tableio, failing, disk_full)
    with pytest.raises(OSError, match="simulated"):
        other.save(prefix, raw=True)
    assert {k: p.read_bytes() for k, p in paths.items()} == before
    assert _listing(tmp_path) == ["rooftop.bin", "rooftop.json", "rooftop.npz"]
    np.testing.assert_array_equal(load_table(prefix).cell_pdf, table.cell_pdf)
    np.testing.assert_array_equal(load_table(paths["bin"]).cell_pdf, table.cell_pdf)


def test_interrupted_before_the_json_never_loads_a_hybrid(tmp_path, table, monkeypatch):
    """If the save dies after the new arrays are in place but before the JSON is renamed, the old JSON's
    checksums refuse the new arrays: a half-written table never loads (tableio module docstring)."""
    prefix, paths = saved(tmp_path, table)
    other = build_table(table_test_map(seed=9), mapping="uv-linear", up="z", rotation_deg=30.0, uniform_mix=0.1, size=(16, 8))
    real_replace = os.replace

    def replace(src, dst):
        if str(dst).endswith(".json"):
            raise OSError("power cut (simulated)")
        return real_replace(src, dst)

    monkeypatch.setattr(os, "replace", replace)
    with pytest.raises(OSError, match="simulated"):
        other.save(prefix)
    monkeypatch.undo()
    assert _listing(tmp_path) == ["rooftop.json", "rooftop.npz"]  # no temporary files left
    with pytest.raises(TableFormatError, match="checksum"):
        load_table(prefix)


def test_save_creates_missing_folders(tmp_path, table):
    """Issue 8, item 4: save() creates missing folders, as the CLI does (README's Python example)."""
    written = table.save(tmp_path / "no" / "such" / "dir" / "sky")
    assert all(p.exists() for p in written)
    load_table(tmp_path / "no" / "such" / "dir" / "sky")


def test_table_paths():
    p = table_paths("tables/sky.v2")
    assert p["json"].name == "sky.v2.json" and p["npz"].name == "sky.v2.npz" and p["bin"].name == "sky.v2.bin"
    for name in ("tables/sky.json", "tables/sky.npz", "tables/sky.BIN", "tables/sky"):
        assert table_paths(name)["json"] == Path("tables/sky.json")


def test_npz_is_a_plain_uncompressed_zip(tmp_path, table):
    """NPZ is numpy's zip container (PKWARE APPNOTE, read back by Python's zipfile): every member is a
    stored (uncompressed) .npy file with the right CRC-32."""
    _, paths = saved(tmp_path, table)
    with zipfile.ZipFile(paths["npz"]) as z:
        names = {i.filename for i in z.infolist()}
        assert names == {f"{n}.npy" for n in ARRAY_DTYPES if n != "radiance"}
        assert all(i.compress_type == zipfile.ZIP_STORED for i in z.infolist())
        assert z.testzip() is None  # every member's CRC-32 is right (zipfile recomputes them)


# ------------------------------------------------------------------ hostile files (issue 12, items 3 and 9)


def test_declared_dtype_message_names_what_the_json_says(tmp_path, table):
    """Issue 12, item 9: the JSON saying <f8 is reported as such (not 'has dtype <f4, expected <f4')."""
    _, paths = saved(tmp_path, table)
    rewrite_json(paths["json"], lambda d: d["arrays"]["cell_pdf"].update(dtype="<f8"))
    with pytest.raises(TableFormatError, match=r"'cell_pdf' is declared '<f8', the format stores '<f4'"):
        load_table(paths["json"])


def test_a_forged_npz_header_is_refused_before_anything_is_allocated(tmp_path, table):
    """Issue 12, item 3: an .npz member whose .npy header declares a huge array (and a JSON that
    agrees) is refused from the sizes alone: tracemalloc (which numpy reports to) sees no large
    allocation."""
    import tracemalloc

    _, paths = saved(tmp_path, table)
    shape = [23170, 46340]  # 1.07e9 cells: about 15 GiB of arrays
    rewrite_json(paths["json"], lambda d: (d["table"].update(width=shape[1], height=shape[0]),
                                            [e.update(shape=[shape[0], shape[1]]) for e in d["arrays"].values()]))
    tracemalloc.start()
    try:
        with pytest.raises(TableFormatError):
            load_table(paths["json"])
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 20 << 20
    # A consistent JSON and a member that only claims to be that big: the member's stored size refuses it.
    huge = np.lib.format.header_data_from_array_1_0(np.empty((1, 1), np.float32))
    huge["shape"] = (100_000, 100_000)
    with zipfile.ZipFile(paths["npz"], "w") as z, z.open("cell_pdf.npy", "w") as m:
        np.lib.format.write_array_header_1_0(m, huge)
        m.write(b"\0" * 64)
    table.save(tmp_path / "ok")
    ok = table_paths(tmp_path / "ok")
    ok["npz"].write_bytes(paths["npz"].read_bytes())
    with pytest.raises(TableFormatError, match=names_file(ok["npz"])):
        load_table(ok["json"])


def test_a_table_bigger_than_the_memory_limit_is_refused_before_reading(tmp_path, table, monkeypatch):
    """Issue 12, item 4: loading checks the arrays' size against the memory limit first."""
    _, paths = saved(tmp_path, table)
    monkeypatch.setenv("ENVSAMPLE_MAX_MEMORY", "1k")
    from envsample.errors import ResourceLimitError

    with pytest.raises(ResourceLimitError, match=r"loading this table: needs about .* above the limit"):
        load_table(paths["json"])


@pytest.mark.parametrize("damage, message", [
    ("truncated to 1 kB", "truncated or padded"),
    ("one array byte flipped", "fails its checksum"),
    ("garbage", "not an envsample table binary"),
    ("header byte flipped", "header fails its checksum"),
    ("offset 1e12 in the JSON", "header and JSON disagree"),
    ("offset -64 in the JSON", "offset must be an integer"),
])
def test_a_damaged_binary_is_refused_where_it_is_read(tmp_path, table, damage, message):
    """Issue 8 and issue 12 item 9: load_table and inspect given the .bin verify it (sizes, header
    checksum, array checksums, agreement with the JSON); the NPZ of the same table still loads."""
    from envsample.pipeline.workflow import table_facts

    _, paths = saved(tmp_path, table, raw=True)
    data = bytearray(paths["bin"].read_bytes())
    if damage == "truncated to 1 kB":
        data = data[:1024]
    elif damage == "one array byte flipped":
        data[-3] ^= 0x10
    elif damage == "garbage":
        data = bytearray(np.random.default_rng(1).integers(0, 256, len(data), dtype=np.uint8).tobytes())
    elif damage == "header byte flipped":
        data[40] ^= 0x01
    elif damage.startswith("offset"):
        value = 10**12 if "1e12" in damage else -64
        rewrite_json(paths["json"], lambda d: d["arrays"]["cell_pdf"].update(offset=value))
    paths["bin"].write_bytes(bytes(data))
    for read in (load_table, table_facts):
        with pytest.raises(TableFormatError, match=message):
            read(paths["bin"])
    if not damage.startswith("offset"):
        load_table(paths["json"])


def test_an_embedded_copy_travels_with_the_table_and_is_checked(tmp_path, table):
    prefix, paths = saved(tmp_path, table)
    table.save(prefix, embed_radiance=True)
    assert read_table_json(prefix)["radiance"] == "embedded"
    np.testing.assert_array_equal(load_table(prefix).image, table.image)

    def negative(arrays):
        arrays["radiance"][0, 0, 0] = -1.0

    rewrite_npz_with_checksums(paths, negative)
    with pytest.raises(TableFormatError, match="radiance has negative or non-finite values"):
        load_table(prefix)


@pytest.mark.parametrize("bad", ["", "   "])
def test_an_empty_table_path_is_refused_in_plain_words(bad):
    with pytest.raises(TableFormatError, match="empty table path"):
        load_table(bad)


def test_a_folder_is_not_a_table(tmp_path):
    with pytest.raises(TableFormatError, match="is a folder"):
        load_table(tmp_path)
