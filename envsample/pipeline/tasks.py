"""One map of a batch, from file to published folder: :func:`process_map` (the task the runners call).

A top-level function of plain-dict input and output, so that spawned worker processes and
Dask workers can import and pickle it.  Each map is built in ``OUTDIR/.staging/<name>.<token>/``
and renamed into ``maps/`` when complete (POSIX ``rename(2)`` is atomic within one file system),
with ``manifest.json`` written last; an unexpected exception removes the staging folder, leaves
the published folder as it was, and becomes an error row.

A map folder holds up to three *outputs*, each with its own options key in the manifest:

``check``   ``check.json`` (the QA report), ``check.html`` (its page), ``thumb.png``;
``table``   ``table.json``, ``table.npz`` (``table.bin`` with ``raw``), for maps that passed
            or warned (or, with ``build_failed``, also for maps that failed QA);
``verify``  ``verify/`` (:func:`envsample.pipeline.verify.verify_map`), when asked for.

An output whose key and files (SHA-256 of every file, recorded in the manifest) are unchanged
is carried over from the published folder instead of being redone; an output that a run does
not ask for is kept as it was, unless it no longer describes the map (a verify of a table that
was rebuilt with other options), which the row's ``note`` then says.  Photometric figures are
estimates for asset preparation, not certified lighting calculations.

References
----------
- IEEE Std 1003.1-2017 (POSIX), ``rename()``, ``link()``.
- FIPS 180-4 (2015), Secure Hash Standard: SHA-256.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import shutil
import stat
import uuid
import warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from envsample.core.schema import Schema
from envsample.core.text import caution, one_line
from envsample.errors import EnvsampleError, EnvsampleWarning, MapReadError, MapValidationError, SunSplitError
from envsample.io.maps import read_map, validate_map, write_map
from envsample.lights.split import split_sun
from envsample.pipeline.fix import (
    FIX_LOG_SCHEMA,
    HEADER_ATTRIBUTE,
    FixRefusedError,
    header_record,
    output_pixel_type,
    repair_image,
)
from envsample.pipeline.outcomes import ROW_FIELDS
from envsample.pipeline.split import write_split
from envsample.pipeline.verify import verify_map  # lazily: verify pulls in the estimators and matplotlib
from envsample.qa.run import check_map
from envsample.reports.pages import check_page, report_row
from envsample.reports.pictures import thumbnail, write_png
from envsample.sampling.table import build_table, load_table
from envsample.validation.tuning import recommend

#: Name and version of each map folder's ``manifest.json`` (3: one options key and file list per output).
MANIFEST_SCHEMA = Schema("envsample.batch-map", 3)

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

#: The outputs of a map folder, in the order they are made.
OUTPUTS = ("check", "table", "verify")

#: Row fields each output contributes (the rest of ROW_FIELDS describe the source and the run).
OUTPUT_FIELDS = {
    "check": ("verdict", "error", "fix_note", "width", "height", "format", "pixel_type", "failed_checks", "warned_checks",
              "dynamic_range", "sun_azimuth_deg", "sun_elevation_deg", "sun_share", "irradiance_up",
              "sampling_relative_rmse", "peak_sample_share"),
    "table": ("luminance_integral", "table_width", "table_height", "table_note", "tuned", "split_note"),
    "verify": ("verify_rmse_table", "verify_rmse_mis", "verify_rmse_tuned", "verify_reference_bound",
               "verify_reference_seconds"),
}

#: The row note of a map that failed QA and got no table.
NOT_BUILT_NOTE = "no table: the map failed QA (batch --build-failed, build_failed=True in Python, builds it anyway)"

_HASH_CHUNK = 1 << 20


def map_seed(sha256: str) -> int:
    """Seed of a map's random numbers: a 64-bit word from ``SeedSequence(int(sha256, 16))``."""
    return int(np.random.SeedSequence(int(sha256, 16)).generate_state(1, dtype=np.uint64)[0])


