"""``envsample demo``: :func:`envsample.synth.demo.run_demo`, then a summary."""

from __future__ import annotations

from pathlib import Path

import click

from envsample.cli.app import main
from envsample.cli.output import echo_json, num, progress_bar, warnings_as_lines
from envsample.synth.demo import demo_steps, run_demo


@main.command()
@click.argument("outdir", required=False, default="envsample-demo", type=click.Path(file_okay=False, path_type=Path))
@click.option("--width", type=click.IntRange(16, 8192), default=1024, show_default=True,
              help="Width of the generated maps (height is half of it); must be even.")
@click.option("--json", "as_json", is_flag=True, help="Print the summary as JSON.")
def demo(outdir, width, as_json):
    """Run the whole flow on invented maps.

    Writes into OUTDIR (default envsample-demo, created if missing). Generates a late-afternoon rooftop, a product studio and an overcast sky
    as .exr maps, builds their tables (the rooftop's also as raw .bin), writes
    golden vectors for the rooftop and prints a summary. Nothing is downloaded.
    """

    if width % 2:
        raise click.BadParameter(f"{width} is odd; the maps are 2:1, give an even width", param_hint="'--width'")
    steps = demo_steps()
    with warnings_as_lines([]), progress_bar(len(steps), "demo") as bar:
        def progress(label, done, total):
            bar.set_description(label)
            bar.n = done
            bar.refresh()

        summary = run_demo(outdir, width=width, steps=steps, progress=progress)
    if as_json:
        echo_json(summary)
        return
    _print_demo(summary)


def _print_demo(s: dict) -> None:
    header = ("map", "size", "integral Y", "brightest (az, el)", "table", "build", "check", "best sampling (rel. RMSE)")
    checks = s.get("extra", {}).get("checks", {})
    verified = s.get("extra", {}).get("verify", {})
    lines = []
    for m in s["maps"]:
        if "size" not in m:
            continue
        b = m["brightest"]
        v = verified.get(m["name"])
        lines.append((
            m["name"],
            f"{m['size'][0]}x{m['size'][1]}",
            num(m["integrals"]["luminance"]),
            f"{b['azimuth_deg']:.1f}, {b['elevation_deg']:.1f} deg",
            f"{m['table_size'][0]}x{m['table_size'][1]}",
            f"{m['build_seconds']:.2f} s",
            checks.get(m["name"], {}).get("verdict", "-"),
            (f"{v['recommended']} ({v['relative_rmse']:.3g}"
             + (f"; cosine {v['cosine_relative_rmse']:.3g})" if v["recommended"] != "cosine" else ")")) if v else "-",
        ))
    widths = [max(len(r[i]) for r in [header] + lines) for i in range(len(header))]
    click.echo(f"demo in {s['outdir']}: invented scenes, generated here ({len(s['files'])} files, "
               f"{s['seconds']:.1f} s)")
    click.echo("")
    for r in [header] + lines:
        click.echo("  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip())
    click.echo("")
    for m in s["maps"]:
        click.echo(f"{m['name']:<{widths[0]}}  {m['description']}")
    for v in s["vectors"]:
        click.echo(f"golden vectors: {v['path']} ({v['count']}, seed {v['seed']})")
    for name, sp in s.get("extra", {}).get("split", {}).items():
        if "note" in sp:
            click.echo(f"split {name}: {sp['note']}")
            continue
        sun = sp["sun"]
        agree = "agrees with" if sp["consistent"] else "DISAGREES with"
        click.echo(f"split {name}: sun at {sun['azimuth_deg']:.1f}, {sun['elevation_deg']:.1f} deg "
                   f"({100 * sun['share']:.0f} % of the light) -> {sp['folder']}; sky + sun {agree} the map, "
                   f"rel. RMSE {sp['relative_rmse_split']:.3g} (sun-mis-balance) vs {sp['relative_rmse_unsplit_table']:.3g}"
                   " (table, unsplit) at equal samples")
    if checks or verified:
        click.echo(f"reports: {s['outdir']}/reports/<map>/check.html and verify/report.html")
    first = next((m for m in s["maps"] if "table_files" in m), None)
    if first is not None:
        json_file = next(p for p in first["table_files"] if p.endswith(".json"))
        click.echo(f"next: envsample inspect {json_file}")
    click.echo(f"({s['caution']})")


if __name__ == "__main__":  # pragma: no cover
    main()
