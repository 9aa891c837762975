"""``envsample verify``: :func:`envsample.pipeline.verify.verify_map`, then the table of estimators."""

from __future__ import annotations

from pathlib import Path

import click

from envsample.cli.app import main
from envsample.cli.options import SIZE, max_memory_option
from envsample.cli.output import print_rows, progress_bar, warnings_as_lines
from envsample.estimation.estimators import estimators as estimator_names
from envsample.pipeline.verify import verify_map


@main.command()
@click.argument("source", metavar="MAP_OR_TABLE", required=False, type=click.Path(path_type=Path))
@click.option("-o", "--output", "outdir", type=click.Path(file_okay=False, path_type=Path),
              help="Report folder (created if missing): metrics.json, EXR images, PNG pictures.")
@click.option("--spp", type=click.IntRange(1, 1 << 16), default=64, show_default=True,
              help="Samples per normal for each estimator.")
@click.option("--normals", type=SIZE, default="128x64", show_default=True,
              help="Grid of normals WIDTHxHEIGHT (a lat-long image of normals).")
@click.option("--estimators", default=None, metavar="LIST",
              help="Comma-separated estimator names (default: all irradiance estimators; see 'envsample verify --list').")
@click.option("--roughness", type=click.FloatRange(1e-4, 1.0), default=None,
              help="Also check glossy GGX reflection at this roughness (alpha).")
@click.option("--seed", type=click.IntRange(0, None), default=0, show_default=True, help="Random seed (recorded).")
@click.option("--table-size", type=SIZE, default=None, help="Table grid when SOURCE is a map (default: its size).")
@click.option("--no-sphere", is_flag=True, help="Skip the picture of a shaded sphere.")
@max_memory_option
@click.option("--list", "list_only", is_flag=True, is_eager=True, expose_value=True,
              help="List the estimator names and exit.")
def verify(source, outdir, spp, normals, estimators, roughness, seed, table_size, no_sphere, max_memory, list_only):
    """Render irradiance over a sphere of normals with every sampling strategy and
    MIS combination, compare with the exact reference, and say which is best.

    Writes metrics.json (relative RMSE, bias with its standard error, variance,
    firefly index, time per sample, efficiency, the recommended estimator), EXR
    images of the reference and each estimate, error heat maps and a convergence plot.
    """

    if list_only:
        click.echo("\n".join(estimator_names("irradiance")))
        return 0
    if source is None or outdir is None:
        raise click.UsageError("give MAP_OR_TABLE and -o OUTDIR (or --list)")
    names = None if estimators is None else [e.strip() for e in estimators.split(",") if e.strip()]
    with warnings_as_lines([]), progress_bar(0, "verify") as bar:
        def progress(label):
            bar.set_description(label)
            bar.refresh()

        m = verify_map(source, outdir, spp=spp, normals=normals, estimators=names, roughness=roughness, seed=seed,
                       table_size=table_size, sphere=not no_sphere, progress=progress, max_memory=max_memory)
    _print_report(source, outdir, m)
    return 0


def _fmt(x, spec: str, width: int) -> str:
    """A number in a fixed-width column, or a dash where there is none (a black map has no errors)."""
    return f"{x:{spec}}".rjust(width) if isinstance(x, (int, float)) else "-".rjust(width)


