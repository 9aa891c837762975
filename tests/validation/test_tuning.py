"""Tests of envsample.validation.tuning: the pilot search of one-sample MIS table fractions.

Sources: Lambert's cosine law (on a constant map cosine sampling is exact, textbook); the
delta-method standard error of a ratio of two variances (common practice).
"""

from __future__ import annotations

import json

import pytest

from envsample.sampling.table import build_table, load_table
from envsample.synth import skies
from envsample.validation.tuning import DEFAULT_FRACTIONS, EDGE_LIMIT, advice_text, recommend, tune_one_sample

#: Standard errors allowed by statistical comparisons (fixed seeds; a 4-sigma event is ~6e-5 two-sided).
SIGMAS = 4.0
GRID = (16, 8)
SPP = 16



def test_tune_returns_a_listed_fraction_no_worse_than_the_default():
    """Variance ratio is re-measured on fresh samples, so it may exceed 1 by noise only (4 SE)."""
    table = build_table(skies.make_sky("rooftop", width=128))
    t = tune_one_sample(table, spp=SPP, normals=GRID, seed=2)
    tried = set(DEFAULT_FRACTIONS) | set(t["extended"])
    assert t["table_fraction"] in tried
    assert t["heuristic"] in ("balance", "power")
    assert t["fractions"] == pytest.approx([t["table_fraction"], 1.0 - t["table_fraction"]])
    assert t["variance_ratio"] <= 1.0 + SIGMAS * t["variance_ratio_se"]
    assert len(t["pilot"]) == 2 * len(tried)
    assert all(p["variance_vs_default_se"] >= 0 for p in t["pilot"])


def test_tune_picks_the_cosine_side_on_a_uniform_map():
    """Lambert's cosine law: on a constant map cosine sampling is exact, and every table share adds variance.

    So the least table fraction on offer must win, with a variance clearly below the default's; and
    since the best then lies at the edge of the range, the search goes on towards 0 (halving) until
    its limit (issue 10: extend the range when the best is at an edge).
    """
    table = build_table(skies.make_sky("uniform", width=64))
    t = tune_one_sample(table, fractions=(0.2, 0.5, 0.8), heuristics="balance", spp=SPP, normals=GRID, seed=4,
                        extend=False)
    assert t["table_fraction"] == 0.2 and t["heuristic"] == "balance" and t["extended"] == []
    assert t["variance_ratio"] + SIGMAS * t["variance_ratio_se"] < 1.0
    t = tune_one_sample(table, fractions=(0.2, 0.5, 0.8), heuristics="balance", spp=SPP, normals=GRID, seed=4)
    assert t["extended"] == [0.1, 0.05, 0.025, 0.0125, EDGE_LIMIT]
    assert t["table_fraction"] == EDGE_LIMIT


def test_search_extends_past_the_upper_edge_and_stops_inside():
    """A sun sky wants most samples from the table: with 0.3..0.7 on offer the best is the top edge,
    so 0.85, 0.925, ... are tried until the best is no longer the largest fraction tried (or the limit)."""
    table = build_table(skies.make_sky("sun", width=64))
    t = tune_one_sample(table, fractions=(0.3, 0.5, 0.7), heuristics="balance", spp=SPP, normals=GRID, seed=3)
    assert t["extended"] and t["extended"][0] == 0.85
    tried = [0.3, 0.5, 0.7] + t["extended"]
    assert t["table_fraction"] != max(tried) or max(tried) == 1.0 - EDGE_LIMIT
    assert isinstance(t["stable"], bool) and (t["margin_sigmas"] is None or t["margin_sigmas"] >= 0)


def test_advice_in_words_names_the_probability_the_heuristic_and_the_ratio():
    rec = {"estimator": "one-sample-power", "heuristic": "power", "heuristic_params": {"beta": 2.0},
           "table_fraction": 0.9, "variance_ratio": 0.42, "variance_ratio_se": 0.01, "extended": [0.95],
           "stable": False, "margin_sigmas": 0.5, "pilot_spp": 64}
    text = " ".join(advice_text(rec))
    assert "probability 0.9" in text and "power heuristic (beta 2)" in text
    assert "0.42 \u00b1 0.01 times that of the default" in text and "less noise" in text
    assert "extended" in text and "not settled" in text
    assert advice_text({"nothing": 1})[0].startswith("the table carries tuning advice in a form")


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
