"""Tests of envsample.qa.profile: TOML profiles over the defaults, and one-line errors for bad ones.
"""

from __future__ import annotations

import re

import pytest
from support.qa_maps import *  # noqa: F403 - the shared test maps and helpers

from envsample.qa.checks import CHECKS
from envsample.qa.profile import ProfileError, load_profile


def test_default_profile_has_one_section_per_check():
    """Adding a check is one function, one CHECKS entry and one profile section: keep them in step."""
    defaults = load_profile(None)
    assert set(defaults.sections) == set(CHECKS) | {"profile"}
    for cid in CHECKS:
        assert defaults.section(cid)["enabled"] is True
    assert defaults.name == "default" and defaults.primaries == "bt709"



def test_profile_file_overrides_only_what_it_lists(profile):
    assert profile.name == "tests"
    assert profile.section("resolution")["warn_below_width"] == 64
    assert profile.section("seam") == load_profile(None).section("seam")



@pytest.mark.parametrize(
    "text, match",
    [
        ("[seam]\nstep_size = 3\n", r"unknown key seam\.step_size; valid keys in \[seam\]"),
        ("[seams]\nenabled = false\n", r"unknown section \[seams\]"),
        ("[seam]\nwarn_share = 'high'\n", r"\[seam\] warn_share must be a number"),
        ("[sampling]\nspp = 0\n", r"\[sampling\] spp must be >= 1"),
        ("[profile]\nprimaries = 'p3'\n", r"unknown primaries 'p3'"),
        ("[sampling]\nestimator = 'magic'\n", r"unknown estimator 'magic'"),
        ("[seam]\nwarn_share = 0.9\nfail_share = 0.5\n", r"warn_share must not exceed fail_share"),
        ("[seam\n", r"not valid TOML"),
    ],
)
def test_bad_profiles_raise_one_line_errors_naming_the_problem(tmp_path, text, match):
    p = tmp_path / "bad.toml"
    p.write_text(text)
    with pytest.raises(ProfileError, match=match) as info:
        load_profile(p)
    assert "\n" not in str(info.value) and str(p) in str(info.value)



def test_missing_profile_file_is_an_error(tmp_path):
    with pytest.raises(ProfileError, match="file not found"):
        load_profile(tmp_path / "none.toml")


@pytest.mark.parametrize("settings, what", [
    ({"spp": 100_000_000}, "spp x repeats x normals"),
    ({"spp": 65536, "repeats": 1024}, "spp x repeats x normals"),
    ({"table_width": 100000, "table_height": 50000}, "table_width x table_height"),
])
def test_oversized_sampling_requests_are_refused_when_the_profile_is_read(settings, what):
    """Issue 12 item 4: a profile spp of 1e8 ended in MemoryError (exit 3) inside the check; it is now
    refused in one line, naming the estimate and the limit, before anything is allocated."""
    with pytest.raises(ProfileError, match=rf"\[sampling\] {re.escape(what)} = .* above the limit") as e:
        load_profile({"sampling": settings})
    assert "\n" not in str(e.value)


def test_orientation_severity_must_be_warn_or_fail():
    assert load_profile({"orientation": {"severity": "fail"}}).section("orientation")["severity"] == "fail"
    with pytest.raises(ProfileError, match=r"\[orientation\] severity must be one of warn, fail, got 'pass'"):
        load_profile({"orientation": {"severity": "pass"}})