def error_line(error: BaseException) -> str:
    """One line for an error in a summary row: the message (the file first for an OS error),
    with the exception's class unless it is ours."""
    if isinstance(error, OSError) and error.filename and not isinstance(error, EnvsampleError):
        text = f"{error.filename}: {error.strerror or one_line(error)}"
    else:
        text = one_line(error) or error.__class__.__name__
        if not isinstance(error, EnvsampleError):
            text = f"{error.__class__.__name__}: {text}"
    return one_line(text, limit=300)


def regular_file_sha256(path) -> str:
    """Hex SHA-256 of a regular file, refusing anything else *before* reading a byte.

    The file is opened with ``O_NONBLOCK`` (opening a FIFO does not wait for a writer) and
    its type is taken from the open descriptor (``fstat``), so a FIFO, a device such as
    ``/dev/zero`` or a socket is refused with :class:`MapReadError` instead of blocking or
    reading forever.
    """
    p = Path(path)
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0)
    try:
        fd = os.open(p, flags)
    except OSError as e:
        raise MapReadError(f"{p}: cannot be read ({e.strerror}); check the file's permissions") from e
    try:
        mode = os.fstat(fd).st_mode
        if not stat.S_ISREG(mode):
            kind = ("a FIFO (named pipe)" if stat.S_ISFIFO(mode) else "a device" if stat.S_ISCHR(mode) or
                    stat.S_ISBLK(mode) else "a socket" if stat.S_ISSOCK(mode) else "not a regular file")
            raise MapReadError(f"{p}: is {kind}, not a map file; remove it from the sources")
        h = hashlib.sha256()
        with os.fdopen(fd, "rb", closefd=False) as fh:
            for chunk in iter(lambda: fh.read(_HASH_CHUNK), b""):
                h.update(chunk)
        return h.hexdigest()
    except OSError as e:
        raise MapReadError(f"{p}: cannot be read ({e.strerror}); check the file") from e
    finally:
        os.close(fd)


def remove_tree(path: Path) -> None:
    shutil.rmtree(path, ignore_errors=True)


def dump_json(path: Path, doc) -> None:
    """JSON into a private staging folder (published later by one rename)."""
    path.write_text(json.dumps(doc, indent=2, allow_nan=False) + "\n", encoding="utf-8")


def output_of(rel: str) -> str | None:
    """Which output a file of a map folder belongs to (None for the manifest)."""
    if rel == "manifest.json":
        return None
    if rel.startswith("verify/"):
        return "verify"
    if rel.startswith(("table.", "split/")):
        return "table"  # the split of the sun (split_sun) is made with the table, from the same pixels
    return "check"


def read_manifest(folder: Path) -> dict | None:
    """The manifest of a published map folder, or None if there is none we can use."""
    try:
        doc = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError):
        return None
    if not isinstance(doc, dict) or not MANIFEST_SCHEMA.matches(doc):
        return None
    if not isinstance(doc.get("outputs"), dict) or not isinstance(doc.get("source"), dict):
        return None
    return doc


def verified_outputs(folder: Path, manifest: Mapping | None, keys: Mapping) -> set:
    """The outputs of a folder that have files, whose options key equals ``keys[output]`` and whose
    files are all present with their recorded SHA-256 (not only their sizes)."""
    if manifest is None:
        return set()
    ok = set()
    for name, out in manifest["outputs"].items():
        if name not in OUTPUTS or not isinstance(out, dict) or out.get("key") != keys.get(name):
            continue
        files = out.get("files")
        if not isinstance(files, dict) or not files:
            continue
        try:
            if all(regular_file_sha256(folder / rel) == info["sha256"] for rel, info in files.items()):
                ok.add(name)
        except (MapReadError, KeyError, TypeError):
            continue
    return ok


def merged_row(manifest: Mapping, outputs) -> dict:
    """The summary row of the outputs kept from a manifest."""
    row = {}
    for name in OUTPUTS:
        if name in outputs:
            row.update(manifest["outputs"][name].get("row") or {})
    return row


def _files_of(folder: Path) -> dict:
    files = {}
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            rel = p.relative_to(folder).as_posix()
            if output_of(rel) is not None:
                files[rel] = {"size": p.stat().st_size, "sha256": regular_file_sha256(p)}
    return files


