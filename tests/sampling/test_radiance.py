"""Tests of envsample.sampling.radiance: a table's radiance is read from its verified source map.

The source map is identified by its SHA-256 (FIPS 180-4; hashlib, Python's standard library, is the
reference); a moved map is found by its path relative to the table, a changed one is refused.
"""

from __future__ import annotations

import hashlib
import os

import numpy as np
import pytest
from support.table_files import table_test_map

from envsample.errors import TableFormatError
from envsample.io.maps import read_map, write_map
from envsample.io.tables import read_table_json
from envsample.pipeline.workflow import build_from_file
from envsample.sampling.radiance import source_radiance
from envsample.sampling.table import load_table


def test_radiance_comes_from_the_verified_source_map(tmp_path, rng):
    """Issue 8: no copy of the map is stored; eval re-reads the recorded source map and checks its
    sha256; a moved map is found relative to the table or given with source=; a changed one is refused."""

    maps = tmp_path / "maps"
    maps.mkdir()
    rgb = table_test_map()
    write_map(maps / "sky.exr", rgb, pixel_type="float")
    build_from_file(maps / "sky.exr", tmp_path / "tables" / "sky", keep_map=False)
    doc = read_table_json(tmp_path / "tables" / "sky")
    assert doc["radiance"] == "source" and doc["source"]["relative_path"] == "../maps/sky.exr"
    t = load_table(tmp_path / "tables" / "sky")
    assert not t.has_image
    np.testing.assert_array_equal(t.image, read_map(maps / "sky.exr").rgb)
    # The whole project moves: the relative path still finds the map.
    os.rename(tmp_path / "maps", tmp_path / "elsewhere")
    with pytest.raises(TableFormatError, match="source map is not found.*--embed-radiance"):
        load_table(tmp_path / "tables" / "sky").image
    t = load_table(tmp_path / "tables" / "sky", source=tmp_path / "elsewhere" / "sky.exr")
    np.testing.assert_array_equal(t.image, rgb)
    write_map(tmp_path / "elsewhere" / "sky.exr", rgb * 2, pixel_type="float")
    with pytest.raises(TableFormatError, match="has changed since the table was built"):
        load_table(tmp_path / "tables" / "sky", source=tmp_path / "elsewhere" / "sky.exr").image


def _doc(map_path, rgb, *, relative=None, sha=True):
    """The parts of a table's JSON that source_radiance reads (docs/table-format.md, "source")."""
    src = {"path": str(map_path), "layer": None, "repair": False}
    if relative:
        src["relative_path"] = relative
    if sha:
        src["sha256"] = hashlib.sha256(map_path.read_bytes()).hexdigest()
    return {"source": src, "image": {"height": rgb.shape[0], "width": rgb.shape[1]}}


def _refusal(load) -> str:
    with pytest.raises(TableFormatError) as e:
        load()
    text = str(e.value)
    assert "\n" not in text
    return text


def test_the_source_map_is_read_only_when_the_radiance_is_asked_for(tmp_path):
    rgb = table_test_map()
    path = write_map(tmp_path / "sky.exr", rgb, pixel_type="float")
    load = source_radiance(_doc(path, rgb), tmp_path / "t.json")
    path.unlink()  # gone before the first read: the loader is made all the same
    text = _refusal(load)
    assert text.startswith(f"{tmp_path / 't.json'}: the source map is not found ({path})")
    assert "--embed-radiance" in text and "source=MAP" in text


def test_a_moved_map_is_found_relative_to_the_table_and_a_changed_one_refused_in_one_line(tmp_path):
    rgb = table_test_map()
    (tmp_path / "maps").mkdir()
    (tmp_path / "tables").mkdir()
    path = write_map(tmp_path / "maps" / "sky.exr", rgb, pixel_type="float")
    doc = _doc(path, rgb, relative="../maps/sky.exr")
    os.rename(tmp_path / "maps", tmp_path / "old")  # the recorded absolute path no longer exists
    (tmp_path / "maps").mkdir()
    os.rename(tmp_path / "old" / "sky.exr", tmp_path / "maps" / "sky.exr")
    doc["source"]["path"] = str(tmp_path / "old" / "sky.exr")
    np.testing.assert_array_equal(source_radiance(doc, tmp_path / "tables" / "t.json")(), rgb)
    write_map(tmp_path / "maps" / "sky.exr", rgb * 0.5, pixel_type="float")
    text = _refusal(source_radiance(doc, tmp_path / "tables" / "t.json"))
    assert "has changed since the table was built (sha256 differs); rebuild the table from it" in text


def test_a_given_map_replaces_the_recorded_path_but_must_be_the_same_file(tmp_path):
    rgb = table_test_map()
    path = write_map(tmp_path / "sky.exr", rgb, pixel_type="float")
    doc = _doc(path, rgb)
    copy = tmp_path / "copy.exr"
    copy.write_bytes(path.read_bytes())
    path.unlink()
    np.testing.assert_array_equal(source_radiance(doc, tmp_path / "t.json", override=copy)(), rgb)
    other = write_map(tmp_path / "other.exr", rgb + 1.0, pixel_type="float")
    assert "has changed" in _refusal(source_radiance(doc, tmp_path / "t.json", override=other))


def test_a_map_of_another_size_is_refused_when_no_checksum_was_recorded(tmp_path):
    rgb = table_test_map()
    path = write_map(tmp_path / "sky.exr", table_test_map(h=8, w=16), pixel_type="float")
    text = _refusal(source_radiance(_doc(path, rgb, sha=False), tmp_path / "t.json"))
    assert "is 16x8, the table was built from 32x16; rebuild the table" in text
