"""``envsample batch``: :func:`envsample.pipeline.batch.run_batch`."""

from __future__ import annotations

from pathlib import Path

import click

from envsample.cli.app import flags, main
from envsample.cli.options import table_options
from envsample.cli.output import progress_bar
from envsample.pipeline.batch import run_batch
from envsample.pipeline.outcomes import BatchInterrupted
from envsample.qa.profile import load_profile


@main.command()
@click.argument("sources", metavar="SOURCE...", nargs=-1, required=True)
@click.option("-o", "--output", "outdir", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="Output folder (created if missing): maps/<name>-<sha8>/, summary.csv, summary.json, index.html.")
@click.option("--workers", type=click.IntRange(0, None), default=None,
              help="Worker processes (default: the cores available; 0 runs in this process).")
@click.option("--verify", is_flag=True, help="Also run a small validation render per map.")
@click.option("--split-sun", is_flag=True, help="Also split the sun off every map whose sun holds the sampling "
              "check's analytic_light_share of the light (envsample split, into maps/NAME/split/).")
@click.option("--force", is_flag=True, help="Redo maps whose outputs are already up to date.")
@click.option("--fix", is_flag=True, help="Apply the safe remedies of 'envsample fix --auto' before building "
              "(the sources are never changed; fixed.exr and fix.json join each repaired map's folder).")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Send the work to a Dask distributed scheduler (needs 'pip install envsample[dask]').")
@click.option("--profile", "profile_path", type=click.Path(dir_okay=False, exists=True, path_type=Path), default=None,
              help="QA thresholds (TOML); default: the built-in profile.")
@click.option("--strict", is_flag=True, help="Exit with status 1 when any map warns, too.")
@table_options
@click.option("--compensate", is_flag=True, help="MIS-compensated tables (valid only inside an MIS combination).")
@click.option("--tune", is_flag=True, help="Store the tuned one-sample MIS selection in each table (as build --tune).")
@click.option("--raw", is_flag=True, help="Also write table.bin in each map folder (as build --raw).")
@click.option("--repair", is_flag=True, help="Build tables of maps with NaN/Inf pixels, set to 0 (as build --repair).")
@click.option("--allow-aspect", is_flag=True, help="Build tables of maps that are not 2:1.")
@click.option("--build-failed", is_flag=True, help="Also build tables for maps that failed QA.")
@click.option("--prune", is_flag=True, help="Remove map folders whose source is gone or has changed.")
@click.option("--follow-links", is_flag=True,
              help="Accept symbolic links in source folders that lead outside them (refused by default).")
def batch(sources, outdir, workers, verify, split_sun, force, fix, scheduler, profile_path, strict, size, primaries,
          mapping, uniform_mix, up, rotation_deg, compensate, tune, raw, repair, allow_aspect, build_failed, prune,
          follow_links):
    """Check, build tables for (and optionally verify) every map under SOURCE.

    SOURCE is files, folders (searched recursively) or glob patterns. Each map's
    outputs appear in OUTDIR only when complete, so an interrupted batch can be
    rerun to resume; maps whose source, options and output checksums are unchanged
    are skipped, and outputs a rerun does not ask for (an earlier --verify) are kept.
    Maps that fail QA get no table unless --build-failed. Source files are never
    modified. Exit status: 0 every map passed or warned,
    1 any map failed or could not be read (with --strict also any warning), 2 usage
    error, 130 interrupted.
    """

    profile = load_profile(profile_path)
    options = {"size": size, "primaries": primaries.lower(), "mapping": mapping, "uniform_mix": uniform_mix,
               "up": up, "rotation_deg": rotation_deg, "compensate": compensate, "tune": tune, "raw": raw,
               "repair": repair, "allow_aspect": allow_aspect}
    bar = progress_bar(0, "maps")

    def progress(p):
        bar.total = p.total
        bar.n = p.done
        c = p.counts
        bar.set_postfix_str(f"pass {c['pass']} warn {c['warn']} fail {c['fail']} error {c['error']} "
                            f"up-to-date {c['skipped']}", refresh=True)

    try:
        with bar:
            result = run_batch(list(sources), outdir, workers=workers, verify=verify, split_sun=split_sun, force=force,
                               fix=fix, scheduler=scheduler, options=options, profile=profile,
                               build_failed=build_failed, prune=prune, follow_links=follow_links, progress=progress)
    except BatchInterrupted as e:
        c = e.result.counts
        click.echo(f"interrupted: {c['done']} of {c['maps']} maps finished (their folders are complete), "
                   f"{c['pending']} not done; rerun the same command to resume", err=True)
        return 130
    for m in result.maps:
        if m.verdict == "pass":
            continue
        failed, warned = m.figures.get("failed_checks") or [], m.figures.get("warned_checks") or []
        detail = m.error or "; ".join(
            f"{label} {', '.join(ids)}" for label, ids in (("failed:", failed), ("warned:", warned)) if ids)
        click.echo(f"{m.verdict:<5}  {m.source}" + (f"  {flags(detail)}" if detail else ""))
    c = result.counts
    click.echo(f"{c['maps']} maps: {c['pass']} pass, {c['warn']} warn, {c['fail']} fail, {c['error']} error "
               f"({c['skipped']} up to date, not redone)")
    for dup in result.duplicates:
        click.echo("duplicate: " + " == ".join(dup["sources"]) + "  (one folder serves them)")
    for st in result.stale:
        what = "removed" if st["pruned"] else "kept" + (" (--prune removes it)" if st["reason"] in (
            "source gone", "source changed") else "")
        click.echo(f"stale: {st['folder']}  {st['reason']}" + (f": {st['source']}" if st["source"] else "")
                   + f"; {what}")
    line = _reference_line(result.maps)
    if line:
        click.echo(line)
    if result.summary:
        names = ", ".join(Path(p).name for p in result.summary.values())
        click.echo(f"wrote {outdir}/ ({names})")
    return result.exit_code(strict=strict)


def _reference_line(maps) -> str | None:
    """One line on the exact references of ``--verify``: their largest error bound and their time."""
    bounds = [m.figures["verify_reference_bound"] for m in maps
              if isinstance(m.figures.get("verify_reference_bound"), (int, float))]
    if not bounds:
        return None
    secs = [m.figures["verify_reference_seconds"] for m in maps
            if isinstance(m.figures.get("verify_reference_seconds"), (int, float))]
    timing = f"; {sum(secs):.1f} s in all, at most {max(secs):.2f} s for one map" if secs else ""
    return (f"verify reference: exact irradiance on {len(bounds)} maps at their table size, relative error bound "
            f"<= {max(bounds):.1e}{timing}")

