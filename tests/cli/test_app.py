"""Tests of envsample.cli.app: the ``envsample`` group, its global options, exit statuses and error lines.

External references: importlib.metadata (Python standard library) for the installed version; click's
public API (``Group.add_command``) to add a failing command.
"""

from __future__ import annotations

from importlib import metadata

import click
import pytest
from support.cli_helpers import assert_one_line_error

import envsample
from envsample.cli.app import EXIT_INTERNAL_ERROR, EXIT_USER_ERROR, main


def test_version_matches_package_metadata(run):
    """--version prints the version the installed distribution declares (importlib.metadata)."""
    result = run("--version")
    assert result.exit_code == 0
    assert result.stdout.strip() == f"envsample {metadata.version('envsample')}"
    assert envsample.__version__ == metadata.version("envsample")


@pytest.mark.parametrize("command", [[], ["build"], ["inspect"], ["vectors"], ["sky"], ["demo"]])
def test_every_command_has_help(run, command):
    result = run(*command, "--help")
    assert result.exit_code == 0
    assert result.stdout.startswith("Usage: envsample")


def test_usage_error_is_one_line_with_a_pointer_to_help(run, tmp_path):
    result = run("build", tmp_path / "x.exr")  # no -o
    assert_one_line_error(result, "Missing option '-o' / '--output'")
    assert "see 'envsample build --help'" in result.stderr


@pytest.mark.parametrize("where", ["before", "after"])
def test_debug_shows_the_traceback(run, tmp_path, where):
    args = ["build", tmp_path / "missing.exr", "-o", tmp_path / "t"]
    result = run(*(["--debug"] + args if where == "before" else args + ["--debug"]))
    assert result.exit_code == EXIT_USER_ERROR
    assert "Traceback" in result.stderr
    assert result.stderr.strip().splitlines()[-1].startswith("error: ")


@pytest.fixture
def failing_command():
    """A command added to the group (click's public API) whose body fails as a bug would."""
    @click.command("fail-for-test")
    def fail_for_test():
        raise RuntimeError("boom")

    main.add_command(fail_for_test)
    yield "fail-for-test"
    main.commands.pop("fail-for-test")


def test_unexpected_failure_is_reported_as_a_bug(run, failing_command):
    """A non-user error gets exit status 3 and one line asking for --debug; --debug shows the traceback."""
    result = run(failing_command)
    assert result.exit_code == EXIT_INTERNAL_ERROR
    assert result.stderr.strip() == (
        "error: internal error (RuntimeError: boom); this is a bug; rerun with --debug and report the traceback"
    )
    debug = run(failing_command, "--debug")
    assert debug.exit_code == EXIT_INTERNAL_ERROR and "Traceback" in debug.stderr and "RuntimeError: boom" in debug.stderr
