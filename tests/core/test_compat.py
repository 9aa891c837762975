"""Former spellings of public names keep working for one version, with a DeprecationWarning."""

from __future__ import annotations

import numpy as np
import pytest

import envsample
from envsample.synth.skies import make_sky


def test_rotate_deg_is_the_former_name_of_rotation_deg():
    rgb = make_sky("sun", width=64, elevation_deg=30.0, azimuth_deg=10.0)
    new = envsample.build_table(rgb, rotation_deg=30.0)
    with pytest.warns(DeprecationWarning, match="'rotate_deg' is now called 'rotation_deg'"):
        old = envsample.build_table(rgb, rotate_deg=30.0)
    assert old.rotation_deg == new.rotation_deg == 30.0
    np.testing.assert_array_equal(old.cell_pdf, new.cell_pdf)
    with pytest.warns(DeprecationWarning, match="rotation_deg"):
        assert old.rotate_deg == 30.0
    u, v = np.array([0.1, 0.7]), np.array([0.2, 0.9])
    with pytest.warns(DeprecationWarning):
        d_old = envsample.uv_to_direction(u, v, rotate_deg=45.0)
    np.testing.assert_array_equal(d_old, envsample.uv_to_direction(u, v, rotation_deg=45.0))


def test_giving_both_spellings_is_refused():
    with pytest.raises(TypeError, match="both 'rotation_deg' and its former name 'rotate_deg'"):
        envsample.uv_to_direction([0.5], [0.5], rotation_deg=1.0, rotate_deg=1.0)


def test_alpha_is_the_former_name_of_the_cutoff_threshold():
    """The cutoff heuristic's threshold was called alpha, like GGX roughness; it is ``cutoff`` now."""
    p, c = np.array([[1.0, 4.0], [4.0, 1.0]]), [1, 1]
    with pytest.warns(DeprecationWarning, match="'alpha' is now called 'cutoff'"):
        old = envsample.mis_weights(p, c, method="cutoff", alpha=0.5)
    np.testing.assert_array_equal(old, envsample.mis_weights(p, c, method="cutoff", cutoff=0.5))
    table = envsample.build_table(make_sky("uniform", width=32))
    normals = np.array([[0.0, 1.0, 0.0]])
    with pytest.warns(DeprecationWarning, match="'alpha' is now called 'cutoff'"):
        e_old = envsample.estimate_irradiance(table, normals, estimator="mis-cutoff", spp=16, alpha=0.3)
    e_new = envsample.estimate_irradiance(table, normals, estimator="mis-cutoff", spp=16, cutoff=0.3)
    np.testing.assert_array_equal(e_old, e_new)
