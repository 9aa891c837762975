"""``envsample sky``: :func:`envsample.synth.skies.make_sky` + :func:`envsample.io.maps.write_map`."""

from __future__ import annotations

import inspect
import math
from pathlib import Path

import click

from envsample.cli.app import main
from envsample.cli.options import DEGREES, SIZE, FiniteFloat, max_memory_option
from envsample.cli.output import num, print_rows, rgb_line, size_text
from envsample.core.constants import HALF_FLOAT_MAX
from envsample.core.limits import check_memory
from envsample.core.text import caution
from envsample.io.maps import supported_extensions, write_map
from envsample.pipeline.workflow import check_output_folder, map_integrals
from envsample.synth.skies import SKY_DESCRIPTIONS, make_sky, sky_kinds, sun_position

#: CLI option -> (make_sky keyword, the kinds that take it).
SKY_OPTIONS = {
    "azimuth": ("azimuth_deg", ("sun",)),
    "elevation": ("elevation_deg", ("sun",)),
    "sun_illuminance": ("sun_illuminance", ("sun",)),
    "sky_model": ("sky", ("sun",)),
    "zenith": ("zenith_luminance", ("overcast", "sun")),
    "ground_albedo": ("ground_albedo", ("overcast", "sun")),
    "radiance": ("radiance", ("uniform",)),
    "background": ("background", ("studio",)),
    "lights": ("lights", ("studio",)),
}


def _flag_name(option: str) -> str:
    return "--light" if option == "lights" else "--" + option.replace("_", "-")


def _parse_light(text: str):
    parts = text.split(",")
    try:
        values = [float(p) for p in parts]
    except ValueError:
        values = []
    if len(values) != 5 or not all(math.isfinite(v) for v in values):
        raise click.BadParameter(
            f"{text!r} is not AZ0,AZ1,EL0,EL1,RADIANCE (degrees and a radiance, e.g. -50,-20,20,50,5)",
            param_hint="'--light'",
        )
    a0, a1, e0, e1, radiance = values
    return ((a0, a1), (e0, e1), radiance)


def _sky_kinds():

    return sky_kinds()


def _sky_help() -> str:

    return "\n".join(f"{k:<16}{v}" for k, v in SKY_DESCRIPTIONS.items())


@main.command()
@click.argument("kind", metavar="KIND", type=click.Choice(_sky_kinds()))
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False, path_type=Path),
              metavar="MAP", help="Map to write: .exr or .hdr (atomically; missing folders are created).")
@click.option("--size", type=SIZE, default="1024x512", show_default=True, help="Map size WIDTHxHEIGHT.")
@click.option("--pixel-type", type=click.Choice(["half", "float"]), default="half", show_default=True,
              help="EXR pixel type (.hdr is always RGBE).")
@click.option("--azimuth", type=DEGREES, default=None, help="sun: azimuth, degrees (0 = image centre, + to the right).")
@click.option("--elevation", type=FiniteFloat(-90.0, 90.0, "DEG"), default=None, help="sun: elevation, degrees.")
@click.option("--sun-illuminance", type=FiniteFloat(0.0, math.inf, "E"), default=None,
              help="sun: illuminance on a surface facing the sun (map units x sr).")
@click.option("--sky-model", type=click.Choice(["clear", "overcast", "none"]), default=None,
              help="sun: the sky behind the sun.")
@click.option("--zenith", type=FiniteFloat(0.0, math.inf, "L"), default=None,
              help="overcast, sun: zenith radiance of the sky.")
@click.option("--ground-albedo", type=FiniteFloat(0.0, 1.0, "A"), default=None,
              help="overcast, sun: albedo of a Lambertian ground lit by the sky (default: black ground).")
@click.option("--radiance", type=FiniteFloat(0.0, math.inf, "L"), default=None, help="uniform: the radiance.")
@click.option("--background", type=FiniteFloat(0.0, math.inf, "L"), default=None,
              help="studio: background radiance.")
@click.option("--light", "lights", multiple=True, metavar="AZ0,AZ1,EL0,EL1,L",
              help="studio: a rectangular light from azimuth AZ0 to AZ1 and elevation EL0 to EL1 (degrees) "
                   "with radiance L; repeat for more lights.")
@max_memory_option
def sky(kind, output, size, pixel_type, max_memory, **given):
    """Write an analytic map of the given KIND.

    \b
    KIND is one of:
    {kinds}

    Options apply to the kinds named in their help; others are refused.
    """

    if output.suffix.lower() not in supported_extensions(write=True):
        raise click.BadParameter(f"{output}: write .exr or .hdr", param_hint="'-o' / '--output'")
    check_output_folder(output)
    options = {}
    for name, value in given.items():
        if value is None or value == ():
            continue
        keyword, kinds = SKY_OPTIONS[name]
        if kind not in kinds:
            valid = [_flag_name(n) for n, (_, ks) in SKY_OPTIONS.items() if kind in ks]
            raise click.UsageError(
                f"{_flag_name(name)} does not apply to sky '{kind}'; options for it: {', '.join(valid) or 'none'}"
            )
        options[keyword] = [_parse_light(v) for v in value] if name == "lights" else value
    width, height = size

    # The map (12 B per pixel) and the float64 directions and temporaries the sky models use.
    check_memory(64 * width * height, what=f"sky --size {width}x{height}", limit=max_memory,
                 remedy="choose a smaller --size")
    rgb = make_sky(kind, width=width, height=height, **options)
    peak = float(rgb.max())
    if output.suffix.lower() == ".exr" and pixel_type == "half" and peak > HALF_FLOAT_MAX:
        raise click.UsageError(
            f"{output}: the map peaks at {peak:.4g}, above the half-float maximum 65504; use --pixel-type float"
        )
    output.parent.mkdir(parents=True, exist_ok=True)
    path = write_map(output, rgb, pixel_type=pixel_type)

    per_rgb, y, _ = map_integrals(rgb, "bt709")
    sun = sun_position(kind, **options)
    what = f"{width}x{height} {kind}" + ("" if path.suffix.lower() == ".hdr" else f", {pixel_type} EXR")
    print_rows([
        ("map", what),
        ("sun", None if sun is None else f"azimuth {sun[0]:g} deg, elevation {sun[1]:g} deg"),
        ("peak", num(peak)),
        ("integral", rgb_line(per_rgb, y, "bt709") + "  (map units x sr)"),
        ("wrote", f"{path}  ({size_text(path.stat().st_size)})"),
    ])
    click.echo(f"({caution('integrals')})")


sky.help = inspect.cleandoc(sky.help).replace("{kinds}", _sky_help())
