"""Tests of envsample.qa.profile: TOML profiles over the defaults.

Sources of the expected values (named again beside each test):
- The traditional overcast sky L = Lz (1 + 2 cos theta) / 3 (Moon & Spencer 1942,
  CIE standard overcast sky, CIE S 003/E:1996): horizontal irradiance 7 pi / 9 Lz
  (closed form; cross-checked with scipy.integrate.quad).
- A uniform sky L: irradiance pi L on any surface (textbook).
- Moments of uniform-sphere sampling of the clamped cosine, E[max(0, cos)^k] = 1/(2(k+1))
  (textbook), for the relative RMSE of table-only sampling of a uniform map.
- The balance heuristic (Veach 1997, eq. 9.4 and section 9.2): in multi-sample MIS
  with half the samples from the table, a sample term is at most twice the table-only
  term L cos / p_table <= 2 integral(L).
- IEEE 754 binary16: largest finite value 65504.  IEC 61966-2-1: the sRGB encoding.
- The sun's mean angular diameter 0.533 deg (from memory; envsample.constants).

Maps are 256x128 or smaller except where a resolved sun disk is needed.  The test
profile lowers the resolution floor to these sizes; everything else is the default.
"""

from __future__ import annotations

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
