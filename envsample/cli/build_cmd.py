"""``envsample build``: :func:`envsample.pipeline.workflow.build_from_file`, then a summary."""

from __future__ import annotations

from pathlib import Path

import click

from envsample.cli.app import flags, main
from envsample.cli.options import table_options
from envsample.cli.output import print_rows, progress_bar, rgb_line, size_text, warnings_as_lines
from envsample.core.text import caution
from envsample.pipeline.workflow import build_from_file


@main.command()
@click.argument("map_path", metavar="MAP", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", "prefix", required=True, metavar="PREFIX",
              help="Table prefix: writes PREFIX.npz and PREFIX.json (and PREFIX.bin with --raw). "
                   "An existing folder (or a path ending in '/') gets the map's name. "
                   "Missing folders are created, but only once the map has passed every check.")
@table_options
@click.option("--compensate", is_flag=True, help="MIS-compensated table (sphere-mean luminance subtracted); "
              "valid only inside an MIS combination.")
@click.option("--tune", is_flag=True, help="Run a short pilot and store the best one-sample MIS selection "
              "(heuristic, table fraction, measured variance ratio) in the table's metadata.")
@click.option("--raw", is_flag=True, help="Also write PREFIX.bin: little-endian arrays at offsets listed in the JSON.")
@click.option("--repair", is_flag=True, help="Replace NaN/Inf pixels with 0 (and say how many) instead of refusing.")
@click.option("--allow-aspect", is_flag=True, help="Accept a map that is not 2:1.")
@click.option("--layer", default=None, metavar="NAME", help="EXR layer to read when the file has several.")
def build(map_path, prefix, size, primaries, mapping, uniform_mix, up, rotation_deg, compensate, tune, raw, repair,
          allow_aspect, layer):
    """Build the sampling table of MAP (.exr or .hdr).

    The map is read and checked (HDR, finite, 2:1, at least 8x4; negative
    values are clamped and counted) before anything is written. Existing
    table files with the same prefix are replaced atomically.
    """

    printed: list[str] = []
    stages = ("read", "check", "build", "tune", "save") if tune else ("read", "check", "build", "save")
    with warnings_as_lines(printed), progress_bar(len(stages), "build") as bar:
        def progress(label):
            bar.n = stages.index(label) if label in stages else bar.n
            bar.set_description(label)

        result = build_from_file(
            map_path, prefix, raw=raw, repair=repair, allow_aspect=allow_aspect, layer=layer, progress=progress,
            size=size, primaries=primaries.lower(), mapping=mapping, uniform_mix=uniform_mix, up=up,
            rotation_deg=rotation_deg, compensate=compensate, tune=tune,
        )
        printed.extend(result.notes)
    t, img = result.table, result.image
    opts = [t.mapping, f"primaries {t.primaries}", f"up {t.up}", f"rotation {t.rotation_deg:g} deg"]
    if t.uniform_mix:
        opts.append(f"uniform mix {t.uniform_mix:g}")
    if t.compensated:
        opts.append("compensated (valid only inside MIS)")
    rows = [
        ("map", f"{img.path}  {img.width}x{img.height} {img.format} {img.pixel_type}, sha256 {img.sha256[:12]}"),
        ("table", f"{t.table_width}x{t.table_height} cells, " + ", ".join(opts)),
        ("integral", rgb_line(t.integrals["rgb"], t.integrals["luminance"]) + "  (map units x sr)"),
        ("time", f"{result.seconds:.2f} s to build"),
    ]
    rec = t.metadata.get("recommendation")
    if rec:
        rows.append(("tuned", f"one-sample MIS, {rec['heuristic']} heuristic, table fraction {rec['table_fraction']:g}: "
                              f"variance {rec['variance_ratio']:.3g}x the default (balance, 0.5) "
                              f"+- {rec['variance_ratio_se']:.2g}"))
    for k, note in enumerate(result.notes):
        rows.append(("note" if k == 0 else "", flags(note)))
    for k, p in enumerate(result.paths):
        rows.append(("wrote" if k == 0 else "", f"{p}  ({size_text(p.stat().st_size)})"))
    print_rows(rows)
    click.echo(f"({caution('integrals')})")
