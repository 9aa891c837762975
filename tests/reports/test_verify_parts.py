"""Tests of envsample.reports.verify_parts: what the validation section of a page shows."""

from __future__ import annotations

import pytest

from envsample.errors import EnvsampleError
from envsample.reports.verify_parts import verify_context


def test_a_folder_without_metrics_shows_its_pictures_only(tmp_path):
    ctx = verify_context(tmp_path)
    assert ctx["rows"] == [] and ctx["wide"] == [] and ctx["other"] == [] and ctx["metrics"] is None


def test_rows_mark_the_recommendation_and_the_tuned_setting(tmp_path):
    metrics = {"spp": 8, "normals": {"count": 8, "width": 4, "height": 2},
               "recommended": {"estimator": "table", "rule": "r", "lowest_variance": "tuned"},
               "estimators": {"table": {"relative_rmse": 0.25}, "tuned": {
                   "relative_rmse": 0.2, "tuned_from": {"estimator": "one-sample-power", "table_fraction": 0.9}}},
               "convergence": {"normals": [4, 2], "grid": [8, 4], "left_out": ["cosine"]},
               "files": {"convergence": "convergence.png"}, "notes": ["a note"]}
    ctx = verify_context(tmp_path, metrics=metrics)
    rows = {r["name"]: r for r in ctx["rows"]}
    assert rows["table"]["recommended"] and not rows["tuned"]["recommended"]
    assert "one-sample-power, table fraction 0.9" in rows["tuned"]["detail"]
    conv = ctx["other"][0]
    assert conv["pic"] is None and "convergence.png is missing" in conv["missing"]
    assert ctx["notes"] == ["a note"] and "least variance per sample: tuned" in ctx["recommendation"]


def test_unreadable_metrics_and_missing_folders_are_one_line_errors(tmp_path):
    (tmp_path / "metrics.json").write_text("{not json")
    with pytest.raises(EnvsampleError, match="not readable JSON"):
        verify_context(tmp_path)
    with pytest.raises(EnvsampleError, match="verify folder does not exist"):
        verify_context(tmp_path / "nowhere")
