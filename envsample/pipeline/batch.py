"""Batch processing of a map library: check, build tables and (optionally) verify many maps at once.

Public objects
--------------
- :func:`run_batch`: expand sources, skip maps whose outputs are up to date, run the
  rest in worker processes (or on a Dask cluster), write the summaries.
- :class:`BatchResult`, :class:`MapResult`, :class:`BatchProgress`: what a batch did.
- :class:`BatchInterrupted`: a :class:`KeyboardInterrupt` carrying the partial result.
- :func:`expand_sources`: files, folders and globs to a sorted list of map files.
- :func:`normalize_options`: the table options a batch accepts (:data:`BUILD_OPTIONS`).
- :func:`process_map`: the task function, one map from file to published folder.
  It is a top-level function of plain-dict input and output so that spawned worker
  processes and Dask workers can import and pickle it.

Output layout
-------------
::

    OUTDIR/
      summary.json  summary.csv  index.html     one row per source (written last; the
                                                 page by envsample.html.index_page)
      maps/<stem>-<sha8>/                        one folder per map name and content
        manifest.json   written last: source sha256, options key, tool version,
                        the files with sizes and SHA-256, the summary row
        check.json      the QA report (envsample.qa, Report.to_dict())
        thumb.png       tone-mapped thumbnail
        table.json  table.npz                    when the map passes validation
        verify/...                               with verify=True
      .staging/                                  only while a batch runs
      .lock                                      an empty file, locked while a batch runs

``<stem>`` is the file name without extension (characters other than letters,
digits, ``.``, ``_`` and ``-`` replaced by ``_``) and ``<sha8>`` the first 8 hex
digits of the SHA-256 of the file bytes.

Atomicity and resumption
------------------------
Each map is built in ``OUTDIR/.staging/<name>.<token>/`` and renamed into
``maps/`` when complete (a rename within one file system is atomic, POSIX
``rename(2)``), so an interrupted or killed batch never leaves a partial map
folder; the staging area is removed on exit, or at the start of the next batch
if the process was killed.  A map folder whose manifest records the same source
SHA-256, the same options key and the same tool version, and whose files are all
present with their recorded sizes, is up to date and skipped unless ``force``.
Source files are only ever opened for reading.

Determinism
-----------
A map's outputs depend only on its bytes, its name and the options: the
verification seed is derived from the file's SHA-256 through
:class:`numpy.random.SeedSequence` (the QA sampling check uses the profile's fixed
seed), and no time stamps are written.  A Dask run therefore writes the same
files, byte for byte, as a local run.  The one exception is ``verify/metrics.json``
(with ``verify=True``): it records timings, and the recommended estimator it names
is ranked by measured efficiency, so it (and its size and hash in the manifest)
varies between runs; the summary row keeps only seed-determined verify figures.

Photometric figures in the summaries are estimates for asset preparation, not
certified lighting calculations.

References
----------
- IEEE Std 1003.1-2017 (POSIX), ``rename()``: atomic replacement within one file
  system; ``flock``/``fcntl`` advisory locks.
- FIPS 180-4 (2015), Secure Hash Standard: SHA-256.
- O'Neill, M. E. (2015). PCG: a family of simple fast space-efficient statistically
  good algorithms for random number generation. HMC-CS-2014-0905 (the seeding
  scheme behind ``numpy.random.SeedSequence``, from memory).
- Rocklin, M. (2015). Dask: parallel computation with blocked algorithms and task
  scheduling. Proc. 14th Python in Science Conference, 130-136.
"""

from __future__ import annotations

import contextlib
import csv
import glob
import hashlib
import io as _io
import json
import math
import multiprocessing
import os
import re
import shutil
import signal
import uuid
import warnings
from collections import deque
from collections.abc import Callable, Iterable, Mapping
from concurrent.futures import FIRST_COMPLETED, ThreadPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool, ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from envsample.core.files import atomic_write_text
from envsample.core.schema import Schema
from envsample.core.text import caution
from envsample.errors import EnvsampleError, EnvsampleWarning, MapReadError, MapValidationError

__all__ = [
    "BUILD_OPTIONS",
    "SUMMARY_SCHEMA",
    "MANIFEST_SCHEMA",
    "ROW_FIELDS",
    "VERDICTS",
    "BatchResult",
    "MapResult",
    "BatchProgress",
    "BatchInterrupted",
    "expand_sources",
    "normalize_options",
    "run_batch",
    "process_map",
]

#: Table options a batch accepts and their defaults (see :func:`envsample.sampling.table.build_table`);
#: ``rotation_deg`` is in degrees.
BUILD_OPTIONS = {
    "size": None,
    "primaries": "bt709",
    "mapping": "equal-area",
    "uniform_mix": 0.0,
    "up": "y",
    "rotation_deg": 0.0,
}

