"""`envsample verify` and `envsample build --tune` through the command line."""

import json

from click.testing import CliRunner

from envsample.cli import main
from envsample.io.maps import write_map
from envsample.sampling.table import load_table
from envsample.synth.skies import make_sky


def _run(*args):
    return CliRunner().invoke(main, list(map(str, args)))


def test_verify_writes_metrics_and_names_the_recommendation(tmp_path):
    write_map(tmp_path / "sky.exr", make_sky("overcast", width=64), pixel_type="float")
    out = tmp_path / "report"
    r = _run("verify", tmp_path / "sky.exr", "-o", out, "--spp", "8", "--normals", "16x8",
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


def test_verify_list_and_usage_errors():
    r = _run("verify", "--list")
    assert r.exit_code == 0 and "mis-balance" in r.output.split()
    r = _run("verify")
    assert r.exit_code == 2 and "MAP_OR_TABLE" in r.output


def test_build_tune_stores_the_recommendation(tmp_path):
    write_map(tmp_path / "sun.exr", make_sky("sun", width=64), pixel_type="float")
    r = _run("build", tmp_path / "sun.exr", "-o", tmp_path / "t", "--tune")
    assert r.exit_code == 0, r.output
    rec = load_table(tmp_path / "t").metadata["recommendation"]
    assert rec["model"] == "one-sample MIS"
    assert 0.0 < rec["table_fraction"] < 1.0
    assert "tuned" in r.output
