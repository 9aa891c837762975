"""Tests of envsample.cli.options: the option types (sizes, finite floats, byte sizes), the shared table
options and renamed flags.

The types follow click's documented ParamType contract (``convert`` returns the value or calls
``fail``, which raises ``click.BadParameter``); a small command made with click's public decorators
shows what a user sees.  Finite numbers: IEEE 754 (``float('1e400')`` is +inf, NaN compares false).
"""

from __future__ import annotations

import math

import click
import pytest
from click.testing import CliRunner
from support.cli_helpers import gradient, json_of, write_test_map

from envsample.cli.options import DEGREES, SIZE, ByteSizeType, FiniteFloat, RenamedOption, table_options
from envsample.core.latlong import MAPPINGS
from envsample.core.sphere import UP_AXES


@pytest.mark.parametrize("text, size", [("256x128", (256, 128)), ("64X32", (64, 32)), ((8, 4), (8, 4))])
def test_size_type_parses_width_by_height(text, size):
    assert SIZE.convert(text, None, None) == size


@pytest.mark.parametrize("text", ["12", "x", "axb", "64x", ""])
def test_size_type_refuses_what_is_not_width_by_height(text):
    with pytest.raises(click.BadParameter, match="WIDTHxHEIGHT"):
        SIZE.convert(text, None, None)


@pytest.mark.parametrize("text, value", [("12.5", 12.5), ("-360", -360.0), ("360", 360.0), ("0", 0.0)])
def test_degrees_accept_finite_angles_within_a_turn(text, value):
    assert DEGREES.convert(text, None, None) == value


@pytest.mark.parametrize("text, problem", [("nan", "outside"), ("inf", "outside"), ("1e400", "outside"),
                                           ("360.5", r"outside \[-360, 360\]"), ("ten", "is not a number")])
def test_degrees_refuse_non_finite_out_of_range_and_non_numbers(text, problem):
    with pytest.raises(click.BadParameter, match=problem):
        DEGREES.convert(text, None, None)


def test_finite_float_bounds_are_inclusive_and_named_in_the_message():
    albedo = FiniteFloat(0.0, 1.0, "A")
    assert albedo.convert("1", None, None) == 1.0 and albedo.convert("0", None, None) == 0.0
    with pytest.raises(click.BadParameter, match=r"1\.5 is outside \[0, 1\]"):
        albedo.convert("1.5", None, None)
    assert FiniteFloat().convert("-1e300", None, None) == -1e300  # unbounded, finite


@pytest.mark.parametrize("text", ["16G", "500M", "2k", "1024", "none"])
def test_byte_size_type_keeps_a_valid_size_as_given(text):
    assert ByteSizeType().convert(text, None, None) == text


@pytest.mark.parametrize("text", ["12X", "lots", "-5G"])
def test_byte_size_type_refuses_what_is_not_a_size_naming_the_option(text):
    with pytest.raises(click.BadParameter, match="--max-memory"):
        ByteSizeType().convert(text, None, None)


def _echo_command():
    """A command with envsample's option types and renamed flag, printing what it received."""

    @click.command()
    @click.option("--size", type=SIZE)
    @click.option("--angle", type=DEGREES, default=0.0)
    @click.option("--turn", "--spin", "turn", cls=RenamedOption, type=DEGREES, default=0.0, help="Turn, degrees.")
    def echo(size, angle, turn):
        click.echo(f"{size} {angle} {turn}")

    return echo


def test_a_refused_value_is_a_usage_error_naming_the_option():
    r = CliRunner().invoke(_echo_command(), ["--angle", "nan"])
    assert r.exit_code == 2 and "Invalid value for '--angle'" in r.stderr
    r = CliRunner().invoke(_echo_command(), ["--size", "12"])
    assert r.exit_code == 2 and "Invalid value for '--size'" in r.stderr and "WIDTHxHEIGHT" in r.stderr


def test_a_renamed_option_takes_both_spellings_and_help_shows_only_the_new_one():
    cmd = _echo_command()
    assert CliRunner().invoke(cmd, ["--turn", "30"]).stdout.split()[-1] == "30.0"
    assert CliRunner().invoke(cmd, ["--spin", "30"]).stdout.split()[-1] == "30.0"
    help_text = CliRunner().invoke(cmd, ["--help"]).stdout
    assert "--turn" in help_text and "--spin" not in help_text


def test_table_options_offer_the_librarys_mappings_and_up_axes():
    @click.command()
    @table_options
    def cmd(**kw):
        click.echo(repr(sorted(kw)))

    params = {p.name: p for p in cmd.params}
    assert set(params) == {"size", "primaries", "mapping", "uniform_mix", "up", "rotation_deg"}
    assert tuple(params["mapping"].type.choices) == tuple(MAPPINGS)
    assert tuple(params["up"].type.choices) == tuple(UP_AXES)
    # --uniform-mix is a weight in [0, 1): a mix of 1 would leave no table at all.
    assert CliRunner().invoke(cmd, ["--uniform-mix", "1"]).exit_code == 2
    assert CliRunner().invoke(cmd, ["--uniform-mix", "0.5"]).exit_code == 0
    assert math.isclose(params["rotation_deg"].default, 0.0)


def test_the_old_rotate_flag_still_works_but_help_shows_one_spelling(run, tmp_path):
    """``--rotate`` was the flag's name before ``--rotation``: kept as a hidden alias."""
    src = write_test_map(tmp_path / "m.exr", gradient())
    run("build", src, "-o", tmp_path / "a", "--rotation", "30")
    run("build", src, "-o", tmp_path / "b", "--rotate", "30")
    a = json_of(run("inspect", tmp_path / "a", "--json"))
    b = json_of(run("inspect", tmp_path / "b", "--json"))
    assert a["largest_cell"] == b["largest_cell"] and a["convention"] == b["convention"]
    text = run("build", "--help").output
    assert "--rotation DEG" in text and "--rotate" not in text
