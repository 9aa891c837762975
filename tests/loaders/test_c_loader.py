"""The reference C loader (loaders/c/envtable.h and its envtab program) against ``envsample vectors``.

The header is compiled with the system C compiler and ``-std=c99 -Wall -Wextra -Werror``
(on its own in an otherwise empty file, and with its implementation), the program is
built, and for each kind of table the issue lists (equal-area and uv-linear, up y and z,
a rotation, a uniform mix, a reduced --size, an odd 30x15 grid, a map with black rows,
one cell-choice method only) the program is fed the uniforms of the golden-vector file
and must return the same cells, directions within 1e-5 and pdfs within 1e-5 relative.

External references: the XXH64 checksums of the C code are compared with the ``xxhash``
package (the reference binding of Collet's implementation); the formulas are those of
docs/table-format.md.  Without a C compiler the tests skip, saying so (CI has one).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
import xxhash
from click.testing import CliRunner

from envsample.cli import main
from envsample.io.maps import write_map

LOADER = Path(__file__).resolve().parents[2] / "loaders" / "c"
FLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror"]
#: Tolerances the issue sets for another loader (directions absolute, pdfs relative).
DIRECTION_TOL = 1e-5
PDF_TOL = 1e-5


def _compiler():
    for name in (os.environ.get("CC"), "cc", "gcc", "clang"):
        if name and shutil.which(name):
            return shutil.which(name)
    return None


CC = _compiler()
pytestmark = pytest.mark.skipif(CC is None, reason="no C compiler (cc, gcc or clang) on this machine")


def _cc(args, cwd):
    r = subprocess.run([CC, *args], cwd=cwd, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    return r


@pytest.fixture(scope="module")
def envtab(tmp_path_factory) -> Path:
    """The envtab program, built with the strict flags."""
    out = tmp_path_factory.mktemp("cloader") / "envtab"
    _cc([*FLAGS, "-O2", "-o", str(out), str(LOADER / "envtab.c"), "-lm"], cwd=LOADER)
    return out


def test_header_compiles_alone_and_with_its_implementation(tmp_path):
    """Issue 8: the header compiles cleanly on its own (in an otherwise empty C file), and so does its
    implementation, with -std=c99 -Wall -Wextra -Werror."""
    for name, text in (("alone.c", '#include "envtable.h"\n'),
                       ("impl.c", '#define ENVTABLE_IMPLEMENTATION\n#include "envtable.h"\n')):
        src = tmp_path / name
        src.write_text(text)
        _cc([*FLAGS, "-pedantic", "-I", str(LOADER), "-c", str(src), "-o", str(tmp_path / (name + ".o"))], tmp_path)


def test_c_xxh64_matches_the_reference_binding(tmp_path):
    """envtab_xxh64 equals xxhash.xxh64 (seed 0) on lengths that exercise every tail of the algorithm."""
    src = tmp_path / "hash.c"
    src.write_text(
        '#define ENVTABLE_IMPLEMENTATION\n#include "envtable.h"\n#include <stdio.h>\n'
        "int main(void) { unsigned char b[1200]; for (int i = 0; i < 1200; i++) b[i] = (unsigned char)(i * 131 + 7);\n"
        '  size_t n[] = {0, 1, 3, 4, 7, 8, 31, 32, 33, 63, 64, 100, 1199};\n'
        '  for (int k = 0; k < 13; k++) printf("%016llx\\n", (unsigned long long)envtab_xxh64(b, n[k], 0));\n'
        "  return 0; }\n"
    )
    _cc([*FLAGS, "-I", str(LOADER), "-o", str(tmp_path / "hash"), str(src), "-lm"], tmp_path)
    got = subprocess.run([str(tmp_path / "hash")], capture_output=True, text=True, timeout=30).stdout.split()
    data = bytes((i * 131 + 7) & 0xFF for i in range(1200))
    assert got == [xxhash.xxh64(data[:n]).hexdigest() for n in (0, 1, 3, 4, 7, 8, 31, 32, 33, 63, 64, 100, 1199)]


def _map(kind: str, h: int, w: int) -> np.ndarray:
    r = np.random.default_rng(17)
    rgb = np.exp(r.normal(0.0, 1.0, (h, w, 3))).astype(np.float32)
    rgb[h // 5, (2 * w) // 3] = 4e3  # a small sun
    if kind == "black-rows":
        rgb[: h // 4] = 0.0
        rgb[h // 2] = 0.0
    return rgb


#: (name, map rows, map columns, map kind, build options)
TABLES = [
    ("equal-area-y", 32, 64, "plain", []),
    ("uv-linear-z-rotated", 32, 64, "plain", ["--mapping", "uv-linear", "--up", "z", "--rotation", "37.5"]),
    ("uniform-mix", 32, 64, "plain", ["--uniform-mix", "0.2", "--up", "z"]),
    ("reduced-size", 64, 128, "plain", ["--size", "32x16", "--mapping", "uv-linear"]),
    ("odd-grid", 15, 30, "plain", ["--rotation", "-120"]),
    ("black-rows", 32, 64, "black-rows", ["--mapping", "uv-linear"]),
    ("alias-only", 32, 64, "plain", ["--cell-choice", "alias", "--rotation", "10"]),
    ("inverse-only", 32, 64, "black-rows", ["--cell-choice", "inverse", "--up", "z"]),
]


def _build(tmp_path: Path, name, h, w, kind, options) -> tuple[Path, dict]:
    runner = CliRunner()
    map_path = tmp_path / f"{name}.exr"
    write_map(map_path, _map(kind, h, w), pixel_type="float")
    prefix = tmp_path / name
    r = runner.invoke(main, ["build", str(map_path), "-o", str(prefix), "--raw", *options])
    assert r.exit_code == 0, r.output
    vectors = tmp_path / f"{name}.vectors.json"
    r = runner.invoke(main, ["vectors", str(prefix), "-o", str(vectors), "--count", "400", "--seed", "3"])
    assert r.exit_code == 0, r.output
    return prefix.with_name(name + ".bin"), json.loads(vectors.read_text())


def _run(envtab, args, lines, timeout=60):
    r = subprocess.run([str(envtab), *args], input="\n".join(lines) + "\n", capture_output=True, text=True,
                       timeout=timeout)
    return r


@pytest.mark.parametrize("name, h, w, kind, options", TABLES, ids=[t[0] for t in TABLES])
def test_c_loader_reproduces_the_golden_vectors(tmp_path, envtab, name, h, w, kind, options):
    """For every table kind: the C loader, fed the golden vectors' uniforms, returns the same cells,
    directions within 1e-5 and pdfs within 1e-5 relative, for each method the table holds; and its
    pdf of each golden direction is the recorded pdf."""
    binary, doc = _build(tmp_path, name, h, w, kind, options)
    assert doc["table"]["format_version"] == 2
    records = doc["vectors"]
    u_lines = [f"{r['u'][0]!r} {r['u'][1]!r}" for r in records]
    for method in doc["methods"]:
        r = _run(envtab, ["sample", str(binary), method], u_lines)
        assert r.returncode == 0, r.stderr
        rows = np.array([line.split() for line in r.stdout.splitlines()], dtype=np.float64)
        assert rows.shape == (len(records), 5)
        want_cells = np.array([rec[method]["cell"] for rec in records])
        want_dirs = np.array([rec[method]["direction"] for rec in records])
        want_pdf = np.array([rec[method]["pdf"] for rec in records])
        np.testing.assert_array_equal(rows[:, 0].astype(np.int64), want_cells)
        np.testing.assert_allclose(rows[:, 1:4], want_dirs, rtol=0, atol=DIRECTION_TOL)
        np.testing.assert_allclose(rows[:, 4], want_pdf, rtol=PDF_TOL)
        r = _run(envtab, ["pdf", str(binary)], [" ".join(repr(x) for x in d) for d in want_dirs.tolist()])
        assert r.returncode == 0, r.stderr
        np.testing.assert_allclose(np.array(r.stdout.split(), dtype=np.float64), want_pdf, rtol=PDF_TOL)
    missing = {"alias-only": "inverse", "inverse-only": "alias"}.get(name)
    if missing:
        assert missing not in doc["methods"]
        r = _run(envtab, ["sample", str(binary), missing], u_lines[:1])
        assert r.returncode == 2 and "does not hold" in r.stderr


def _damaged(tmp_path, binary: Path, how: str) -> Path:
    data = bytearray(binary.read_bytes())
    if how == "truncated":
        data = data[: len(data) // 2]
    elif how == "flipped array byte":
        data[-5] ^= 0x40
    elif how == "flipped header byte":
        data[30] ^= 0x01
    elif how == "padded":
        data += b"\0" * 64
    out = tmp_path / f"damaged-{how.replace(' ', '-')}.bin"
    out.write_bytes(bytes(data))
    return out


@pytest.mark.parametrize("how, message", [("truncated", "size differs"), ("flipped array byte", "checksum"),
                                          ("flipped header byte", "header fails its checksum"), ("padded", "size differs")])
def test_c_loader_refuses_a_damaged_binary(tmp_path, envtab, how, message):
    """A truncated, padded or altered binary is refused with one line and exit status 2."""
    binary, _ = _build(tmp_path, "t", 16, 32, "plain", [])
    r = _run(envtab, ["info", str(_damaged(tmp_path, binary, how))], [])
    assert r.returncode == 2 and message in r.stderr and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert _run(envtab, ["info", str(binary)], []).returncode == 0


_PINNED = sorted((Path(__file__).resolve().parents[2] / "data" / "tables").glob("*/*.bin"))


@pytest.mark.parametrize("binary", _PINNED, ids=[f"{p.parent.name}/{p.stem}" for p in _PINNED])
def test_c_loader_reproduces_the_pinned_conformance_set(envtab, binary):
    """Issue 14: the C loader on every pinned table of data/ matches the pinned golden vectors."""
    doc = json.loads(binary.with_name(binary.stem + ".vectors.json").read_text())
    u_lines = [f"{r['u'][0]!r} {r['u'][1]!r}" for r in doc["vectors"]]
    for method in doc["methods"]:
        r = _run(envtab, ["sample", str(binary), method], u_lines)
        assert r.returncode == 0, r.stderr
        rows = np.array([line.split() for line in r.stdout.splitlines()], dtype=np.float64)
        np.testing.assert_array_equal(rows[:, 0].astype(np.int64), [v[method]["cell"] for v in doc["vectors"]])
        np.testing.assert_allclose(rows[:, 1:4], [v[method]["direction"] for v in doc["vectors"]], atol=DIRECTION_TOL)
        np.testing.assert_allclose(rows[:, 4], [v[method]["pdf"] for v in doc["vectors"]], rtol=PDF_TOL)
