"""End-to-end tests of envsample.synth.demo (run_demo, its steps) at 64x32; one run shared with the
demo command's tests (the session fixture ``demo_run``, tests/conftest.py).

External references used below:
- Traditional overcast sky L = Lz (1 + 2 cos theta) / 3 (Moon & Spencer 1942;
  CIE S 003/E:1996): integral over the upper hemisphere 4*pi/3 * Lz, horizontal
  illuminance 7*pi/9 * Lz (closed forms).  A Lambertian ground of albedo rho lit
  by it has radiance rho * E / pi (textbook), over 2*pi sr.
- IEEE 754-2008 binary16: relative rounding error at most 2**-11, which bounds
  the error of integrals of maps stored as half floats.
- numpy.random.default_rng (PCG64) as the reference generator of the golden vectors' u.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from support.demo_runs import DEMO_WIDTH as WIDTH

from envsample.errors import EnvsampleError
from envsample.io.maps import read_map
from envsample.sampling.table import load_table
from envsample.synth.demo import DEMO_SCENES, DEMO_VECTOR_SEED, demo_steps, run_demo
from envsample.synth.skies import ROOFTOP_SUN

HALF_REL_ERROR = 2.0**-11


@pytest.fixture(scope="module")
def demo(demo_run):
    return demo_run["summary"]


def _scene(summary, name):
    return next(m for m in summary["maps"] if m["name"] == name)


def test_demo_writes_maps_tables_and_vectors(demo):
    from pathlib import Path

    assert [m["name"] for m in demo["maps"]] == [s.name for s in DEMO_SCENES]
    for path in demo["files"]:
        assert Path(path).is_file(), path
    for scene in DEMO_SCENES:
        m = _scene(demo, scene.name)
        img = read_map(m["map"])
        assert (img.width, img.height, img.format, img.pixel_type) == (WIDTH, WIDTH // 2, "exr", "half")
        prefix = Path(next(p for p in m["table_files"] if p.endswith(".json"))).with_suffix("")
        table = load_table(prefix)
        w = WIDTH // scene.table_divisor
        assert (table.table_width, table.table_height) == (w, w // 2) == tuple(m["table_size"])
        assert any(p.endswith(".bin") for p in m["table_files"]) == scene.raw
        assert np.array_equal(table.image, img.rgb)  # the table samples the file as written
    assert demo["steps"] == [s.label for s in demo_steps()] + ["count tables"]
    assert "not certified" in demo["caution"]


def test_demo_overcast_integral_matches_the_closed_form(demo):
    """Sky 4*pi/3 * Lz plus ground 2*pi * rho * 7/9 * Lz (Lz = 1, rho = 0.2), within half-float rounding."""
    options = next(s for s in DEMO_SCENES if s.name == "overcast").options
    rho = options["ground_albedo"]
    expected = 4.0 * math.pi / 3.0 + 2.0 * math.pi * rho * 7.0 / 9.0
    got = _scene(demo, "overcast")["integrals"]["luminance"]
    assert got == pytest.approx(expected, rel=2 * HALF_REL_ERROR)


def test_demo_rooftop_brightest_pixel_is_the_sun(demo):
    """The brightest pixel lies within half a pixel plus the sun's radius (0.2665 deg) of the scene's sun."""
    b = _scene(demo, "rooftop")["brightest"]
    az, el = ROOFTOP_SUN
    tol = 0.5 * 360.0 / WIDTH + 0.2665
    assert abs(b["azimuth_deg"] - az) <= tol
    assert abs(b["elevation_deg"] - el) <= tol


def test_demo_vectors_reproduce_the_saved_table(demo):
    (entry,) = demo["vectors"]
    doc = json.loads(open(entry["path"], encoding="utf-8").read())
    u = np.array([r["u"] for r in doc["vectors"]])
    assert np.array_equal(u, np.random.default_rng(DEMO_VECTOR_SEED).random((entry["count"], 2)))
    m = _scene(demo, entry["scene"])
    table = load_table(next(p for p in m["table_files"] if p.endswith(".json")))
    for method in ("inverse", "alias"):
        s = table.sample(u, method=method)
        assert np.array_equal(np.array([r[method]["direction"] for r in doc["vectors"]]), s.directions)
        assert np.array_equal(np.array([r[method]["pdf"] for r in doc["vectors"]]), s.pdf)
        assert np.array_equal(np.array([r[method]["cell"] for r in doc["vectors"]]), s.cells)


def test_demo_steps_can_be_extended_and_report_progress(demo_run):
    summary, steps = demo_run["summary"], demo_run["steps"]
    assert demo_run["seen"]["tables"] == sorted(s.name for s in DEMO_SCENES)
    assert summary["extra"]["checked"] == len(DEMO_SCENES)
    # The built-in verify and check steps report one entry per scene.
    assert set(summary["extra"]["verify"]) == set(summary["extra"]["checks"]) == {s.name for s in DEMO_SCENES}
    n = len(steps)
    assert demo_run["calls"] == [(s.label, k, n) for k, s in enumerate(steps)] + [("done", n, n)]


def test_demo_refuses_bad_arguments(tmp_path):
    with pytest.raises(ValueError, match="even number of pixels >= 16"):
        run_demo(tmp_path / "d", width=33)
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(EnvsampleError, match="exists and is not a folder"):
        run_demo(blocker, width=32)


def test_demo_rooftop_goes_through_the_split(demo):
    """The rooftop's sun is split off (sky, sun file, sky table) and sky + sun agrees with the map."""
    from pathlib import Path

    from envsample.pipeline.split import load_sun

    sp = demo["extra"]["split"]["rooftop"]
    sun = load_sun(Path(sp["folder"]) / "rooftop.sun.json")
    assert sun.angles_deg == pytest.approx(ROOFTOP_SUN, abs=180.0 / (WIDTH // 2))  # within one pixel
    assert sp["consistent"] is True
    assert sp["relative_rmse_split"] < sp["relative_rmse_unsplit_table"]
