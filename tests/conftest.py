"""Shared pytest fixtures (generic only; module-specific helpers live in their test files)."""

from __future__ import annotations

import numpy as np
import pytest


@pytest.fixture
def rng() -> np.random.Generator:
    """A fixed-seed generator, so every statistical test is reproducible bit for bit."""
    return np.random.default_rng(20240601)
