"""Tests of envsample.sampling.frames: frames and parameters are checked at the boundary.

Sources named per test.  Statistical tests use fixed seeds; chi-square tests fail
below a p-value of 1e-4 (about a 3.7-sigma event).
"""

from __future__ import annotations

import numpy as np
import pytest
from support.sampling_checks import *  # noqa: F403 - the shared test maps and helpers

from envsample.sampling.frames import make_frame
from envsample.sampling.ggx import GGXReflection
from envsample.sampling.strategies import CosineHemisphere, LambertBSDF


def test_bad_frames_and_parameters_are_rejected_with_clear_messages():
    with pytest.raises(ValueError, match="normals contains a zero vector"):
        make_frame([[0.0, 0.0, 0.0]])
    with pytest.raises(ValueError, match="normals contains NaN or Inf"):
        make_frame([[np.nan, 0.0, 1.0]])
    with pytest.raises(ValueError, match=r"normals must have shape \(N, 3\)"):
        make_frame(np.zeros((4, 2)))
    with pytest.raises(ValueError, match="wo has 2 rows but the normals have 3"):
        make_frame(np.eye(3), np.eye(3)[:2])
    with pytest.raises(ValueError, match=r"roughness \(GGX alpha\) must lie in"):
        make_frame([0.0, 0.0, 1.0], [0.0, 0.0, 1.0], 0.0)
    with pytest.raises(ValueError, match="needs frame.wo and frame.roughness"):
        GGXReflection().sample(np.zeros((1, 2)), make_frame([0.0, 0.0, 1.0]))
    with pytest.raises(ValueError, match=r"u must have shape \(1, 2\)"):
        CosineHemisphere().sample(np.zeros((2, 2)), make_frame([0.0, 0.0, 1.0]))
    with pytest.raises(ValueError, match="albedo must lie in"):
        LambertBSDF(1.5)
    # Inputs are normalised, and one wo is broadcast to every normal.
    fr = make_frame([[0.0, 0.0, 2.0], [0.0, 3.0, 0.0]], [0.0, 0.0, 5.0], 0.3)
    np.testing.assert_allclose(fr.normals, [[0, 0, 1], [0, 1, 0]])
    np.testing.assert_allclose(fr.wo, [[0, 0, 1], [0, 0, 1]])
    np.testing.assert_allclose(fr.roughness, [0.3, 0.3])
