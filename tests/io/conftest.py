"""Fixtures of the io tests: a small table with every option set away from its default."""

from __future__ import annotations

import pytest
from support.table_files import table_test_map

from envsample.sampling.table import build_table


@pytest.fixture
def table():
    t = build_table(table_test_map(), mapping="uv-linear", up="z", rotation_deg=30.0, uniform_mix=0.1, size=(16, 8))
    t.metadata["recommendation"] = {"method": "alias", "why": "invented for the test"}
    return t
