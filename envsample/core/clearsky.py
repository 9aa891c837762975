"""A clear-sky model: the sun's direct-normal and the sky's diffuse-horizontal irradiance at an elevation.

Public objects
--------------
:data:`DEFAULT_LINKE_TURBIDITY`  the Linke turbidity assumed when none is given (3.0).
:data:`DEFAULT_DNI_EXTRA`        extraterrestrial normal irradiance, W/m2 (1364).
:func:`relative_airmass`         Kasten & Young (1989) relative optical air mass.
:func:`pressure_at_altitude`     standard-atmosphere pressure at an altitude, Pa.
:func:`absolute_airmass`         pressure-corrected air mass.
:func:`clear_sky`                Ineichen & Perez (2002): GHI, DNI and DHI (:class:`ClearSky`).
:func:`direct_to_diffuse_ratio`  DNI / DHI, the ratio used to restore a clipped sun.
:func:`sun_color`                an illustrative colour of the direct sun (Rayleigh + aerosol extinction).

Angles: the sun's **elevation** above the horizon in radians (``pi/2`` minus the
zenith angle); no refraction correction is applied (the elevation is taken as the
apparent one).  Irradiances are in the unit of ``dni_extra`` (W/m2 by default);
envsample applies the model's *ratios* to a map's own light, so only ratios matter
there.  Values are estimates for asset preparation, not certified lighting calculations.

The model, as published (Ineichen & Perez 2002, eqs. 1-9, with the altitude terms
``fh1 = exp(-h/8000)``, ``fh2 = exp(-h/1250)``)::

    cg1 = 5.09e-5 h + 0.868,   cg2 = 3.92e-5 h + 0.0387
    GHI = cg1 I0 cos z exp(-cg2 AM (fh1 + fh2 (TL - 1)))
    b   = 0.664 + 0.163 / fh1
    DNI = min(b I0 exp(-0.09 AM (TL - 1)),
              GHI (1 - (0.1 - 0.2 exp(-TL)) / (0.1 + 0.882 / fh1)) / cos z)
    DHI = GHI - DNI cos z

with ``AM`` the pressure-corrected (absolute) air mass, ``TL`` the Linke turbidity
(air-mass-2 value), ``h`` the altitude in metres and ``I0`` the extraterrestrial
irradiance.  The relative air mass is Kasten & Young (1989)::

    AM_rel = 1 / (cos z + 0.50572 (96.07995 - z_deg)^-1.6364)

and ``AM = AM_rel p / 101325 Pa`` with the standard-atmosphere pressure
``p = 100 ((44331.514 - h) / 11880.516)^(1 / 0.1902632)`` Pa.

References
----------
- Ineichen, P. and Perez, R. (2002). A new airmass independent formulation for the
  Linke turbidity coefficient. Solar Energy 73(3), 151-157.
- Perez, R. et al. (2002). A new operational model for satellite-derived irradiances:
  description and validation. Solar Energy 73(5), 307-317 (the DNI correction term).
- Kasten, F. and Young, A. T. (1989). Revised optical air mass tables and
  approximation formula. Applied Optics 28(22), 4735-4738.
- Portland State Aerospace Society (2004). A quick derivation relating altitude to
  air pressure, version 1.03 (the standard-atmosphere pressure formula).
- Bodhaine, B. A., Wood, N. B., Dutton, E. G. and Slusser, J. R. (1999). On Rayleigh
  optical depth calculations. Journal of Atmospheric and Oceanic Technology 16(11),
  1854-1861 (the Rayleigh optical depth of :func:`sun_color`).
- Angstrom, A. (1929). On the atmospheric transmission of sun radiation and on dust in
  the air. Geografiska Annaler 11, 156-166 (the aerosol optical depth law).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = [
    "DEFAULT_DNI_EXTRA",
    "DEFAULT_LINKE_TURBIDITY",
    "ClearSky",
    "absolute_airmass",
    "clear_sky",
    "direct_to_diffuse_ratio",
    "pressure_at_altitude",
    "relative_airmass",
    "sun_color",
]

#: Linke turbidity assumed when none is given: 3.0, a clear sky over a rural or
#: suburban site (typical values 2 for very clean to 6 for hazy air; from memory).
DEFAULT_LINKE_TURBIDITY = 3.0

#: Extraterrestrial normal irradiance, W/m2: 1364, the value pvlib uses by default
#: (the solar constant is about 1361 W/m2 and varies +-3.4 % over the year; from memory).
DEFAULT_DNI_EXTRA = 1364.0

#: Sea-level standard pressure, Pa (ISO 2533:1975 standard atmosphere).
STANDARD_PRESSURE_PA = 101325.0

#: Wavelengths (micrometres) standing for the red, green and blue channels in
#: :func:`sun_color`: near the dominant wavelengths of the BT.709 primaries (common practice).
_RGB_WAVELENGTHS_UM = (0.61, 0.55, 0.465)

#: Angstrom aerosol coefficients of a clear sky (turbidity beta, exponent alpha; from memory).
_ANGSTROM_BETA = 0.1
_ANGSTROM_ALPHA = 1.3


@dataclass(frozen=True)
class ClearSky:
    """Clear-sky irradiances at one or more sun elevations, in the unit of ``dni_extra``.

    ``ghi`` global horizontal, ``dni`` direct normal, ``dhi`` diffuse horizontal
    (float64 arrays of the input's shape, or floats).  ``linke_turbidity``,
    ``altitude_m`` and ``airmass`` record the inputs.
    """

    ghi: np.ndarray
    dni: np.ndarray
    dhi: np.ndarray
    airmass: np.ndarray
    linke_turbidity: float
    altitude_m: float


def _zenith(elevation) -> np.ndarray:
    el = np.asarray(elevation, dtype=np.float64)
    if not np.all(np.isfinite(el)):
        raise ValueError("elevation must be finite (radians above the horizon)")
    return 0.5 * math.pi - el


def relative_airmass(elevation) -> np.ndarray:
    """Kasten & Young (1989) relative optical air mass at a sun elevation (radians), float64.

    ``1 / (cos z + 0.50572 (96.07995 - z)^-1.6364)`` with ``z`` the zenith angle in
    degrees; NaN where the sun is below the horizon (zenith > 90 deg), as the formula
    is fitted only down to it.
    """
    z = _zenith(elevation)
    z_deg = np.degrees(z)
    with np.errstate(invalid="ignore", divide="ignore"):
        am = 1.0 / (np.cos(z) + 0.50572 * (96.07995 - z_deg) ** -1.6364)
    return np.where(z_deg <= 90.0, am, np.nan)


def pressure_at_altitude(altitude_m: float) -> float:
    """Standard-atmosphere pressure (Pa) at an altitude (metres above sea level)."""
    h = _altitude(altitude_m)
    return 100.0 * ((44331.514 - h) / 11880.516) ** (1.0 / 0.1902632)


def absolute_airmass(relative, altitude_m: float = 0.0) -> np.ndarray:
    """Pressure-corrected air mass: ``relative * p(altitude) / 101325 Pa``."""
    return np.asarray(relative, dtype=np.float64) * (pressure_at_altitude(altitude_m) / STANDARD_PRESSURE_PA)


def _altitude(altitude_m) -> float:
    h = float(altitude_m)
    if not (math.isfinite(h) and -500.0 <= h <= 9000.0):
        raise ValueError(f"altitude_m must lie in [-500, 9000] metres, got {altitude_m!r}")
    return h


def _turbidity(linke_turbidity) -> float:
    tl = float(linke_turbidity)
    if not (math.isfinite(tl) and 1.0 <= tl <= 10.0):
        raise ValueError(f"linke_turbidity must lie in [1, 10] (clean to very hazy air), got {linke_turbidity!r}")
    return tl


def clear_sky(elevation, *, linke_turbidity: float = DEFAULT_LINKE_TURBIDITY, altitude_m: float = 0.0,
              dni_extra: float = DEFAULT_DNI_EXTRA) -> ClearSky:
    """Ineichen & Perez (2002) clear-sky irradiances at a sun elevation (radians).

    Returns :class:`ClearSky` with GHI, DNI and DHI in the unit of ``dni_extra``
    (W/m2 by default), zero where the sun is at or below the horizon.  The air mass
    is Kasten & Young (1989), corrected to the pressure of ``altitude_m``.
    """
    tl = _turbidity(linke_turbidity)
    h = _altitude(altitude_m)
    am = absolute_airmass(relative_airmass(elevation), h)
    cos_z = np.maximum(np.cos(_zenith(elevation)), 0.0)
    up = np.isfinite(am) & (cos_z > 0.0)
    am0 = np.where(up, am, 1.0)
    fh1, fh2 = math.exp(-h / 8000.0), math.exp(-h / 1250.0)
    cg1, cg2 = 5.09e-5 * h + 0.868, 3.92e-5 * h + 0.0387
    ghi = cg1 * dni_extra * cos_z * np.exp(-cg2 * am0 * (fh1 + fh2 * (tl - 1.0)))
    b = 0.664 + 0.163 / fh1
    beam = b * dni_extra * np.exp(-0.09 * am0 * (tl - 1.0))
    corr = (1.0 - (0.1 - 0.2 * math.exp(-tl)) / (0.1 + 0.882 / fh1))
    with np.errstate(divide="ignore", invalid="ignore"):
        beam2 = ghi * np.minimum(np.maximum(corr / cos_z, 0.0), 1e20)
    dni = np.where(up, np.minimum(beam, beam2), 0.0)
    ghi = np.where(up, ghi, 0.0)
    dhi = ghi - dni * cos_z
    return ClearSky(ghi=ghi, dni=dni, dhi=dhi, airmass=np.where(up, am, np.nan), linke_turbidity=tl,
                    altitude_m=h)


def direct_to_diffuse_ratio(elevation, *, linke_turbidity: float = DEFAULT_LINKE_TURBIDITY,
                            altitude_m: float = 0.0) -> float:
    """DNI / DHI of :func:`clear_sky` at one elevation (radians): direct normal per unit diffuse horizontal.

    Raises ValueError when the sun is at or below the horizon (the model has no direct sun there).
    """
    el = float(elevation)
    if not el > 0.0:
        raise ValueError(f"the sun is {math.degrees(el):.3g} deg above the horizon: the clear-sky model "
                         "has no direct sun there; give the sun's illuminance instead")
    cs = clear_sky(el, linke_turbidity=linke_turbidity, altitude_m=altitude_m)
    return float(cs.dni / cs.dhi)


def sun_color(elevation, *, altitude_m: float = 0.0) -> np.ndarray:
    """Illustrative linear RGB colour of the direct sun at an elevation (radians), float64 (3,).

    Extraterrestrial white light (equal RGB) attenuated along the air mass by Rayleigh
    scattering (optical depth of Bodhaine et al. 1999, eq. 30) and aerosols (Angstrom
    1929, ``beta lambda^-alpha`` with beta 0.1, alpha 1.3), evaluated at one wavelength
    per channel (0.61, 0.55, 0.465 um); the air mass already carries the pressure.  The
    result is the transmittance per channel (1 = unattenuated); scale it to unit luminance
    for a colour.  An approximation for pictures: a band is not one wavelength.
    """
    el = max(float(elevation), math.radians(0.5))  # the air-mass formula ends at the horizon
    am = float(absolute_airmass(relative_airmass(el), altitude_m))
    lam = np.asarray(_RGB_WAVELENGTHS_UM)
    lam2 = lam * lam
    # Bodhaine et al. (1999) eq. 30, lambda in micrometres, sea-level air (from memory):
    # about 0.097 at 0.55 um, close to the lambda^-4 law.
    rayleigh = 0.0021520 * (1.0455996 - 341.29061 / lam2 - 0.90230850 * lam2) / (
        1.0 + 0.0027059889 / lam2 - 85.968563 * lam2)
    aerosol = _ANGSTROM_BETA * lam ** -_ANGSTROM_ALPHA
    return np.exp(-am * (rayleigh + aerosol))
