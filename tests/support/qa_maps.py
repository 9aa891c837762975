"""Maps and helpers shared by the QA tests (each with a known defect, or none)."""

from __future__ import annotations

import math

import numpy as np

from envsample.core.sphere import pixel_center_directions, row_solid_angles
from envsample.synth import skies

W, H = 256, 128



SUN_EL, SUN_AZ = 35.0, 40.0



TEST_PROFILE = """\
[profile]
name = "tests"

[resolution]
# The maps here are 64..256 px wide; the default floors are for production maps.
fail_below_width = 16
warn_below_width = 64
"""



def sunny(width=W, height=None, **kw):
    """Overcast sky with a real-sized sun and a Lambertian ground of albedo 0.2 (envsample.skies)."""
    opts = dict(elevation_deg=SUN_EL, azimuth_deg=SUN_AZ, sky="overcast", ground_albedo=0.2)
    opts.update(kw)
    return skies.sun_sky(width, height, **opts)



def overcast_with_point_sun(width=W, height=H) -> np.ndarray:
    """Built here, independently of envsample.skies: the traditional overcast sky sampled at
    pixel centres, a uniform ground, and a sun smaller than a pixel added to the one pixel
    that holds its direction with the disk's power (E_sun = 3 on a surface facing it)."""
    d = pixel_center_directions(height, width)
    cos_t = d[..., 1]
    sky = np.where(cos_t > 0, (1.0 + 2.0 * cos_t) / 3.0, 0.15)
    img = np.repeat(sky[..., None], 3, axis=2)
    el, az = math.radians(50.0), math.radians(-120.0)
    theta = math.pi / 2 - el
    row = int(theta / math.pi * height)
    col = int((az / (2 * math.pi) + 0.5) * width)
    img[row, col] += 3.0 / row_solid_angles(height, width)[row]
    return img.astype(np.float32)



def non_pass(report):
    return {c.id: c.severity for c in report.checks if c.severity != "pass"}



def clipped_sun(width=W):
    """A sun with a wide glare halo whose top was clipped at 500: a plateau with a soft shoulder."""
    img = sunny(width).astype(np.float64)
    d = pixel_center_directions(width // 2, width)
    s = skies.sun_direction(azimuth_deg=SUN_AZ, elevation_deg=SUN_EL)
    angle = np.degrees(np.arccos(np.clip(d @ s, -1, 1)))
    img += (5e4 * np.exp(-(angle ** 2) / (2 * 4.0 ** 2)))[..., None]
    return np.minimum(img, 500.0).astype(np.float32)



def srgb_encode(x):
    """IEC 61966-2-1 encoding of linear values in [0, 1]."""
    return np.where(x <= 0.0031308, 12.92 * x, 1.055 * np.power(x, 1 / 2.4) - 0.055)


def debevec_malik_merge(radiance, *, exposures=(1 / 64, 1 / 8, 1.0, 8.0), noise=0.004, seed=7):
    """A captured HDR made here: 8-bit exposures of ``radiance`` with sensor noise, merged back.

    Camera: response Z = 255 (E t)^(1/2.2) clipped to [0, 255] (a known response), Gaussian read
    noise of ``noise`` x full scale before quantisation.  Merge: Debevec, P. E. and Malik, J. (1997).
    Recovering high dynamic range radiance maps from photographs. SIGGRAPH 97, eq. 6: ln E =
    sum w(Z) (g(Z) - ln t) / sum w(Z), with the hat weight w(z) = min(z, 255 - z) and the known
    g = ln f^-1.  The result is float32 scene-referred radiance whose values sit on no lattice.
    """
    rng = np.random.default_rng(seed)
    e = np.asarray(radiance, dtype=np.float64)
    num = np.zeros_like(e)
    den = np.zeros_like(e)
    for t in exposures:
        x = np.clip(e * t, 0.0, None) ** (1 / 2.2) + rng.normal(0.0, noise, e.shape)
        z = np.clip(np.round(255.0 * x), 0, 255)
        w = np.minimum(z, 255.0 - z)
        g = 2.2 * np.log(np.maximum(z, 0.5) / 255.0)  # ln of the linear exposure f^-1(Z)
        num += w * (g - math.log(t))
        den += w
    merged = np.exp(num / np.maximum(den, 1e-12))
    # Pixels no exposure measured (w = 0 everywhere) take the nearest exposure's estimate.
    merged = np.where(den > 0, merged, e)
    return merged.astype(np.float32)


def eight_bit(img, *, scale=1.0, srgb=False):
    """A display-referred copy: values / max to [0, 1], quantised to 8 bits (sRGB-encoded if asked), times ``scale``."""
    x = np.clip(np.asarray(img, dtype=np.float64) / np.percentile(img, 99.0), 0.0, 1.0)
    if srgb:
        k = np.round(255.0 * srgb_encode(x)) / 255.0
        v = np.where(k <= 0.04045, k / 12.92, ((k + 0.055) / 1.055) ** 2.4)
    else:
        v = np.round(255.0 * x) / 255.0
    return (v * scale).astype(np.float32)
