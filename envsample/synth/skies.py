"""Analytic equirectangular environment maps for tests and demos.

Every map is float32 ``(H, W, 3)`` linear RGB in the convention of
:mod:`envsample.sphere`: row 0 touches the zenith, pixel ``(i, j)`` covers
``theta`` in ``[pi*i/H, pi*(i+1)/H]`` (polar angle from the up axis, radians) and
azimuth ``phi`` in ``[2*pi*j/W - pi, 2*pi*(j+1)/W - pi]``.  The skies are defined
in ``(theta, phi)`` only, so they do not depend on the up axis; azimuths given in
degrees are the convention's ``phi`` (0 = image centre = forward, positive to the
right, +-180 at the left/right seam).  Elevations are ``90 deg - theta``.

Pixel values are **cell averages** of the analytic radiance over the pixel's solid
angle, so integrals of a map (``sum(L * pixel_solid_angles)``) match the closed
forms.  A pixel is a rectangle in ``(mu, phi)`` with ``mu = cos(theta)``, and the
solid-angle measure is ``d mu d phi``; hence

* functions of ``mu`` only are averaged per row, exactly (closed form) or by
  8-point Gauss-Legendre quadrature in ``mu`` on each side of the horizon
  (exact for polynomials of degree <= 15, Abramowitz & Stegun 25.4.29);
* separable terms ``B(mu) * C(phi)`` average to ``avg_row(B) * avg_col(C)``;
* lat-long rectangles (studio lights, buildings) cover a pixel by the exact
  fraction ``overlap_mu / dmu * overlap_phi / dphi``;
* the sun disk (a spherical cap) covers a pixel by a fraction estimated on a
  midpoint grid of sub-samples laid over the intersection of the pixel with the
  disk's ``(mu, phi)`` bounding box only, so the disk is resolved by tens of
  sub-samples across even when it is much smaller than a pixel.

The two demo scenes composite buildings over the pixel-average sky, which is an
approximation in the few pixels their edges cross; they are pictures, not references.

Radiance units are arbitrary but consistent (relative units; the overcast sky's
``zenith_luminance`` is the scale).  A grey colour ``(1, 1, 1)`` has unit luminance
in every supported RGB space, so grey maps have luminance equal to the radiance.
Values are estimates for asset preparation and tests, not certified lighting data.

Skies
-----
``uniform``         constant radiance: ``int L d omega = 4*pi*L``.
``overcast``        the traditional overcast sky ``L = Lz (1 + 2 cos theta) / 3``
                    (Moon & Spencer 1942), adopted by the CIE in 1955 as the *CIE
                    standard overcast sky* (CIE S 003/E:1996).  CIE S 011/E:2003
                    (ISO 15469:2004) replaced it by 15 general sky types; its
                    *type 1* (also called overcast) is a different formula,
                    ``(1 + 4 exp(-0.7 / cos theta)) / (1 + 4 exp(-0.7))`` (from
                    memory), with horizontal illuminance about 2.4495 Lz instead of
                    7*pi/9 Lz = 2.4435 Lz.  We implement the traditional one, not type 1.
``sun``             a smooth illustrative clear-sky gradient of our own (bluer
                    zenith, brighter horizon; not a published sky model) or the
                    overcast sky, plus a sun disk of the real angular size
                    (0.533 deg, :data:`envsample.constants.SUN_ANGULAR_DIAMETER_RAD`).
                    By default the sun's illuminance and the sky's brightness follow
                    the elevation through the Ineichen & Perez (2002) clear-sky model.
``studio``          lat-long rectangular area lights on a dim background.
``rooftop``         invented demo: a late-afternoon rooftop in a fictional city.
``product-studio``  invented demo: a small product studio with softboxes and a cyclorama.

References
----------
- Moon, P. and Spencer, D. E. (1942). Illumination from a non-uniform sky.
  Illuminating Engineering 37(10), 707-726 (from memory).
- CIE S 003/E:1996. Spatial distribution of daylight - CIE standard overcast sky
  and clear sky. Commission Internationale de l'Eclairage, Vienna (from memory).
- CIE S 011/E:2003 (ISO 15469:2004). Spatial distribution of daylight - CIE
  standard general sky. Commission Internationale de l'Eclairage, Vienna.
- Abramowitz, M. and Stegun, I. A. (1964). Handbook of Mathematical Functions,
  section 25.4.29 (Gauss-Legendre quadrature).
"""

from __future__ import annotations

import inspect
import math
import warnings
from collections.abc import Callable, Sequence

import numpy as np

from envsample.core.clearsky import DEFAULT_LINKE_TURBIDITY, clear_sky
from envsample.core.clearsky import sun_color as clear_sun_color
from envsample.core.constants import SUN_ANGULAR_DIAMETER_RAD, luminance_weights
from envsample.core.sphere import angles_to_uv, row_cos_edges, uv_to_direction

__all__ = [
    "OVERCAST_HORIZONTAL_FACTOR",
    "DEFAULT_STUDIO_LIGHTS",
    "ROOFTOP_SUN",
    "SKY_DESCRIPTIONS",
    "make_sky",
    "sky_kinds",
    "sun_position",
    "uniform_sky",
    "overcast_radiance",
    "cie_overcast_sky",
    "clear_sky_radiance",
    "sun_sky",
    "sun_direction",
    "sun_solid_angle",
    "sun_radiance",
    "studio_sky",
    "rooftop_scene",
    "studio_scene",
]

