"""One map of a batch, from file to published folder: :func:`process_map` (the task the runners call).

A top-level function of plain-dict input and output, so that spawned worker processes and
Dask workers can import and pickle it.  Each map is built in ``OUTDIR/.staging/<name>.<token>/``
and renamed into ``maps/`` when complete (POSIX ``rename(2)`` is atomic within one file system),
with ``manifest.json`` written last; an unexpected exception removes the staging folder and
becomes an error row.  Photometric figures are estimates for asset preparation, not certified
lighting calculations.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import uuid
import warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from envsample.core.schema import Schema
from envsample.core.text import caution, one_line
from envsample.errors import EnvsampleError, EnvsampleWarning, MapReadError, MapValidationError, SunSplitError
from envsample.pipeline.outcomes import ROW_FIELDS

#: Name and version of each map folder's ``manifest.json``.
MANIFEST_SCHEMA = Schema("envsample.batch-map", 2)


#: Thumbnail width in pixels (the index page shows them at this size).
THUMB_WIDTH = 128


#: Settings of the optional verification (small on purpose: a batch is a screening pass).  The
#: reference is the same exact irradiance as ``envsample verify`` and runs on the table's own map
#: (the source at full resolution, or ``--size``), the cells the estimators sample, so it is exact
#: for what they integrate; with the compiled kernel its cost is about one pass over the map
#: (its row sums) plus 32x16 normals x (H + W) boundary elements, well under a second at 8192x4096.
VERIFY_SETTINGS = {
    "spp": 32,
    "normals": [32, 16],
    "estimators": ["cosine", "table", "mis-balance", "one-sample-balance"],
    "sphere": False,
}


MAPS_FOLDER = "maps"


def map_seed(sha256: str) -> int:
    """Seed of a map's random numbers: a 64-bit word from ``SeedSequence(int(sha256, 16))``."""
    return int(np.random.SeedSequence(int(sha256, 16)).generate_state(1, dtype=np.uint64)[0])


def error_line(error: BaseException) -> str:
    """One line for an error in a summary row: the message, with the exception's class unless it is ours."""
    text = one_line(error) or error.__class__.__name__
    if not isinstance(error, EnvsampleError):
        text = f"{error.__class__.__name__}: {text}"
    return one_line(text, limit=300)


def remove_tree(path: Path) -> None:
    shutil.rmtree(path, ignore_errors=True)


def dump_json(path: Path, doc) -> None:
    path.write_text(json.dumps(doc, indent=2, allow_nan=False) + "\n", encoding="utf-8")


def _report_figures(report) -> dict:
    """Key figures of a QA report for the summary row (None where a check did not run).

    The same figures as a row of the HTML index (:func:`envsample.html.report_row`):
    dynamic range in stops, the sun-like emitter (degrees, share of the light), the
    sampling check's relative RMSE and peak sample share, the irradiance on an up-facing
    surface (map units x sr).
    """
    from envsample.reports.pages import report_row

    row = report_row(report)
    return {k: row.get(k) for k in ROW_FIELDS if k in row and k not in ("source", "verdict", "error")}


def _files_of(folder: Path) -> dict:
    from envsample.io.maps import file_sha256

    files = {}
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            files[p.relative_to(folder).as_posix()] = {"size": p.stat().st_size, "sha256": file_sha256(p)}
    return files


def _build_outputs(task: Mapping, work: Path) -> dict:
    """Write check.json, thumb.png, the table and verify/ into ``work``; return the summary row."""
    from envsample.io.maps import read_map, validate_map
    from envsample.qa.run import check_map
    from envsample.reports.pictures import thumbnail, write_png
    from envsample.sampling.table import build_table

    src = Path(task["source"])
    try:
        image = read_map(src)
    except MapReadError:
        image = None
    if image is not None and image.sha256 != task["sha256"]:
        raise EnvsampleError(f"{src}: the file changed while the batch ran (SHA-256 differs); rerun the batch")
    # An unreadable file still gets its QA report (a failing "read" check) so the reviewer sees why.
    report = check_map(src if image is None else image, profile=task["profile"])
    dump_json(work / "check.json", report.to_dict())
    row = _report_figures(report)
    row.update(source=task["display"], status="done", folder=f"{MAPS_FOLDER}/{task['name']}", sha256=task["sha256"])
    if image is None or not report.readable:
        row.update(verdict="error", error=report.checks[0].message if report.checks else "unreadable")
        return row
    row["verdict"] = report.verdict
    write_png(work / "thumb.png", thumbnail(image.rgb, width=THUMB_WIDTH))
    # The notes of validation and of the build say what the warnings would say; a batch
    # records them in the row instead of printing them once per map.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EnvsampleWarning)
        try:
            clean, notes = validate_map(image)
        except MapValidationError as e:
            row["table_note"] = "no table: " + error_line(e).removeprefix(f"{src}: ")
            return row
        o = task["options"]
        table = build_table(clean, size=o["size"], primaries=o["primaries"], mapping=o["mapping"],
                            uniform_mix=o["uniform_mix"], up=o["up"], rotation_deg=o["rotation_deg"])
    table.save(work / "table")
    notes = list(notes) + [str(n) for n in table.metadata.get("notes", [])]
    row.update(luminance_integral=float(table.integrals["luminance"]),
               table_width=table.table_width, table_height=table.table_height,
               table_note="; ".join(notes) or None)
    if task.get("split_sun"):
        row.update(_split(clean, work / "split", task))
    if task["verify"]:
        try:
            row.update(_verify(table, work / "verify", seed=map_seed(task["sha256"])))
        except Exception as e:
            raise EnvsampleError(f"verify failed ({error_line(e)})") from e
    return row