def _carry_over(src: Path, work: Path, files: Mapping) -> None:
    """Hard-link (else copy) the files of a kept output into the staging folder.

    Published files are never changed in place (every write replaces), so a link is safe.
    """
    for rel in files:
        dst = work / rel
        dst.parent.mkdir(parents=True, exist_ok=True)
        try:
            os.link(src / rel, dst)
        except OSError:
            shutil.copy2(src / rel, dst)


def _report_figures(report) -> dict:
    """Key figures of a QA report for the summary row (None where a check did not run); the same
    figures as a row of the index page (:func:`envsample.reports.pages.report_row`)."""

    row = report_row(report)
    return {k: row.get(k) for k in OUTPUT_FIELDS["check"] if k in row}


class _Map:
    """The source of one task, read at most once, and checked against the SHA-256 planned."""

    def __init__(self, task: Mapping):
        self.path = Path(task["source"])
        self.sha256 = task["sha256"]
        self._image = None
        self._read = False

    def fixed_image(self, work: Path):
        """The repaired map as written (``fixed.exr``, this run's or carried over with the check output), else the source.

        The table is built from the file itself, so it records ``fixed.exr`` (beside it in the map's
        folder) as its source and reads its radiance back from there, bit for bit the pixels it sampled.
        """

        if (work / "fixed.exr").is_file():
            return read_map(work / "fixed.exr")
        return self.image()

    def image(self):

        if not self._read:
            self._read = True
            try:
                self._image = read_map(self.path)
            except MapReadError:
                self._image = None
            if self._image is not None and self._image.sha256 != self.sha256:
                raise EnvsampleError(f"{self.path}: the file changed while the batch ran (SHA-256 differs); "
                                     "rerun the batch")
        return self._image


def _make_check(task: Mapping, source: _Map, work: Path) -> dict:
    """check.json, thumb.png and check.html; the row part of the check output."""

    image = source.image()
    # An unreadable file still gets its QA report (a failing "read" check) so the reviewer sees why.
    try:
        report = check_map(source.path if image is None else image, profile=task["profile"])
    except (ArithmeticError, TypeError, ValueError) as e:
        top = float(np.nanmax(image.rgb)) if image is not None and image.rgb.size else float("nan")
        raise EnvsampleError(f"{source.path}: the QA checks could not run on this map ({error_line(e)}; its "
                             f"largest value is {top:.3g}); this is a bug of envsample, please report it") from e
    fix_note = None
    if task["options"].get("fix") and image is not None and report.readable:
        image, report, fix_note = _auto_fix(image, report, work, task["profile"])
    dump_json(work / "check.json", report.to_dict())
    row = _report_figures(report)
    if image is None or not report.readable:
        row.update(verdict="error", error=report.checks[0].message if report.checks else "unreadable")
    else:
        row["verdict"] = report.verdict
        write_png(work / "thumb.png", thumbnail(image.rgb, width=THUMB_WIDTH))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EnvsampleWarning)
        check_page(report, work / "check.html", images=[None if image is None else image])
    row["fix_note"] = fix_note
    return row


#: Table options that only add to a table (a .bin file, the tuned advice): a table made with them
#: also serves a run that does not ask for them, so a rerun without them keeps them.
ADDITIVE = ("raw", "tune", "split_sun")


def _extras(out: Mapping | None) -> dict:
    ex = (out or {}).get("extras") or {}
    return {k: bool(ex.get(k)) for k in ADDITIVE}


def table_serves(out: Mapping | None, options: Mapping) -> bool:
    """Whether a recorded table output has every additive part the options ask for."""
    ex = _extras(out)
    return all(ex[k] or not options[k] for k in ADDITIVE)