#: Name and version of ``summary.json``.
SUMMARY_SCHEMA = Schema("envsample.batch-summary", 2)
#: Name and version of each map folder's ``manifest.json``.
MANIFEST_SCHEMA = Schema("envsample.batch-map", 2)
#: Verdicts of a map, best to worst: the QA verdict, or ``error`` when the file could
#: not be read or processing failed.
VERDICTS = ("pass", "warn", "fail", "error")
#: Statuses of a source in one run.
STATUSES = ("done", "skipped", "error")

#: Columns of ``summary.csv`` (and keys of each row of ``summary.json``).
ROW_FIELDS = (
    "source",
    "status",
    "verdict",
    "folder",
    "sha256",
    "duplicate_of",
    "error",
    "width",
    "height",
    "format",
    "pixel_type",
    "failed_checks",
    "warned_checks",
    "dynamic_range",
    "sun_azimuth_deg",
    "sun_elevation_deg",
    "sun_share",
    "irradiance_up",
    "sampling_relative_rmse",
    "peak_sample_share",
    "luminance_integral",
    "table_width",
    "table_height",
    "table_note",
    "verify_rmse_table",
    "verify_rmse_mis",
)


#: Thumbnail width in pixels (the index page shows them at this size).
THUMB_WIDTH = 128
#: Settings of the optional verification (small on purpose: a batch is a screening pass).
VERIFY_SETTINGS = {
    "spp": 32,
    "normals": [32, 16],
    "estimators": ["cosine", "table", "mis-balance", "one-sample-balance"],
    "sphere": False,
}
# Bump when the layout or the content of a map folder changes: old folders are then redone.
_LAYOUT_VERSION = 1
_STAGING = ".staging"
_MAPS = "maps"
_NAME_CHARS = re.compile(r"[^A-Za-z0-9._-]+")
_GLOB_CHARS = re.compile(r"[*?\[]")


# =============================================================================
# results
# =============================================================================


@dataclass
class MapResult:
    """The outcome of one source in a batch.

    ``source`` is the path as found (string); ``status`` is ``"done"`` (processed in
    this run), ``"skipped"`` (up-to-date outputs) or ``"error"`` (processing failed,
    nothing written); ``verdict`` is one of :data:`VERDICTS`; ``folder`` the map
    folder relative to OUTDIR (None when nothing was written); ``error`` a one-line
    message or None; ``duplicate_of`` the first source (in sorted order) with the same
    bytes, or None; ``figures`` the key figures (the remaining :data:`ROW_FIELDS`).
    """

    source: str
    status: str
    verdict: str
    folder: str | None = None
    sha256: str | None = None
    duplicate_of: str | None = None
    error: str | None = None
    figures: dict = field(default_factory=dict)

    def to_row(self) -> dict:
        """The summary row: every key of :data:`ROW_FIELDS`, JSON-ready."""
        row = {k: self.figures.get(k) for k in ROW_FIELDS}
        row.update(source=self.source, status=self.status, verdict=self.verdict, folder=self.folder,
                   sha256=self.sha256, duplicate_of=self.duplicate_of, error=self.error)
        return row


@dataclass
class BatchProgress:
    """Passed to the ``progress`` callback: ``done`` of ``total`` sources resolved,
    ``counts`` per verdict (plus ``skipped``), and the latest ``item`` (None at the start)."""

    done: int
    total: int
    counts: dict
    item: MapResult | None = None


@dataclass
class BatchResult:
    """What :func:`run_batch` did.

    ``maps`` lists one :class:`MapResult` per source in sorted order; ``outdir`` the
    output folder; ``summary`` the paths of ``summary.json``, ``summary.csv`` and
    ``index.html`` (empty when interrupted); ``interrupted`` True after Ctrl-C;
    ``options`` the normalised table options; ``duplicates`` lists
    ``{"sha256", "sources"}`` for bytes found under several names.
    """

    outdir: Path
    maps: list
    options: dict
    interrupted: bool = False
    summary: dict = field(default_factory=dict)
    duplicates: list = field(default_factory=list)

    @property
    def counts(self) -> dict:
        """Sources per verdict, plus ``skipped``, ``done``, ``pending`` and ``maps`` (the total)."""
        return _counts(self.maps, total=len(self.maps))

    def exit_code(self, strict: bool = False) -> int:
        """CLI status: 130 interrupted; 1 any map failed QA or errored (or, with
        ``strict``, warned); else 0.  (Usage errors, 2, are raised before a batch starts.)"""
        if self.interrupted:
            return 130
        worst = {m.verdict for m in self.maps}
        if worst & {"fail", "error"} or (strict and "warn" in worst):
            return 1
        return 0

    def __len__(self) -> int:
        return len(self.maps)

    def __iter__(self):
        return iter(self.maps)


