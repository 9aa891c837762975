"""Tests of envsample.validation.render: the render computes and returns objects; it writes nothing.

Sources: Lambert's cosine law (a uniform map of radiance L gives E = pi L for every normal,
and cosine-weighted sampling of it has zero variance; textbook); the exact lat-long cell
solid angle 2 pi / W (cos theta_i - cos theta_{i+1}) (textbook spherical geometry).
"""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest

from envsample.core.color import luminance
from envsample.sampling.table import build_table
from envsample.synth import skies
from envsample.validation.render import ValidationResult, render_estimates, render_validation


def _cell_solid_angles(width: int, height: int) -> np.ndarray:
    t = np.pi * np.arange(height + 1) / height
    return np.repeat(2.0 * np.pi / width * (np.cos(t[:-1]) - np.cos(t[1:])), width)


def test_render_returns_a_result_and_writes_no_file(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    table = build_table(skies.make_sky("rooftop", width=64))
    result = render_validation(table, spp=8, normals=(8, 4), estimators=("cosine", "table", "mis-balance"), seed=3)
    assert isinstance(result, ValidationResult)
    assert os.listdir(tmp_path) == []
    assert result.reference.shape == (32, 3) and set(result.estimates) == {"cosine", "table", "mis-balance"}
    # Relative RMSE recomputed here from the arrays: solid-angle weights, luminance, over the weighted mean.
    w = _cell_solid_angles(8, 4)
    yr = luminance(result.reference, "bt709", dtype=np.float64)
    ebar = np.dot(w, yr) / w.sum()
    for name, est in result.estimates.items():
        y = luminance(est, "bt709", dtype=np.float64)
        rmse = math.sqrt(np.dot(w, (y - yr) ** 2) / w.sum()) / ebar
        assert result.entries[name]["relative_rmse"] == pytest.approx(rmse, rel=1e-12)
        assert result.entries[name]["peak_sample_share"] > 0
    doc = result.metrics(source={"kind": "table"}, files={})
    json.dumps(doc, allow_nan=False)
    assert doc["estimators"] is result.entries and doc["caution"].endswith("not certified lighting calculations")


def test_render_estimates_on_any_normals_matches_lamberts_law():
    """Uniform radiance L: E = pi L exactly, and cosine sampling has zero variance (Lambert's cosine law)."""
    L = 0.75
    table = build_table(skies.uniform_sky(32, radiance=L))
    rng = np.random.default_rng(5)
    n = rng.normal(size=(20, 3))
    n /= np.linalg.norm(n, axis=1, keepdims=True)
    ref = np.full((20, 3), math.pi * L)
    out = render_estimates(table, n, np.ones(20), ref, ["cosine", "mis-balance"], spp=16, seed=1)
    assert out["cosine"].entry["relative_rmse"] == pytest.approx(0.0, abs=1e-6)
    assert out["cosine"].entry["variance_per_sample"] == pytest.approx(0.0, abs=1e-10)
    # MIS with the table is unbiased but not exact here: its mean error lies within 4 standard errors.
    e = out["mis-balance"].entry
    assert e["relative_rmse"] > 0 and abs(e["mean_bias"]) <= 4.0 * e["mean_bias_se"]
