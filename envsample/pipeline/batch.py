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
      summary.json  summary.csv  index.html     one row per source (written at the start
                                                 and again last; the page by
                                                 envsample.reports.pages.index_page)
      maps/<stem>-<sha8>/                        one folder per map name and content
        manifest.json   written last: source sha256, tool version, and per output
                        (check, table, verify) its options key, its files with
                        sizes and SHA-256, and its part of the summary row
        check.json  check.html  thumb.png        the QA report, its page, a thumbnail
        table.json  table.npz  (table.bin)       when the map passed or warned
                                                 (with build_failed also when it failed)
        verify/  (report.html, metrics.json...)  with verify=True
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
SHA-256 and tool version, and for every output this run asks for the same options
key and files whose SHA-256 still match, is up to date and skipped unless ``force``.
Outputs a run does not ask for (an earlier verify) are kept.  Maps whose bytes
are found under several names are done once, in the folder of the first name;
the others' rows point at it (``duplicate_of``).  Folders in ``maps/`` that no
source of the run claims are listed as stale (source gone, source changed, or not
among this run's sources); ``prune`` removes the first two kinds.

Sources are only ever opened for reading, and only regular files: a FIFO, a
device or a socket named like a map is refused before a byte is read, and a
symbolic link found in a source folder whose target lies outside that folder is
refused unless ``follow_links``.  While a batch runs, ``summary.json`` says
``"state": "running"`` and lists the maps still pending, so a batch killed with
SIGKILL leaves a summary that says so.

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
import glob
import hashlib
import json
import math
import os
import re
from collections.abc import Callable, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from envsample._version import __version__
from envsample.core.color import canonical_primaries
from envsample.core.latlong import MAPPINGS, parse_size
from envsample.core.sphere import UP_AXES
from envsample.errors import EnvsampleError, MapReadError
from envsample.io.maps import supported_extensions
from envsample.pipeline.outcomes import (
    BatchInterrupted,
    BatchProgress,
    BatchResult,
    MapResult,
    count_verdicts,
    result_from_row,
)
from envsample.pipeline.runners import import_distributed, make_runner
from envsample.pipeline.summary import write_summaries
from envsample.pipeline.tasks import (
    ADDITIVE,
    MAPS_FOLDER,
    THUMB_WIDTH,
    VERIFY_SETTINGS,
    process_map,
    read_manifest,
    regular_file_sha256,
    remove_tree,
    up_to_date,
)
from envsample.qa.profile import load_profile

__all__ = [
    "BUILD_OPTIONS",
    "BatchResult",
    "MapResult",
    "BatchProgress",
    "BatchInterrupted",
    "expand_sources",
    "normalize_options",
    "run_batch",
    "process_map",
]

#: Table options a batch accepts and their defaults: the keywords of
#: :func:`envsample.sampling.table.build_table` (``rotation_deg`` in degrees) and the
#: per-map options of ``envsample build`` (``tune``, ``raw``, ``repair``, ``allow_aspect``).
BUILD_OPTIONS = {
    "size": None,
    "primaries": "bt709",
    "mapping": "equal-area",
    "uniform_mix": 0.0,
    "up": "y",
    "rotation_deg": 0.0,
    "compensate": False,
    "tune": False,
    "raw": False,
    "repair": False,
    "allow_aspect": False,
}

_FLAGS = ("compensate", "tune", "raw", "repair", "allow_aspect")

# Bump when the layout or the content of a map folder changes: old folders are then redone.
_LAYOUT_VERSION = 2
_STAGING = ".staging"
_NAME_CHARS = re.compile(r"[^A-Za-z0-9._-]+")
_GLOB_CHARS = re.compile(r"[*?\[]")


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


def _glob_root(pattern: str) -> Path:
    """The folder a glob pattern searches: its leading components without wildcards."""
    parts = []
    for part in Path(pattern).parts:
        if _GLOB_CHARS.search(part):
            break
        parts.append(part)
    return Path(*parts) if parts else Path(".")


def _collect_sources(sources, *, exclude=None, follow_links: bool = False) -> tuple[list[Path], dict]:
    """(sorted unique files, {path: why refused}) for :func:`expand_sources` and :func:`run_batch`."""

    if isinstance(sources, (str, os.PathLike)):
        sources = [sources]
    extensions = supported_extensions()
    ex = None if exclude is None else Path(exclude).resolve()
    candidates: list[tuple[Path, Path | None]] = []  # (file, the folder it was found in, or None if named)
    for src in sources:
        text = os.fspath(src)
        p = Path(text)
        if p.is_dir():
            candidates.extend((f, p) for f in _walk(p, extensions, ex))
        elif p.exists() or p.is_symlink():
            candidates.append((p, None))
        elif _GLOB_CHARS.search(text):
            matches = sorted(glob.glob(text, recursive=True))
            if not matches:
                raise EnvsampleError(f"{text}: the pattern matches no file; check the pattern and the folder")
            root = _glob_root(text)
            for m in matches:
                mp = Path(m)
                if mp.is_dir():
                    candidates.extend((f, mp) for f in _walk(mp, extensions, ex))
                else:
                    candidates.append((mp, root))
        else:
            raise EnvsampleError(f"{text}: no such file or folder; check the path")
    unique: dict[Path, Path] = {}
    refused: dict[str, str] = {}
    for c, tree in candidates:
        key = c.resolve()
        if _under(key, ex):
            continue
        if tree is not None and not follow_links and not _under(key, tree.resolve()):
            # Named without the target (it may be a system file).
            refused[os.fspath(c)] = (f"{c}: a symbolic link to a file outside the source folder {tree}; "
                                     "refused (pass follow_links=True to include such links)")
            continue
        unique.setdefault(key, c)
    return [unique[k] for k in sorted(unique, key=os.fspath)], refused


def expand_sources(sources, *, exclude=None, follow_links: bool = False) -> list[Path]:
    """Files, folders and glob patterns to a sorted, de-duplicated list of files.

    Parameters
    ----------
    sources : str, PathLike or iterable of them
        A file is taken as it is (whatever its extension: QA reports what it is).
        A folder is searched recursively for ``.exr`` and ``.hdr`` maps and for
        LDR images (``.png``, ``.jpg``, ``.jpeg``, ``.tif``, ``.tiff``), so that QA can
        fail them; hidden files and folders are skipped, and linked folders are not
        entered.  A string with ``*``, ``?`` or ``[`` that is not an existing path is a
        glob pattern (``**`` recursive); folders it matches are searched as above.
    exclude : str or PathLike, optional
        A folder whose contents are never inputs (the batch's output folder).
    follow_links : bool
        Keep files found in a folder (or by a pattern) that are symbolic links to a
        file outside that folder (or outside the pattern's fixed leading folders).
        By default they are left out (:func:`run_batch` lists them as refused).

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
    return _collect_sources(sources, exclude=exclude, follow_links=follow_links)[0]


def normalize_options(options: Mapping | None) -> dict:
    """Check the table options of a batch and return them in canonical form.

    Keys (all optional, defaults in :data:`BUILD_OPTIONS`): ``size`` (``"WxH"`` or
    ``(width, height)``, None = the map's resolution), ``primaries``, ``mapping``,
    ``uniform_mix`` (in [0, 1)), ``up`` (``"y"`` or ``"z"``), ``rotation_deg`` (degrees;
    the old names ``rotate`` and ``rotate_deg`` are still accepted), and the flags
    ``compensate``, ``tune``, ``raw``, ``repair``, ``allow_aspect`` (as ``envsample build``).
    Unknown keys raise ValueError listing the valid ones.
    """

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
    for name in _FLAGS:
        if not isinstance(opts[name], (bool, np.bool_)):
            raise ValueError(f"{name} must be True or False, got {opts[name]!r}")
    return {
        "size": None if size is None else [size[0], size[1]],
        "primaries": canonical_primaries(opts["primaries"]),
        "mapping": mapping,
        "uniform_mix": mix,
        "up": up,
        "rotation_deg": rotation,
        **{name: bool(opts[name]) for name in _FLAGS},
    }


def _map_name(path: Path, sha256: str, width: int = 8) -> str:
    stem = _NAME_CHARS.sub("_", path.stem).strip("._") or "map"
    return f"{stem[:80]}-{sha256[:width]}"


def _hash_all(paths: list[Path]) -> list[tuple[str | None, str | None]]:
    """(sha256, error) per path; special files are refused before reading; threads overlap the reads."""
    def one(p: Path):
        try:
            return regular_file_sha256(p), None
        except MapReadError as e:
            return None, str(e)

    if not paths:
        return []
    with ThreadPoolExecutor(max_workers=min(8, len(paths))) as pool:
        return list(pool.map(one, paths))


def _digest(doc: dict) -> str:
    return hashlib.sha256(json.dumps(doc, sort_keys=True, allow_nan=False).encode("utf-8")).hexdigest()


def output_keys(opts: dict, profile, version: str) -> tuple[dict, dict]:
    """The options document and key of each output (check, table, verify): what shapes it."""
    common = {"layout": _LAYOUT_VERSION, "tool_version": version}
    # raw and tune only add to a table (tasks.ADDITIVE): they are not part of its key, so a table
    # made with them serves a run without them; a verify is tied to the very table.json it checked.
    docs = {"check": {**common, "profile": profile.to_dict()["settings"], "thumb_width": THUMB_WIDTH},
            "table": {**common, "build": {k: v for k, v in opts.items() if k not in ADDITIVE}},
            "verify": {**common, "verify": dict(VERIFY_SETTINGS)}}
    if opts.get("fix"):  # only when asked, so the check key of runs without it stays the same
        docs["check"]["fix"] = True
    keys = {name: _digest(doc) for name, doc in docs.items()}
    docs["table"]["asked"] = {k: opts[k] for k in ADDITIVE}
    return docs, keys


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


@dataclass
class _Run:
    """What every step of one batch needs: the output folder, the keys and the choices."""

    out: Path
    key_docs: dict
    keys: dict
    profile: object
    version: str
    verify: bool
    build_failed: bool
    force: bool
    prune: bool
    options: dict = field(default_factory=dict)


def run_batch(
    sources,
    outdir,
    *,
    workers: int | None = None,
    verify: bool = False,
    split_sun: bool = False,
    force: bool = False,
    fix: bool = False,
    scheduler=None,
    options: Mapping | None = None,
    profile=None,
    build_failed: bool = False,
    prune: bool = False,
    follow_links: bool = False,
    progress: Callable[[BatchProgress], None] | None = None,
    task: Callable[[Mapping], dict] = process_map,
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
        Also run the validation render (:func:`envsample.pipeline.verify.verify_map`) at
        :data:`VERIFY_SETTINGS`, seeded from each map's SHA-256.  Without it, verify
        results of an earlier run are kept (while the table they describe is unchanged).
    split_sun : bool
        Also split the sun off every map whose sun holds at least the profile's
        ``[sampling] analytic_light_share`` of the light (the share from which the check
        advises it): ``maps/NAME/split/`` holds ``map.sky.exr``, ``map.sun.json`` and the
        sky's table (:func:`envsample.pipeline.split.write_split`); the row's ``split_note`` says
        why not.  Like ``raw`` and ``tune`` it only adds to the table output, so a rerun without
        it keeps the split.
    force : bool
        Redo maps whose outputs are up to date.
    fix : bool
        Apply the safe remedies of ``envsample fix --auto`` to each map before its table is
        built (the source is never changed; ``fixed.exr`` and ``fix.json`` join its folder).
    scheduler : str or dask.distributed.Client, optional
        Send the tasks to a Dask cluster (``"tcp://host:8786"`` or a Client) instead
        of local processes; needs ``pip install envsample[dask]`` and a file system
        shared with the workers.  The outputs are identical to a local run.
    options : mapping, optional
        Table options, see :func:`normalize_options` (size, primaries, mapping,
        uniform_mix, up, rotation_deg in degrees, compensate, tune, raw, repair, allow_aspect).
    profile : Profile, path, mapping or None
        QA thresholds (:func:`envsample.qa.profile.load_profile`).
    build_failed : bool
        Also build tables for maps that failed QA (by default they get none).
    prune : bool
        Remove the folders of ``maps/`` whose source is gone or has changed.
    follow_links : bool
        Accept symbolic links found in source folders that lead outside them.
    progress : callable, optional
        Called with a :class:`BatchProgress` once at the start and after every source.
    task : callable, optional
        The function each worker runs on one map's task dict (default
        :func:`envsample.pipeline.tasks.process_map`).  Give a wrapper of it to
        instrument or restrict a batch; with worker processes or Dask it must be a
        top-level function the workers can import.

    Returns
    -------
    BatchResult
        ``summary.json``, ``summary.csv`` and ``index.html`` are written to OUTDIR.

    Raises
    ------
    BatchInterrupted
        On Ctrl-C (a KeyboardInterrupt): pending maps are cancelled, workers
        stopped, staging removed; ``.result`` lists the maps finished (their
        folders are complete) and the summaries say ``"state": "interrupted"`` with
        the pending maps.  Rerun to resume.
    EnvsampleError
        A missing source, no maps found, OUTDIR not a folder or locked by another
        batch, or dask missing.  ValueError / ProfileError: bad options.
    """
    n_workers = _check_workers(workers)
    paths, refused, run = _prepare(sources, outdir, options=options, profile=profile, follow_links=follow_links,
                                   scheduler=scheduler, flags={"verify": verify, "split_sun": split_sun, "fix": fix,
                                                               "build_failed": build_failed, "force": force,
                                                               "prune": prune})
    with _locked(run.out):
        return _run_locked(paths, refused, run, runner=make_runner(scheduler, n_workers), progress=progress,
                           task=task)


def _prepare(sources, outdir, *, options, profile, follow_links, scheduler, flags) -> tuple:
    """Check everything a batch is given, find its sources, make OUTDIR; (paths, refused, _Run)."""

    opts = normalize_options(options)
    prof = load_profile(profile)
    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise EnvsampleError(f"{out}: exists and is not a folder; choose an output folder")
    paths, refused = _collect_sources(sources, exclude=out, follow_links=follow_links)
    if not paths and not refused:
        shown = ", ".join(os.fspath(s) for s in ([sources] if isinstance(sources, (str, os.PathLike)) else sources))
        raise EnvsampleError(f"no map files found in {shown or 'the sources given'}; pass .exr/.hdr files, folders or globs")
    if scheduler is not None:
        import_distributed()
    out.mkdir(parents=True, exist_ok=True)
    out = out.resolve()
    # split_sun adds to a map's table output like raw and tune (tasks.ADDITIVE): not part of its key.
    # fix changes the report and the pixels the table is built from: part of both keys.
    opts = {**opts, "split_sun": bool(flags["split_sun"]), "fix": bool(flags["fix"])}
    docs, keys = output_keys(opts, prof, __version__)
    run = _Run(out=out, key_docs=docs, keys=keys, profile=prof, version=__version__, verify=bool(flags["verify"]),
               build_failed=bool(flags["build_failed"]), force=bool(flags["force"]), prune=bool(flags["prune"]),
               options=opts)
    return paths, refused, run


def _run_locked(paths, refused: dict, run: _Run, *, runner, progress, task) -> BatchResult:
    """The batch proper, with OUTDIR locked: plan, run, write the summaries; Ctrl-C anywhere -> BatchInterrupted."""
    staging = run.out / _STAGING
    results: list = [None] * len(paths)
    plan = None
    jobs = None

    def emit(item):
        if progress is not None:
            progress(BatchProgress(done=sum(r is not None for r in results), total=len(results),
                                   counts=count_verdicts(results, total=len(results)), item=item))

    def result(state: str) -> BatchResult:
        done = [r for r in results if r is not None]
        return BatchResult(outdir=run.out, maps=done if state == "interrupted" else list(results),
                           options=run.options, interrupted=state == "interrupted",
                           duplicates=plan.duplicates if plan else [], stale=plan.stale if plan else [],
                           requested=len(results))

    try:
        remove_tree(staging)  # left by a batch that was killed
        (run.out / MAPS_FOLDER).mkdir(exist_ok=True)
        plan = _plan(paths, refused, run)
        results = plan.results
        emit(None)
        for r in results:
            if r is not None:
                emit(r)
        pending = [os.fspath(paths[i]) for i in plan.todo]
        write_summaries(result("running"), run.key_docs, run.profile, state="running", pending=pending)
        tasks = [(i, {"source": os.fspath(paths[i].resolve()), "display": os.fspath(paths[i]),
                      "name": plan.names[i], "sha256": plan.hashes[i], "outdir": os.fspath(run.out),
                      "staging": os.fspath(staging), "options": run.options, "verify": run.verify,
                      "build_failed": run.build_failed, "profile": run.profile, "keys": run.keys,
                      "key_docs": run.key_docs, "version": run.version})
                 for i in plan.todo]
        jobs = runner(tasks, task)
        for index, outcome in jobs:
            results[index] = _finish(plan, index, outcome)
            emit(results[index])
            for j in plan.aliases.get(index, ()):
                results[j] = _alias(results[index], os.fspath(paths[j]), plan.dup_of[j])
                emit(results[j])
        jobs.close()
        final = result("complete")
        final.summary = write_summaries(final, run.key_docs, run.profile, state="complete")
        return final
    except KeyboardInterrupt:
        if jobs is not None:
            jobs.close()  # cancels what is pending and stops the workers
        stopped = result("interrupted")
        if plan is not None:
            pending = [os.fspath(p) for p, r in zip(paths, results) if r is None]
            with contextlib.suppress(Exception):
                stopped.summary = write_summaries(stopped, run.key_docs, run.profile, state="interrupted",
                                                  pending=pending)
        raise BatchInterrupted(stopped) from None
    finally:
        if jobs is not None:
            jobs.close()
        remove_tree(staging)


@dataclass
class _Plan:
    results: list
    names: list
    hashes: list
    todo: list
    aliases: dict
    dup_of: list
    duplicates: list
    stale: list


def _plan(paths: list[Path], refused: dict, run: _Run) -> _Plan:
    """Hash the sources, name their folders, note duplicates, find what is up to date and what is stale."""
    n = len(paths)
    hashed = _hash_all(paths)
    results: list = [None] * n
    names: list = [None] * n
    hashes = [h for h, _ in hashed]
    dup_of: list = [None] * n
    todo, aliases, owner_of, by_sha, used, owners = [], {}, {}, {}, {}, []
    for i, (p, (sha, err)) in enumerate(zip(paths, hashed)):
        display = os.fspath(p)
        if err is not None:
            results[i] = MapResult(display, "error", "error", error=err)
            continue
        by_sha.setdefault(sha, []).append(display)
        if sha in owner_of:
            # The same bytes under another name: the first copy's folder serves both.
            owner = owner_of[sha]
            dup_of[i] = os.fspath(paths[owner])
            names[i] = names[owner]
            aliases.setdefault(owner, []).append(i)
            continue
        owner_of[sha] = i
        name = _map_name(p, sha)
        if name.casefold() in used:
            name = _map_name(p, sha, width=64)  # same stem and a clash of 8 hex digits
        used[name.casefold()] = i
        names[i] = name
        owners.append(i)
    for i, row in zip(owners, _stored_rows(run, [names[i] for i in owners], [hashes[i] for i in owners])):
        if row is not None:
            results[i] = result_from_row({**row, "source": os.fspath(paths[i]), "duplicate_of": None},
                                         status="skipped")
        else:
            todo.append(i)
    for owner, members in aliases.items():
        if results[owner] is not None:
            for j in members:
                results[j] = _alias(results[owner], os.fspath(paths[j]), dup_of[j])
    extra = [MapResult(display, "error", "error", error=msg) for display, msg in sorted(refused.items())]
    paths.extend(Path(d) for d, _ in sorted(refused.items()))
    results.extend(extra)
    names.extend([None] * len(extra))
    hashes.extend([None] * len(extra))
    dup_of.extend([None] * len(extra))
    duplicates = [{"sha256": s, "sources": d} for s, d in by_sha.items() if len(d) > 1]
    stale = _stale_folders(run, {nm for nm in names if nm})
    return _Plan(results, names, hashes, todo, aliases, dup_of, duplicates, stale)


def _stored_rows(run: _Run, names: list, hashes: list) -> list:
    """The stored row of each folder that is up to date (None where it must be redone).

    Checking means hashing every output file; SHA-256 releases the GIL, so threads overlap the folders.
    """
    if run.force or not names:
        return [None] * len(names)

    def one(item):
        name, sha = item
        return up_to_date(run.out / MAPS_FOLDER / name, sha, run.keys, run.version, verify=run.verify,
                          build_failed=run.build_failed, options=run.options)

    with ThreadPoolExecutor(max_workers=min(4, len(names))) as pool:
        return list(pool.map(one, zip(names, hashes)))


def _stale_folders(run: _Run, claimed: set) -> list[dict]:
    """Folders of maps/ that no source of this run claims, with the reason; pruned if asked."""
    folder = run.out / MAPS_FOLDER
    others = sorted(p for p in folder.iterdir() if p.is_dir() and p.name not in claimed)
    found = []
    for p in others:
        doc = read_manifest(p)
        entry = {"folder": f"{MAPS_FOLDER}/{p.name}", "source": None, "reason": "no manifest (not a folder "
                 "this version of envsample made)", "pruned": False}
        if doc is not None:
            src = doc["source"]
            entry["source"] = src.get("path")
            resolved = Path(str(src.get("resolved") or src.get("path") or ""))
            if not (resolved.exists() or resolved.is_symlink()):
                entry["reason"] = "source gone"
            else:
                try:
                    same = regular_file_sha256(resolved) == src.get("sha256")
                except MapReadError:
                    same = False
                entry["reason"] = "not among this run's sources" if same else "source changed"
            if run.prune and entry["reason"] in ("source gone", "source changed"):
                remove_tree(p)
                entry["pruned"] = not p.exists()
        found.append(entry)
    return found


def _finish(plan: _Plan, index: int, outcome: Mapping) -> MapResult:
    row = dict(outcome["row"])
    row["duplicate_of"] = plan.dup_of[index]
    return result_from_row(row)


def _alias(owner: MapResult, display: str, dup_of: str | None) -> MapResult:
    return MapResult(source=display, status=owner.status, verdict=owner.verdict, folder=owner.folder,
                     sha256=owner.sha256, duplicate_of=dup_of, error=owner.error, figures=dict(owner.figures))
