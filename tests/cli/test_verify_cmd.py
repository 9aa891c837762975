"""Tests of envsample.cli.verify_cmd (``envsample verify``): the validation report through the command line.

Outside reference: Lambert's cosine law (textbook): under a constant map the cosine-weighted
estimate of irradiance is exact, so its error is 0 whatever the scale.
"""

from __future__ import annotations

import json

from envsample.io.maps import write_map
from envsample.synth.skies import make_sky


def test_verify_writes_metrics_and_names_the_recommendation(run, tmp_path):
    write_map(tmp_path / "sky.exr", make_sky("overcast", width=64), pixel_type="float")
    out = tmp_path / "report"
    r = run("verify", tmp_path / "sky.exr", "-o", out, "--spp", "8", "--normals", "16x8",
             "--estimators", "cosine,table,mis-balance", "--no-sphere")
    assert r.exit_code == 0, r.output
    metrics = json.loads((out / "metrics.json").read_text())
    assert set(metrics["estimators"]) == {"cosine", "table", "mis-balance"}
    assert f"{metrics['recommended']['estimator']} (highest efficiency" in r.output
    # The printed relative RMSE is the one in metrics.json (4 significant digits).
    table_rmse = metrics["estimators"]["table"]["relative_rmse"]
    assert f"{table_rmse:.4g}" in r.output
    # The reference's own size, accuracy, time and implementation are printed and recorded.
    ref = metrics["reference"]
    assert f"exact at {ref['resolution'][0]}x{ref['resolution'][1]}, relative error bound " \
           f"{ref['relative_error_bound']:.1e}" in r.output
    assert ref["accuracy_seconds"] > 0.0 and f"{ref['backend']} kernel" in r.output


def test_verify_list_and_usage_errors(run):
    r = run("verify", "--list")
    assert r.exit_code == 0 and "mis-balance" in r.output.split()
    r = run("verify")
    assert r.exit_code == 2 and "MAP_OR_TABLE" in r.output


def test_verify_refuses_oversized_requests_before_making_anything(run, tmp_path):
    """issue 12 item 4: 100000x50000 normals ended in MemoryError and left an empty folder."""
    write_map(tmp_path / "sky.exr", make_sky("overcast", width=64), pixel_type="float")
    for args in (("--normals", "100000x50000"), ("--table-size", "100000x50000")):
        r = run("verify", tmp_path / "sky.exr", "-o", tmp_path / "report", *args)
        assert r.exit_code == 2, r.output
        assert r.output.startswith("error:") and "needs about" in r.output and len(r.output.splitlines()) == 1
        assert not (tmp_path / "report").exists()


def test_verify_of_a_black_map_says_there_is_no_light(run, tmp_path):
    """issue 12 item 8: an all-black map exited 3 after writing its outputs."""
    import numpy as np

    write_map(tmp_path / "black.exr", np.zeros((32, 64, 3), np.float32), pixel_type="float")
    r = run("verify", tmp_path / "black.exr", "-o", tmp_path / "report", "--spp", "4", "--normals", "8x4",
             "--estimators", "cosine,table")
    assert r.exit_code == 0, r.output
    assert "no light reaches any normal" in r.output
    assert json.loads((tmp_path / "report" / "metrics.json").read_text())["recommended"]["estimator"] is None


def test_verify_of_extreme_values_reports_its_scale(run, tmp_path):
    """issue 12 item 8: all 3e38 (overflow) and all 1e-45 (denormal) get a report, rendered scaled."""
    import numpy as np

    for name, value in (("huge", 3e38), ("tiny", 1e-45)):
        write_map(tmp_path / f"{name}.exr", np.full((32, 64, 3), value, np.float32), pixel_type="float")
        r = run("verify", tmp_path / f"{name}.exr", "-o", tmp_path / name, "--spp", "4", "--normals", "8x4",
                 "--estimators", "cosine,table")
        assert r.exit_code == 0, r.output
        m = json.loads((tmp_path / name / "metrics.json").read_text())
        assert m["scale"]["factor"] == 2.0 ** m["scale"]["exponent"] and "rendered times 2^" in r.output
        # A constant map: the cosine estimator is exact (Lambert), whatever the scale.
        assert m["estimators"]["cosine"]["relative_rmse"] == 0.0


def test_verify_prints_the_glossy_figures_and_inspect_the_advice_in_words(run, tmp_path):
    write_map(tmp_path / "sun.exr", make_sky("sun", width=64), pixel_type="float")
    r = run("build", tmp_path / "sun.exr", "-o", tmp_path / "t", "--tune")
    assert r.exit_code == 0, r.output
    r = run("verify", tmp_path / "t", "-o", tmp_path / "rep", "--spp", "4", "--normals", "8x4",
             "--estimators", "table,mis-balance", "--roughness", "0.3", "--no-sphere")
    assert r.exit_code == 0, r.output
    assert "tuned" in r.output and "the table's tuned setting" in r.output
    assert "glossy" in r.output and "GGX roughness 0.3" in r.output
    r = run("inspect", tmp_path / "t")
    assert r.exit_code == 0 and "draw from the table with probability" in r.output
    assert "{" not in r.output  # no raw JSON line any more