class BatchInterrupted(KeyboardInterrupt):
    """Ctrl-C stopped a batch; ``result`` holds the maps finished so far (``interrupted=True``).

    The map folders already published are complete and a rerun resumes from them;
    no partial folder and no staging files are left behind.
    """

    def __init__(self, result: BatchResult):
        super().__init__("batch interrupted")
        self.result = result


def _counts(maps: Iterable[MapResult | None], *, total: int) -> dict:
    out = {v: 0 for v in VERDICTS}
    out.update(skipped=0, done=0)
    for m in maps:
        if m is None:
            continue
        out["done"] += 1
        out[m.verdict] += 1
        if m.status == "skipped":
            out["skipped"] += 1
    out["pending"] = total - out["done"]
    out["maps"] = total
    return out


# =============================================================================
# sources and options
# =============================================================================


def _under(path: Path, folder: Path | None) -> bool:
    return folder is not None and (path == folder or folder in path.parents)


def _walk(folder: Path, extensions: tuple[str, ...], exclude: Path | None) -> list[Path]:
    found = []
    for root, dirs, files in os.walk(folder):
        root_p = Path(root)
        # Hidden folders (our own staging area among them) and the output folder are never inputs.
        dirs[:] = sorted(d for d in dirs if not d.startswith(".") and not _under((root_p / d).resolve(), exclude))
        found.extend(root_p / f for f in files if not f.startswith(".") and Path(f).suffix.lower() in extensions)
    return found


def expand_sources(sources, *, exclude=None) -> list[Path]:
    """Files, folders and glob patterns to a sorted, de-duplicated list of files.

    Parameters
    ----------
    sources : str, PathLike or iterable of them
        A file is taken as it is (whatever its extension: QA reports what it is).
        A folder is searched recursively for ``.exr`` and ``.hdr`` maps and for
        LDR images (``.png``, ``.jpg``, ``.jpeg``, ``.tif``, ``.tiff``), so that QA can
        fail them; hidden files and folders are skipped.  A string with ``*``, ``?``
        or ``[`` that is not an existing path is a glob pattern (``**`` recursive);
        folders it matches are searched as above.
    exclude : str or PathLike, optional
        A folder whose contents are never inputs (the batch's output folder).

    Returns
    -------
    list of Path
        Sorted by resolved absolute path; a file reached twice (also through a
        symbolic link) appears once, under the first path that reached it.

    Raises
    ------
    EnvsampleError
        A source that does not exist and matches nothing.
    """
    from envsample.io.maps import supported_extensions

    if isinstance(sources, (str, os.PathLike)):
        sources = [sources]
    extensions = supported_extensions()
    ex = None if exclude is None else Path(exclude).resolve()
    candidates: list[Path] = []
    for src in sources:
        text = os.fspath(src)
        p = Path(text)
        if p.is_dir():
            candidates.extend(_walk(p, extensions, ex))
        elif p.exists():
            candidates.append(p)
        elif _GLOB_CHARS.search(text):
            matches = sorted(glob.glob(text, recursive=True))
            if not matches:
                raise EnvsampleError(f"{text}: the pattern matches no file; check the pattern and the folder")
            for m in matches:
                mp = Path(m)
                candidates.extend(_walk(mp, extensions, ex) if mp.is_dir() else [mp])
        else:
            raise EnvsampleError(f"{text}: no such file or folder; check the path")
    unique: dict[Path, Path] = {}
    for c in candidates:
        key = c.resolve()
        if not _under(key, ex):
            unique.setdefault(key, c)
    return [unique[k] for k in sorted(unique, key=os.fspath)]


def normalize_options(options: Mapping | None) -> dict:
    """Check the table options of a batch and return them in canonical form.

    Keys (all optional, defaults in :data:`BUILD_OPTIONS`): ``size`` (``"WxH"`` or
    ``(width, height)``, None = the map's resolution), ``primaries``, ``mapping``,
    ``uniform_mix`` (in [0, 1)), ``up`` (``"y"`` or ``"z"``), ``rotation_deg`` (degrees;
    the old names ``rotate`` and ``rotate_deg`` are still accepted).  Unknown keys raise ValueError listing the valid ones.
    """
    from envsample.core.color import canonical_primaries
    from envsample.core.latlong import MAPPINGS, parse_size
    from envsample.core.sphere import UP_AXES

    given = dict(options or {})
    for old in ("rotate", "rotate_deg"):
        if old in given:
            if "rotation_deg" in given:
                raise ValueError(f"options: give rotation_deg or {old}, not both")
            given["rotation_deg"] = given.pop(old)
    unknown = sorted(set(given) - set(BUILD_OPTIONS))
    if unknown:
        raise ValueError(f"unknown batch option(s) {', '.join(unknown)}; valid options: {', '.join(BUILD_OPTIONS)}")
    opts = {**BUILD_OPTIONS, **given}
    size = parse_size(opts["size"])
    mapping = str(opts["mapping"])
    if mapping not in MAPPINGS:
        raise ValueError(f"unknown mapping {mapping!r}; valid: {', '.join(MAPPINGS)}")
    mix = float(opts["uniform_mix"])
    if not 0.0 <= mix < 1.0:
        raise ValueError(f"uniform_mix must be in [0, 1), got {mix}")
    up = str(opts["up"]).lower()
    if up not in UP_AXES:
        raise ValueError(f"up must be one of {', '.join(UP_AXES)}, got {opts['up']!r}")
    rotation = float(opts["rotation_deg"])
    if not math.isfinite(rotation):
        raise ValueError(f"rotation_deg must be a finite angle in degrees, got {opts['rotation_deg']!r}")
    return {
        "size": None if size is None else [size[0], size[1]],
        "primaries": canonical_primaries(opts["primaries"]),
        "mapping": mapping,
        "uniform_mix": mix,
        "up": up,
        "rotation_deg": rotation,
    }


