"""Parameter types and options shared by several commands; choices come from the library's registries.

Angles are degrees on the command line and radians inside the library.
"""

from __future__ import annotations

import math

import click

from envsample.core.color import PRIMARY_NAMES
from envsample.core.constants import PRIMARY_ALIASES
from envsample.core.latlong import MAPPINGS, parse_size
from envsample.core.limits import parse_bytes
from envsample.core.sphere import UP_AXES


class SizeType(click.ParamType):
    """``WIDTHxHEIGHT`` -> (width, height)."""

    name = "WxH"

    def convert(self, value, param, ctx):
        if isinstance(value, tuple):
            return value

        try:
            return parse_size(value)
        except ValueError as e:
            self.fail(str(e), param, ctx)


class FiniteFloat(click.ParamType):
    """A finite float, optionally within [lo, hi]."""

    name = "DEG"

    def __init__(self, lo=-math.inf, hi=math.inf, name="NUMBER"):
        self.lo, self.hi, self.name = lo, hi, name

    def convert(self, value, param, ctx):
        try:
            x = float(value)
        except (TypeError, ValueError):
            self.fail(f"{value!r} is not a number", param, ctx)
        if not math.isfinite(x) or not self.lo <= x <= self.hi:
            self.fail(f"{value} is outside [{self.lo:g}, {self.hi:g}]", param, ctx)
        return x


SIZE = SizeType()
DEGREES = FiniteFloat(-360.0, 360.0, "DEG")

#: ``--primaries`` choices: the library's names and their aliases (``srgb``, ``rec709``...).
PRIMARY_CHOICES = PRIMARY_NAMES + tuple(PRIMARY_ALIASES)


class RenamedOption(click.Option):
    """An option whose later names are old spellings: accepted, but not shown in ``--help``."""

    def get_help_record(self, ctx):
        record = super().get_help_record(ctx)
        if record is None or len(self.opts) < 2:
            return record
        names, text = record
        for old in self.opts[1:]:
            names = names.replace(f", {old}", "")
        return names, text


def table_options(command):
    """The table options shared by ``build`` and ``batch`` (the keywords of build_table)."""
    options = (
        click.option("--size", type=SIZE, default=None, help="Table grid WIDTHxHEIGHT (area-weighted, "
                     "power-preserving reduction); default: the map's own size."),
        click.option("--primaries", type=click.Choice(PRIMARY_CHOICES, case_sensitive=False), default="bt709",
                     show_default=True, help="Luminance weights the table follows."),
        click.option("--mapping", type=click.Choice(MAPPINGS), default="equal-area",
                     show_default=True, help="Placement within a cell: equal-area (pdf constant per cell) or uv-linear."),
        click.option("--uniform-mix", type=click.FloatRange(0.0, 1.0, max_open=True), default=0.0, show_default=True,
                     metavar="F", help="Weight of uniform sphere sampling mixed in, so the pdf is never zero."),
        click.option("--up", type=click.Choice(tuple(UP_AXES)), default="y", show_default=True, help="World up axis."),
        click.option("--rotation", "--rotate", "rotation_deg", cls=RenamedOption, type=DEGREES, default=0.0,
                     show_default=True, help="Rotation of the map about the up axis, degrees."),
    )
    for option in reversed(options):
        command = option(command)
    return command


class ByteSizeType(click.ParamType):
    """``16G``, ``500M``, a byte count, or ``none`` -> the text (checked by :func:`envsample.core.limits.parse_bytes`)."""

    name = "SIZE"

    def convert(self, value, param, ctx):

        try:
            parse_bytes(value, name="--max-memory")
        except ValueError as e:
            self.fail(str(e), param, ctx)
        return value


def max_memory_option(command):
    """``--max-memory SIZE``: raise (or lower) the memory limit of one run on purpose (envsample.core.limits)."""
    return click.option("--max-memory", "max_memory", type=ByteSizeType(), default=None, metavar="SIZE",
                        help="Memory limit of this run, e.g. 16G (default 8G or $ENVSAMPLE_MAX_MEMORY; "
                             "'none' removes it). Requests estimated above it are refused before any work.")(command)
