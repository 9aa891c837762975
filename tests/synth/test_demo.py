"""End-to-end tests of the demo (envsample.demo.run_demo and ``envsample demo``) at 64x32.

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
from click.testing import CliRunner

from envsample.cli import main
from envsample.errors import EnvsampleError
from envsample.io.maps import read_map
from envsample.sampling.table import load_table
from envsample.synth.demo import DEMO_SCENES, DEMO_VECTOR_SEED, DemoStep, demo_steps, run_demo
from envsample.synth.skies import ROOFTOP_SUN

WIDTH = 64
HALF_REL_ERROR = 2.0**-11


def _table_checksums(summary) -> list[dict]:
    """The stored arrays' sha256 of every scene's table, read from its JSON."""
    out = []
    for m in summary["maps"]:
        doc = json.loads(open(next(p for p in m["table_files"] if p.endswith(".json")), encoding="utf-8").read())
        out.append({k: v["sha256"] for k, v in doc["arrays"].items()})
    return out


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    """One demo run for the whole file, with an extra step appended and the progress calls recorded."""
    out = tmp_path_factory.mktemp("demo") / "envsample-demo"
    seen, calls = {}, []

    def extra(ctx):
        seen["tables"] = sorted(ctx.tables)
        ctx.extra["checked"] = len(ctx.tables)

    steps = demo_steps() + [DemoStep("count tables", extra)]
    summary = run_demo(out, width=WIDTH, steps=steps, progress=lambda *a: calls.append(a))
    vectors = json.loads(open(summary["vectors"][0]["path"], encoding="utf-8").read())["vectors"]
    return {"out": out, "summary": summary, "steps": steps, "seen": seen, "calls": calls,
            "checksums": _table_checksums(summary), "vectors": vectors}


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


def test_demo_command_reruns_in_the_same_folder_with_the_same_tables(demo_run):
    """The command prints its summary table; a rerun into the same folder rebuilds the same tables bit for bit."""
    out = demo_run["out"]
    result = CliRunner().invoke(main, ["demo", str(out), "--width", str(WIDTH)], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    assert lines[0].startswith(f"demo in {out}: invented scenes")
    header = next(k for k, line in enumerate(lines) if line.startswith("map "))
    assert lines[header].split() == ["map", "size", "integral", "Y", "brightest", "(az,", "el)", "table", "build",
                                     "check", "best", "sampling", "(rel.", "RMSE)"]
    rows = [line.split()[0] for line in lines[header + 1 : header + 1 + len(DEMO_SCENES)]]
    assert rows == [s.name for s in DEMO_SCENES]
    assert f"next: envsample inspect {out}/tables/rooftop.json" in result.stdout
    assert _table_checksums(demo_run["summary"]) == demo_run["checksums"]
    vectors = json.loads(open(demo_run["summary"]["vectors"][0]["path"], encoding="utf-8").read())["vectors"]
    assert vectors == demo_run["vectors"]


def test_demo_command_json_and_bad_width(tmp_path):
    runner = CliRunner()
    done = runner.invoke(main, ["demo", str(tmp_path / "small"), "--width", "32", "--json"], catch_exceptions=False)
    assert done.exit_code == 0
    assert json.loads(done.stdout)["width"] == 32
    odd = runner.invoke(main, ["demo", str(tmp_path / "odd"), "--width", "63"])
    assert odd.exit_code == 2 and odd.stderr.startswith("error: Invalid value for '--width': 63 is odd")
    assert not (tmp_path / "odd").exists()


def test_demo_rooftop_goes_through_the_split(demo):
    """The rooftop's sun is split off (sky, sun file, sky table) and sky + sun agrees with the map."""
    from pathlib import Path

    from envsample.pipeline.split import load_sun

    sp = demo["extra"]["split"]["rooftop"]
    sun = load_sun(Path(sp["folder"]) / "rooftop.sun.json")
    assert sun.angles_deg == pytest.approx(ROOFTOP_SUN, abs=180.0 / (WIDTH // 2))  # within one pixel
    assert sp["consistent"] is True
    assert sp["relative_rmse_split"] < sp["relative_rmse_unsplit_table"]