def _print_report(source, outdir, m: dict) -> None:
    tab, ref = m["table"], m["reference"]
    rows = [
        ("verify", f"{source}  (table {tab['cells'][0]}x{tab['cells'][1]}, {tab['mapping']})"),
        ("normals", f"{m['normals']['width']}x{m['normals']['height']} x {m['spp']} spp, seed {m['seed']}"),
        ("reference", f"exact at {ref['resolution'][0]}x{ref['resolution'][1]}, relative error bound "
                      f"{ref['relative_error_bound']:.1e} ({ref['seconds']:.1f} s, its accuracy check "
                      f"{ref['accuracy_seconds']:.1f} s; {ref['backend']} kernel)"),
    ]
    if m.get("scale"):
        rows.append(("scale", m["scale"]["why"]))
    print_rows(rows)
    click.echo("")
    click.echo(f"{'estimator':<20} {'rel. RMSE':>9}  {'bias +- SE':>17}  {'firefly':>8}  {'ns/sample':>9}  "
               f"{'efficiency':>10}")
    rec = m["recommended"]
    for name, e in m["estimators"].items():
        bias = (f"{e['mean_bias']:+.3f} +- {e['mean_bias_se']:.3f}"
                if isinstance(e.get("mean_bias"), float) and isinstance(e.get("mean_bias_se"), float) else "-")
        # An unbiased estimator whose mean is many SE off has missed rare, bright samples (the sun).
        mark = "  <- recommended" if name == rec["estimator"] else (
            "  (mean off: misses rare bright light)" if e.get("bias_consistent_with_zero") is False else "")
        if e.get("tuned_from"):
            mark += f"  (the table's tuned setting: {e['tuned_from']['estimator']} at {e['tuned_from']['table_fraction']:g})"
        click.echo(f"{name:<20} {_fmt(e.get('relative_rmse'), '.4g', 9)}  {bias:>17}  "
                   f"{_fmt(e.get('firefly_index'), '.3g', 8)}  {_fmt(e['time_per_sample_s'] * 1e9, '.0f', 9)}  "
                   f"{_fmt(e.get('efficiency'), '.3g', 10)}{mark}")
    if m.get("split"):
        _print_split(m["split"])
    click.echo("")
    if rec["estimator"] is None:
        rows = [("recommended", "none: " + rec["rule"] + " (no light reaches any normal)")]
    else:
        rows = [("recommended", f"{rec['estimator']} (highest efficiency among estimators whose bias is within 4 SE; "
                                f"least variance: {rec['lowest_variance']})")]
    g = m.get("glossy")
    if g:
        angles = ", ".join(f"{a:g}" for a in g["view_angles_deg"])
        rows.append(("glossy", f"GGX roughness {g['roughness']:g}, relative RMSE at view angles {angles} deg "
                               f"({g['normals'][0]}x{g['normals'][1]} normals, map reduced to "
                               f"{g['map'][0]}x{g['map'][1]}):"))
        for name, e in g["estimators"].items():
            rows.append(("", f"{name:<20} " + "  ".join(_fmt(x, ".3g", 8) for x in e["relative_rmse"])))
    rows.append(("wrote", f"{outdir}/ (report.html, metrics.json and {len(list(Path(outdir).glob('*.exr')))} EXR, "
                          f"{len(list(Path(outdir).glob('*.png')))} PNG files)"))
    print_rows(rows)
    click.echo(f"({m['caution']})")


def _print_split(doc: dict) -> None:
    """The split against its original map, side by side at equal samples (split.json)."""
    click.echo("")
    if not doc.get("compared"):
        click.echo(f"split      {doc.get('reason')}")
        return
    verdict = "agrees" if doc["consistent"] else "DISAGREES"
    click.echo(f"split      sky + sun {verdict} with {doc['original']} within the Monte Carlo error "
               f"(references differ by {doc['reference_difference']:+.1e} of the mean); "
               f"{doc['normals'][0]}x{doc['normals'][1]} normals x {doc['spp']} spp")
    click.echo(f"{'scene':<8} {'estimator':<24} {'rel. RMSE':>9}  {'bias +- SE':>17}  {'firefly':>8}")
    for e in doc["estimators"].values():
        bias = f"{e['mean_bias']:+.3f} +- {e['mean_bias_se']:.3f}"
        click.echo(f"{e['scene']:<8} {e['estimator']:<24} {e['relative_rmse']:>9.4g}  {bias:>17}  "
                   f"{e['firefly_index']:>8.3g}")