def _map_name(path: Path, sha256: str, width: int = 8) -> str:
    stem = _NAME_CHARS.sub("_", path.stem).strip("._") or "map"
    return f"{stem[:80]}-{sha256[:width]}"


def _hash_all(paths: list[Path]) -> list[tuple[str | None, str | None]]:
    """(sha256, error) per path; hashing releases the GIL, so threads overlap the reads."""
    from envsample.io.maps import file_sha256

    def one(p: Path):
        try:
            return file_sha256(p), None
        except MapReadError as e:
            return None, str(e)

    if not paths:
        return []
    with ThreadPoolExecutor(max_workers=min(8, len(paths))) as pool:
        return list(pool.map(one, paths))


def map_seed(sha256: str) -> int:
    """Seed of a map's random numbers: a 64-bit word from ``SeedSequence(int(sha256, 16))``."""
    return int(np.random.SeedSequence(int(sha256, 16)).generate_state(1, dtype=np.uint64)[0])


def _options_key(doc: dict) -> str:
    return hashlib.sha256(json.dumps(doc, sort_keys=True, allow_nan=False).encode("utf-8")).hexdigest()


# =============================================================================
# the task: one map, from its file to a published folder
# =============================================================================


def _one_line(error: BaseException) -> str:
    text = " ".join(str(error).split()) or error.__class__.__name__
    if not isinstance(error, EnvsampleError):
        text = f"{error.__class__.__name__}: {text}"
    return text if len(text) <= 300 else text[:297] + "..."


def _remove(path: Path) -> None:
    shutil.rmtree(path, ignore_errors=True)


def _dump_json(path: Path, doc) -> None:
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
    _dump_json(work / "check.json", report.to_dict())
    row = _report_figures(report)
    row.update(source=task["display"], status="done", folder=f"{_MAPS}/{task['name']}", sha256=task["sha256"])
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
            row["table_note"] = "no table: " + _one_line(e).removeprefix(f"{src}: ")
            return row
        o = task["options"]
        table = build_table(clean, size=o["size"], primaries=o["primaries"], mapping=o["mapping"],
                            uniform_mix=o["uniform_mix"], up=o["up"], rotation_deg=o["rotation_deg"])
    table.save(work / "table")
    notes = list(notes) + [str(n) for n in table.metadata.get("notes", [])]
    row.update(luminance_integral=float(table.integrals["luminance"]),
               table_width=table.table_width, table_height=table.table_height,
               table_note="; ".join(notes) or None)
    if task["verify"]:
        try:
            row.update(_verify(table, work / "verify", seed=map_seed(task["sha256"])))
        except Exception as e:
            raise EnvsampleError(f"verify failed ({_one_line(e)})") from e
    return row


def _verify(table, folder: Path, *, seed: int) -> dict:
    """Run the validation render at :data:`VERIFY_SETTINGS`; return its key figures for the row.

    Only figures that depend on the seed alone go into the row: the relative RMSEs.
    (verify's recommended estimator ranks by measured efficiency, which includes
    timings, so it is left in ``verify/metrics.json``.)
    """
    from envsample.pipeline.verify import verify_map  # lazily: verify pulls in the estimators and matplotlib

    s = VERIFY_SETTINGS
    doc = verify_map(table, folder, spp=s["spp"], normals=tuple(s["normals"]), estimators=tuple(s["estimators"]),
                     seed=seed, sphere=s["sphere"])
    est = doc.get("estimators", {})

    def rmse(name):
        v = est.get(name, {}).get("relative_rmse")
        return float(v) if isinstance(v, (int, float)) and math.isfinite(v) else None

    return {"verify_rmse_table": rmse("table"), "verify_rmse_mis": rmse("mis-balance")}


