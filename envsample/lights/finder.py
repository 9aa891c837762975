"""The sun finder: where a map's sun is, how big and bright, whether its core is clipped.

Public objects
--------------
:class:`SunEstimate`  what the finder measured (direction, size, radiance, share, clipping,
                      confidence) and the hole it cut with the sky filled in.
:func:`find_sun`      find the dominant sun-like emitter of a map and measure it.

One finder for the whole package: QA's ``sun`` check reports its result and
``envsample split`` takes the sun it finds out of the map.

Steps (directions in the map's frame: polar angle theta from the up axis, row 0 at the
zenith; azimuth phi of :mod:`envsample.core.sphere`):

1. **Emitters** (:mod:`envsample.lights.emitters`): pixels brighter than both
   ``median_multiple`` x the solid-angle-weighted median luminance and ``max_fraction`` x
   the peak, connected across the seam and the poles.  The sun is the most powerful one
   that holds at least ``min_share`` of the light and whose equivalent diameter is at most
   ``compact_max_deg`` (QA's ``[sun]`` thresholds).
2. **Glare radius**: the median luminance of rings one pixel wide around the emitter
   falls with the distance; the glare ends at the first ring whose median is within
   ``glare_tolerance`` of the ring ``max(3 px, 0.5 deg)`` further out (the sky's own
   gradient is flat at that scale), at most ``max_glare_deg``.  The hole is the disk out to
   that radius plus ``margin_px`` pixels, and the emitter itself.
3. **Sky behind the sun**: the hole is filled harmonically from the pixels around it
   (:func:`envsample.lights.fill.harmonic_fill`).
4. **Measures** of the excess ``map - fill`` over the hole: its integral per channel is the
   sun's power (map units x sr; the energy moved out of the map); its power-weighted mean
   unit vector is the direction; the solid angle comes from the second moment about that
   direction over the emitter and a one-pixel ring around it: over a uniform cap of
   radius r, ``cos rho`` is uniform on ``[cos r, 1]`` (Archimedes), so
   ``Omega = 2 pi (1 - cos r) = 4 pi <1 - cos rho>``, with rho measured from each cell's
   mean direction less the cell's own spread about it (``1 - |m|`` for the cell's mean unit
   vector m): Sheppard's correction for grouping (Sheppard 1898) in its exact spherical
   form, so a disk of one or two pixels is sized to a fraction of a pixel.  A disk within
   two rows of a pole covers whole wedge-shaped cells, which show its radiance itself:
   there ``Omega = power / peak excess``.  Mean radiance = power / solid angle.
5. **Clipping**: pixels at the half-float maximum, or a plateau at the top of the emitter
   that is large and soft-shouldered (:mod:`envsample.lights.plateau`, QA's ``clipping``
   logic).  A clipped sun's power is a lower bound: restore it (:mod:`envsample.lights.restore`).
6. **Confidence** in [0, 1], with the reasons it is below 1 (clipped core, glare that does
   not end within ``max_glare_deg``, a sun smaller than a pixel, a minor share).

References
----------
- Sheppard, W. F. (1898). On the calculation of the most probable values of
  frequency-constants, for data arranged according to equidistant divisions of a scale.
  Proceedings of the London Mathematical Society 29, 353-380.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from envsample.core.color import luminance as _luminance
from envsample.core.constants import HALF_FLOAT_MAX, SUN_ANGULAR_DIAMETER_DEG
from envsample.core.latlong import RowWeightedSample
from envsample.core.sphere import row_solid_angles, uv_to_angles, uv_to_direction
from envsample.lights.emitters import Emitter, emitter_level, find_emitters
from envsample.lights.fill import harmonic_fill
from envsample.lights.plateau import find_plateau, plateau_is_clipped
from envsample.lights.regions import label_wrapped, ring

__all__ = ["SunEstimate", "find_sun", "FINDER_DEFAULTS"]

#: The finder's parameters and their defaults (our choice, set on synthetic maps; the
#: emitter thresholds are QA's ``[sun]`` defaults, the clipping ones QA's ``[clipping]``).
FINDER_DEFAULTS = {
    "median_multiple": 20.0,
    "max_fraction": 0.05,
    "min_share": 0.01,
    "compact_max_deg": 10.0,
    "glare_tolerance": 0.05,
    "max_glare_deg": 10.0,
    "margin_px": 2,
}


@dataclass
class SunEstimate:
    """The sun a map holds, as measured by :func:`find_sun`.

    ``direction`` float64 (3,) unit vector in the table's convention (``up``,
    ``rotation_deg``); ``azimuth_deg``/``elevation_deg``; ``diameter_deg`` and
    ``solid_angle_sr`` of the disk; ``power_rgb`` the integral of ``map - sky`` over the
    hole (map units x sr), ``radiance_rgb = power_rgb / solid_angle_sr``; ``share`` of the
    map's luminance integral; ``clipped`` and ``clipping`` (why); ``confidence`` in [0, 1]
    and ``notes`` (the reasons); ``resolved`` (wider than two pixels).  ``rows`` is the
    band ``(first, stop)`` holding the hole, ``hole`` its (stop - first, W) mask, ``core``
    the emitter's pixels in that band and ``sky_band`` the band with the hole filled
    (float32), for the split.
    """

    direction: np.ndarray
    azimuth_deg: float
    elevation_deg: float
    diameter_deg: float
    solid_angle_sr: float
    power_rgb: np.ndarray
    radiance_rgb: np.ndarray
    share: float
    clipped: bool
    confidence: float
    resolved: bool
    pixel_diameter_deg: float
    glare_radius_deg: float
    emitter: Emitter
    rows: tuple[int, int]
    hole: np.ndarray
    core: np.ndarray
    sky_band: np.ndarray
    clipping: dict | None = None
    notes: list[str] = field(default_factory=list)
    parameters: dict = field(default_factory=dict)
    up: str = "y"
    rotation_deg: float = 0.0

    @property
    def power(self) -> float:
        """Luminance integral of the sun (map units x sr), with the map's primaries."""
        return float(self.parameters.get("power_luminance", 0.0))

    def to_dict(self) -> dict:
        """JSON-ready measures (no arrays but the direction and the RGB triples)."""
        return {
            "direction": [float(x) for x in self.direction],
            "azimuth_deg": self.azimuth_deg,
            "elevation_deg": self.elevation_deg,
            "angular_diameter_deg": self.diameter_deg,
            "solid_angle_sr": self.solid_angle_sr,
            "radiance_rgb": [float(x) for x in self.radiance_rgb],
            "power_rgb": [float(x) for x in self.power_rgb],
            "share": self.share,
            "clipped": self.clipped,
            "clipping": self.clipping,
            "confidence": self.confidence,
            "notes": list(self.notes),
            "resolved": self.resolved,
            "pixel_diameter_deg": self.pixel_diameter_deg,
            "glare_radius_deg": self.glare_radius_deg,
            "hole_pixels": int(self.hole.sum()),
            "sun_diameter_ratio": self.diameter_deg / SUN_ANGULAR_DIAMETER_DEG,
        }


