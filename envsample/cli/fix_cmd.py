"""``envsample fix``: :func:`envsample.pipeline.fix.fix_map`, then the steps and the verdicts before and after."""

from __future__ import annotations

from pathlib import Path

import click

from envsample.cli.app import main
from envsample.pipeline.fix import fix_map


def _requested(flip, rotate, sun_azimuth, fill_nonfinite, clamp_negative, poles, seam, exposure, irradiance,
               pad_hemisphere, ground_albedo) -> dict:
    """Remedy name -> options from the command-line flags."""
    out = {}
    if fill_nonfinite:
        out["fill-nonfinite"] = {}
    if clamp_negative:
        out["clamp-negative"] = {}
    if pad_hemisphere:
        out["pad-hemisphere"] = {"ground_albedo": ground_albedo}
    if flip:
        out["flip"] = {}
    if rotate is not None and sun_azimuth is not None:
        raise click.UsageError("--rotation and --sun-azimuth both turn the map; give one of them")
    if rotate is not None:
        out["rotate"] = {"degrees": rotate}
    if poles:
        out["poles"] = {}
    if seam is not None:
        out["seam"] = {"columns": seam}
    if exposure is not None and irradiance is not None:
        raise click.UsageError("--exposure and --irradiance both set the light level; give one of them")
    if exposure is not None:
        out["exposure"] = {"target": exposure}
    if irradiance is not None:
        out["exposure"] = {"irradiance": irradiance}
    return out


@main.command()
@click.argument("source", metavar="MAP", type=click.Path(dir_okay=False, exists=True, path_type=Path))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="The repaired map (.exr or .hdr); a JSON log OUTPUT-STEM.fix.json is written beside it.")
@click.option("--auto", is_flag=True,
              help="Apply the safe remedy of every check that warns or fails (fill NaN/Inf, clamp negatives, "
                   "constant poles, seam blend, exposure).")
@click.option("--flip", is_flag=True, help="Flip vertically (an upside-down map).")
@click.option("--rotation", "rotate", type=float, default=None, metavar="DEG",
              help="Rotate about the up axis by DEG degrees of azimuth (whole columns).")
@click.option("--sun-azimuth", type=float, default=None, metavar="DEG",
              help="Rotate so that the dominant sun-like emitter sits at azimuth DEG.")
@click.option("--fill-nonfinite", is_flag=True, help="Replace NaN/Inf pixels by their nearest finite neighbours.")
@click.option("--clamp-negative", is_flag=True, help="Clamp negative values to 0.")
@click.option("--poles", is_flag=True, help="Make the pole rows constant.")
@click.option("--seam", type=click.IntRange(1, None), default=None, metavar="COLUMNS",
              help="Blend the left/right seam over COLUMNS columns on each side.")
@click.option("--exposure", type=click.FloatRange(min=0.0, min_open=True), default=None, metavar="TARGET",
              help="Scale so that a white surface facing up reflects TARGET (E/pi; 1 = display white).")
@click.option("--irradiance", type=click.FloatRange(min=0.0, min_open=True), default=None, metavar="E",
              help="Scale so that the irradiance on an up-facing surface is E (map units x sr; lux for cd/m2 maps).")
@click.option("--pad-hemisphere", is_flag=True, help="Treat the map as an upper hemisphere and pad the lower one.")
@click.option("--ground-albedo", type=click.FloatRange(0.0, 1.0), default=0.2, show_default=True,
              help="Albedo of the uniform ground of --pad-hemisphere.")
@click.option("--profile", "profile_path", type=click.Path(dir_okay=False, exists=True, path_type=Path), default=None,
              help="QA profile (TOML) for the checks before and after.")
def fix(source, output, auto, flip, rotate, sun_azimuth, fill_nonfinite, clamp_negative, poles, seam, exposure,
        irradiance, pad_hemisphere, ground_albedo, profile_path):
    """Repair a map with the remedies its checks propose, then check the result.

    The source file is never changed.  Every step is recorded in the output's EXR
    header (attribute envsampleFix) and in the JSON log beside it.  Maps whose
    content cannot be fixed (8-bit or display-referred data, clipped highlights) are
    refused with the remedy.  Exit status: 0 the result passes or only warns, 1 it
    still fails, 2 refused or bad input.
    """
    requested = _requested(flip, rotate, sun_azimuth, fill_nonfinite, clamp_negative, poles, seam, exposure,
                           irradiance, pad_hemisphere, ground_albedo)
    if sun_azimuth is not None:
        requested["rotate"] = {"sun_azimuth": sun_azimuth}
    if not requested and not auto:
        raise click.UsageError("nothing to do: give --auto or at least one remedy (see envsample fix --help)")
    result = fix_map(source, output, remedies=requested, auto=auto, profile=profile_path)
    for step in result.steps:
        click.echo(f"  {step['remedy']:<15} {step['message']} ({step['why']})")
    for p in result.not_applied_lines():
        click.echo(f"  not applied     {p}")
    before = {c.id: c.severity for c in result.before.checks}
    after = {c.id: c.severity for c in result.after.checks}
    changed = [cid for cid in after if before.get(cid) != after[cid] or after[cid] != "pass"]
    if changed:
        width = max(len(c) for c in changed)
        click.echo(f"  {'check':<{width}}  before -> after")
        for cid in changed:
            click.echo(f"  {cid:<{width}}  {before.get(cid, '-'):>6} -> {after[cid]}")
    click.echo(f"verdict {result.before.verdict} -> {result.after.verdict}")
    click.echo(f"wrote {result.output} and {result.log}")
    return 1 if result.after.verdict == "fail" else 0
