"""``envsample split``: :func:`envsample.pipeline.split.split_map_file`, then a summary."""

from __future__ import annotations

from pathlib import Path

import click

from envsample.cli.app import main
from envsample.cli.options import DEGREES, PRIMARY_CHOICES, SIZE
from envsample.cli.output import print_rows, rgb_line, size_text, warnings_as_lines
from envsample.core.sphere import UP_AXES
from envsample.core.text import caution, number
from envsample.pipeline.split import split_map_file


def _summary(result) -> list[tuple[str, str]]:
    sp = result.split
    f, s = sp.found, sp.sun
    rows = [
        ("sun", f"azimuth {number(s.azimuth_deg)} deg, elevation {number(s.elevation_deg)} deg, "
                f"{number(s.diameter_deg)} deg across ({number(s.solid_angle)} sr)"),
        ("found", f"{number(100.0 * f.share, 3)} % of the map's light, diameter {number(f.diameter_deg)} deg, "
                  f"glare out to {number(f.glare_radius_deg)} deg, confidence {number(f.confidence, 2)}"
                  + (", core clipped" if f.clipped else "")),
        ("radiance", rgb_line(s.radiance) + "  (map units)"),
        ("irradiance", rgb_line(s.normal_irradiance) + "  (facing the sun, map units x sr)"),
        ("moved", rgb_line(sp.moved_rgb) + "  (energy taken out of the map, map units x sr)"),
    ]
    rows += [("note" if k == 0 else "", n) for k, n in enumerate(f.notes)]
    if sp.restoration is not None:
        rows.append(("restored", f"{sp.restoration.method}: normal irradiance {number(sp.restoration.normal_irradiance)}"
                                 " (luminance, map units x sr)"))
        rows += [("assumed" if k == 0 else "", a) for k, a in enumerate(sp.restoration.assumptions)]
    else:
        resid = max(abs(x) for x in result.balance["relative_residual_rgb"])
        rows.append(("energy", f"sky + sun = original within {resid:.1e} (relative)"))
    files = [result.paths["sky_map"], result.paths["sun"], *result.paths["table"]]
    rows += [("wrote" if k == 0 else "", f"{p}  ({size_text(Path(p).stat().st_size)})") for k, p in enumerate(files)]
    return rows


@main.command()
@click.argument("map_path", metavar="MAP", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", "outdir", required=True, metavar="OUTDIR", type=click.Path(path_type=Path),
              help="Folder for NAME.sky.exr, NAME.sun.json and the sky's table NAME.sky.npz/.json (created if missing).")
@click.option("--sun-illuminance", type=click.FloatRange(min=0.0, min_open=True), default=None, metavar="E",
              help="Restore a clipped sun: its illuminance at normal incidence, map units x sr (e.g. measured at "
                   "capture).")
@click.option("--restore", type=click.Choice(("clear-sky",)), default=None,
              help="Restore a clipped sun from the clear-sky model's direct/diffuse ratio at its elevation.")
@click.option("--turbidity", "linke_turbidity", type=click.FloatRange(1.0, 10.0), default=3.0, show_default=True,
              help="Linke turbidity of the clear-sky model.")
@click.option("--altitude", "altitude_m", type=click.FloatRange(-500.0, 9000.0), default=0.0, show_default=True,
              metavar="M", help="Altitude of the capture for the clear-sky model, metres.")
@click.option("--size", type=SIZE, default=None, help="The sky table's grid WIDTHxHEIGHT; default: the map's size.")
@click.option("--primaries", type=click.Choice(PRIMARY_CHOICES, case_sensitive=False), default="bt709",
              show_default=True, help="Luminance weights.")
@click.option("--up", type=click.Choice(tuple(UP_AXES)), default="y", show_default=True, help="World up axis.")
@click.option("--rotation", "rotation_deg", type=DEGREES, default=0.0, show_default=True,
              help="Rotation of the map about the up axis, degrees.")
@click.option("--layer", default=None, metavar="NAME", help="EXR layer to read when the file has several.")
def split(map_path, outdir, sun_illuminance, restore, linke_turbidity, altitude_m, size, primaries, up, rotation_deg,
          layer):
    """Take the sun out of MAP: a sky map, an analytic sun light and the sky's sampling table.

    The sun and its glare are removed and the hole is filled smoothly from the
    surrounding sky (a harmonic fill); the energy taken out goes into the sun,
    unless --sun-illuminance or --restore clear-sky restores a clipped sun.
    """
    printed: list[str] = []
    with warnings_as_lines(printed):
        result = split_map_file(map_path, outdir, restore=restore, sun_illuminance=sun_illuminance,
                                linke_turbidity=linke_turbidity, altitude_m=altitude_m, primaries=primaries.lower(),
                                up=up, rotation_deg=rotation_deg, size=size, layer=layer)
    print_rows([("note", n) for n in printed + result.notes] + _summary(result))
    click.echo(f"({caution('the sun and sky values')})")