def _options(options: dict) -> dict:
    unknown = sorted(set(options) - set(FINDER_DEFAULTS))
    if unknown:
        raise ValueError(f"unknown sun finder option(s) {', '.join(unknown)}; valid: {', '.join(FINDER_DEFAULTS)}")
    out = dict(FINDER_DEFAULTS)
    out.update({k: v for k, v in options.items() if v is not None})
    for k, v in out.items():
        if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
            raise ValueError(f"sun finder option {k} must be a non-negative number, got {v!r}")
    return out


def _clean(rgb) -> np.ndarray:
    a = np.asarray(rgb)
    if a.ndim != 3 or a.shape[2] != 3 or min(a.shape[:2]) < 2:
        raise ValueError(f"rgb must be a lat-long (H, W, 3) image (2:1 for an equirectangular map), got shape {a.shape}")
    a = a.astype(np.float32, copy=False)
    if not np.all(np.isfinite(a)) or float(a.min()) < 0.0:
        a = np.where(np.isfinite(a) & (a > 0), a, np.float32(0.0)).astype(np.float32)
    return a


def _sun_like(emitters: list[Emitter], opt: dict) -> Emitter | None:
    for e in emitters:
        if e.share >= opt["min_share"] and e.diameter_deg <= opt["compact_max_deg"]:
            return e
    return None


def _distance(theta: np.ndarray, phi: np.ndarray, theta0: float, phi0: float) -> np.ndarray:
    """Angular distance (radians) between pixel centres (theta (h, 1), phi (1, W)) and a point (haversine)."""
    hav = np.sin(0.5 * (theta - theta0)) ** 2 + np.sin(theta) * math.sin(theta0) * np.sin(0.5 * (phi - phi0)) ** 2
    return 2.0 * np.arcsin(np.sqrt(np.clip(hav, 0.0, 1.0)))


