"""Tests of envsample.qa.checks.sampling.

- Moments of uniform-sphere sampling of the clamped cosine, E[max(0, cos)^k] = 1/(2(k+1)) (textbook), for
  the relative RMSE of table-only sampling of a uniform map.
- The balance heuristic (Veach 1997, eq. 9.4 and section 9.2): in multi-sample MIS with half the samples
  from the table, a sample term is at most twice the table-only term L cos / p_table <= 2 integral(L).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.core.sphere import row_solid_angles
from envsample.qa.run import check_map
from envsample.synth import skies


def test_sampling_table_only_rmse_on_a_uniform_map_matches_theory():
    """On a uniform map the table samples the sphere uniformly, so one sample of E(n) is
    X = 4 pi L max(0, cos); with E[max(0, cos)^k] = 1/(2(k+1)) (textbook), E[X] = pi L and
    Var X = (5/3) pi^2 L^2, so the relative RMSE at n spp is sqrt(5/3)/sqrt(n).  The
    measured value pools normals x repeats independent estimates; its tolerance is 4 sigma
    of the RMSE estimate from the exact fourth moment.  Cosine sampling is exact there."""
    report = check_map(skies.uniform_sky(64), checks=["sampling"])
    d = report["sampling"].details
    n, count = d["spp"], d["normals"] * d["repeats"]
    m = [1.0 / (2 * (k + 1)) * (4 * math.pi) ** k for k in range(5)]  # raw moments of X / L
    mu = m[1]
    var = m[2] - mu**2
    mu4 = m[4] - 4 * mu * m[3] + 6 * mu**2 * m[2] - 3 * mu**4
    var_mean = var / n
    mu4_mean = (mu4 + 3 * (n - 1) * var**2) / n**3
    rmse = math.sqrt(var_mean)
    se_rmse = math.sqrt((mu4_mean - var_mean**2) / count) / (2 * rmse)
    measured = d["estimators"]["table"]["relative_rmse"]
    assert measured == pytest.approx(rmse / mu, abs=4 * se_rmse / mu)
    assert d["estimators"]["cosine"]["relative_rmse"] < 1e-5



def test_sampling_mis_terms_stay_under_the_balance_heuristic_bound():
    """Veach 1997 (eq. 9.4, balance heuristic), half the samples from the table: every term is
    at most 2 L cos / p_table <= 2 integral(L dw), so peak sample share <= 2 integral / (spp mean E).
    At 64 px the sun pixel is large enough for cosine samples to hit it (about 10 hits
    expected), and those terms break the bound by far."""
    img = sunny(64)
    report = check_map(img, checks=["sampling"])
    d = report["sampling"].details
    y = img.astype(np.float64) @ np.array([0.212639, 0.715169, 0.072192])
    total = float((y * row_solid_angles(32, 64)[:, None]).sum())
    bound = 2.0 * total / (d["spp"] * d["mean_reference"])
    assert d["estimators"]["mis-balance"]["peak_sample_share"] <= bound * (1 + 1e-4)
    assert d["estimators"]["cosine"]["peak_sample_share"] > bound  # cosine sampling hits the sun rarely and hard



def test_sampling_fails_when_the_graded_estimator_is_cosine_only():
    """A renderer without environment importance sampling: a sun at 16 spp is hopeless.

    At 64 px the sun pixel is hit often enough (about 10 times in the check's samples)
    for the measured error to be stable; a smaller sun is hit even less and does worse."""
    report = check_map(sunny(64), checks=["sampling"], profile={"sampling": {"estimator": "cosine"}})
    c = report["sampling"]
    assert c.severity == "fail" and c.value > 2.0
    assert "MIS" in c.remedy and "mis-balance" in c.remedy
    assert check_map(sunny(), checks=["sampling"])["sampling"].severity == "pass"



def test_sampling_advises_an_analytic_sun_when_it_holds_most_of_the_light():
    img = skies.sun_sky(W, sky="none", elevation_deg=40.0)
    advice = check_map(img, checks=["sampling"])["sampling"].details["advice"]
    assert any("analytic light" in a and "envsample split" in a for a in advice)



def test_sampling_is_reproducible():
    a = check_map(sunny(), checks=["sampling"])["sampling"].details
    b = check_map(sunny(), checks=["sampling"])["sampling"].details
    assert a == b
