"""Shared pytest fixtures: the generic ones, and those used by the tests of several packages (the
helpers behind them live in tests/support/)."""

from __future__ import annotations

import numpy as np
import pytest
from support.demo_runs import demo_once


@pytest.fixture
def rng() -> np.random.Generator:
    """A fixed-seed generator, so every statistical test is reproducible bit for bit."""
    return np.random.default_rng(20240601)


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """One demo run (64x32 maps) for the demo's tests and the demo command's (tests/support/demo_runs.py)."""
    return demo_once(tmp_path_factory.mktemp("demo"))
