"""Tests of envsample.core.text: numbers, one-line text and the photometric caution as people read them."""

from __future__ import annotations

import math

import pytest

from envsample.core.text import CAUTION, caution, number, one_line


@pytest.mark.parametrize("x, digits, text", [
    (61024.3, 4, "61024"), (0.28512, 3, "0.285"), (2.5e-5, 3, "2.50e-05"), (3.2e7, 4, "3.200e+07"), (7, 4, "7"),
    (0.0, 4, "0"), (math.inf, 4, "inf"), (-12.345, 3, "-12.3"),
])
def test_number_keeps_significant_digits_and_integer_parts(x, digits, text):
    assert number(x, digits) == text


def test_one_line_collapses_whitespace_and_cuts():
    assert one_line("a\n  b\tc ") == "a b c"
    assert one_line("x" * 50, limit=10) == "xxxxxxx..." and len(one_line("x" * 50, limit=10)) == 10


def test_the_caution_is_one_text():
    assert caution("integrals") == f"integrals are {CAUTION}"
    assert "not certified lighting calculations" in CAUTION