#: Horizontal irradiance of the traditional overcast sky per unit zenith radiance:
#: ``2*pi * int_0^1 (1 + 2 mu)/3 * mu d mu = 7*pi/9`` (closed form).
OVERCAST_HORIZONTAL_FACTOR = 7.0 * math.pi / 9.0

_SUN_DIAMETER_DEG = math.degrees(SUN_ANGULAR_DIAMETER_RAD)
_GL_X, _GL_W = np.polynomial.legendre.leggauss(8)
_BT709 = luminance_weights("bt709")
# Cap on sub-samples held in memory at once by the sun-disk coverage estimate.
_SUN_SUBSAMPLE_BUDGET = 4_000_000


# ---------------------------------------------------------------------------
# validation helpers
# ---------------------------------------------------------------------------

def _size(width, height) -> tuple[int, int]:
    if isinstance(width, bool) or not isinstance(width, (int, np.integer)) or width < 4:
        raise ValueError(f"width must be an integer >= 4, got {width!r}; pass e.g. width=256")
    width = int(width)
    if height is None:
        height = width // 2
    if isinstance(height, bool) or not isinstance(height, (int, np.integer)) or height < 2:
        raise ValueError(f"height must be an integer >= 2 (or None for width // 2), got {height!r}")
    return width, int(height)


def _rgb(value, name: str) -> np.ndarray:
    arr = np.asarray(value, dtype=np.float64)
    if arr.ndim == 0:
        arr = np.full(3, float(arr))
    if arr.shape != (3,):
        raise ValueError(f"{name} must be a number or 3 numbers (r, g, b), got shape {arr.shape}")
    if not np.all(np.isfinite(arr)) or np.any(arr < 0):
        raise ValueError(f"{name} must be finite and >= 0, got {arr.tolist()}")
    return arr


def _scalar(value, name: str) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(x) or x < 0:
        raise ValueError(f"{name} must be finite and >= 0, got {x!r}")
    return x


def _unit_luminance(color, name: str) -> np.ndarray:
    """Scale an RGB colour to unit BT.709 luminance (so a radiance scale is a luminance)."""
    c = _rgb(color, name)
    y = float(c @ _BT709)
    if y <= 0:
        raise ValueError(f"{name} must have positive luminance, got {c.tolist()}")
    return c / y


def _angle(value, name: str, lo: float, hi: float) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number of degrees, got {value!r}") from None
    if not (lo <= x <= hi):
        raise ValueError(f"{name} must lie in [{lo:g}, {hi:g}] degrees, got {x:g}")
    return x


# ---------------------------------------------------------------------------
# cell-average machinery
# ---------------------------------------------------------------------------

def _row_mu(height: int) -> tuple[np.ndarray, np.ndarray]:
    """cos(theta) at the top and bottom edge of every row (top > bottom), float64 (H,)."""
    mu = row_cos_edges(height)
    # cos(pi/2) evaluates to 6e-17: snap it so the horizon edge of an even height is exact.
    mu[np.abs(mu) < 1e-12] = 0.0
    return mu[:-1], mu[1:]


def _col_phi(width: int) -> tuple[np.ndarray, np.ndarray]:
    """Azimuth (radians) at the left and right edge of every column, float64 (W,)."""
    edges = 2.0 * math.pi * np.arange(width + 1) / width - math.pi
    return edges[:-1], edges[1:]


