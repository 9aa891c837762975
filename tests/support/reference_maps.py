"""Helpers shared by the tests of envsample.reference: unit vectors, the map frame written
independently of the package, and polar-cap maps whose irradiance has a closed form."""

from __future__ import annotations

import math

import numpy as np

from envsample.core.sphere import UP_AXES

__all__ = ["unit", "random_normals", "AXES", "frame_rows", "cap_map"]


def unit(v):
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def random_normals(count, seed):
    return unit(np.random.default_rng(seed).normal(size=(count, 3)))


AXES = np.concatenate([np.eye(3), -np.eye(3)])


def frame_rows(up, rotation_deg):
    """Rows forward_R, right_R, up of the sphere convention, computed independently here."""
    f, r, a = (np.array(v, dtype=np.float64) for v in UP_AXES[up])
    c, s = math.cos(math.radians(rotation_deg)), math.sin(math.radians(rotation_deg))
    return np.stack([c * f + s * r, -s * f + c * r, a])


def cap_map(height, width, rows, inside, outside=(0.0, 0.0, 0.0)):
    """A polar cap made of the top ``rows`` rows: exactly the cap theta < pi*rows/height."""
    img = np.empty((height, width, 3))
    img[:rows] = inside
    img[rows:] = outside
    return img