def _publish(work: Path, final: Path, staging: Path) -> None:
    """Rename a finished folder into place; an older folder of the same name is moved aside first."""
    if final.exists():
        old = staging / f"{final.name}.old.{uuid.uuid4().hex[:12]}"
        os.replace(final, old)
        os.replace(work, final)
        _remove(old)
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
        _dump_json(work / "manifest.json", manifest)
        _publish(work, Path(task["outdir"]) / _MAPS / task["name"], staging)
        return {"status": "done", "row": row}
    except Exception as e:
        _remove(work)
        return {"status": "error", "row": _error_row(task, f"processing failed: {_one_line(e)}")}
    except BaseException:
        _remove(work)
        raise


def _error_row(task: Mapping, message: str) -> dict:
    return {"source": task["display"], "status": "error", "verdict": "error", "folder": None,
            "sha256": task.get("sha256"), "error": message}


def _result_from_row(row: Mapping, *, status: str | None = None) -> MapResult:
    known = ("source", "status", "verdict", "folder", "sha256", "duplicate_of", "error")
    figures = {k: v for k, v in row.items() if k not in known}
    return MapResult(source=row["source"], status=status or row["status"], verdict=row["verdict"],
                     folder=row.get("folder"), sha256=row.get("sha256"), duplicate_of=row.get("duplicate_of"),
                     error=row.get("error"), figures=figures)


def _up_to_date(folder: Path, sha256: str, key: str, version: str) -> dict | None:
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


# =============================================================================
# runners: in this process, a local process pool, a Dask cluster
# =============================================================================


def _worker_init() -> None:
    # Ctrl-C reaches the whole process group; only the parent decides what to stop.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # A worker whose parent was killed (SIGKILL, OOM) would otherwise wait forever on the
    # task queue, whose pipe it holds open itself: leave as soon as the parent is gone.
    parent = multiprocessing.parent_process()
    if parent is not None:
        import threading
        from multiprocessing.connection import wait as wait_for

        def watch():
            wait_for([parent.sentinel])
            os._exit(1)

        threading.Thread(target=watch, name="envsample-parent-watch", daemon=True).start()


def _run_inline(tasks, task_fn):
    for index, task in tasks:
        yield index, task_fn(task)


def _terminate(executor) -> None:
    """Stop a pool's workers now.  ProcessPoolExecutor has no public way to do this before
    Python 3.14 (``terminate_workers``); ``_processes`` is its map of worker processes."""
    procs = list((getattr(executor, "_processes", None) or {}).values())
    for p in procs:
        with contextlib.suppress(Exception):
            p.terminate()
    for p in procs:
        with contextlib.suppress(Exception):
            p.join(10)


def _run_pool(tasks, task_fn, workers: int):
    """Yield (index, outcome) as tasks finish in spawned worker processes.

    At most ``workers`` tasks are in flight, so a worker that dies (a crash in a
    decoder, the out-of-memory killer) takes down few others.  Tasks caught in a
    broken pool are retried one at a time; a task that breaks the pool on its own
    is recorded as an error.
    """
    ctx = multiprocessing.get_context("spawn")
    queue = deque(tasks)
    suspects: deque = deque()
    in_flight: dict = {}
    executor = None
    finished = False
    try:
        while queue or suspects or in_flight:
            if executor is None:
                executor = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_worker_init)
                broken = False
            if not broken:
                if suspects:
                    if not in_flight:
                        item = suspects.popleft()
                        in_flight[executor.submit(task_fn, item[1])] = (item, True)
                else:
                    while queue and len(in_flight) < workers:
                        item = queue.popleft()
                        in_flight[executor.submit(task_fn, item[1])] = (item, False)
            done, _ = wait(list(in_flight), return_when=FIRST_COMPLETED)
            for fut in done:
                item, alone = in_flight.pop(fut)
                try:
                    outcome = fut.result()
                except BrokenProcessPool:
                    broken = True
                    if alone:
                        msg = "the worker process died on this map (a crash or out of memory); check the file"
                        yield item[0], {"status": "error", "row": _error_row(item[1], msg)}
                    else:
                        suspects.append(item)
                    continue
                except KeyboardInterrupt:
                    raise
                except Exception as e:
                    outcome = {"status": "error", "row": _error_row(item[1], f"processing failed: {_one_line(e)}")}
                yield item[0], outcome
            if broken and not in_flight:
                executor.shutdown(wait=True)
                executor = None
        finished = True
    finally:
        if executor is not None:
            if not finished:
                for fut in in_flight:
                    fut.cancel()
                _terminate(executor)
            executor.shutdown(wait=True, cancel_futures=True)


def _import_distributed():
    """dask.distributed, imported only when a scheduler is given (an optional extra)."""
    try:
        import distributed
    except ImportError as e:
        raise EnvsampleError(
            "scheduler: dask.distributed is not installed; install it with 'pip install envsample[dask]'"
        ) from e
    return distributed


