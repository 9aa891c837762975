"""Fixtures of the command-line tests: ``run`` invokes ``envsample`` in-process (click.testing.CliRunner)."""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from envsample.cli.app import main


@pytest.fixture
def run():
    """``run(*args)`` -> click's Result; arguments are turned into strings, exceptions are not swallowed."""
    runner = CliRunner()

    def invoke(*args):
        return runner.invoke(main, [str(a) for a in args], catch_exceptions=False)

    return invoke