def _band(core: np.ndarray, height: int, reach_rows: int) -> tuple[int, int]:
    hit = np.flatnonzero(core.any(axis=1))
    return max(0, int(hit[0]) - reach_rows), min(height, int(hit[-1]) + reach_rows + 1)


def _glare_radius(lum: np.ndarray, rho: np.ndarray, core: np.ndarray, step: float, opt: dict):
    """(radius, ended): where the rings' median luminance stops falling (see the module docstring)."""
    r0 = float(rho[core].max())
    gap = max(3, int(math.ceil(math.radians(0.5) / step)))
    limit = max(r0, math.radians(opt["max_glare_deg"]))
    k_max = int(math.ceil((limit - r0) / step)) + gap + 1
    k = np.floor((rho - r0) / step).astype(np.int64)
    sel = (k >= 0) & (k < k_max) & ~core
    ring_k, ring_lum = k[sel], lum[sel]
    order = np.argsort(ring_k, kind="stable")
    ring_k, ring_lum = ring_k[order], ring_lum[order]
    bounds = np.searchsorted(ring_k, np.arange(k_max + 1))
    med = np.array([np.median(ring_lum[bounds[i]:bounds[i + 1]]) if bounds[i + 1] > bounds[i] else np.nan
                    for i in range(k_max)])
    for i in range(k_max - gap):
        a, b = med[i], med[i + gap]
        if np.isfinite(a) and np.isfinite(b) and a <= (1.0 + opt["glare_tolerance"]) * b:
            return r0 + i * step, True
    return limit, False


def _cell_means(lo: int, hi: int, height: int, width: int) -> tuple[np.ndarray, ...]:
    """Mean unit vector (map frame) over each pixel of rows lo..hi: x (h, W), y (h, W), z (h, 1).

    Over a cell theta in [t0, t1], phi in [p0, p1] of solid angle (cos t0 - cos t1)(p1 - p0):
    x = S (sin p1 - sin p0) / omega, y = S (cos p0 - cos p1) / omega, z = Q (p1 - p0) / omega with
    S = integral of sin^2 = ((t1 - t0) - (sin t1 cos t1 - sin t0 cos t0)) / 2 and
    Q = integral of sin cos = (sin^2 t1 - sin^2 t0) / 2 (textbook calculus).
    """
    t = np.arange(lo, hi + 1) * (math.pi / height)
    t0, t1 = t[:-1, None], t[1:, None]
    S = 0.5 * ((t1 - t0) - (np.sin(t1) * np.cos(t1) - np.sin(t0) * np.cos(t0)))
    Q = 0.5 * (np.sin(t1) ** 2 - np.sin(t0) ** 2)
    p = np.arange(width + 1) * (2.0 * math.pi / width) - math.pi
    p0, p1 = p[None, :-1], p[None, 1:]
    dp = 2.0 * math.pi / width
    om = (np.cos(t0) - np.cos(t1)) * dp
    return S * (np.sin(p1) - np.sin(p0)) / om, S * (np.cos(p0) - np.cos(p1)) / om, Q * dp / om


def _clipping(rgb_band, lum_band, core, omega_rows, median, clip: dict) -> dict | None:
    at_half = int((rgb_band[core] >= np.float32(HALF_FLOAT_MAX)).any(axis=1).sum())
    if at_half:
        return {"reason": f"{at_half} pixels hold the largest half float {HALF_FLOAT_MAX:g}", "half_max_pixels": at_half}
    m = rgb_band.max(axis=2)
    p = find_plateau(m, lum_band, omega_rows, median_luminance=median, region=core,
                     tolerance=clip.get("plateau_relative_tolerance", 1e-6))
    if p is None:
        return None
    limits = {k: clip[k] for k in ("min_pixels", "min_sun_multiple", "min_contrast", "min_shoulder") if k in clip}
    if plateau_is_clipped(p, **limits):
        return {"reason": f"a flat top of {p['pixels']} pixels at {p['level']:.6g} with a soft shoulder", "plateau": p}
    return None


