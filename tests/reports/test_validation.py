"""Tests of envsample.reports.validation: the files of a verify report.

Outside references: PNG signature (ISO/IEC 15948, sec. 5.2), EXR read back through the OpenEXR
bindings (envsample.io.read_map); the camera of sphere.png follows the convention of
envsample.core.sphere (forward -Z with +Y up, forward +Y with +Z up), stated in the docs.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from envsample.errors import EnvsampleError
from envsample.io.maps import read_map
from envsample.reports.validation import sphere_view, write_validation
from envsample.sampling.table import build_table
from envsample.synth.skies import make_sky
from envsample.validation.render import render_validation


@pytest.fixture(scope="module")
def result():
    table = build_table(make_sky("sun", width=64))
    return render_validation(table, spp=8, normals=(16, 8), estimators=["cosine", "table", "mis-balance"], seed=3)


def test_every_file_appears_and_the_page_and_metrics_agree(result, tmp_path):
    out = tmp_path / "verify"
    doc = write_validation(result, out, source={"kind": "test"})
    names = {p.name for p in out.iterdir()}
    assert {"map.png", "reference.exr", "convergence.png", "sphere.png", "report.html", "metrics.json"} <= names
    assert {f"estimate_{n}.exr" for n in ("cosine", "table", "mis-balance")} <= names
    assert json.loads((out / "metrics.json").read_text()) == json.loads(json.dumps(doc))
    ref = read_map(out / "reference.exr").rgb.reshape(-1, 3)
    assert np.array_equal(ref, result.reference)
    page = (out / "report.html").read_text()
    assert str(out) in page and ".tmp" not in page  # the page names the folder, not the staging one
    for name in ("cosine", "table", "mis-balance"):
        assert name in page
    # Nothing but the report is left beside it (the staging folder is gone).
    assert [p.name for p in tmp_path.iterdir()] == ["verify"]


def test_a_rerun_replaces_the_files_and_keeps_the_folder(result, tmp_path):
    out = tmp_path / "verify"
    write_validation(result, out, source={"kind": "test"})
    (out / "estimate_old.exr").write_bytes(b"from an earlier run")
    write_validation(result, out, source={"kind": "test"}, sphere=False)
    names = {p.name for p in out.iterdir()}
    assert "estimate_old.exr" not in names and "sphere.png" not in names and "metrics.json" in names


def test_a_file_in_the_way_is_refused_and_nothing_is_made(result, tmp_path):
    (tmp_path / "verify").write_text("not a folder")
    with pytest.raises(EnvsampleError, match="exists and is not a folder"):
        write_validation(result, tmp_path / "verify", source={})
    assert [p.name for p in tmp_path.iterdir()] == ["verify"]


def test_the_sphere_view_names_the_camera_axis_and_up():
    assert "looking along \u2212Z" in sphere_view("y") and "+Y up" in sphere_view("y")
    assert "looking along +Y" in sphere_view("z") and "+Z up" in sphere_view("z")
