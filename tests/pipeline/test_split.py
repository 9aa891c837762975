"""Tests of envsample.pipeline.split: the files of ``envsample split`` (sky map, sun file, sky table).

Outside reference: energy conservation (the sky's integral plus the sun's power equals the map's,
within 1e-4 relative); the command itself is tested in tests/cli/test_split_cmd.py.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from support.sun_maps import write_sun_map

from envsample.io.maps import read_map
from envsample.lights.split import SUN_SCHEMA, map_integral
from envsample.pipeline.split import load_sun, split_map_file
from envsample.sampling.table import load_table


@pytest.fixture()
def sun_map(tmp_path):
    return write_sun_map(tmp_path)


def test_split_writes_sky_sun_and_a_table_that_names_the_sun(sun_map, tmp_path):
    out = tmp_path / "out"
    result = split_map_file(sun_map, out)
    sky = read_map(out / "clear.sky.exr").rgb
    assert np.array_equal(sky, result.split.sky)
    doc = json.loads((out / "clear.sun.json").read_text())
    assert SUN_SCHEMA.matches(doc) and doc["files"]["table"] == "clear.sky.json"
    table_doc = json.loads((out / "clear.sky.json").read_text())
    assert table_doc["lights"][0]["file"] == "clear.sun.json"
    table = load_table(out / "clear.sky")
    assert table.metadata["lights"][0]["kind"] == "sun"
    sun = load_sun(out / "clear.sun.json")
    original = read_map(sun_map).rgb
    assert np.allclose(map_integral(sky) + sun.power, map_integral(original), rtol=1e-4)


def test_load_sun_refuses_another_schema(tmp_path):
    p = tmp_path / "x.json"
    p.write_text(json.dumps({"schema": "envsample.table", "schema_version": 1}))
    with pytest.raises(Exception, match="envsample.sun"):
        load_sun(p)


def test_verify_on_a_split_folder_compares_it_with_the_original(sun_map, tmp_path):
    from envsample.pipeline.verify import verify_map

    split_map_file(sun_map, tmp_path / "s")
    doc = verify_map(tmp_path / "s", tmp_path / "v", spp=8, normals=(16, 8), sphere=False)
    assert doc["split"]["compared"] and doc["split"]["consistent"]
    saved = json.loads((tmp_path / "v" / "split.json").read_text())
    assert set(saved["estimators"]) == {"unsplit:table", "unsplit:mis-balance", "split:sun-mis-balance",
                                        "split:sun-one-sample-balance"}
    # The comparison is part of the report: listed in metrics.json and shown side by side on the page.
    metrics = json.loads((tmp_path / "v" / "metrics.json").read_text())
    assert metrics["files"]["split"] == "split.json" and metrics["split"] == saved
    page = (tmp_path / "v" / "report.html").read_text(encoding="utf-8")
    assert "Sun split: sky + sun agrees with the original map" in page
    assert all(name in page for name in ("sun-mis-balance", "sun-one-sample-balance"))
