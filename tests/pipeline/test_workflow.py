"""Tests of envsample.pipeline.workflow: the file-level steps behind build, vectors and inspect.

Sources: a uniform sky of radiance L integrates to 4 pi L over the sphere (textbook); the
traditional overcast sky L = Lz (1 + 2 cos theta) / 3 integrates to 4 pi / 3 Lz over the upper
hemisphere (closed form; CIE S 003/E:1996); numpy.random.default_rng (PCG64) generates the
golden vectors' uniforms.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from envsample.errors import EnvsampleError, MapReadError
from envsample.io.maps import MapImage, write_map
from envsample.pipeline.workflow import (
    build_from_file,
    check_output_folder,
    golden_vectors,
    map_facts,
    map_integrals,
    output_prefix,
    write_vectors,
)
from envsample.sampling.table import build_table, load_table
from envsample.synth.skies import make_sky, sun_direction


def test_map_integrals_of_closed_form_skies():
    rgb, y, _ = map_integrals(make_sky("uniform", width=64, radiance=1.5))
    assert rgb == pytest.approx([4 * math.pi * 1.5] * 3, rel=1e-6) and y == pytest.approx(4 * math.pi * 1.5, rel=1e-6)
    _, y_sky, _ = map_integrals(make_sky("overcast", width=128, zenith_luminance=2.0, ground=0.0))
    assert y_sky == pytest.approx(4 * math.pi / 3 * 2.0, rel=1e-6)


def test_map_facts_find_the_sun():
    """The brightest pixel of a sun sky lies within one pixel of the sun's direction."""
    az, el = 40.0, 25.0
    facts = map_facts(MapImage.from_array(make_sky("sun", width=256, azimuth_deg=az, elevation_deg=el)))
    b = facts["brightest"]
    pixel = 360.0 / 256
    assert abs(b["azimuth_deg"] - az) <= pixel and abs(b["elevation_deg"] - el) <= pixel
    assert np.dot(b["direction"], sun_direction(azimuth_deg=az, elevation_deg=el)) > math.cos(math.radians(2 * pixel))


def test_golden_vectors_replay_the_table_exactly_and_repeat():
    table = build_table(make_sky("rooftop", width=64))
    doc = golden_vectors(table, count=32, seed=9)
    u = np.random.default_rng(9).random((32, 2))
    assert np.array_equal(np.array([r["u"] for r in doc["vectors"]]), u)
    for method in ("inverse", "alias"):
        s = table.sample(u, method=method)
        assert np.array_equal(np.array([r[method]["direction"] for r in doc["vectors"]]), s.directions)
        assert np.array_equal(np.array([r[method]["cell"] for r in doc["vectors"]]), s.cells)
    assert golden_vectors(table, count=32, seed=9) == doc


def test_written_vectors_are_standard_json(tmp_path):
    doc = golden_vectors(build_table(make_sky("overcast", width=32)), count=4, seed=1)
    path = write_vectors(tmp_path / "sub" / "v.json", doc)
    assert json.loads(path.read_text(encoding="utf-8"))["vectors"] == json.loads(json.dumps(doc["vectors"]))


def test_build_from_file_writes_a_table_that_loads(tmp_path):
    src = write_map(tmp_path / "noon.exr", make_sky("sun", width=64, elevation_deg=50.0))
    result = build_from_file(src, f"{tmp_path}/tables/")  # a path ending in "/" is a folder
    assert result.prefix == tmp_path / "tables" / "noon"
    table = load_table(result.prefix)
    np.testing.assert_array_equal(table.cell_pdf, result.table.cell_pdf)
    assert [p.suffix for p in result.paths] == [".npz", ".json"]


def test_bad_input_writes_nothing(tmp_path):
    with pytest.raises(MapReadError):
        build_from_file(tmp_path / "missing.exr", tmp_path / "out" / "t")
    assert not (tmp_path / "out").exists()
    (tmp_path / "file").write_text("x")
    with pytest.raises(EnvsampleError, match="is a file, not a folder"):
        check_output_folder(tmp_path / "file" / "t")


def test_output_prefix_of_a_folder_takes_the_map_name(tmp_path):
    assert output_prefix(tmp_path, "maps/noon.exr") == tmp_path / "noon"
    assert output_prefix(tmp_path / "t.json", "m.exr") == tmp_path / "t"
    assert output_prefix(tmp_path / "t", "m.exr") == tmp_path / "t"