def _make_table(task: Mapping, source: _Map, work: Path, extras: Mapping,
                fix_note: str | None = None) -> tuple[dict, bool]:
    """table.json/.npz (.bin); the row part, and whether a table was written.

    ``extras`` are the additive parts an earlier table had: they are made again, so a
    rebuild does not lose what a rerun did not ask for.  With ``fix`` the table is built
    from the repaired map (``fixed.exr`` of the check output) when there is one.
    """

    o = {**task["options"], **{k: bool(task["options"][k] or extras.get(k)) for k in ADDITIVE}}
    image = source.fixed_image(work) if o.get("fix") else source.image()
    # The notes of validation and of the build say what the warnings would say; a batch
    # records them in the row instead of printing them once per map.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EnvsampleWarning)
        try:
            clean, notes = validate_map(image, repair=o["repair"], allow_aspect=o["allow_aspect"])
            table = build_table(clean, size=o["size"], primaries=o["primaries"], mapping=o["mapping"],
                                uniform_mix=o["uniform_mix"], up=o["up"], rotation_deg=o["rotation_deg"],
                                compensate=o["compensate"], allow_aspect=o["allow_aspect"])
        except (MapValidationError, EnvsampleError, ValueError) as e:
            return {"table_note": "no table: " + error_line(e).removeprefix(f"{source.path}: ")}, False
        if o["tune"]:

            table.metadata["recommendation"] = recommend(table, seed=map_seed(task["sha256"]) % (1 << 32))
    table.save(work / "table", raw=o["raw"])
    notes = ([fix_note] if fix_note else []) + list(notes) + [
        str(n) for n in table.metadata.get("notes", []) if str(n) not in notes]
    rec = table.metadata.get("recommendation")
    row = {"luminance_integral": float(table.integrals["luminance"]), "table_width": table.table_width,
           "table_height": table.table_height, "table_note": "; ".join(notes) or None,
           "tuned": None if not rec else f"{rec['estimator']} at table fraction {rec['table_fraction']:g}"}
    if o["split_sun"]:
        row.update(_split(clean, work / "split", {**task, "options": o}))
    return row, True


def _auto_fix(image, report, work: Path, profile):
    """``batch --fix``: the safe remedies (``fix --auto``) in memory; the map, its report and a note for the row.

    When something was repaired, ``fixed.exr`` (steps in its header) and ``fix.json`` (steps,
    verdicts before and after) join the map's folder, and the table is built from the repaired
    map.  A map that cannot be fixed, or needs nothing, is kept as it is (the note says why).
    """
    import dataclasses

    try:
        rgb, records, _, _ = repair_image(image, report, auto=True, profile=profile)
    except FixRefusedError as e:
        return image, report, "not fixed: " + str(e).split(": ", 1)[-1]
    if not records:
        return image, report, None
    write_map(work / "fixed.exr", rgb, pixel_type=output_pixel_type(image, rgb),
              attributes={HEADER_ATTRIBUTE: header_record(image, records)})
    fixed = dataclasses.replace(image, rgb=rgb)
    after = check_map(fixed, profile=profile)
    dump_json(work / "fix.json", {**FIX_LOG_SCHEMA.header(), "source": str(image.path), "source_sha256": image.sha256,
                                  "steps": records, "before": {"verdict": report.verdict},
                                  "after": {"verdict": after.verdict}})
    names = ", ".join(r["remedy"] for r in records)
    return fixed, after, f"fixed ({names}): {report.verdict} -> {after.verdict}"


def _split(image, folder: Path, task: Mapping) -> dict:
    """``split/``: the sky, sun and sky table of a map whose sun holds the sampling check's share; else a note.

    The threshold is the profile's ``[sampling] analytic_light_share`` (the share from which
    the check advises an analytic sun); the sun is the shared finder's.
    """

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




