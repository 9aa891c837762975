"""The pinned conformance set in data/ (issue 14): every table and vector file rebuilt from its map with the
current code equals the pinned one bit for bit, per backend (the compiled kernels and the numpy code each
against their own files), and the manifest's sha256 values hold.

A drift fails with the table, the field and its first differing element.  The test that perturbs a copy
by one ulp shows that every stored array is covered.  Regenerate data/ only on purpose:
``python scripts/pin_data.py --force`` (DEVELOPERS.md says when).
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
from pathlib import Path

import numpy as np
import pytest

from envsample.io.tables import read_table
from envsample.pipeline.workflow import golden_vectors
from envsample.sampling import kernels as kernel_switch
from envsample.sampling.kernels import backend_name

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT / "data"
_spec = importlib.util.spec_from_file_location("pin_data", ROOT / "scripts" / "pin_data.py")
pin = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(pin)

pytestmark = pytest.mark.skipif(not (DATA / "MANIFEST.json").exists(), reason="data/ is not part of this checkout")
BACKENDS = ["numpy"] + (["compiled"] if backend_name() == "compiled" else [])


def first_difference(name: str, got: dict, want: dict) -> str | None:
    """A description of the first array or element where ``got`` and ``want`` differ (bit for bit), or None."""
    if set(got) != set(want):
        return f"{name}: arrays {sorted(got)} instead of {sorted(want)}"
    for key in want:
        a, b = np.asarray(got[key]), np.asarray(want[key])
        if a.shape != b.shape or a.dtype != b.dtype:
            return f"{name}: {key} is {a.dtype}{list(a.shape)}, pinned {b.dtype}{list(b.shape)}"
        bits = a.view(f"u{a.dtype.itemsize}") != b.view(f"u{b.dtype.itemsize}")
        if bits.any():
            idx = tuple(int(i) for i in np.argwhere(bits)[0])
            return f"{name}: {key}{list(idx)} is {a[idx]!r}, pinned {b[idx]!r} ({int(bits.sum())} elements differ)"
    return None


def _rebuilt(name: str, backend: str, monkeypatch):
    from envsample.io.maps import read_map, validate_map
    from envsample.sampling.table import build_table

    if backend == "numpy":
        monkeypatch.setattr(kernel_switch._SWITCH, "_module", None)
    map_file, _, options = pin.TABLES[name]
    image, _ = validate_map(read_map(DATA / "maps" / map_file))
    return build_table(image, **options)


@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("name", sorted(pin.TABLES))
def test_pinned_tables_and_vectors_are_reproduced_bit_for_bit(name, backend, monkeypatch):
    table = _rebuilt(name, backend, monkeypatch)
    pinned = read_table(DATA / "tables" / backend / f"{name}.bin")
    problem = first_difference(f"{backend}/{name}", table.arrays(), pinned.arrays)
    assert problem is None, problem
    for key in ("options", "convention", "integrals", "sampled_integral", "summary"):
        got = json.loads(json.dumps({"x": (table.metadata[key] if key != "summary" else table.summary())}))["x"]
        assert got == pinned.doc[key], f"{backend}/{name}: JSON field {key!r} drifted"
    doc = golden_vectors(table, count=pin.VECTOR_COUNT, seed=pin.VECTOR_SEED)
    want = json.loads((DATA / "tables" / backend / f"{name}.vectors.json").read_text())
    for k, (a, b) in enumerate(zip(doc["vectors"], want["vectors"])):
        assert a == b, f"{backend}/{name}.vectors.json: vector {k} differs: {a} != pinned {b}"
    assert doc["table"] == want["table"] and doc["count"] == want["count"]


def test_a_one_ulp_change_to_any_stored_array_is_caught():
    """Every array of a pinned table (a copy), one element moved by one ulp (or one index step): the
    comparison names that array and element."""
    pinned = read_table(DATA / "tables" / "numpy" / "sun-equal-area.bin").arrays
    for key, a in pinned.items():
        copy = {k: v.copy() for k, v in pinned.items()}
        flat = copy[key].reshape(-1)
        i = flat.size // 3
        if flat.dtype.kind == "f":
            flat[i] = np.nextafter(flat[i], np.float32(np.inf))
        else:
            flat[i] = flat[i] + 1 if flat[i] < np.iinfo(flat.dtype).max else flat[i] - 1
        problem = first_difference("copy", copy, pinned)
        assert problem is not None and problem.startswith(f"copy: {key}["), (key, problem)
    assert first_difference("same", pinned, pinned) is None


def test_the_manifest_lists_every_pinned_file_with_its_sha256():
    manifest = json.loads((DATA / "MANIFEST.json").read_text())
    assert manifest["schema"] == "envsample.data-manifest" and "MIT" in manifest["licence"]
    on_disk = {str(p.relative_to(DATA)) for p in DATA.rglob("*") if p.is_file() and p.name != "MANIFEST.json"}
    assert set(manifest["files"]) == on_disk
    for rel, digest in manifest["files"].items():
        assert hashlib.sha256((DATA / rel).read_bytes()).hexdigest() == digest, f"data/{rel} changed"
    assert sum((DATA / rel).stat().st_size for rel in on_disk) < 5 << 20


def test_regenerating_refuses_to_overwrite_without_force(tmp_path):
    (tmp_path / "MANIFEST.json").write_text("{}")
    with pytest.raises(SystemExit, match="pass --force"):
        pin.regenerate(tmp_path)