def _dask_client(scheduler):
    distributed = _import_distributed()
    if isinstance(scheduler, str):
        try:
            return distributed, distributed.Client(scheduler, timeout="30s"), True
        except (OSError, TimeoutError) as e:
            raise EnvsampleError(
                f"scheduler {scheduler}: cannot connect ({_one_line(e)}); check the address (e.g. tcp://host:8786)"
            ) from e
    if hasattr(scheduler, "submit") and hasattr(scheduler, "cancel"):
        return distributed, scheduler, False
    raise TypeError(f"scheduler must be an address string or a dask.distributed Client, got {type(scheduler).__name__}")


def _run_dask(tasks, task_fn, scheduler):
    """Yield (index, outcome) as tasks finish on a Dask cluster (the same task function).

    The workers must see OUTDIR and the sources at the same paths (a shared file
    system) and have envsample installed.
    """
    distributed, client, owned = _dask_client(scheduler)
    futures = {}
    finished = False
    try:
        run = uuid.uuid4().hex[:8]
        for index, task in tasks:
            fut = client.submit(task_fn, task, key=f"envsample-batch-{task['name']}-{run}", pure=False)
            futures[fut] = (index, task)
        for fut in distributed.as_completed(list(futures)):
            index, task = futures[fut]
            try:
                outcome = fut.result()
            except Exception as e:
                outcome = {"status": "error", "row": _error_row(task, f"processing failed on the cluster: {_one_line(e)}")}
            yield index, outcome
        finished = True
    finally:
        if not finished and futures:
            with contextlib.suppress(Exception):
                client.cancel(list(futures))
        if owned:
            with contextlib.suppress(Exception):
                client.close()


# =============================================================================
# the batch
# =============================================================================


@contextlib.contextmanager
def _locked(outdir: Path):
    """Exclusive advisory lock on OUTDIR/.lock (POSIX flock), released even if the process is killed."""
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows: no lock
        yield
        return
    fh = open(outdir / ".lock", "a+")
    try:
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            raise EnvsampleError(
                f"{outdir}: another batch is writing to this folder; wait for it to finish or choose another output folder"
            ) from None
        yield
    finally:
        fh.close()


def _check_workers(workers) -> int:
    if workers is None:
        # The cores this process may run on (affinity, cpusets), else all of them.
        try:
            return max(1, len(os.sched_getaffinity(0)))
        except (AttributeError, OSError):
            return max(1, os.cpu_count() or 1)
    if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 0:
        raise ValueError(f"workers must be a whole number >= 0 (0 = in this process), got {workers!r}")
    return int(workers)


_TASK = process_map  # the function the runners call; replaceable in tests


def run_batch(
    sources,
    outdir,
    *,
    workers: int | None = None,
    verify: bool = False,
    force: bool = False,
    scheduler=None,
    options: Mapping | None = None,
    profile=None,
    progress: Callable[[BatchProgress], None] | None = None,
) -> BatchResult:
    """Check, build tables for and optionally verify every map of a library.

    Parameters
    ----------
    sources : str, PathLike or iterable of them
        Files, folders (searched recursively) and glob patterns; see :func:`expand_sources`.
    outdir : str or PathLike
        Output folder (created if missing); layout in the module docstring.
    workers : int, optional
        Worker processes (spawned); default: the number of cores this process may
        use (``os.sched_getaffinity``, else ``os.cpu_count()``).  0 runs every map
        in the calling process (no isolation; for debugging and profiling).
        Scripts that call run_batch with workers must guard their entry point with
        ``if __name__ == "__main__":`` (spawned workers import the main module).
    verify : bool
        Also run the validation render (:func:`envsample.verify.verify_map`) at
        :data:`VERIFY_SETTINGS`, seeded from each map's SHA-256.
    force : bool
        Redo maps whose outputs are up to date.
    scheduler : str or dask.distributed.Client, optional
        Send the tasks to a Dask cluster (``"tcp://host:8786"`` or a Client) instead
        of local processes; needs ``pip install envsample[dask]`` and a file system
        shared with the workers.  The outputs are identical to a local run.
    options : mapping, optional
        Table options, see :func:`normalize_options` (size, primaries, mapping,
        uniform_mix, up, rotation_deg in degrees).
    profile : Profile, path, mapping or None
        QA thresholds (:func:`envsample.qa.load_profile`).
    progress : callable, optional
        Called with a :class:`BatchProgress` once at the start and after every source.

    Returns
    -------
    BatchResult
        ``summary.json``, ``summary.csv`` and ``index.html`` are written to OUTDIR.

    Raises
    ------
    BatchInterrupted
        On Ctrl-C (a KeyboardInterrupt): pending maps are cancelled, workers
        stopped, staging removed; ``.result`` lists the maps finished (their
        folders are complete) and no summary is written.  Rerun to resume.
    EnvsampleError
        A missing source, no maps found, OUTDIR not a folder or locked by another
        batch, or dask missing.  ValueError / ProfileError: bad options.
    """
    from envsample._version import __version__
    from envsample.qa.profile import load_profile

    opts = normalize_options(options)
    prof = load_profile(profile)
    n_workers = _check_workers(workers)
    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise EnvsampleError(f"{out}: exists and is not a folder; choose an output folder")
    paths = expand_sources(sources, exclude=out)
    if not paths:
        shown = ", ".join(os.fspath(s) for s in ([sources] if isinstance(sources, (str, os.PathLike)) else sources))
        raise EnvsampleError(f"no map files found in {shown or 'the sources given'}; pass .exr/.hdr files, folders or globs")
    if scheduler is not None:
        _import_distributed()
    out.mkdir(parents=True, exist_ok=True)
    out = out.resolve()
    key_doc = {
        "layout": _LAYOUT_VERSION,
        "tool_version": __version__,
        "build": opts,
        "verify": dict(VERIFY_SETTINGS) if verify else None,
        "thumb_width": THUMB_WIDTH,
        "profile": prof.to_dict()["settings"],
    }
    with _locked(out):
        return _run_locked(paths, out, key_doc=key_doc, key=_options_key(key_doc), profile=prof, force=force,
                           runner=_runner(scheduler, n_workers), progress=progress)


