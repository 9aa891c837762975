"""Tests of envsample.reports.map_parts: the parts of a map's section of a check page.

References: the image coordinates of an azimuth/elevation in envsample.core.sphere's documented
convention (u = 1/2 + azimuth/360, v = (90 - elevation)/180 at rotation 0); numbers for people as
envsample.core.text.number writes them.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from envsample.reports.map_parts import _emitter_uv, clip_settings, num, verdict_of


def test_emitter_positions_follow_the_documented_convention():
    uv = _emitter_uv([{"azimuth_deg": 90.0, "elevation_deg": 45.0}, {"azimuth_deg": -180.0, "elevation_deg": -90.0}])
    assert uv[0] == pytest.approx([0.75, 0.25]) and uv[1] == pytest.approx([0.0, 1.0])
    assert _emitter_uv([]).shape == (0, 2)


def test_the_overlay_takes_each_clipped_channel_when_the_clipping_check_failed():
    failed = {"checks": [{"id": "clipping", "severity": "fail", "details": {
        "band_width": 1e-6, "channels": [{"channel": "R", "level": 500.0}, {"channel": "B", "level": 80.0}]}}]}
    assert clip_settings(failed) == ([500.0, None, 80.0], 1e-6)


def test_the_overlay_takes_the_plateau_only_when_the_clipping_check_failed():
    failed = {"checks": [{"id": "clipping", "severity": "fail", "details": {"plateau": {"level": 500.0}}}],
              "profile": {"path": None}}
    level, tol = clip_settings(failed)
    assert level == 500.0 and 0.0 < tol < 0.1
    passed = {"checks": [{"id": "clipping", "severity": "pass", "details": {"plateau": {"level": 500.0}}}]}
    assert clip_settings(passed) == (None, 0.0)
    assert clip_settings({"checks": []}) == (None, 0.0)


def test_numbers_dashes_and_verdicts_for_people():
    assert num(None) == "\u2014" and num(float("nan")) == "\u2014" and num(math.inf) == "\u221e"
    assert num(np.int64(3)) == "3" and num(True) == "yes" and num([1, 2.5]) == "1, 2.5"
    assert verdict_of({"readable": False}) == "fail" and verdict_of({"verdict": "odd"}) == "error"
    assert verdict_of({"verdict": "warn"}) == "warn"