def _make_verify(task: Mapping, work: Path) -> dict:
    """verify/ from the table in ``work``; the row part.

    The summary fields depend on the map and the seed alone: the relative RMSEs and the
    reference's relative error bound.  The reference's seconds (``verify_reference_seconds``)
    go to the manifest's row and the command's output, not to the summaries (a timing;
    verify's recommended estimator ranks by measured efficiency, which includes timings,
    so it is left in ``verify/metrics.json``).
    """

    s = VERIFY_SETTINGS

    # The table object, not its staging path, so metrics.json names the map it came from.
    doc = verify_map(load_table(work / "table"), work / "verify", spp=s["spp"], normals=tuple(s["normals"]),
                     estimators=tuple(s["estimators"]), seed=map_seed(task["sha256"]), sphere=s["sphere"])
    est = doc.get("estimators", {})

    def rmse(name):
        v = est.get(name, {}).get("relative_rmse")
        return float(v) if isinstance(v, (int, float)) and math.isfinite(v) else None

    ref = doc.get("reference", {})
    return {"verify_rmse_table": rmse("table"), "verify_rmse_mis": rmse("mis-balance"),
            "verify_rmse_tuned": rmse("tuned"), "verify_reference_bound": ref.get("relative_error_bound"),
            "verify_reference_seconds": ref.get("seconds")}


def _build_outputs(task: Mapping, work: Path, final: Path) -> tuple[dict, dict, list]:
    """Make or carry over each output into ``work``; return (row parts, outputs made, notes)."""
    keys = task["keys"]
    old = read_manifest(final)
    if old is not None and old["source"].get("sha256") != task["sha256"]:
        old = None
    reuse = verified_outputs(final, old, keys)
    source = _Map(task)
    parts, notes = {}, []

    def keep(name):
        _carry_over(final, work, old["outputs"][name]["files"])
        parts[name] = dict(old["outputs"][name].get("row") or {})

    if "check" in reuse:
        keep("check")
    else:
        parts["check"] = _make_check(task, source, work)
    verdict = parts["check"].get("verdict")
    wanted = verdict in ("pass", "warn") or (verdict == "fail" and task["build_failed"])
    recorded_table = (old or {}).get("outputs", {}).get("table")
    old_table = recorded_table if "table" in reuse else None
    has_table = False
    if old_table is not None and table_serves(old_table, task["options"]):
        keep("table")
        has_table = True
        if not wanted:
            notes.append("table kept from an earlier run with build_failed")
    elif wanted or old_table is not None:
        parts["table"], has_table = _make_table(task, source, work, _extras(recorded_table),
                                                fix_note=parts["check"].get("fix_note"))
    elif verdict == "fail":
        parts["table"] = {"table_note": NOT_BUILT_NOTE}
    table_sha = regular_file_sha256(work / "table.json") if has_table else None
    old_verify = (old or {}).get("outputs", {}).get("verify") if "verify" in reuse else None
    if has_table and old_verify is not None and old_verify.get("table_sha256") == table_sha:
        keep("verify")
    elif has_table and task["verify"]:
        try:
            parts["verify"] = _make_verify(task, work)
        except Exception as e:
            raise EnvsampleError(f"verify failed ({error_line(e)})") from e
        if all(v is None for v in parts["verify"].values()):
            notes.append("verify: no light reaches any normal (a black map), nothing to rank")
    dropped = [n for n in (old or {}).get("outputs", {}) if n in OUTPUTS and n not in parts]
    for name in dropped:
        why = "the table changed or is gone" if name == "verify" else "its options or files changed"
        notes.append(f"earlier {name} results removed: {why}")
    return parts, {n: keys[n] for n in parts if n in keys}, notes