def _runner(scheduler, workers: int):
    """A function (tasks, task_fn) -> generator of (index, outcome): Dask, a process pool, or inline."""
    if scheduler is not None:
        return lambda tasks, fn: _run_dask(tasks, fn, scheduler)
    if workers == 0:
        return _run_inline
    return lambda tasks, fn: _run_pool(tasks, fn, min(workers, len(tasks))) if tasks else _run_inline(tasks, fn)


def _run_locked(paths, out: Path, *, key_doc: dict, key: str, profile, force: bool, runner, progress) -> BatchResult:
    """The batch proper, with OUTDIR locked: plan, run, write the summaries; Ctrl-C anywhere -> BatchInterrupted."""
    version = key_doc["tool_version"]
    staging = out / _STAGING
    results: list = [None] * len(paths)
    duplicates: list = []

    def emit(item):
        if progress is not None:
            progress(BatchProgress(done=sum(r is not None for r in results), total=len(results),
                                   counts=_counts(results, total=len(results)), item=item))

    jobs = None
    try:
        _remove(staging)  # left by a batch that was killed
        (out / _MAPS).mkdir(exist_ok=True)
        plan = _plan(paths, out, force=force, key=key, version=version)
        results[:] = plan.results
        duplicates = plan.duplicates
        emit(None)
        for r in results:
            if r is not None:
                emit(r)
        tasks = [(i, {"source": os.fspath(paths[i].resolve()), "display": os.fspath(paths[i]),
                      "name": plan.names[i], "sha256": plan.hashes[i], "outdir": os.fspath(out),
                      "staging": os.fspath(staging), "options": key_doc["build"],
                      "verify": key_doc["verify"] is not None, "profile": profile, "key": key,
                      "key_doc": key_doc, "version": version})
                 for i in plan.todo]
        jobs = runner(tasks, _TASK)
        for index, outcome in jobs:
            results[index] = _finish(plan, index, outcome)
            emit(results[index])
            for j in plan.aliases.get(index, ()):
                results[j] = _alias(results[index], os.fspath(paths[j]), plan.dup_of[j])
                emit(results[j])
        jobs.close()
        result = BatchResult(outdir=out, maps=results, options=key_doc["build"], duplicates=duplicates)
        result.summary = _write_summaries(result, key_doc, profile)
        return result
    except KeyboardInterrupt:
        if jobs is not None:
            jobs.close()  # cancels what is pending and stops the workers
        done = [r for r in results if r is not None]
        raise BatchInterrupted(BatchResult(outdir=out, maps=done, options=key_doc["build"], interrupted=True,
                                           duplicates=duplicates)) from None
    finally:
        if jobs is not None:
            jobs.close()
        _remove(staging)


@dataclass
class _Plan:
    results: list
    names: list
    hashes: list
    todo: list
    aliases: dict
    dup_of: list
    duplicates: list


