"""Fixtures of the QA tests: a profile that lowers the resolution floor to the small test maps."""

from __future__ import annotations

import pytest
from support.qa_maps import *  # noqa: F403

from envsample.qa.profile import load_profile


@pytest.fixture(scope="module")
def profile_path(tmp_path_factory):
    p = tmp_path_factory.mktemp("profiles") / "tests.toml"
    p.write_text(TEST_PROFILE)
    return p



@pytest.fixture(scope="module")
def profile(profile_path):
    return load_profile(profile_path)