def process_map(task: Mapping) -> dict:
    """Process one map and publish its folder; return ``{"status", "row"}`` (plain data).

    ``task`` is the plain dict :func:`run_batch` builds (source path, expected SHA-256,
    folder name, options, profile, the options key of each output).  Outputs whose key
    and files are unchanged are carried over from the published folder; the rest are
    made in a fresh staging folder that is renamed into ``OUTDIR/maps/`` only when
    complete (``manifest.json`` written last); on any error or interruption the staging
    folder is removed and the published folder is left as it was.  Errors of the map
    (unreadable, invalid pixels) are results, not exceptions; an unexpected exception
    gives ``status = "error"`` with a one-line message and writes nothing.
    """
    staging = Path(task["staging"])
    final = Path(task["outdir"]) / MAPS_FOLDER / task["name"]
    work = staging / f"{task['name']}.{uuid.uuid4().hex[:12]}"
    work.mkdir(parents=True)
    try:
        parts, made, notes = _build_outputs(task, work, final)
        files = _files_of(work)
        outputs = {}
        for name in parts:
            out_files = {rel: info for rel, info in files.items() if output_of(rel) == name}
            outputs[name] = {"key": made.get(name), "files": out_files, "row": parts[name]}
            if name == "table" and not out_files:
                outputs[name]["reason"] = "qa" if parts[name].get("table_note") == NOT_BUILT_NOTE else "build"
            elif name == "table":
                outputs[name]["extras"] = {"raw": "table.bin" in out_files,
                                           "tune": bool(parts[name].get("tuned")),
                                           "split_sun": bool(parts[name].get("split_note"))}
            elif name == "verify":
                outputs[name]["table_sha256"] = (files.get("table.json") or {}).get("sha256")
        row = {}
        for name in OUTPUTS:
            row.update(parts.get(name, {}))
        row.update(source=task["display"], status="done", folder=f"{MAPS_FOLDER}/{task['name']}",
                   sha256=task["sha256"], note="; ".join(notes) or None)
        manifest = {
            **MANIFEST_SCHEMA.header(),
            "tool": {"name": "envsample", "version": task["version"]},
            "source": {"path": task["display"], "resolved": task["source"], "sha256": task["sha256"],
                       "size": Path(task["source"]).stat().st_size},
            "options": task["key_docs"],
            "seed": map_seed(task["sha256"]),
            "outputs": outputs,
            # The row of the summaries, plus the reference's seconds (a timing: for the command's output only).
            "row": {k: row.get(k) for k in ROW_FIELDS + ("verify_reference_seconds",) if k in row},
            "caution": caution("photometric figures"),
        }
        dump_json(work / "manifest.json", manifest)
        publish(work, final, staging)
        return {"status": "done", "row": manifest["row"]}
    except Exception as e:
        remove_tree(work)
        return {"status": "error", "row": error_row(task, f"processing failed: {error_line(e)}")}
    except BaseException:
        remove_tree(work)
        raise


def publish(work: Path, final: Path, staging: Path) -> None:
    """Rename a finished folder into place; an older folder of the same name is moved aside first."""
    if final.exists():
        old = staging / f"{final.name}.old.{uuid.uuid4().hex[:12]}"
        os.replace(final, old)
        os.replace(work, final)
        remove_tree(old)
    else:
        os.replace(work, final)


def error_row(task: Mapping, message: str) -> dict:
    return {"source": task["display"], "status": "error", "verdict": "error", "folder": None,
            "sha256": task.get("sha256"), "error": message}


def up_to_date(folder: Path, sha256: str, keys: Mapping, version: str, *, verify: bool,
               build_failed: bool, options: Mapping) -> dict | None:
    """The stored summary row if ``folder`` holds every output this run asks for, with the same
    options keys and files whose SHA-256 still match the manifest; else None.

    Outputs the run does not ask for (an earlier verify) are part of the folder and of the row.
    """
    doc = read_manifest(folder)
    if doc is None or doc["source"].get("sha256") != sha256 or doc.get("tool", {}).get("version") != version:
        return None
    outputs = {n: o for n, o in doc["outputs"].items() if n in OUTPUTS and isinstance(o, dict)}
    good = verified_outputs(folder, doc, keys)
    if not {n for n, o in outputs.items() if o.get("files")} <= good or "check" not in good:
        return None
    verdict = (outputs["check"].get("row") or {}).get("verdict")
    wants_table = verdict in ("pass", "warn") or (verdict == "fail" and build_failed)
    table = outputs.get("table") or {}
    # A table that could not be built (validation refused the pixels) is up to date as a note.
    refused = table.get("key") == keys.get("table") and table.get("reason") == "build"
    if wants_table and not refused and ("table" not in good or not table_serves(table, options)):
        return None
    if verify and "table" in good:
        table_sha = (table.get("files") or {}).get("table.json", {}).get("sha256")
        if "verify" not in good or outputs["verify"].get("table_sha256") != table_sha:
            return None
    row = doc.get("row")
    return dict(row) if isinstance(row, dict) else None
