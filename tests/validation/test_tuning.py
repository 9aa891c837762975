"""Tests of envsample.validation.tuning: the pilot search of one-sample MIS table fractions.

Sources: Lambert's cosine law (on a constant map cosine sampling is exact, textbook); the
delta-method standard error of a ratio of two variances (common practice).
"""

from __future__ import annotations

import json

import pytest

from envsample.sampling.table import build_table, load_table
from envsample.synth import skies
from envsample.validation.tuning import DEFAULT_FRACTIONS, recommend, tune_one_sample

#: Standard errors allowed by statistical comparisons (fixed seeds; a 4-sigma event is ~6e-5 two-sided).
SIGMAS = 4.0
GRID = (16, 8)
SPP = 16



def test_tune_returns_a_listed_fraction_no_worse_than_the_default():
    """Variance ratio is re-measured on fresh samples, so it may exceed 1 by noise only (4 SE)."""
    table = build_table(skies.make_sky("rooftop", width=128))
    t = tune_one_sample(table, spp=SPP, normals=GRID, seed=2)
    assert t["table_fraction"] in DEFAULT_FRACTIONS
    assert t["heuristic"] in ("balance", "power")
    assert t["fractions"] == pytest.approx([t["table_fraction"], 1.0 - t["table_fraction"]])
    assert t["variance_ratio"] <= 1.0 + SIGMAS * t["variance_ratio_se"]
    assert len(t["pilot"]) == 2 * len(DEFAULT_FRACTIONS)


def test_tune_picks_the_cosine_side_on_a_uniform_map():
    """Lambert's cosine law: on a constant map cosine sampling is exact, and every table share adds variance.

    So the least table fraction on offer must win, with a variance clearly below the default's.
    """
    table = build_table(skies.make_sky("uniform", width=64))
    t = tune_one_sample(table, fractions=(0.2, 0.5, 0.8), heuristics="balance", spp=SPP, normals=GRID, seed=4)
    assert t["table_fraction"] == 0.2 and t["heuristic"] == "balance"
    assert t["variance_ratio"] + SIGMAS * t["variance_ratio_se"] < 1.0


def test_recommendation_round_trips_through_the_table_files(tmp_path):
    table = build_table(skies.make_sky("rooftop", width=64))
    rec = recommend(table, spp=8, normals=(8, 4), seed=1)
    assert rec["estimator"].startswith("one-sample-") and "Sbert" in rec["cite"]
    json.dumps(rec, allow_nan=False)
    table.metadata["recommendation"] = rec
    table.save(tmp_path / "tuned")
    assert load_table(tmp_path / "tuned").metadata["recommendation"] == rec


def test_tune_rejects_bad_fractions():
    table = build_table(skies.make_sky("uniform", width=32))
    with pytest.raises(ValueError, match="strictly between 0 and 1"):
        tune_one_sample(table, fractions=(0.0, 0.5))
    with pytest.raises(ValueError, match="heuristic"):
        tune_one_sample(table, heuristics=("nope",))
