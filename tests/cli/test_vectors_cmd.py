"""Tests of envsample.cli.vectors_cmd (``envsample vectors``): golden sample vectors of a table.

External references: numpy.random.default_rng (PCG64) as the reference generator of the vectors' u;
hashlib (Python standard library) as the reference SHA-256.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
from support.cli_helpers import assert_one_line_error, gradient, write_test_map

from envsample.io.maps import write_map
from envsample.sampling.table import load_table


@pytest.fixture
def table_prefix(run, tmp_path):
    assert run("build", write_test_map(tmp_path / "m.exr", gradient()), "-o", tmp_path / "t").exit_code == 0
    return tmp_path / "t"


def test_vectors_reproduce_sampling_exactly(run, tmp_path, table_prefix):
    out = tmp_path / "golden" / "v.json"
    result = run("vectors", table_prefix, "--count", "50", "--seed", "9", "-o", out)
    assert result.exit_code == 0, result.output
    doc = json.loads(out.read_text())
    u = np.array([r["u"] for r in doc["vectors"]])
    # The uniforms are numpy's default generator with the recorded seed.
    assert np.array_equal(u, np.random.default_rng(9).random((50, 2)))
    table = load_table(table_prefix)
    for method in ("inverse", "alias"):
        s = table.sample(u, method=method)
        recs = [r[method] for r in doc["vectors"]]
        assert np.array_equal(np.array([r["direction"] for r in recs]), s.directions)
        assert np.array_equal(np.array([r["pdf"] for r in recs]), s.pdf)
        assert np.array_equal(np.array([r["cell"] for r in recs]), s.cells)
        assert np.array_equal(np.array([r["radiance"] for r in recs], dtype=np.float32), s.radiance)
        # pdf(sample(u).directions) == sample(u).pdf to 1e-5 relative (the table's contract).
        np.testing.assert_allclose(table.pdf(s.directions), s.pdf, rtol=1e-5)
    assert doc["seed"] == 9 and doc["count"] == 50 and doc["methods"] == ["inverse", "alias"]
    stored = json.loads((tmp_path / "t.json").read_text())["arrays"]
    assert doc["table"]["array_xxh64"] == {k: v["xxh64"] for k, v in stored.items()}
    assert doc["table"]["json_sha256"] == hashlib.sha256((tmp_path / "t.json").read_bytes()).hexdigest()
    assert set(doc["fields"]) >= {"u", "direction", "pdf", "cell", "radiance"}


def test_vectors_same_seed_same_file(run, tmp_path, table_prefix):
    paths = [tmp_path / f"{name}.json" for name in ("a", "b", "c")]
    for path, seed in zip(paths, (3, 3, 4)):
        assert run("vectors", table_prefix, "--count", "20", "--seed", seed, "-o", path).exit_code == 0
    assert paths[0].read_bytes() == paths[1].read_bytes()
    assert paths[0].read_bytes() != paths[2].read_bytes()


def test_vectors_single_method(run, tmp_path, table_prefix):
    out = tmp_path / "v.json"
    assert run("vectors", table_prefix, "--method", "alias", "-o", out, "-n", "5").exit_code == 0
    doc = json.loads(out.read_text())
    assert doc["methods"] == ["alias"]
    assert all(set(r) == {"u", "alias"} for r in doc["vectors"])


def test_vectors_bad_input_writes_nothing(run, tmp_path, table_prefix):
    out = tmp_path / "v.json"
    assert_one_line_error(run("vectors", tmp_path / "none", "-o", out), "table metadata file not found")
    assert_one_line_error(run("vectors", table_prefix, "-o", out, "--count", "0"), "--count")
    assert not out.exists()


def test_vectors_refuses_to_overwrite_the_table_or_its_map(run, tmp_path):
    """Issue 12, item 6: `vectors t -o t.json` used to replace the table's own metadata."""
    write_map(tmp_path / "m.exr", np.ones((32, 64, 3), np.float32))
    assert run("build", tmp_path / "m.exr", "-o", tmp_path / "t").exit_code == 0
    before = (tmp_path / "t.json").read_bytes()
    for target in ("t.json", "t.npz", "m.exr"):
        assert_one_line_error(run("vectors", tmp_path / "t", "-o", tmp_path / target), "would overwrite the input",
                              alone=True)
    assert (tmp_path / "t.json").read_bytes() == before
    assert run("vectors", tmp_path / "t", "-o", tmp_path / "v.json", "-n", "4").exit_code == 0
