"""Tests of envsample.sampling.checks: a loaded or saved table's arrays must form one valid distribution.

The rules are the definition of a discrete distribution and of its encodings: a CDF starts at
exactly 0, ends at exactly 1 and never decreases; probabilities are finite and non-negative and sum
to 1 (here, the pdf integrates to 1 over the sphere's 4*pi sr); an alias table (Walker 1977; Vose
1991) gives each cell its probability back.  Checksums are recomputed with ``xxhash.xxh64`` so only
these meaning checks can object.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from support.table_files import names_file, rewrite_npz_with_checksums, saved, table_test_map

from envsample.errors import TableFormatError
from envsample.sampling.checks import check_distribution
from envsample.sampling.kernels import backend_name
from envsample.sampling.table import build_table, load_table


@pytest.mark.parametrize(
    "name, edit, message",
    [
        ("marginal_cdf", lambda a: a.__setitem__(3, a[2] - 0.01), "marginal_cdf is not non-decreasing"),
        ("conditional_cdf", lambda a: a.__setitem__((1, -1), 0.99), "conditional_cdf is not a CDF"),
        ("marginal_cdf", lambda a: a.__setitem__(0, 1e-6), "marginal_cdf does not start at exactly 0"),
        ("alias_index", lambda a: a.__setitem__((2, 5), a.shape[1]), "alias_index has entries outside"),
        ("alias_probability", lambda a: a.__setitem__((2, 5), 1.5), "alias_probability has values outside"),
        ("row_alias_index", lambda a: a.__setitem__(1, a.size), "row_alias_index has entries outside"),
        ("cell_pdf", lambda a: a.__imul__(np.float32(1e30)), "cell_pdf integrates to"),
        ("cell_pdf", lambda a: a.__setitem__(slice(None), 0.0), "cell_pdf integrates to 0"),
        ("cell_pdf", lambda a: a.__setitem__((3, 2), a[3, 2] * 2), "does not match cell_pdf"),
        ("alias_probability", lambda a: a.__setitem__((3, 2), a[3, 2] * 0.5), "alias tables do not match"),
        ("cell_pdf", lambda a: a.__setitem__((0, 0), -1.0), "cell_pdf has negative or non-finite"),
        ("cell_pdf", lambda a: a.__setitem__((0, 0), np.nan), "cell_pdf has negative or non-finite"),
    ],
)
def test_inconsistent_arrays_with_valid_checksums_are_refused(tmp_path, name, edit, message):
    """A writer that produced bad arrays (checksums consistent): the loader's own checks catch it."""
    t = build_table(table_test_map())
    prefix, paths = saved(tmp_path, t)

    def bad(arrays):
        edit(arrays[name])

    rewrite_npz_with_checksums(paths, bad)
    with pytest.raises(TableFormatError, match=names_file(paths["npz"]) + ".*" + re.escape(message)):
        load_table(prefix)
    # save() refuses such a table before writing anything (it could not be loaded).
    edit(getattr(t, name))
    with pytest.raises(TableFormatError, match=re.escape(message)):
        t.save(tmp_path / "never")
    assert not list(tmp_path.glob("never*"))


BACKENDS = ["numpy"] + (["compiled"] if backend_name() == "compiled" else [])


def _uniform_arrays(h=8, w=16) -> dict:
    """The uniform distribution on the sphere, by closed forms only (docs/table-format.md, "Arrays"):
    pdf 1/(4 pi) per sr; row i holds the share (cos theta_i - cos theta_{i+1}) / 2 of the sphere
    (Archimedes' hat-box theorem); columns are equally likely; an alias bucket of a uniform row keeps itself."""
    cos_edges = np.cos(np.linspace(0.0, math.pi, h + 1))
    marginal = (1.0 - cos_edges) / 2.0
    marginal[0], marginal[-1] = 0.0, 1.0
    return {
        "cell_pdf": np.full((h, w), 1.0 / (4.0 * math.pi), np.float32),
        "marginal_cdf": marginal.astype(np.float32),
        "conditional_cdf": np.tile(np.linspace(0.0, 1.0, w + 1, dtype=np.float32), (h, 1)),
        "alias_probability": np.ones((h, w), np.float32),
        "alias_index": np.tile(np.arange(w, dtype=np.uint16), (h, 1)),
    }


@pytest.mark.parametrize("backend", BACKENDS)
def test_the_uniform_distribution_from_closed_forms_passes(backend):
    check_distribution(_uniform_arrays(), "uniform.npz", backend=backend)


@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("name, edit, message, row", [
    ("conditional_cdf", lambda a: a.__setitem__((2, 5), a[2, 4]), "conditional_cdf does not match cell_pdf", 2),
    ("conditional_cdf", lambda a: a.__setitem__((4, 0), 0.01), "conditional_cdf is not a CDF", 4),
    ("alias_probability", lambda a: a.__setitem__((1, 3), 0.5), None, None),  # bucket 3 still aliases itself
    ("alias_index", lambda a: a.__setitem__((6, 1), 16), "alias_index has entries outside the row", 6),
    ("alias_both", None, "alias tables do not match cell_pdf", 1),
    ("cell_pdf", lambda a: a.__setitem__((3, 0), -0.0 - 1e-3), "cell_pdf has negative or non-finite values", 3),
    ("marginal_cdf", lambda a: a.__setitem__(2, a[3] + 0.01), "marginal_cdf", None),
])
def test_each_backend_names_the_same_broken_rule_and_row(backend, name, edit, message, row):
    """The compiled and the numpy checks apply one set of rules: the same corruption names the same rule and
    the first row that breaks it (the marginal CDF is one array: no row)."""
    arrays = _uniform_arrays()
    if name == "alias_both":  # bucket 3 of row 1 keeps half and gives half to column 4: 0.5/w and 1.5/w
        arrays["alias_probability"][1, 3], arrays["alias_index"][1, 3] = 0.5, 4
    else:
        edit(arrays[name])
    if message is None:
        check_distribution(arrays, "uniform.npz", backend=backend)
        return
    where = "" if row is None else re.escape(f" (row {row})")
    with pytest.raises(TableFormatError, match=r"^uniform\.npz: " + re.escape(message) + ".*" + where + "; rebuild the table$"):
        check_distribution(arrays, "uniform.npz", backend=backend)


def test_a_pdf_off_by_more_than_the_tolerance_fails_and_within_it_passes():
    """The pdf must integrate to 1 within TOTAL_TOLERANCE (1e-5): scaled by 1 + 3e-5 it fails, by 1 + 3e-6 not."""
    arrays = _uniform_arrays()
    for name in ("marginal_cdf", "conditional_cdf", "alias_probability", "alias_index"):
        arrays.pop(name)  # the total alone
    check_distribution({"cell_pdf": arrays["cell_pdf"] * np.float32(1 + 3e-6)}, "t.npz", backend="numpy")
    with pytest.raises(TableFormatError, match="integrates to 1.00003"):
        check_distribution({"cell_pdf": arrays["cell_pdf"] * np.float32(1 + 3e-5)}, "t.npz", backend="numpy")