def _confidence(clipping, ended: bool, r_px: float, share: float, notes: list[str]) -> float:
    c = 1.0
    if clipping is not None:
        c *= 0.5
        notes.append("the core is clipped: the measured power is a lower bound (restore the sun)")
    if not ended:
        c *= 0.6
        notes.append("the glare does not end within the search radius: part of it stays in the sky")
    if r_px < 0.5:
        c *= 0.8
        notes.append("the disk is smaller than a pixel: its size comes from a sub-pixel moment")
    if share < 0.1:
        c *= 0.8
        notes.append("the sun holds under 10 % of the light")
    return c


def find_sun(rgb, *, primaries: str = "bt709", up: str = "y", rotation_deg: float = 0.0, emitters=None,
             labels=None, luminance=None, median_luminance: float | None = None, clipping: dict | None = None,
             **options) -> SunEstimate | None:
    """Find and measure the dominant sun-like emitter of an equirectangular map, or None if it has none.

    Parameters
    ----------
    rgb : (H, 2H, 3) array
        Linear radiance (NaN, Inf and negatives are read as 0).
    primaries : str
        RGB primaries for luminance (:func:`envsample.core.color.luminance`).
    up, rotation_deg
        The direction convention of the returned unit vector (:mod:`envsample.core.sphere`).
    emitters, labels, luminance, median_luminance
        Already computed by a caller (QA's context): the emitter list, ``(labels, count)``
        of :func:`label_wrapped`, the luminance image and its weighted median.
    clipping : dict, optional
        Plateau thresholds (``plateau_relative_tolerance``, ``min_pixels``, ``min_sun_multiple``,
        ``min_contrast``, ``min_shoulder``; default QA's ``[clipping]`` defaults).
    **options
        :data:`FINDER_DEFAULTS`: ``median_multiple``, ``max_fraction``, ``min_share``,
        ``compact_max_deg``, ``glare_tolerance``, ``max_glare_deg``, ``margin_px``.

    Returns :class:`SunEstimate` (degrees in ``*_deg``, steradians, map units x sr) or None.
    """
    opt = _options(options)
    img = _clean(rgb)
    height, width = img.shape[:2]
    lum = _luminance(img, primaries) if luminance is None else luminance
    omega = row_solid_angles(height, width)
    total = float(lum.sum(axis=1, dtype=np.float64) @ omega)
    if not total > 0.0:
        return None
    if emitters is None:
        if labels is None:
            med = RowWeightedSample(lum, omega).quantile(0.5) if median_luminance is None else median_luminance
            level = emitter_level(lum, med, median_multiple=opt["median_multiple"], max_fraction=opt["max_fraction"])
            labels = label_wrapped(lum > level)
        emitters = find_emitters(lum, labels[0], labels[1], omega, total_power=total)
    sun = _sun_like(emitters, opt)
    if sun is None:
        return None
    if median_luminance is None:
        median_luminance = RowWeightedSample(lum, omega).quantile(0.5)
    if labels is None:
        raise ValueError("find_sun(emitters=...) needs labels= too (the emitters' label image and count)")
    return _measure(img, lum, omega, labels[0], sun, total, float(median_luminance), opt, clipping or {},
                    up, float(rotation_deg), primaries)


