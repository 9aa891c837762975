"""Tests of envsample.core.clearsky against pvlib, a general-purpose solar-energy library.

pvlib (``pvlib.clearsky.ineichen``, ``pvlib.atmosphere.get_relative_airmass(model="kastenyoung1989")``,
``alt2pres``, ``get_absolute_airmass``) implements the same published models (Ineichen & Perez
2002; Kasten & Young 1989); it is a test dependency only.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from envsample.core import clearsky

pvlib = pytest.importorskip("pvlib")

#: Agreement asked by issue 11: within 1 %.
TOLERANCE = 0.01


def _pvlib(zenith_deg: float, turbidity: float, altitude: float) -> dict:
    am = pvlib.atmosphere.get_relative_airmass(zenith_deg, model="kastenyoung1989")
    am_abs = pvlib.atmosphere.get_absolute_airmass(am, pvlib.atmosphere.alt2pres(altitude))
    return pvlib.clearsky.ineichen(zenith_deg, am_abs, turbidity, altitude=altitude)


@pytest.mark.parametrize("zenith_deg", [0.0, 30.0, 60.0, 80.0, 85.0, 88.5])
@pytest.mark.parametrize(("turbidity", "altitude"), [(3.0, 0.0), (2.0, 1500.0), (5.0, 300.0)])
def test_clear_sky_matches_pvlib_ineichen(zenith_deg, turbidity, altitude):
    """Ineichen & Perez (2002) DNI, DHI and GHI: pvlib's implementation, same air mass (Kasten & Young 1989)."""
    ours = clearsky.clear_sky(math.radians(90.0 - zenith_deg), linke_turbidity=turbidity, altitude_m=altitude)
    ref = _pvlib(zenith_deg, turbidity, altitude)
    for key in ("dni", "dhi", "ghi"):
        assert float(getattr(ours, key)) == pytest.approx(float(ref[key]), rel=TOLERANCE), key


def test_clear_sky_matches_the_values_checked_in_the_design_notes():
    """pvlib 0.16.1 on this machine, zenith 30/60/85 deg, TL 3, sea level (shared design notes)."""
    cs = clearsky.clear_sky(np.radians([60.0, 30.0, 5.0]))
    assert np.allclose(cs.dni, [916.5, 787.8, 176.5], rtol=1e-3)
    assert np.allclose(cs.dhi, [103.1, 75.7, 15.8], rtol=3e-3)


def test_relative_airmass_matches_pvlib_kasten_young():
    """Kasten & Young (1989) relative air mass, pvlib's 'kastenyoung1989' model."""
    z = np.array([0.0, 45.0, 70.0, 85.0, 89.9])
    ours = clearsky.relative_airmass(np.radians(90.0 - z))
    ref = pvlib.atmosphere.get_relative_airmass(z, model="kastenyoung1989")
    assert np.allclose(ours, ref, rtol=1e-9)
    assert ours[0] == pytest.approx(1.0, abs=1e-3)  # air mass 1 at the zenith (definition)


def test_pressure_at_altitude_matches_pvlib():
    """Standard-atmosphere pressure: pvlib.atmosphere.alt2pres."""
    for h in (0.0, 1000.0, 4000.0):
        assert clearsky.pressure_at_altitude(h) == pytest.approx(pvlib.atmosphere.alt2pres(h), rel=1e-12)


def test_no_direct_sun_below_the_horizon():
    cs = clearsky.clear_sky(math.radians(-2.0))
    assert float(cs.dni) == 0.0 and float(cs.ghi) == 0.0
    with pytest.raises(ValueError, match="give the sun's illuminance"):
        clearsky.direct_to_diffuse_ratio(math.radians(-2.0))


def test_bad_turbidity_and_altitude_name_the_parameter():
    with pytest.raises(ValueError, match="linke_turbidity"):
        clearsky.clear_sky(0.5, linke_turbidity=0.2)
    with pytest.raises(ValueError, match="altitude_m"):
        clearsky.clear_sky(0.5, altitude_m=1e5)


def test_direct_to_diffuse_ratio_is_pvlibs_dni_over_dhi():
    """The ratio that restores a clipped sun: pvlib's DNI / DHI at the same elevation, within 1 %."""
    for el in (80.0, 30.0, 5.0):
        ref = _pvlib(90.0 - el, 3.0, 0.0)
        assert clearsky.direct_to_diffuse_ratio(math.radians(el)) == pytest.approx(
            float(ref["dni"] / ref["dhi"]), rel=TOLERANCE)


def test_sun_color_reddens_at_low_elevation():
    """Rayleigh optical depth about 0.097 at 0.55 um (Bodhaine et al. 1999, from memory): blue falls first."""
    high = clearsky.sun_color(math.radians(80.0))
    low = clearsky.sun_color(math.radians(3.0))
    assert high[2] / high[0] > low[2] / low[0]
    assert np.all((high > 0) & (high < 1))