def _plan(paths: list[Path], out: Path, *, force: bool, key: str, version: str) -> _Plan:
    """Hash the sources, name their folders, note duplicates and find what is up to date."""
    n = len(paths)
    hashed = _hash_all(paths)
    results: list = [None] * n
    names: list = [None] * n
    hashes = [h for h, _ in hashed]
    dup_of: list = [None] * n
    todo, aliases, owners, first, by_sha = [], {}, {}, {}, {}
    for i, (p, (sha, err)) in enumerate(zip(paths, hashed)):
        display = os.fspath(p)
        if err is not None:
            results[i] = MapResult(display, "error", "error", error=err)
            continue
        by_sha.setdefault(sha, []).append(display)
        if first.setdefault(sha, display) != display:
            dup_of[i] = first[sha]
        name = _map_name(p, sha)
        owner = owners.get(name.casefold())
        if owner is not None and hashes[owner] != sha:
            name = _map_name(p, sha, width=64)  # same stem and a clash of 8 hex digits
            owner = owners.get(name.casefold())
        names[i] = name
        if owner is not None:
            # Same name and same bytes (e.g. one file copied into two folders): one folder serves both.
            aliases.setdefault(owner, []).append(i)
            continue
        owners[name.casefold()] = i
        row = None if force else _up_to_date(out / _MAPS / name, sha, key, version)
        if row is not None:
            results[i] = _result_from_row({**row, "source": display, "duplicate_of": dup_of[i]}, status="skipped")
        else:
            todo.append(i)
    for owner, members in aliases.items():
        if results[owner] is not None:
            for j in members:
                results[j] = _alias(results[owner], os.fspath(paths[j]), dup_of[j])
    duplicates = [{"sha256": s, "sources": d} for s, d in by_sha.items() if len(d) > 1]
    return _Plan(results, names, hashes, todo, aliases, dup_of, duplicates)


def _finish(plan: _Plan, index: int, outcome: Mapping) -> MapResult:
    row = dict(outcome["row"])
    row["duplicate_of"] = plan.dup_of[index]
    return _result_from_row(row)


def _alias(owner: MapResult, display: str, dup_of: str | None) -> MapResult:
    return MapResult(source=display, status=owner.status, verdict=owner.verdict, folder=owner.folder,
                     sha256=owner.sha256, duplicate_of=dup_of, error=owner.error, figures=dict(owner.figures))


# =============================================================================
# summaries: JSON, CSV and an HTML index
# =============================================================================


def _csv_value(v) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return f"{v:.6g}"
    if isinstance(v, (list, tuple)):
        return ";".join(str(x) for x in v)
    return str(v)


def _write_summaries(result: BatchResult, key_doc: dict, profile) -> dict:
    """summary.json, summary.csv and index.html in OUTDIR, each by temporary file and rename."""
    from envsample._version import __version__

    rows = [m.to_row() for m in result.maps]
    doc = {
        **SUMMARY_SCHEMA.header(),
        "tool": {"name": "envsample", "version": __version__},
        "options": {k: v for k, v in key_doc.items() if k != "profile"},
        "profile": {"name": profile.name, "path": profile.path},
        "counts": result.counts,
        "duplicates": result.duplicates,
        "maps": rows,
        "caution": caution("photometric figures"),
    }
    paths = {"json": result.outdir / "summary.json", "csv": result.outdir / "summary.csv",
             "html": result.outdir / "index.html"}
    atomic_write_text(paths["json"], json.dumps(doc, indent=2, allow_nan=False) + "\n")
    buf = _io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(ROW_FIELDS)
    for row in rows:
        writer.writerow([_csv_value(row[k]) for k in ROW_FIELDS])
    atomic_write_text(paths["csv"], buf.getvalue())
    from envsample.reports.pages import index_page

    index_page(_index_rows(result, rows), paths["html"])
    return paths


def _index_rows(result: BatchResult, rows: list[dict]) -> list[dict]:
    """Rows for :func:`envsample.html.index_page`: the summary row plus picture, links and a note."""
    out = []
    for row in rows:
        r = dict(row)
        notes = []
        folder = row.get("folder")
        if folder:
            r["links"] = {"report": f"{folder}/check.json"}
            if (result.outdir / folder / "table.json").is_file():
                r["links"]["table"] = f"{folder}/table.json"
            if (result.outdir / folder / "verify" / "metrics.json").is_file():
                r["links"]["verify"] = f"{folder}/verify/metrics.json"
            if (result.outdir / folder / "thumb.png").is_file():
                r["thumbnail"] = f"{folder}/thumb.png"
        if row.get("table_width"):
            notes.append(f"table {row['table_width']}\u00d7{row['table_height']}")
        if row.get("table_note"):
            notes.append(row["table_note"])
        if row.get("verify_rmse_table") is not None or row.get("verify_rmse_mis") is not None:
            figures = ", ".join(f"{label} {row[key]:.3g}" for label, key in (("table", "verify_rmse_table"),
                                                                            ("MIS", "verify_rmse_mis"))
                                if row.get(key) is not None)
            notes.append(f"verify relative RMSE: {figures}")
        if row.get("duplicate_of"):
            notes.append(f"same bytes as {row['duplicate_of']}")
        r["note"] = "; ".join(notes) or None
        out.append(r)
    return out