def _measure(img, lum, omega, label_img, sun: Emitter, total, median, opt, clip, up, rotation_deg,
             primaries) -> SunEstimate:
    height, width = lum.shape
    dth, dph = math.pi / height, 2.0 * math.pi / width
    theta0 = math.radians(90.0 - sun.elevation_deg)
    phi0 = math.radians(sun.azimuth_deg)  # the emitters' azimuths are in the map's own frame
    reach = int(math.ceil(math.radians(opt["max_glare_deg"] + 1.0) / dth)) + int(opt["margin_px"]) + 8
    core_full = label_img == sun.label
    lo, hi = _band(core_full, height, reach)
    core = core_full[lo:hi]
    theta = ((np.arange(lo, hi) + 0.5) * dth)[:, None]
    phi = ((np.arange(width) + 0.5) * dph - math.pi)[None, :]
    rho = _distance(theta, phi, theta0, phi0)
    lum_b = lum[lo:hi].astype(np.float64)
    radius, ended = _glare_radius(lum_b, rho, core, dth, opt)
    margin = int(opt["margin_px"])
    hole = (rho <= radius + margin * dth) | core
    for _ in range(margin):
        hole |= ring(hole)
    # One known row above and below the hole (unless it touches the top or bottom of the map).
    rows_hit = np.flatnonzero(hole.any(axis=1))
    a = max(0, int(rows_hit[0]) - 1)
    b = min(hi - lo, int(rows_hit[-1]) + 2)
    lo2, hi2 = lo + a, lo + b
    hole, core, rho, theta, lum_b = hole[a:b], core[a:b], rho[a:b], theta[a:b], lum_b[a:b]
    band = img[lo2:hi2]
    sky_band = harmonic_fill(band, hole, first_row=lo2, height=height)
    excess = np.where(hole[..., None], band.astype(np.float64) - sky_band, 0.0)
    w_rows = omega[lo2:hi2][:, None]
    power_rgb = (excess * w_rows[..., None]).sum(axis=(0, 1))
    e_lum = np.where(hole, _luminance(band, primaries, dtype=np.float64)
                     - _luminance(sky_band, primaries, dtype=np.float64), 0.0)
    wpos = np.maximum(e_lum, 0.0) * w_rows
    mx, my, mz = _cell_means(lo2, hi2, height, width)
    # Power-weighted mean of the cells' mean unit vectors: the direction.
    c = np.array([(wpos * mx).sum(), (wpos * my).sum(), (wpos * mz).sum()])
    norm = float(np.linalg.norm(c))
    if not norm > 0:
        c = np.array([math.sin(theta0) * math.cos(phi0), math.sin(theta0) * math.sin(phi0), math.cos(theta0)])
        norm = 1.0
    c = c / norm
    theta_c, phi_c = math.acos(max(-1.0, min(1.0, float(c[2])))), math.atan2(float(c[1]), float(c[0]))
    # Over a uniform cap of radius r, cos(rho) is uniform on [cos r, 1], so <1 - cos rho> = (1 - cos r) / 2
    # and Omega = 4 pi <1 - cos rho>, measured from each cell's mean direction.
    wn = np.where((core | ring(core)) & hole, wpos, 0.0)
    total_near = float(wn.sum())
    m = np.sqrt(mx * mx + my * my + mz * mz)  # 1 - |m| is half the cell's own spread about its mean
    # Sheppard: the centres' moment overstates the source's by the cells' own spread; subtract it.
    g = (1.0 - (mx * c[0] + my * c[1] + mz * c[2]) / m) - (1.0 - m)
    gap = float((wn * g).sum()) / total_near if total_near > 0 else 0.0
    solid = max(4.0 * math.pi * gap, 1e-12)
    r = math.acos(max(-1.0, 1.0 - solid / (2.0 * math.pi)))
    if theta_c - r < 2.0 * dth or theta_c + r > math.pi - 2.0 * dth:
        # Around a pole the cells are thin wedges wholly inside the disk, where grouping
        # corrections fail; those cells show the disk's radiance itself: Omega = power / peak.
        peak = float(e_lum.max())
        if peak > 0.0:
            solid = float((e_lum * w_rows).sum()) / peak
            r = math.acos(max(-1.0, 1.0 - solid / (2.0 * math.pi)))
    r_px = r / dth
    u, v = phi_c / (2.0 * math.pi) + 0.5, theta_c / math.pi
    direction = uv_to_direction(u, v, up=up, rotation_deg=rotation_deg)
    clipping = _clipping(band, lum_b.astype(np.float32), core, omega[lo2:hi2], median, clip)
    share = float((e_lum * w_rows).sum()) / total
    notes: list[str] = []
    conf = _confidence(clipping, ended, r_px, share, notes)
    row_c = min(height - 1, int(theta_c / dth))
    px = math.degrees(2.0 * math.acos(1.0 - omega[row_c] / (2.0 * math.pi)))
    az, el = uv_to_angles(u, v, rotation_deg=rotation_deg)
    return SunEstimate(
        direction=direction, azimuth_deg=az, elevation_deg=el,
        diameter_deg=math.degrees(2.0 * r), solid_angle_sr=solid, power_rgb=power_rgb,
        radiance_rgb=power_rgb / solid, share=share, clipped=clipping is not None, confidence=conf,
        resolved=2.0 * r > 2.0 * math.radians(px), pixel_diameter_deg=px, glare_radius_deg=math.degrees(radius),
        emitter=sun, rows=(lo2, hi2), hole=hole, core=core, sky_band=sky_band, clipping=clipping, notes=notes,
        parameters=dict(opt) | {"power_luminance": float((e_lum * w_rows).sum())}, up=up, rotation_deg=rotation_deg,
    )
