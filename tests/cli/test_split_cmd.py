"""Tests of envsample.cli.split_cmd (``envsample split``): the sun split off a map through the command line.

The map is an analytic sun over a sky (tests/support/sun_maps.py, a disk of the mean 0.533 deg
diameter, from memory); a constant map has no sun.  What the split must conserve is checked
against closed forms in tests/lights/test_split.py and tests/pipeline/test_split.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from support.sun_maps import write_sun_map

from envsample.io.maps import write_map


@pytest.fixture()
def sun_map(tmp_path):
    return write_sun_map(tmp_path)


def test_split_writes_nothing_for_a_map_without_a_sun(run, tmp_path):
    path = tmp_path / "flat.exr"
    write_map(path, np.ones((64, 128, 3), np.float32), pixel_type="float")
    result = run("split", path, "-o", tmp_path / "out")
    assert result.exit_code == 2 and "no sun-like emitter" in result.output
    assert not (tmp_path / "out").exists()


def test_split_command_prints_the_sun_and_the_caution(run, sun_map, tmp_path):
    result = run("split", sun_map, "-o", tmp_path / "o", "--sun-illuminance", "4")
    assert result.exit_code == 0, result.output
    assert "restored" in result.output and "assumed" in result.output and "not certified" in result.output