def _split(image, folder: Path, task: Mapping) -> dict:
    """``split/``: the sky, sun and sky table of a map whose sun holds the sampling check's share; else a note.

    The threshold is the profile's ``[sampling] analytic_light_share`` (the share from which
    the check advises an analytic sun); the sun is the shared finder's.
    """
    from envsample.lights.split import split_sun
    from envsample.pipeline.split import write_split

    share = float(task["profile"].section("sampling")["analytic_light_share"])
    o = task["options"]
    try:
        sp = split_sun(image.rgb, primaries=o["primaries"], up=o["up"], rotation_deg=o["rotation_deg"])
    except SunSplitError:
        return {"split_note": "no sun-like emitter: not split"}
    if sp.found.share < share:
        return {"split_note": f"sun holds {sp.found.share:.1%} of the light, under {share:.0%}: not split"}
    folder.mkdir()
    write_split(sp, folder, "map", source={"map": task["display"], "sha256": task["sha256"]}, size=o["size"])
    return {"split_note": f"split: sun {sp.found.share:.1%} of the light"
                          + (", core clipped" if sp.found.clipped else "")}


def _verify(table, folder: Path, *, seed: int) -> dict:
    """Run the validation render at :data:`VERIFY_SETTINGS`; return its key figures for the row.

    The summary fields depend on the map and the seed alone: the relative RMSEs and the
    reference's relative error bound.  The reference's seconds (``verify_reference_seconds``)
    go to the manifest's row and the command's output, not to the summaries (a timing;
    verify's recommended estimator ranks by measured efficiency, which includes timings,
    so it is left in ``verify/metrics.json``).
    """
    from envsample.pipeline.verify import verify_map  # lazily: verify pulls in the estimators and matplotlib

    s = VERIFY_SETTINGS
    doc = verify_map(table, folder, spp=s["spp"], normals=tuple(s["normals"]), estimators=tuple(s["estimators"]),
                     seed=seed, sphere=s["sphere"])
    est = doc.get("estimators", {})

    def rmse(name):
        v = est.get(name, {}).get("relative_rmse")
        return float(v) if isinstance(v, (int, float)) and math.isfinite(v) else None

    ref = doc.get("reference", {})
    return {"verify_rmse_table": rmse("table"), "verify_rmse_mis": rmse("mis-balance"),
            "verify_reference_bound": ref.get("relative_error_bound"),
            "verify_reference_seconds": ref.get("seconds")}


def _publish(work: Path, final: Path, staging: Path) -> None:
    """Rename a finished folder into place; an older folder of the same name is moved aside first."""
    if final.exists():
        old = staging / f"{final.name}.old.{uuid.uuid4().hex[:12]}"
        os.replace(final, old)
        os.replace(work, final)
        remove_tree(old)
    else:
        os.replace(work, final)


def process_map(task: Mapping) -> dict:
    """Process one map and publish its folder; return ``{"status", "row"}`` (plain data).

    ``task`` is the plain dict :func:`run_batch` builds (source path, expected
    SHA-256, folder name, options, profile, options key).  Every output is written
    into a fresh staging folder that is renamed into ``OUTDIR/maps/`` only when
    complete (``manifest.json`` written last); on any error or interruption the
    staging folder is removed.  Errors of the map (unreadable, invalid pixels) are
    results, not exceptions; an unexpected exception gives ``status = "error"``
    with a one-line message and writes nothing.
    """
    staging = Path(task["staging"])
    work = staging / f"{task['name']}.{uuid.uuid4().hex[:12]}"
    work.mkdir(parents=True)
    try:
        row = _build_outputs(task, work)
        manifest = {
            **MANIFEST_SCHEMA.header(),
            "tool": {"name": "envsample", "version": task["version"]},
            "source": {"path": task["display"], "sha256": task["sha256"], "size": Path(task["source"]).stat().st_size},
            "key": task["key"],
            "options": task["key_doc"],
            "seed": map_seed(task["sha256"]),
            "files": _files_of(work),
            "row": row,
            "caution": caution("photometric figures"),
        }
        dump_json(work / "manifest.json", manifest)
        _publish(work, Path(task["outdir"]) / MAPS_FOLDER / task["name"], staging)
        return {"status": "done", "row": row}
    except Exception as e:
        remove_tree(work)
        return {"status": "error", "row": error_row(task, f"processing failed: {error_line(e)}")}
    except BaseException:
        remove_tree(work)
        raise


def error_row(task: Mapping, message: str) -> dict:
    return {"source": task["display"], "status": "error", "verdict": "error", "folder": None,
            "sha256": task.get("sha256"), "error": message}


def up_to_date(folder: Path, sha256: str, key: str, version: str) -> dict | None:
    """The stored summary row if ``folder`` holds complete outputs for these bytes and options."""
    try:
        doc = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(doc, dict) or not MANIFEST_SCHEMA.matches(doc) or doc.get("key") != key:
        return None
    if doc.get("source", {}).get("sha256") != sha256 or doc.get("tool", {}).get("version") != version:
        return None
    files = doc.get("files")
    if not isinstance(files, dict) or not isinstance(doc.get("row"), dict):
        return None
    for rel, info in files.items():
        try:
            if (folder / rel).stat().st_size != info["size"]:
                return None
        except (OSError, KeyError, TypeError):
            return None
    return doc["row"]
