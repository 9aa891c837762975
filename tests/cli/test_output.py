"""Tests of envsample.cli.output: warnings shown as one line each, aligned rows, number and size texts.

Hangs run in a child process under a timeout, so that a regression fails instead of blocking the
suite.  References: Python's ``warnings`` module (a warning shown while warnings are recorded is
recorded again, so the printer must show them after recording); sizes in binary multiples
(1 kB printed for 1024 bytes, common practice in file managers).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
import warnings

import pytest

from envsample.cli.output import num, print_rows, size_text, warnings_as_lines
from envsample.errors import EnvsampleWarning

TIMEOUT = 120


def _child(code: str, tmp_path):
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], cwd=tmp_path, capture_output=True,
                          text=True, timeout=TIMEOUT)


def test_the_warning_printer_does_not_loop_on_a_library_warning(tmp_path):
    """Issue 12, item 1: a warning from a library (not envsample's own) raised inside the printer's
    context used to be re-recorded while being shown: an endless loop.  Now it prints once."""
    r = _child("""
        import warnings
        from envsample.cli.output import warnings_as_lines
        with warnings_as_lines([]):
            warnings.warn("overflow encountered in multiply", RuntimeWarning)
            warnings.warn("overflow encountered in multiply", RuntimeWarning)
        print("done")
    """, tmp_path)
    assert r.returncode == 0 and r.stdout.strip() == "done", r.stderr
    assert r.stderr.count("overflow encountered") == 1
    assert "warning: RuntimeWarning: overflow encountered in multiply" in r.stderr  # passed through, named


def test_an_envsample_warning_is_printed_once_as_a_line(capsys):
    with warnings_as_lines([]):
        for _ in range(3):
            warnings.warn("map is 32x32, not 2:1; pass allow_aspect=True\n  to accept it", EnvsampleWarning)
    err = capsys.readouterr().err
    # One line, whitespace collapsed, the library's keyword spelled as the command-line flag.
    assert err == "warning: map is 32x32, not 2:1; pass --allow-aspect to accept it\n"


def test_a_warning_that_a_printed_note_already_says_is_not_repeated(capsys):
    with warnings_as_lines(["clamped 3 negative values"]):
        warnings.warn("clamped 3 negative values (lowest -1) to 0", EnvsampleWarning)
        warnings.warn("another thing", EnvsampleWarning)
    assert capsys.readouterr().err == "warning: another thing\n"


def test_warnings_are_still_printed_when_the_command_fails(capsys):
    with pytest.raises(ValueError), warnings_as_lines([]):
        warnings.warn("said before the failure", EnvsampleWarning)
        raise ValueError("the command failed")
    assert capsys.readouterr().err == "warning: said before the failure\n"


def test_rows_are_aligned_and_empty_values_dropped(capsys):
    print_rows([("map", "sky.exr"), ("integral", "Y 3.142"), ("skipped", None), ("", "second line")])
    lines = capsys.readouterr().out.splitlines()
    assert lines == ["map       sky.exr", "integral  Y 3.142", "          second line"]


@pytest.mark.parametrize("n, text", [(0, "0 B"), (1023, "1023 B"), (1024, "1.0 kB"), (1536, "1.5 kB"),
                                     (5 << 20, "5.0 MB"), (3 << 30, "3.0 GB")])
def test_sizes_are_printed_in_binary_multiples(n, text):
    assert size_text(n) == text


@pytest.mark.parametrize("x, text", [(3.14159265, "3.142"), (61024.4, "61024"), (2.5e-4, "2.500e-04"),
                                     (7, "7"), (float("inf"), "inf")])
def test_numbers_have_four_significant_digits(x, text):
    assert num(x) == text