def _integrate(fn: Callable[[np.ndarray], np.ndarray], lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Gauss-Legendre integral of ``fn`` over each interval [lo, hi] (8 nodes); fn(x (R,8)) -> (R,8[,C])."""
    half = 0.5 * (hi - lo)
    x = (0.5 * (hi + lo))[:, None] + half[:, None] * _GL_X
    vals = np.asarray(fn(x), dtype=np.float64)
    w = _GL_W if vals.ndim == 2 else _GL_W[:, None]
    return np.sum(vals * w, axis=1) * (half if vals.ndim == 2 else half[:, None])


def _row_average(height: int, sky: Callable, ground: Callable | None = None) -> np.ndarray:
    """Solid-angle average per row of ``sky(mu)`` above the horizon and ``ground(mu)`` below.

    Each function maps an array of mu to ``mu.shape + (3,)``.  The horizon splits a
    row that straddles it, so the discontinuity never spoils the quadrature.
    Returns float64 (H, 3).
    """
    top, bot = _row_mu(height)
    total = _integrate(sky, np.maximum(bot, 0.0), np.maximum(top, 0.0))
    if ground is not None:
        total = total + _integrate(ground, np.minimum(bot, 0.0), np.minimum(top, 0.0))
    return total / (top - bot)[:, None]


def _col_average(width: int, fn: Callable[[np.ndarray], np.ndarray]) -> np.ndarray:
    """Average over each column's azimuth interval of a scalar ``fn(phi)``, float64 (W,)."""
    left, right = _col_phi(width)
    return _integrate(fn, left, right) / (right - left)


def _rows_to_image(rows: np.ndarray, width: int) -> np.ndarray:
    return np.repeat(rows[:, None, :], width, axis=1)


def _constant(rgb: np.ndarray) -> Callable:
    return lambda mu: np.broadcast_to(rgb, mu.shape + (3,))


def _rect_fractions(height: int, width: int, az_deg, el_deg) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Exact fraction of each pixel covered by a lat-long rectangle.

    ``az_deg = (a0, a1)`` runs rightwards from a0 to a1 (a1 < a0 wraps across the
    +-180 seam); ``el_deg = (e0, e1)`` with e0 < e1.  Returns ``(rows, row_frac,
    cols, col_frac)`` restricted to the rows/columns actually touched; the pixel
    fraction is the outer product.
    """
    a0, a1 = (math.radians(a) for a in az_deg)
    if a1 <= a0:
        a1 += 2.0 * math.pi
    s0, s1 = math.sin(math.radians(el_deg[0])), math.sin(math.radians(el_deg[1]))
    top, bot = _row_mu(height)
    row_frac = np.clip(np.minimum(top, s1) - np.maximum(bot, s0), 0.0, None) / (top - bot)
    left, right = _col_phi(width)
    col_frac = np.zeros(width)
    for shift in (-2.0 * math.pi, 0.0, 2.0 * math.pi):
        col_frac += np.clip(np.minimum(right, a1 + shift) - np.maximum(left, a0 + shift), 0.0, None)
    col_frac /= right - left
    rows = np.flatnonzero(row_frac > 0)
    cols = np.flatnonzero(col_frac > 0)
    return rows, row_frac[rows], cols, col_frac[cols]


def _rect_solid_angle(az_deg, el_deg) -> float:
    a0, a1 = az_deg
    span = (a1 - a0) if a1 > a0 else (a1 - a0 + 360.0)
    return math.radians(span) * (math.sin(math.radians(el_deg[1])) - math.sin(math.radians(el_deg[0])))


def _check_rect(az, el, name: str) -> tuple[tuple[float, float], tuple[float, float]]:
    try:
        a0, a1 = (float(x) for x in az)
        e0, e1 = (float(x) for x in el)
    except (TypeError, ValueError):
        raise ValueError(f"{name}: azimuth and elevation ranges must be pairs of degrees, got {az!r}, {el!r}") from None
    if not all(-360.0 <= a <= 360.0 for a in (a0, a1)) or a0 == a1:
        raise ValueError(f"{name}: azimuth range must be two different angles in [-360, 360] degrees, got ({a0:g}, {a1:g})")
    if not (-90.0 <= e0 < e1 <= 90.0):
        raise ValueError(f"{name}: elevation range must satisfy -90 <= e0 < e1 <= 90 degrees, got ({e0:g}, {e1:g})")
    return (a0, a1), (e0, e1)


def _paint_rect(img: np.ndarray, az, el, radiance, under) -> None:
    """Cover a lat-long rectangle with ``radiance`` over ``under``, by each pixel's exact coverage, in place.

    ``under`` is what the rectangle hides: an rgb (a uniform background) or an
    (H, W, 3) image; each touched pixel gains ``coverage * (radiance - under)``.
    """
    height, width = img.shape[:2]
    rows, rf, cols, cf = _rect_fractions(height, width, az, el)
    if rows.size and cols.size:
        block = np.ix_(rows, cols)
        hidden = under[block] if np.ndim(under) == 3 else under
        img[block] += (rf[:, None] * cf[None, :])[..., None] * (radiance - hidden)


# ---------------------------------------------------------------------------
# uniform and overcast skies
# ---------------------------------------------------------------------------

def uniform_sky(width: int, height: int | None = None, *, radiance: float = 1.0, color=(1.0, 1.0, 1.0)) -> np.ndarray:
    """Constant radiance ``radiance * color`` over the whole sphere, float32 (H, W, 3).

    ``int L d omega = 4*pi * radiance * color`` (units of the map times steradians).
    ``height`` defaults to ``width // 2``.
    """
    width, height = _size(width, height)
    value = _rgb(color, "color") * _scalar(radiance, "radiance")
    return np.broadcast_to(value.astype(np.float32), (height, width, 3)).copy()


def overcast_radiance(cos_theta, *, zenith_luminance: float = 1.0) -> np.ndarray:
    """Traditional overcast sky (Moon & Spencer 1942; CIE standard overcast sky, CIE S 003/E:1996).

    ``L(theta) = Lz * (1 + 2 cos theta) / 3`` for ``cos theta >= 0``; 0 below the
    horizon (the ground is added separately by :func:`cie_overcast_sky`).  Not the
    CIE S 011 general sky type 1.  Float64, shape of ``cos_theta``.
    """
    mu = np.asarray(cos_theta, dtype=np.float64)
    return np.where(mu >= 0.0, float(zenith_luminance) * (1.0 + 2.0 * mu) / 3.0, 0.0)


def _overcast_rows(height: int, zenith_luminance: float) -> np.ndarray:
    """Exact row average of the overcast sky (zero below the horizon), float64 (H,).

    The antiderivative of (1 + 2 mu)/3 is (mu + mu^2)/3.
    """
    top, bot = _row_mu(height)
    hi, lo = np.maximum(top, 0.0), np.maximum(bot, 0.0)
    return zenith_luminance * ((hi + hi * hi) - (lo + lo * lo)) / 3.0 / (top - bot)


def _ground_fraction(height: int) -> np.ndarray:
    """Fraction of each row's solid angle below the horizon, float64 (H,)."""
    top, bot = _row_mu(height)
    return (np.minimum(top, 0.0) - np.minimum(bot, 0.0)) / (top - bot)


def _ground_radiance(ground, ground_albedo, horizontal_irradiance: np.ndarray) -> np.ndarray:
    if ground_albedo is None:
        return _rgb(ground, "ground")
    if np.any(_rgb(ground, "ground") != 0):
        raise ValueError("give either ground (a radiance) or ground_albedo, not both")
    # A Lambertian ground lit by the sky alone (no interreflection): L = albedo * E / pi.
    return _rgb(ground_albedo, "ground_albedo") * horizontal_irradiance / math.pi


def cie_overcast_sky(width: int, height: int | None = None, *, zenith_luminance: float = 1.0,
                     color=(1.0, 1.0, 1.0), ground=0.0, ground_albedo=None) -> np.ndarray:
    """The traditional overcast sky (Moon & Spencer 1942; CIE S 003/E:1996), float32 (H, W, 3).

    Upper hemisphere: ``Lz (1 + 2 cos theta) / 3`` times ``color``, each row the exact
    solid-angle average of that law (closed form), so ``int L d omega`` over the sky
    is exactly ``4*pi/3 * Lz``.  The horizontal irradiance ``int L cos theta d omega``
    tends to ``7*pi/9 * Lz`` (:data:`OVERCAST_HORIZONTAL_FACTOR`); a row-constant map
    falls short of it by ``pi/9 * Lz * sum(dmu^3)`` over the sky rows, O(1/H^2).

    Lower hemisphere: a uniform ground of radiance ``ground`` (default 0, black), or,
    with ``ground_albedo``, a Lambertian ground lit by this sky,
    ``albedo * 7/9 * Lz`` (no interreflection).  This is *not* CIE general sky type 1.
    """
    width, height = _size(width, height)
    lz = _scalar(zenith_luminance, "zenith_luminance")
    color = _rgb(color, "color")
    g = _ground_radiance(ground, ground_albedo, OVERCAST_HORIZONTAL_FACTOR * lz * color)
    rows = _overcast_rows(height, lz)[:, None] * color + _ground_fraction(height)[:, None] * g
    return _rows_to_image(rows, width).astype(np.float32)


# ---------------------------------------------------------------------------
# sun and clear sky
# ---------------------------------------------------------------------------

def clear_sky_radiance(cos_theta, *, zenith_luminance: float = 1.0, horizon_ratio: float = 2.5) -> np.ndarray:
    """Illustrative clear-sky gradient of our own (not a published sky model), float64 ``shape + (3,)``.

    A blue zenith colour blending into a paler, ``horizon_ratio`` times brighter
    horizon with weight ``exp(-cos theta / 0.2)``: clear skies are bluer overhead
    and brighter near the horizon (common observation).  Colours are scaled to
    unit luminance, so the luminance is ``Lz`` at the zenith and about
    ``horizon_ratio * Lz`` at the horizon.  Zero below the horizon.
    """
    mu = np.asarray(cos_theta, dtype=np.float64)[..., None]
    zen = _unit_luminance((0.30, 0.48, 1.0), "zenith colour")
    hor = _unit_luminance((0.82, 0.90, 1.0), "horizon colour") * horizon_ratio
    w = np.exp(-np.maximum(mu, 0.0) / 0.2)
    return np.where(mu >= 0.0, float(zenith_luminance) * (zen * (1.0 - w) + hor * w), 0.0)


def sun_solid_angle(diameter_deg: float = _SUN_DIAMETER_DEG) -> float:
    """Solid angle of a disk of angular diameter ``diameter_deg``: ``2*pi*(1 - cos(d/2))`` steradians."""
    return 2.0 * math.pi * (1.0 - math.cos(math.radians(diameter_deg) / 2.0))


def sun_radiance(sun_illuminance: float, diameter_deg: float = _SUN_DIAMETER_DEG) -> float:
    """Uniform disk radiance giving ``sun_illuminance`` on a surface facing the sun.

    ``E_normal = L * int_cap cos(alpha) d omega = L * pi * sin^2(r)`` for a cap of
    angular radius r (closed form); about ``L * solid_angle`` for a disk this small.
    """
    r = math.radians(diameter_deg) / 2.0
    return float(sun_illuminance) / (math.pi * math.sin(r) ** 2)


def sun_direction(*args, azimuth_deg: float | None = None, elevation_deg: float | None = None,
                  up: str = "y") -> np.ndarray:
    """Unit direction (float64 (3,)) towards a point at the given azimuth and elevation, degrees.

    Azimuth is the convention's ``phi`` (0 = image centre, positive to the right);
    elevation is 90 deg minus the polar angle from ``up``.  Pass both by keyword.
    Two positional numbers are read in the former order ``(elevation, azimuth)``,
    with a DeprecationWarning (envsample writes angles as azimuth, elevation).
    """
    if args:
        if len(args) != 2 or azimuth_deg is not None or elevation_deg is not None:
            raise TypeError("sun_direction() takes azimuth_deg= and elevation_deg= by keyword")
        warnings.warn("sun_direction(elevation, azimuth) with positional angles is deprecated; "
                      "pass azimuth_deg= and elevation_deg=", DeprecationWarning, stacklevel=2)
        elevation_deg, azimuth_deg = args
    if azimuth_deg is None or elevation_deg is None:
        raise TypeError("sun_direction() needs azimuth_deg= and elevation_deg=")
    el = _angle(elevation_deg, "elevation_deg", -90.0, 90.0)
    az = _angle(azimuth_deg, "azimuth_deg", -360.0, 360.0)
    u, v = angles_to_uv(az, el)
    return uv_to_direction(u, v, up=up)


def _sun_coverage(height: int, width: int, theta_s: float, phi_s: float, radius: float,
                  n: int = 48) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Fraction of each pixel covered by the visible (above-horizon) part of a disk.

    Sub-samples form an n x n midpoint grid over the intersection of each pixel
    with the disk's (mu, phi) bounding box.  Returns ``(rows, cols, fraction)``.
    """
    cos_r = math.cos(radius)
    mu_s, sin_s = math.cos(theta_s), math.sin(theta_s)
    mu_lo = max(math.cos(min(theta_s + radius, math.pi)), 0.0)  # the ground hides what is below
    mu_hi = math.cos(max(theta_s - radius, 0.0))
    empty = (np.empty(0, np.int64), np.empty(0, np.int64), np.empty(0))
    if mu_hi <= mu_lo:
        return empty
    top, bot = _row_mu(height)
    rows = np.flatnonzero((bot < mu_hi) & (top > mu_lo))
    left, right = _col_phi(width)
    if theta_s - radius <= 0.0 or theta_s + radius >= math.pi:
        cols = np.arange(width)  # the disk contains a pole: every azimuth
        ph_lo, ph_hi = left, right
    else:
        half = math.asin(min(1.0, math.sin(radius) / sin_s)) * (1.0 + 1e-9)
        lo, hi = phi_s - half, phi_s + half
        # Shift the box into each column's frame so the seam at +-pi needs no special case.
        centre = 0.5 * (left + right)
        shift = 2.0 * math.pi * np.round((phi_s - centre) / (2.0 * math.pi))
        ph_lo = np.maximum(left + shift, lo)
        ph_hi = np.minimum(right + shift, hi)
        cols = np.flatnonzero(ph_hi > ph_lo)
    if rows.size == 0 or cols.size == 0:
        return empty
    rr, cc = np.meshgrid(rows, cols, indexing="ij")
    rr, cc = rr.ravel(), cc.ravel()
    m_lo = np.maximum(bot[rr], mu_lo)
    m_hi = np.minimum(top[rr], mu_hi)
    p_lo, p_hi = ph_lo[cc], ph_hi[cc]
    keep = (m_hi > m_lo) & (p_hi > p_lo)
    rr, cc, m_lo, m_hi, p_lo, p_hi = rr[keep], cc[keep], m_lo[keep], m_hi[keep], p_lo[keep], p_hi[keep]
    n = int(max(8, min(n, math.isqrt(max(1, _SUN_SUBSAMPLE_BUDGET // max(1, rr.size))))))
    t = (np.arange(n) + 0.5) / n
    frac = np.empty(rr.size)
    chunk = max(1, _SUN_SUBSAMPLE_BUDGET // (n * n))
    for s in range(0, rr.size, chunk):
        sl = slice(s, s + chunk)
        mu = m_lo[sl, None] + (m_hi - m_lo)[sl, None] * t  # (P, n)
        ph = p_lo[sl, None] + (p_hi - p_lo)[sl, None] * t
        sin_t = np.sqrt(np.clip(1.0 - mu * mu, 0.0, None))
        cosang = mu[:, :, None] * mu_s + (sin_t * sin_s)[:, :, None] * np.cos(ph - phi_s)[:, None, :]
        inside = np.count_nonzero(cosang >= cos_r, axis=(1, 2)) / (n * n)
        box = (m_hi[sl] - m_lo[sl]) * (p_hi[sl] - p_lo[sl])
        frac[sl] = inside * box
    pixel = (top[rr] - bot[rr]) * (2.0 * math.pi / width)
    frac /= pixel
    nz = frac > 0
    return rr[nz], cc[nz], frac[nz]


def _add_sun(img: np.ndarray, azimuth_deg: float, elevation_deg: float, illuminance: float,
             diameter_deg: float, color: np.ndarray) -> None:
    """Add a uniform sun disk of the given size and normal illuminance to ``img`` (float64), in place."""
    height, width = img.shape[:2]
    theta_s = math.radians(90.0 - elevation_deg)
    phi_s = math.radians(azimuth_deg)
    rows, cols, frac = _sun_coverage(height, width, theta_s, phi_s, math.radians(diameter_deg) / 2.0)
    lum = sun_radiance(illuminance, diameter_deg)
    np.add.at(img, (rows, cols), frac[:, None] * (lum * color))


def _sky_rows(sky: str, height: int, zenith_luminance: float) -> tuple[np.ndarray, np.ndarray]:
    """Row averages of the named background sky and its horizontal irradiance (rgb)."""
    if sky == "clear":
        fn = lambda mu: clear_sky_radiance(mu, zenith_luminance=zenith_luminance)  # noqa: E731
        rows = _row_average(height, fn)
        e_h = 2.0 * math.pi * _integrate(lambda mu: fn(mu) * mu[..., None], np.zeros(1), np.ones(1))[0]
    elif sky == "overcast":
        rows = _overcast_rows(height, zenith_luminance)[:, None] * np.ones(3)
        e_h = OVERCAST_HORIZONTAL_FACTOR * zenith_luminance * np.ones(3)
    elif sky == "none":
        rows, e_h = np.zeros((height, 3)), np.zeros(3)
    else:
        raise ValueError(f"unknown sky {sky!r} for the sun map; valid: clear, overcast, none")
    return rows, e_h


#: Map units per W/m2 of the clear-sky model in :func:`sun_sky`: the sun's disk stays below the
#: half-float maximum 65504 at any elevation (DNI at most about 1000 W/m2 gives L of about 5.9e4).
CLEAR_SKY_SCALE = 1.0 / 250.0

#: The sun colour of :func:`sun_sky` when a brightness is given by hand (a warm white).
_LEGACY_SUN_COLOR = (1.0, 0.96, 0.90)


def clear_sky_levels(elevation_deg: float, *, linke_turbidity: float = DEFAULT_LINKE_TURBIDITY,
                     altitude_m: float = 0.0, scale: float = CLEAR_SKY_SCALE) -> dict:
    """Sun and sky brightness of the clear-sky model at an elevation, in map units (``scale`` per W/m2).

    ``sun_illuminance`` is the Ineichen & Perez (2002) DNI and ``sky_horizontal`` the DHI, both
    times ``scale``; ``sun_color`` the illustrative extinction colour at unit luminance.
    """
    el = math.radians(float(elevation_deg))
    cs = clear_sky(el, linke_turbidity=linke_turbidity, altitude_m=altitude_m)
    return {"sun_illuminance": float(cs.dni) * scale, "sky_horizontal": float(cs.dhi) * scale,
            "sun_color": _unit_luminance(clear_sun_color(el, altitude_m=altitude_m), "sun colour")}


def _clear_sky_defaults(sky, el, sun_illuminance, zenith_luminance, sun_color_, linke_turbidity, altitude_m):
    """(sun_illuminance, zenith_luminance, colour) of :func:`sun_sky`: the model's when none is given."""
    if str(sky).lower() == "clear" and sun_illuminance is None and zenith_luminance is None:
        lv = clear_sky_levels(el, linke_turbidity=linke_turbidity, altitude_m=altitude_m)
        unit_e_h = _sky_rows("clear", 8, 1.0)[1] @ luminance_weights("bt709")
        color = lv["sun_color"] if sun_color_ is None else sun_color_
        return lv["sun_illuminance"], lv["sky_horizontal"] / unit_e_h, color
    return (4.0 if sun_illuminance is None else sun_illuminance,
            1.0 if zenith_luminance is None else zenith_luminance,
            _LEGACY_SUN_COLOR if sun_color_ is None else sun_color_)


def sun_sky(width: int, height: int | None = None, *, azimuth_deg: float = 0.0, elevation_deg: float = 30.0,
            sun_illuminance: float | None = None, sun_color=None, sky: str = "clear",
            zenith_luminance: float | None = None, sun_diameter_deg: float = _SUN_DIAMETER_DEG,
            ground=0.0, ground_albedo=None, linke_turbidity: float = DEFAULT_LINKE_TURBIDITY,
            altitude_m: float = 0.0) -> np.ndarray:
    """A sky with a sun disk of the real angular size, float32 (H, W, 3).

    With the clear sky and neither ``sun_illuminance`` nor ``zenith_luminance`` given, the sun
    and the sky follow the sun's elevation through the Ineichen & Perez (2002) clear-sky model
    (:func:`clear_sky_levels`, Kasten & Young 1989 air mass, ``linke_turbidity``,
    ``altitude_m``): the sun's normal illuminance is the model's DNI and the sky's horizontal
    irradiance its DHI, both times :data:`CLEAR_SKY_SCALE` map units per W/m2, and the sun's
    colour reddens towards the horizon (:func:`envsample.core.clearsky.sun_color`).  So the
    sun-to-sky ratio is realistic; the sky's angular distribution stays the illustrative
    gradient of :func:`clear_sky_radiance`.  Below the horizon the model has no light.
    Otherwise the former defaults hold: ``sun_illuminance`` 4.0, ``zenith_luminance`` 1.0 and a
    warm white sun.

    Parameters
    ----------
    azimuth_deg, elevation_deg : float
        Sun position, degrees (azimuth is the convention's phi, 0 = image centre,
        positive to the right; elevation in [-90, 90]).  The ground hides any part
        of the disk below the horizon.
    sun_illuminance : float, optional
        Illuminance on a surface facing the sun, map units times steradians; the
        disk radiance is ``sun_radiance(sun_illuminance, sun_diameter_deg)``
        (about ``E / 6.8e-5 sr``).  The default 4.0 gives about 5.9e4, below the
        half-float maximum 65504; brighter suns overflow half-float EXR files at
        resolutions where a pixel lies wholly inside the disk.
    sun_color : rgb
        Scaled to unit BT.709 luminance, so the disk's luminance is the radiance.
    sky : {"clear", "overcast", "none"}
        Background: :func:`clear_sky_radiance` (illustrative), the traditional
        overcast sky, or black.  ``zenith_luminance`` scales it.
    sun_diameter_deg : float
        Angular diameter of the disk, degrees (default 0.533, the mean solar
        diameter, from memory; :data:`envsample.constants.SUN_ANGULAR_DIAMETER_RAD`).
    ground, ground_albedo
        Uniform ground radiance, or the albedo of a Lambertian ground lit by sky and sun.

    Each pixel near the sun adds ``L_sun * color`` times the fraction of the pixel
    the disk covers (sub-sampled over the disk's bounding box), so
    ``sum(L * omega_pixel)`` over the disk is ``L_sun * sun_solid_angle()`` within
    a fraction of a percent at any resolution.  The disk adds to the sky behind it
    (that sky is about 6.8e-5 sr: negligible, common practice).
    """
    width, height = _size(width, height)
    el = _angle(elevation_deg, "elevation_deg", -90.0, 90.0)
    az = _angle(azimuth_deg, "azimuth_deg", -360.0, 360.0)
    diam = _angle(sun_diameter_deg, "sun_diameter_deg", 1e-4, 20.0)
    sun_illuminance, zenith_luminance, sun_color = _clear_sky_defaults(
        sky, el, sun_illuminance, zenith_luminance, sun_color, linke_turbidity, altitude_m)
    e_sun = _scalar(sun_illuminance, "sun_illuminance")
    lz = _scalar(zenith_luminance, "zenith_luminance")
    color = _unit_luminance(sun_color, "sun_color")
    rows, e_h = _sky_rows(str(sky).lower(), height, lz)
    e_h = e_h + e_sun * max(0.0, math.sin(math.radians(el))) * color
    g = _ground_radiance(ground, ground_albedo, e_h)
    rows = rows + _ground_fraction(height)[:, None] * g
    img = _rows_to_image(rows, width)
    _add_sun(img, az, el, e_sun, diam, color)
    return img.astype(np.float32)


# ---------------------------------------------------------------------------
# studio
# ---------------------------------------------------------------------------

#: Lights of :func:`studio_sky` when none are given: a key and a fill, (azimuth, elevation, radiance).
DEFAULT_STUDIO_LIGHTS = (
    ((-50.0, -20.0), (20.0, 50.0), 5.0),
    ((25.0, 55.0), (10.0, 35.0), 1.5),
)


def studio_sky(width: int, height: int | None = None, *, lights: Sequence | None = None,
               background=0.02) -> np.ndarray:
    """Lat-long rectangular area lights on a uniform dim background, float32 (H, W, 3).

    ``lights`` is a sequence of ``(azimuth_range_deg, elevation_range_deg, radiance)``:
    ``(a0, a1)`` runs rightwards from a0 to a1 (a1 < a0 wraps across the +-180 seam),
    ``(e0, e1)`` with -90 <= e0 < e1 <= 90, radiance a number or rgb.  A light
    replaces the background where it covers it, by the exact coverage fraction of
    each pixel, so ``int L d omega = 4*pi*bg + sum_k (L_k - bg) * Omega_k`` with
    ``Omega_k = (a1 - a0) * (sin e1 - sin e0)`` (radians).  Overlapping lights add
    their excess over the background.  ``lights=None`` uses
    :data:`DEFAULT_STUDIO_LIGHTS`; ``lights=()`` leaves the background alone.
    """
    width, height = _size(width, height)
    if lights is None:
        lights = DEFAULT_STUDIO_LIGHTS
    bg = _rgb(background, "background")
    img = np.broadcast_to(bg, (height, width, 3)).copy()
    for k, light in enumerate(lights):
        try:
            az, el, radiance = light
        except (TypeError, ValueError):
            raise ValueError(f"lights[{k}] must be (azimuth_range_deg, elevation_range_deg, radiance), got {light!r}") from None
        az, el = _check_rect(az, el, f"lights[{k}]")
        _paint_rect(img, az, el, _rgb(radiance, f"lights[{k}] radiance"), bg)
    return img.astype(np.float32)


# ---------------------------------------------------------------------------
# invented demo scenes
# ---------------------------------------------------------------------------

#: Sun of the rooftop demo: (azimuth_deg, elevation_deg).
ROOFTOP_SUN = (-65.0, 12.0)


def _rooftop_skyline(seed: int = 20240611):
    """Invented skyline, drawn from a fixed seed.

    Returns ``buildings`` as (azimuth range, elevation range, rgb) and ``windows``
    as (azimuth range, elevation range, rgb, rgb of the building that holds it).
    """
    rng = np.random.default_rng(seed)
    buildings, windows = [], []
    az = -180.0
    while az < 180.0:
        w = float(rng.uniform(3.0, 13.0))
        if 180.0 - az < w + 3.0:
            w = 180.0 - az  # the last building closes the circle
        top = float(rng.uniform(0.6, 6.5))
        rgb = np.array([0.85, 0.9, 1.1]) * rng.uniform(0.025, 0.07)
        buildings.append(((az, az + w), (-4.0, top), rgb))
        for _ in range(int(rng.integers(0, 4))):
            wa = float(rng.uniform(az + 0.3, az + w - 0.8))
            we = float(rng.uniform(-3.5, top - 0.6))
            if we + 0.35 < top:
                glow = np.array([1.7, 1.15, 0.55]) * rng.uniform(0.6, 1.4)
                windows.append(((wa, wa + 0.45), (we, we + 0.35), glow, rgb))
        az += w
    return buildings, windows


def rooftop_scene(width: int = 1024, height: int | None = None) -> np.ndarray:
    """Invented demo: a late-afternoon rooftop in a fictional city, float32 (H, W, 3).

    A warm sun 12 deg above the horizon at azimuth -65 deg (:data:`ROOFTOP_SUN`),
    a deep-blue zenith fading to an orange horizon with a glow towards the sun, a
    skyline of made-up buildings with a few lit windows, then a concrete parapet
    (-4 to -14 deg) and a gravel roof below.  Radiances are illustrative relative
    values, not measurements of any place.
    """
    width, height = _size(width, height)
    az_s, el_s = ROOFTOP_SUN
    phi_s = math.radians(az_s)
    zen = _unit_luminance((0.10, 0.22, 0.60), "zenith") * 0.45
    hor = _unit_luminance((1.0, 0.58, 0.30), "horizon") * 1.1
    glow = _unit_luminance((1.0, 0.50, 0.18), "glow") * 2.2

    def base(mu):
        w = np.exp(-mu / 0.25)[..., None]
        return zen * (1.0 - w) + hor * w

    def ground(mu):
        # Parapet face from -4 to -14 deg elevation, gravel roof below it.
        parapet = (mu > -math.sin(math.radians(14.0)))[..., None]
        return np.where(parapet, np.array([0.075, 0.062, 0.050]), np.array([0.040, 0.036, 0.032]))

    img = _rows_to_image(_row_average(height, base, ground), width)
    # Separable warm glow: a horizon-hugging profile in mu times a bump in azimuth.
    g_rows = _row_average(height, lambda mu: np.exp(-mu / 0.08)[..., None] * glow)
    g_cols = _col_average(width, lambda ph: np.exp(2.5 * (np.cos(ph - phi_s) - 1.0)))
    img += g_rows[:, None, :] * g_cols[None, :, None]
    sky_only = img.copy()
    buildings, windows = _rooftop_skyline()
    for az, el, radiance in buildings:
        # Buildings replace the sky (and the top of the parapet) by their coverage.
        _paint_rect(img, az, el, radiance, sky_only)
    for az, el, radiance, host in windows:
        # A window lies inside its building's box, so replacing the building is exact.
        _paint_rect(img, az, el, radiance, host)
    _add_sun(img, az_s, el_s, 2.5, _SUN_DIAMETER_DEG, _unit_luminance((1.0, 0.72, 0.45), "sun"))
    return img.astype(np.float32)


def studio_scene(width: int = 1024, height: int | None = None) -> np.ndarray:
    """Invented demo: a small product studio, float32 (H, W, 3).

    A dim grey cyclorama (a floor that curves up into the wall: brighter below
    and just above the horizon, fading to a dark ceiling) lit by a large warm key
    softbox front-left, a cooler fill front-right and a strip light behind the
    set across the +-180 deg seam.  Illustrative relative radiances.
    """
    width, height = _size(width, height)
    wall, floor = np.array([0.012, 0.012, 0.013]), np.array([0.060, 0.058, 0.056])

    def cyc(mu):
        w = np.exp(-mu / 0.30)[..., None]
        return wall * (1.0 - w) + floor * w

    bg_rows = _row_average(height, cyc, _constant(floor))
    img = _rows_to_image(bg_rows, width)
    lights = [
        ((-62.0, -24.0), (12.0, 48.0), np.array([6.0, 5.7, 5.2])),
        ((28.0, 66.0), (4.0, 30.0), np.array([1.4, 1.55, 1.8])),
        ((172.0, -172.0), (15.0, 70.0), np.array([3.5, 3.5, 3.5])),
    ]
    background = img.copy()
    for az, el, radiance in lights:
        _paint_rect(img, az, el, radiance, background)
    return img.astype(np.float32)


# ---------------------------------------------------------------------------
# dispatcher
# ---------------------------------------------------------------------------

_SKIES: dict[str, Callable[..., np.ndarray]] = {
    "uniform": uniform_sky,
    "overcast": cie_overcast_sky,
    "sun": sun_sky,
    "studio": studio_sky,
    "rooftop": rooftop_scene,
    "product-studio": studio_scene,
}

#: One-line description of every sky kind (for help texts).
SKY_DESCRIPTIONS = {
    "uniform": "constant radiance over the sphere",
    "overcast": "traditional CIE standard overcast sky (1 + 2 cos theta)/3, black ground",
    "sun": "0.533 deg sun over a clear sky, both as bright as the Ineichen & Perez model says at that elevation "
           "(the sky's angular distribution is illustrative)",
    "studio": "rectangular area lights on a dim background",
    "rooftop": "invented demo: late-afternoon rooftop, low warm sun",
    "product-studio": "invented demo: product studio with softboxes and a grey cyclorama",
}


def sky_kinds() -> tuple[str, ...]:
    """Names accepted by :func:`make_sky`."""
    return tuple(_SKIES)


def make_sky(kind: str, *, width: int = 256, height: int | None = None, **options) -> np.ndarray:
    """Build an analytic map by name, float32 (H, W, 3); ``height`` defaults to ``width // 2``.

    ``options`` are passed to the named function (see :func:`sky_kinds` and each
    function's docstring).  Unknown kinds or options raise ValueError listing the
    valid ones.
    """
    fn = _SKIES.get(str(kind).lower())
    if fn is None:
        raise ValueError(f"unknown sky kind {kind!r}; valid kinds: {', '.join(_SKIES)}")
    params = [p for p in inspect.signature(fn).parameters if p not in ("width", "height")]
    unknown = sorted(set(options) - set(params))
    if unknown:
        valid = ", ".join(params) or "none"
        raise ValueError(f"unknown option(s) {', '.join(unknown)} for sky {kind!r}; valid options: {valid}")
    return fn(width, height, **options)


def sun_position(kind: str, **options) -> tuple[float, float] | None:
    """(azimuth_deg, elevation_deg) of the sun in a sky built by ``make_sky(kind, **options)``, or None."""
    key = str(kind).lower()
    if key not in _SKIES:
        raise ValueError(f"unknown sky kind {kind!r}; valid kinds: {', '.join(_SKIES)}")
    if key == "rooftop":
        return ROOFTOP_SUN
    if key == "sun":
        defaults = inspect.signature(sun_sky).parameters
        return (float(options.get("azimuth_deg", defaults["azimuth_deg"].default)),
                float(options.get("elevation_deg", defaults["elevation_deg"].default)))
    return None
