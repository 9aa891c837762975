"""Maps and first-principles references shared by the tests of building (sampling/test_table.py) and
sampling (sampling/test_envtable.py) environment-map tables.

- The exact solid angle of a lat-long cell, (cos theta_i - cos theta_{i+1}) * 2*pi / W (textbook),
  written out here rather than taken from envsample.
- colour-science's BT.709 luminance row (``RGB_COLOURSPACES['ITU-R BT.709'].matrix_RGB_to_XYZ[1]``).
- Uniform directions as normalised standard normal vectors (Muller 1959; common practice).
"""

from __future__ import annotations

import colour
import numpy as np

from envsample.sampling.kernels import backend_name

#: Chi-square and KS tests reject at p < P_REJECT (fixed seeds; each paired with a test of its power).
P_REJECT = 1e-4
#: Means are compared within N_SIGMA standard errors.
N_SIGMA = 4.0
#: colour-science's BT.709 luminance row, the reference luminance.
BT709_Y = colour.RGB_COLOURSPACES["ITU-R BT.709"].matrix_RGB_to_XYZ[1]

#: The compiled sampler is optional; when it is built, both code paths are tested.
BACKENDS = ["numpy"] + (["compiled"] if backend_name() == "compiled" else [])


def draw(table, u, method="inverse", backend="auto"):
    """``table.sample(u, ...)`` with the method and the code path named."""
    return table.sample(u, method=method, backend=backend)


def random_sky(rng, h=16, w=32) -> np.ndarray:
    """Log-normal coloured radiance: a dynamic range of a few hundred, like a cloudy sky."""
    return np.exp(rng.normal(0.0, 1.0, (h, w, 3))).astype(np.float32)


def one_pixel_sun_map(rng, h=32, w=64, sun=(9, 41), ratio=1e6) -> np.ndarray:
    """A random sky of radiance 0.5..1.5 with a one-pixel 'sun' ratio times brighter."""
    sky = rng.uniform(0.5, 1.5, (h, w, 1)) * np.array([0.9, 1.0, 1.1])
    sky = sky.astype(np.float32)
    sky[sun] = ratio
    return sky


def exact_row_solid_angles(h, w) -> np.ndarray:
    """(cos theta_i - cos theta_{i+1}) * 2*pi / w, written out here rather than taken from envsample."""
    edges = np.cos(np.pi * np.arange(h + 1) / h)
    return (edges[:-1] - edges[1:]) * 2.0 * np.pi / w


def reference_probabilities(rgb) -> np.ndarray:
    """Cell probabilities from first principles: BT.709 luminance (colour-science) x exact solid angle."""
    y = np.maximum(rgb.astype(np.float64) @ BT709_Y, 0.0)
    wgt = y * exact_row_solid_angles(*rgb.shape[:2])[:, None]
    return wgt / wgt.sum()


def uniform_directions(rng, n) -> np.ndarray:
    """Uniform directions on the sphere: normalised standard normal vectors (Muller 1959; common practice)."""
    d = rng.normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1, keepdims=True)
