"""Tests of envsample.qa.messages: how check messages write numbers, angles and shares."""

from __future__ import annotations

import numpy as np

from envsample.qa.messages import deg, fmt, pct


def test_percentages_name_a_rounding_residue_instead_of_printing_it():
    assert pct(0.5) == "50%" and pct(0.0123) == "1.23%" and pct(0.004) == "0.4%"
    assert pct(1e-9) == "<0.001%" and pct(0.0) == "0%"


def test_angles_to_a_tenth_and_no_negative_zero():
    assert deg(35.04) == "35.0" and deg(0.123) == "0.12" and deg(-0.001) == "0"


def test_numbers_as_everywhere_else():
    assert fmt(None) == "-" and fmt(np.int64(7)) == "7" and fmt(0.28512) == "0.285"
