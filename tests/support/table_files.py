"""Table files for the tests of the table format (io), its reader (io.table_json) and its checks
(sampling.checks): an invented map, a saved table, and edits of its JSON and NPZ behind the writer's back.

Checksums are recomputed with ``xxhash.xxh64``, the reference binding of Collet's XXH64.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import xxhash

from envsample.io.tables import table_paths


def table_test_map(seed=5, h=16, w=32):
    """Invented log-normal map (float32 (h, w, 3)) with a one-pixel sun at row 3, column 7."""
    r = np.random.default_rng(seed)
    rgb = np.exp(r.normal(0.0, 1.0, (h, w, 3))).astype(np.float32)
    rgb[3, 7] = 5e4  # a small sun
    return rgb


def names_file(path) -> str:
    """A pytest.raises pattern that requires the message to name the file."""
    return re.escape(str(path))


def saved(tmp_path, table, raw=False):
    """Save ``table`` as ``tmp_path/rooftop``; return the prefix and its files (io.tables.table_paths)."""
    prefix = tmp_path / "rooftop"
    table.save(prefix, raw=raw)
    return prefix, table_paths(prefix)


def rewrite_json(path, edit):
    """Apply ``edit`` to the JSON document in ``path`` and write it back (checksums untouched)."""
    doc = json.loads(Path(path).read_text())
    edit(doc)
    Path(path).write_text(json.dumps(doc))


def rewrite_npz_with_checksums(paths, edit):
    """Edit arrays and record their new checksums in the JSON: only the meaning checks can then object."""
    with np.load(paths["npz"]) as z:
        arrays = {k.removesuffix(".npy"): z[k].copy() for k in z.files}
    edit(arrays)
    with open(paths["npz"], "wb") as f:
        np.savez(f, **arrays)
    rewrite_json(paths["json"], lambda d: [d["arrays"][k].update(xxh64=xxhash.xxh64(a.tobytes()).hexdigest())
                                           for k, a in arrays.items()])
