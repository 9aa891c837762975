"""``envsample check``: :func:`envsample.qa.checks.check_map` (+ :func:`envsample.reports.pages.check_page`)."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from envsample.cli.app import main
from envsample.cli.output import progress_bar
from envsample.core.files import atomic_write_text, refuse_inputs_as_outputs
from envsample.qa.profile import load_profile
from envsample.qa.report import format_report, report_to_json
from envsample.qa.run import check_map
from envsample.reports.pages import check_page


@main.command()
@click.argument("maps", metavar="MAP...", nargs=-1, required=True, type=click.Path(dir_okay=False, path_type=Path))
@click.option("--profile", "profile_path", type=click.Path(dir_okay=False, exists=True, path_type=Path), default=None,
              help="Thresholds (TOML); default: the built-in profile (see 'envsample/profiles/default.toml').")
@click.option("--json", "json_path", type=click.Path(dir_okay=False, path_type=Path), default=None, metavar="FILE",
              help="Also write every check with its values as JSON ('-' for standard output, which then holds the JSON "
                   "alone; the table goes to standard error).")
@click.option("--html", "html_path", type=click.Path(dir_okay=False, path_type=Path), default=None, metavar="FILE",
              help="Also write one self-contained HTML page for all the maps.")
@click.option("--strict", is_flag=True, help="Exit with status 1 on warnings too.")
@click.option("--only", "only", default=None, metavar="ID,ID",
              help="Run only these checks (comma-separated ids; 'read' always runs).")
def check(maps, profile_path, json_path, html_path, strict, only):
    """Check HDR environment maps before they enter the library.

    Each check has a stable id, a severity (pass, warn, fail), the measured value,
    its threshold, a message and a remedy. Exit status: 0 all pass, 1 any fail
    (with --strict also any warn), 2 unreadable input or usage error.
    Light levels are estimates for asset preparation, not certified lighting calculations.
    """
    refuse_inputs_as_outputs([json_path, html_path], list(maps) + ([profile_path] if profile_path else []))
    if json_path is not None and html_path is not None and str(json_path) != "-" and str(json_path) == str(html_path):
        raise click.UsageError(f"{json_path}: --json and --html name the same file; give each its own")
    profile = load_profile(profile_path)
    ids = None if only is None else [c.strip() for c in only.split(",") if c.strip()]
    for out in (json_path, html_path):
        if out is not None and str(out) != "-" and not out.parent.exists():
            raise click.UsageError(f"{out.parent}: output folder does not exist; create it first")
    reports = []
    with progress_bar(len(maps), "checking") as bar:
        for path in maps:
            reports.append(check_map(path, profile=profile, checks=ids))
            bar.update(1)
    # With --json -, standard output carries the JSON alone: the table and the notes go to standard error.
    to_stdout = json_path is not None and str(json_path) == "-"
    human = sys.stderr if to_stdout else sys.stdout
    click.echo(format_report(reports, color=human.isatty()), file=human)
    if json_path is not None:
        text = report_to_json(reports) + "\n"
        if to_stdout:
            click.echo(text, nl=False)
        else:
            atomic_write_text(json_path, text)
            click.echo(f"wrote {json_path}", file=human)
    if html_path is not None:
        check_page(reports, html_path)
        click.echo(f"wrote {html_path}", file=human)
    return max(r.exit_code(strict=strict) for r in reports)
