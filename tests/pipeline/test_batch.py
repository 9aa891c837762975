"""Tests of envsample.batch: a library of small generated maps through run_batch.

Outside references used here:
- the integral of a constant radiance L over the sphere is 4*pi*L (textbook calculus);
- uniform sphere sampling of the irradiance of a constant sky: per-sample contribution
  X = 4*pi*L*max(0, cos theta), E[X] = pi*L, E[X^2] = 16*pi^2*L^2 * (1/4pi) * 2*pi/3,
  so Var X / E[X]^2 = 16/6 - 1 = 5/3 (textbook Monte Carlo, e.g. Veach 1997, sec. 2.4);
- PNG files start with the signature of ISO/IEC 15948:2004, sec. 5.2;
- SHA-256 of the bytes (FIPS 180-4) through Python's hashlib;
- CSV read back with Python's csv module, HTML with html.parser.

The maps are 64x32 analytic skies from envsample.skies written with envsample.io.
"""

from __future__ import annotations

import base64
import csv
import hashlib
import json
import math
import os
import shutil
import signal
import subprocess
import sys
import textwrap
import time
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from support.batch_tasks import crash_on_studio

from envsample.errors import EnvsampleError
from envsample.io.maps import write_map
from envsample.pipeline.batch import expand_sources, normalize_options, run_batch
from envsample.pipeline.outcomes import ROW_FIELDS, VERDICTS, BatchInterrupted
from envsample.pipeline.summary import SUMMARY_SCHEMA
from envsample.pipeline.tasks import VERIFY_SETTINGS, map_seed, process_map
from envsample.sampling.table import load_table
from envsample.synth.skies import make_sky

WIDTH = 64
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948:2004, sec. 5.2


def sha256(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def make_library(root: Path) -> dict:
    """Good maps, one corrupt EXR, one duplicate under another name, one 8-bit PNG, and files to ignore."""
    root.mkdir(parents=True, exist_ok=True)
    (root / "sub").mkdir()
    files = {
        "uniform": root / "uniform.exr",
        "overcast": root / "overcast.hdr",
        "sun": root / "sun.exr",
        "studio": root / "sub" / "studio.exr",
    }
    write_map(files["uniform"], make_sky("uniform", width=WIDTH))
    write_map(files["overcast"], make_sky("overcast", width=WIDTH))
    write_map(files["sun"], make_sky("sun", width=WIDTH), pixel_type="float")
    write_map(files["studio"], make_sky("studio", width=WIDTH))
    files["duplicate"] = root / "sub" / "sun_copy.exr"
    shutil.copyfile(files["sun"], files["duplicate"])
    # A truncated copy of a valid EXR: the header survives, the pixels do not.
    data = files["studio"].read_bytes()
    files["corrupt"] = root / "broken.exr"
    files["corrupt"].write_bytes(data[: len(data) // 2])
    import imageio.v3 as iio

    files["ldr"] = root / "photo.png"
    ldr = np.clip(make_sky("overcast", width=WIDTH), 0.0, 1.0)
    iio.imwrite(files["ldr"], np.rint(ldr * 255).astype(np.uint8))
    (root / "notes.txt").write_text("not a map\n")
    write_map(root / ".hidden.exr", make_sky("uniform", width=WIDTH))
    return files


def fingerprint(files) -> dict:
    return {str(p): (p.stat().st_mtime_ns, sha256(p)) for p in files}


def tree_hashes(outdir: Path) -> dict:
    """sha256 of every file under outdir except the lock file."""
    return {p.relative_to(outdir).as_posix(): sha256(p) for p in sorted(outdir.rglob("*"))
            if p.is_file() and p.name != ".lock"}


def assert_complete(folder: Path) -> dict:
    """Every file a manifest lists exists with its recorded size and SHA-256; nothing else is there."""
    manifest = json.loads((folder / "manifest.json").read_text())
    listed = {rel: info for out in manifest["outputs"].values() for rel, info in out["files"].items()}
    present = {p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file()} - {"manifest.json"}
    assert present == set(listed), folder
    for rel, info in listed.items():
        assert (folder / rel).stat().st_size == info["size"]
        assert sha256(folder / rel) == info["sha256"]
    return manifest


class _IndexParser(HTMLParser):
    def __init__(self):
        super().__init__()
        self.rows = 0
        self.in_body = False
        self.images = []

    def handle_starttag(self, tag, attrs):
        if tag == "tbody":
            self.in_body = True
        elif tag == "tr" and self.in_body:
            self.rows += 1
        elif tag == "img":
            self.images.append(dict(attrs)["src"])

    def handle_endtag(self, tag):
        if tag == "tbody":
            self.in_body = False


def by_source(result) -> dict:
    return {Path(m.source).name: m for m in result.maps}


# --------------------------------------------------------------------------- sources and options


def test_expand_sources_walks_folders_globs_and_dedupes(tmp_path):
    files = make_library(tmp_path / "lib")
    out = tmp_path / "lib" / "out"
    out.mkdir()
    write_map(out / "old.exr", make_sky("uniform", width=WIDTH))  # inside OUTDIR: never an input
    (tmp_path / "link.exr").symlink_to(files["sun"])
    found = expand_sources([tmp_path / "lib", str(files["sun"]), str(tmp_path / "lib" / "*.exr"), tmp_path / "link.exr"],
                           exclude=out)
    # Sorted by resolved path, each file once (the symlink resolves to sun.exr); hidden files,
    # other extensions and the output folder are skipped.
    resolved = [p.resolve().relative_to((tmp_path / "lib").resolve()).as_posix() for p in found]
    assert resolved == ["broken.exr", "overcast.hdr", "photo.png", "sub/studio.exr", "sub/sun_copy.exr",
                        "sun.exr", "uniform.exr"]
    assert found[5] == files["sun"]  # reached first through the folder walk, kept under that path
    with pytest.raises(EnvsampleError, match="no such file or folder"):
        expand_sources([tmp_path / "missing.exr"])
    with pytest.raises(EnvsampleError, match="matches no file"):
        expand_sources([str(tmp_path / "*.nothing")])


def test_normalize_options_checks_names_and_values():
    opts = normalize_options({"size": "32x16", "primaries": "srgb", "rotation_deg": 90, "tune": True})
    assert opts == {"size": [32, 16], "primaries": "bt709", "mapping": "equal-area", "uniform_mix": 0.0,
                    "up": "y", "rotation_deg": 90.0, "compensate": False, "tune": True, "raw": False,
                    "repair": False, "allow_aspect": False}
    with pytest.raises(ValueError, match="raw must be True or False"):
        normalize_options({"raw": "yes"})
    with pytest.raises(ValueError, match="unknown batch option.*valid options: size, primaries"):
        normalize_options({"sizes": "32x16"})
    with pytest.raises(ValueError, match="unknown mapping 'flat'"):
        normalize_options({"mapping": "flat"})
    with pytest.raises(ValueError, match="uniform_mix must be in"):
        normalize_options({"uniform_mix": 1.0})
    with pytest.raises(ValueError, match="up must be"):
        normalize_options({"up": "x"})


def test_map_seed_comes_from_the_sha256_through_seedsequence():
    digest = hashlib.sha256(b"a map").hexdigest()
    expected = int(np.random.SeedSequence(int(digest, 16)).generate_state(1, dtype=np.uint64)[0])
    assert map_seed(digest) == expected
    assert map_seed(hashlib.sha256(b"another map").hexdigest()) != expected


# --------------------------------------------------------------------------- the main run


def test_batch_reports_the_corrupt_file_and_finishes_the_rest(tmp_path):
    files = make_library(tmp_path / "lib")
    before = fingerprint(files.values())
    events = []
    out = tmp_path / "out"
    result = run_batch([tmp_path / "lib"], out, workers=2, progress=events.append)
    rows = by_source(result)
    assert set(rows) == {"uniform.exr", "overcast.hdr", "sun.exr", "studio.exr", "sun_copy.exr", "broken.exr",
                         "photo.png"}

    corrupt = rows["broken.exr"]
    assert corrupt.verdict == "error" and corrupt.status == "done"
    assert "broken.exr" in corrupt.error and "\n" not in corrupt.error
    for name in ("uniform.exr", "overcast.hdr", "sun.exr", "studio.exr", "sun_copy.exr"):
        m = rows[name]
        assert m.status == "done" and m.verdict in ("pass", "warn") and m.error is None, (name, m)
        folder = out / m.folder
        assert_complete(folder)
        table = load_table(folder / "table")
        assert (table.width, table.height) == (WIDTH, WIDTH // 2)
        qa = json.loads((folder / "check.json").read_text())
        assert qa["verdict"] == m.verdict
    # Closed form: a constant sky of radiance 1 integrates to 4*pi over the sphere.
    assert rows["uniform.exr"].figures["luminance_integral"] == pytest.approx(4 * math.pi, rel=1e-6)
    ldr = rows["photo.png"]
    assert ldr.verdict == "fail" and "hdr" in ldr.figures["failed_checks"]
    # A map that failed QA gets no table (issue 10: only with build_failed).
    assert ldr.figures["table_note"].startswith("no table: the map failed QA")
    assert not (out / ldr.folder / "table.json").exists()

    # Same bytes under two names: done once, and the second name's row points at the first copy's folder.
    assert rows["sun_copy.exr"].folder == rows["sun.exr"].folder
    assert rows["sun_copy.exr"].sha256 == rows["sun.exr"].sha256 == sha256(files["sun"])
    first, second = sorted((rows["sun.exr"], rows["sun_copy.exr"]), key=lambda m: m.duplicate_of is not None)
    assert first.duplicate_of is None and second.duplicate_of == first.source
    assert len(list((out / "maps").glob("sun*"))) == 1
    assert result.duplicates == [{"sha256": sha256(files["sun"]),
                                  "sources": sorted([os.fspath(files["sun"]), os.fspath(files["duplicate"])],
                                                    key=lambda s: os.fspath(Path(s).resolve()))}]

    # Summaries: one row per source, in every format.
    summary = json.loads((out / "summary.json").read_text())
    assert SUMMARY_SCHEMA.matches(summary) and summary["schema"] == "envsample.batch-summary" and len(summary["maps"]) == 7
    assert summary["state"] == "complete" and summary["stale"] == []
    assert summary["counts"]["error"] == 1 and summary["counts"]["fail"] == 1
    with open(out / "summary.csv", newline="") as fh:
        table_rows = list(csv.DictReader(fh))
    assert len(table_rows) == 7 and tuple(table_rows[0]) == ROW_FIELDS
    assert [r["source"] for r in table_rows] == [m.source for m in result.maps]
    page = _IndexParser()
    page.feed((out / "index.html").read_text())
    assert page.rows == 7
    assert len(page.images) == 6  # every readable map has a thumbnail; the corrupt one shows a placeholder
    import imageio.v3 as iio

    for src in page.images:
        assert src.startswith("data:image/png;base64,")
        png = base64.b64decode(src.split(",", 1)[1])
        assert png.startswith(PNG_SIGNATURE)
        assert iio.imread(png, extension=".png").shape == (WIDTH // 2, WIDTH, 3)

    # Progress: a start event, then one per source, counts adding up.
    assert events[0].done == 0 and events[0].item is None
    assert [e.done for e in events] == list(range(8))
    last = events[-1].counts
    assert sum(last[v] for v in VERDICTS) == 7 and last["pending"] == 0
    assert result.exit_code() == 1  # one failure and one error

    assert not (out / ".staging").exists()
    assert fingerprint(files.values()) == before  # sources untouched


def test_second_run_skips_everything_force_redoes_and_new_options_redo(tmp_path):
    files = make_library(tmp_path / "lib")
    before = fingerprint(files.values())
    out = tmp_path / "out"
    first = run_batch([tmp_path / "lib"], out, workers=0)
    manifests = {m.source: (out / m.folder / "manifest.json").stat().st_mtime_ns for m in first.maps}

    second = run_batch([tmp_path / "lib"], out, workers=0)
    assert [m.status for m in second.maps] == ["skipped"] * 7
    assert [m.to_row() | {"status": None} for m in second.maps] == [m.to_row() | {"status": None} for m in first.maps]
    assert {m.source: (out / m.folder / "manifest.json").stat().st_mtime_ns for m in second.maps} == manifests
    assert second.counts["skipped"] == 7

    forced = run_batch([tmp_path / "lib"], out, workers=0, force=True)
    assert [m.status for m in forced.maps] == ["done"] * 7
    assert all((out / m.folder / "manifest.json").stat().st_mtime_ns != manifests[m.source] for m in forced.maps)

    coarse = run_batch([tmp_path / "lib"], out, workers=0, options={"size": "32x16"})
    rows = by_source(coarse)
    # Only the maps that have a table are redone: the unreadable and the failed map have nothing
    # that the table options shape, so they stay up to date.
    assert {n: m.status for n, m in rows.items()} == {
        "broken.exr": "skipped", "photo.png": "skipped", "uniform.exr": "done", "overcast.hdr": "done",
        "sun.exr": "done", "sun_copy.exr": "done", "studio.exr": "done"}
    assert (rows["sun.exr"].figures["table_width"], rows["sun.exr"].figures["table_height"]) == (32, 16)
    assert load_table(out / rows["sun.exr"].folder / "table").table_width == 32

    # A changed source is redone; an incomplete folder is not trusted.
    write_map(files["uniform"], make_sky("uniform", width=WIDTH, radiance=2.0))
    (out / rows["studio.exr"].folder / "thumb.png").unlink()
    again = by_source(run_batch([tmp_path / "lib"], out, workers=0, options={"size": "32x16"}))
    assert again["uniform.exr"].status == "done" and again["uniform.exr"].folder != rows["uniform.exr"].folder
    assert again["uniform.exr"].figures["luminance_integral"] == pytest.approx(8 * math.pi, rel=1e-6)
    assert again["studio.exr"].status == "done"
    assert again["sun.exr"].status == "skipped"
    del before[str(files["uniform"])]
    assert {k: v for k, v in fingerprint(files.values()).items() if k in before} == before


def _fail_inside_studio(task):
    """Task wrapper: the studio map fails inside process_map (its profile is not one), the others run."""
    if task["name"].startswith("studio-"):
        task = {**task, "profile": object()}
    return process_map(task)


def test_a_failing_map_is_recorded_and_the_batch_goes_on(tmp_path):
    files = make_library(tmp_path / "lib")
    out = tmp_path / "out"
    rows = by_source(run_batch([tmp_path / "lib"], out, workers=0, task=_fail_inside_studio))
    bad = rows["studio.exr"]
    assert bad.status == "error" and bad.folder is None
    assert bad.error.startswith("processing failed: ") and "TypeError: profile must be a path" in bad.error
    assert not list((out / "maps").glob("studio-*")) and not (out / ".staging").exists()
    assert all(m.status == "done" for n, m in rows.items() if n != "studio.exr")
    # Errors are not cached: the next run tries the map again and skips the others.
    rows = by_source(run_batch([tmp_path / "lib"], out, workers=0))
    assert rows["studio.exr"].status == "done" and rows["sun.exr"].status == "skipped"
    assert files["studio"].exists()




def test_a_crashing_worker_costs_only_its_map(tmp_path):
    make_library(tmp_path / "lib")
    rows = by_source(run_batch([tmp_path / "lib" / "sub", tmp_path / "lib" / "uniform.exr"], tmp_path / "out", workers=1,
                               task=crash_on_studio))
    assert rows["studio.exr"].status == "error" and "worker process died" in rows["studio.exr"].error
    assert rows["uniform.exr"].status == "done" and rows["sun_copy.exr"].status == "done"


def test_clamped_pixels_are_noted_and_the_source_keeps_them(tmp_path):
    from envsample.io.maps import read_map

    lib = tmp_path / "lib"
    lib.mkdir()
    rgb = make_sky("overcast", width=WIDTH)
    rgb[3, 5, 0] = -0.5
    write_map(lib / "negative.exr", rgb, pixel_type="float")
    before = fingerprint([lib / "negative.exr"])
    m = run_batch([lib], tmp_path / "out", workers=0).maps[0]
    assert m.status == "done" and "clamped 1 negative values" in m.figures["table_note"]
    table = load_table(tmp_path / "out" / m.folder / "table")
    assert table.image.min() == 0.0
    assert fingerprint([lib / "negative.exr"]) == before
    assert read_map(lib / "negative.exr").rgb[3, 5, 0] == np.float32(-0.5)


def test_lock_refuses_a_second_batch_on_the_same_folder(tmp_path):
    fcntl = pytest.importorskip("fcntl")
    make_library(tmp_path / "lib")
    out = tmp_path / "out"
    out.mkdir()
    with open(out / ".lock", "a+") as fh:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        with pytest.raises(EnvsampleError, match="another batch is writing to this folder"):
            run_batch([tmp_path / "lib" / "uniform.exr"], out, workers=0)
    assert run_batch([tmp_path / "lib" / "uniform.exr"], out, workers=0).maps[0].status == "done"


def test_usage_errors_are_raised_before_anything_runs(tmp_path):
    make_library(tmp_path / "lib")
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(EnvsampleError, match="no map files found"):
        run_batch([empty], tmp_path / "out", workers=0)
    with pytest.raises(ValueError, match="workers must be"):
        run_batch([tmp_path / "lib"], tmp_path / "out", workers=-1)
    (tmp_path / "file").write_text("x")
    with pytest.raises(EnvsampleError, match="is not a folder"):
        run_batch([tmp_path / "lib"], tmp_path / "file", workers=0)
    assert not (tmp_path / "out").exists()


# --------------------------------------------------------------------------- interruption


def test_simulated_ctrl_c_cancels_cleans_up_and_a_rerun_completes(tmp_path):
    make_library(tmp_path / "lib")
    calls = []

    def interrupt_on_third(task):
        calls.append(task["name"])
        if len(calls) == 3:
            # Leave a half-written staging folder behind, as a real interruption would.
            work = Path(task["staging"]) / f"{task['name']}.partial"
            work.mkdir(parents=True)
            (work / "check.json").write_text("{")
            raise KeyboardInterrupt
        return process_map(task)

    out = tmp_path / "out"
    with pytest.raises(BatchInterrupted) as info:
        run_batch([tmp_path / "lib"], out, workers=0, task=interrupt_on_third)
    partial = info.value.result
    assert partial.interrupted and partial.exit_code() == 130
    assert len(partial.maps) == 2 and all(m.status == "done" for m in partial.maps)
    # issue 12 item 11: the counts name the 7 maps asked for, not only the 2 finished.
    assert partial.counts["maps"] == 7 and partial.counts["done"] == 2 and partial.counts["pending"] == 5
    assert not (out / ".staging").exists()
    summary = json.loads((out / "summary.json").read_text())
    assert summary["state"] == "interrupted" and len(summary["maps"]) == 7
    assert sum(r["status"] == "pending" for r in summary["maps"]) == 5
    folders = sorted((out / "maps").iterdir())
    assert len(folders) == 2
    for f in folders:
        assert_complete(f)
    rerun = run_batch([tmp_path / "lib"], out, workers=0)
    assert sorted(m.status for m in rerun.maps) == ["done"] * 5 + ["skipped"] * 2


_SCRIPT = textwrap.dedent(
    """
    import sys
    from envsample.pipeline.batch import run_batch, BatchInterrupted
    try:
        result = run_batch([sys.argv[1]], sys.argv[2], workers=1)
    except BatchInterrupted as e:
        print("interrupted", e.result.counts["done"], flush=True)
        sys.exit(130)
    print("finished", flush=True)
    """
)


@pytest.mark.parametrize("sig", ["SIGINT", "SIGKILL"])
def test_killing_a_batch_midway_leaves_no_partial_output_and_a_rerun_completes(tmp_path, sig):
    lib = tmp_path / "many"
    lib.mkdir()
    n_maps = 12
    for i in range(n_maps):
        write_map(lib / f"m{i:02d}.exr", make_sky("sun", width=WIDTH, azimuth_deg=float(12 * i - 150)))
    out = tmp_path / "out"
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    proc = subprocess.Popen([sys.executable, "-c", _SCRIPT, str(lib), str(out)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env)
    maps = out / "maps"
    deadline = time.monotonic() + 120  # a safety net for a hung child, not a timing assertion
    while time.monotonic() < deadline and proc.poll() is None:
        if maps.is_dir() and any(p.is_dir() for p in maps.iterdir()):
            break
        time.sleep(0.005)
    assert proc.poll() is None, "the batch ended before the first map was published: " + proc.stderr.read()[-500:]
    proc.send_signal(getattr(signal, sig))
    stdout, stderr = proc.communicate(timeout=120)
    folders = [p for p in maps.iterdir()]
    assert 1 <= len(folders) < n_maps, "the batch was not interrupted midway"
    for folder in folders:  # only complete map folders were published
        assert_complete(folder)
    if sig == "SIGINT":
        assert proc.returncode == 130, stderr[-1000:]
        assert stdout.startswith("interrupted")
        assert not (out / ".staging").exists()
    else:
        assert proc.returncode == -signal.SIGKILL
    # The summary never claims more than it knows: written when the plan was made, it says so.
    summary = json.loads((out / "summary.json").read_text())
    assert summary["state"] == ("interrupted" if sig == "SIGINT" else "running")
    assert len(summary["maps"]) == n_maps

    rerun = run_batch([lib], out, workers=0)
    assert len(rerun.maps) == n_maps and all(m.verdict in ("pass", "warn") for m in rerun.maps)
    assert rerun.counts["skipped"] >= len(folders)
    assert not (out / ".staging").exists()
    for folder in (out / "maps").iterdir():
        assert_complete(folder)
    assert len(json.loads((out / "summary.json").read_text())["maps"]) == n_maps


# --------------------------------------------------------------------------- Dask


def test_dask_cluster_gives_the_same_files_as_the_local_run(tmp_path):
    distributed = pytest.importorskip("distributed", reason="dask.distributed is not installed (envsample[dask])")
    make_library(tmp_path / "lib")
    local = run_batch([tmp_path / "lib"], tmp_path / "local", workers=0)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        remote = run_batch([tmp_path / "lib"], tmp_path / "dask", scheduler=client)
        by_address = run_batch([tmp_path / "lib"], tmp_path / "address", scheduler=cluster.scheduler_address)
    assert [m.to_row() for m in remote.maps] == [m.to_row() for m in local.maps]
    assert [m.to_row() for m in by_address.maps] == [m.to_row() for m in local.maps]
    local_files = tree_hashes(tmp_path / "local")
    assert tree_hashes(tmp_path / "dask") == local_files
    assert tree_hashes(tmp_path / "address") == local_files
    assert any(k.endswith("table.npz") for k in local_files)


def test_missing_dask_names_the_extra(tmp_path, monkeypatch):
    make_library(tmp_path / "lib")
    monkeypatch.setitem(sys.modules, "distributed", None)  # makes "import distributed" fail
    with pytest.raises(EnvsampleError, match=r"pip install envsample\[dask\]"):
        run_batch([tmp_path / "lib"], tmp_path / "out", scheduler="tcp://127.0.0.1:1")
    assert not (tmp_path / "out").exists()


# --------------------------------------------------------------------------- verify


def test_verify_figures_match_the_closed_form_variance_of_a_constant_sky(tmp_path):
    """Table sampling of a constant sky is uniform sphere sampling: relative variance 5/3 per sample.

    The row's relative RMSE is over a 32x16 grid of normals weighted by solid angle,
    at spp samples each; its relative standard error is about sqrt(2 / n_eff) / 2 with
    n_eff = 8/pi^2 * 512 for sin(theta) weights (Gaussian errors, common practice); the
    tolerance is 4 of those.
    """
    lib = tmp_path / "lib"
    lib.mkdir()
    write_map(lib / "uniform.exr", make_sky("uniform", width=WIDTH))
    out = tmp_path / "out"
    result = run_batch([lib], out, workers=0, verify=True)
    m = result.maps[0]
    folder = out / m.folder
    metrics = json.loads((folder / "verify" / "metrics.json").read_text())
    spp = VERIFY_SETTINGS["spp"]
    assert metrics["seed"] == map_seed(m.sha256) and metrics["spp"] == spp
    expected = math.sqrt(5.0 / 3.0 / spp)
    w, h = VERIFY_SETTINGS["normals"]
    n_eff = 8.0 / math.pi ** 2 * w * h
    tolerance = 4.0 * 0.5 * math.sqrt(2.0 / n_eff)
    assert m.figures["verify_rmse_table"] == pytest.approx(expected, rel=tolerance)
    assert m.figures["verify_rmse_table"] == metrics["estimators"]["table"]["relative_rmse"]
    assert_complete(folder)
    # A rerun with verify skips; a rerun without it keeps the verify results (issue 10: nothing deleted).
    assert run_batch([lib], out, workers=0, verify=True).maps[0].status == "skipped"
    before = tree_hashes(folder)
    plain = run_batch([lib], out, workers=0)
    assert plain.maps[0].status == "skipped" and plain.maps[0].figures["verify_rmse_table"] == m.figures["verify_rmse_table"]
    assert tree_hashes(folder) == before


# --------------------------------------------------------------------------- stale folders, links


def test_a_changed_source_leaves_a_stale_folder_that_prune_removes(tmp_path):
    """issue 10: a fixed source's old folder is listed (kept), and --prune removes it and gone sources' folders."""
    lib = tmp_path / "lib"
    lib.mkdir()
    write_map(lib / "a.exr", make_sky("overcast", width=WIDTH))
    write_map(lib / "b.exr", make_sky("uniform", width=WIDTH))
    out = tmp_path / "out"
    first = by_source(run_batch([lib], out, workers=0))
    old_a, old_b = first["a.exr"].folder, first["b.exr"].folder
    write_map(lib / "a.exr", make_sky("overcast", width=WIDTH, zenith_luminance=3.0))  # "fixed": new bytes
    (lib / "b.exr").unlink()
    second = run_batch([lib], out, workers=0)
    stale = {s["folder"]: s for s in second.stale}
    assert stale[old_a]["reason"] == "source changed" and stale[old_b]["reason"] == "source gone"
    assert not any(s["pruned"] for s in second.stale) and (out / old_a).is_dir() and (out / old_b).is_dir()
    summary = json.loads((out / "summary.json").read_text())
    assert {s["folder"] for s in summary["stale"]} == {old_a, old_b}
    assert "source changed" in (out / "index.html").read_text()
    pruned = run_batch([lib], out, workers=0, prune=True)
    assert {s["folder"]: s["pruned"] for s in pruned.stale} == {old_a: True, old_b: True}
    assert not (out / old_a).exists() and not (out / old_b).exists()
    assert (out / pruned.maps[0].folder).is_dir()
    assert run_batch([lib], out, workers=0).stale == []


def test_links_that_leave_the_source_folder_are_refused_unless_asked(tmp_path):
    """issue 12 item 11: a link to a file elsewhere is refused without naming its target."""
    lib = tmp_path / "lib"
    lib.mkdir()
    elsewhere = tmp_path / "private"
    elsewhere.mkdir()
    write_map(lib / "inside.exr", make_sky("overcast", width=WIDTH))
    write_map(elsewhere / "secret.exr", make_sky("uniform", width=WIDTH))
    (lib / "outside.exr").symlink_to(elsewhere / "secret.exr")
    (lib / "alias.exr").symlink_to(lib / "inside.exr")  # inside the tree: the same file, counted once
    found = expand_sources([lib])
    assert len(found) == 1 and found[0].resolve() == (lib / "inside.exr").resolve()
    out = tmp_path / "out"
    rows = by_source(run_batch([lib], out, workers=0))
    refused = rows["outside.exr"]
    assert refused.verdict == "error" and "outside the source folder" in refused.error
    assert "private" not in refused.error and "secret" not in refused.error
    assert "secret" not in (out / "summary.csv").read_text()
    rows = by_source(run_batch([lib], out, workers=0, follow_links=True))
    assert rows["outside.exr"].verdict in ("pass", "warn")


def test_verify_reports_the_exact_reference_bound_in_the_summary_and_its_time_in_the_manifest(tmp_path):
    """The reference's relative error bound (seed-independent, so byte-stable) is a summary field;
    its seconds, a timing, stay out of the summaries and reach the command through the row."""
    lib = tmp_path / "lib"
    lib.mkdir()
    write_map(lib / "sky.exr", make_sky("rooftop", width=WIDTH))
    out = tmp_path / "out"
    m = run_batch([lib], out, workers=0, verify=True).maps[0]
    metrics = json.loads((out / m.folder / "verify" / "metrics.json").read_text())
    bound = metrics["reference"]["relative_error_bound"]
    assert 0.0 <= bound < 1e-9 and m.figures["verify_reference_bound"] == bound
    assert metrics["reference"]["resolution"] == [m.figures["table_width"], m.figures["table_height"]]
    assert m.figures["verify_reference_seconds"] == metrics["reference"]["seconds"] > 0.0
    row = json.loads((out / "summary.json").read_text())["maps"][0]
    assert row["verify_reference_bound"] == bound and "verify_reference_seconds" not in row
    skipped = run_batch([lib], out, workers=0, verify=True).maps[0]
    assert skipped.status == "skipped"
    assert skipped.figures["verify_reference_seconds"] == m.figures["verify_reference_seconds"]


def test_split_sun_splits_only_maps_whose_sun_holds_the_sampling_checks_share(tmp_path):
    """batch --split-sun: maps/NAME/split/ for a sun over half the light; a note for the others."""
    lib = tmp_path / "lib"
    lib.mkdir()
    write_map(lib / "noon.exr", make_sky("sun", width=256, elevation_deg=50.0), pixel_type="float")
    write_map(lib / "grey.exr", make_sky("overcast", width=WIDTH))
    result = run_batch([lib], tmp_path / "out", workers=0, split_sun=True)
    rows = {Path(m.source).name: m.to_row() for m in result.maps}
    assert rows["noon.exr"]["split_note"].startswith("split: sun")
    assert rows["grey.exr"]["split_note"] == "no sun-like emitter: not split"
    split = tmp_path / "out" / rows["noon.exr"]["folder"] / "split"
    assert json.loads((split / "map.sky.json").read_text())["lights"][0]["file"] == "map.sun.json"
    assert (split / "map.sky.exr").exists() and not (tmp_path / "out" / rows["grey.exr"]["folder"] / "split").exists()
    # Without the option nothing is split.
    again = run_batch([lib], tmp_path / "out2", workers=0)
    assert all(m.to_row()["split_note"] is None for m in again.maps)


def test_a_rerun_without_split_sun_keeps_the_split(tmp_path):
    """--split-sun adds to the table output (like --raw): a rerun without it deletes nothing."""
    lib = tmp_path / "lib"
    lib.mkdir()
    write_map(lib / "noon.exr", make_sky("sun", width=256, elevation_deg=50.0), pixel_type="float")
    out = tmp_path / "out"
    m = run_batch([lib], out, workers=0, split_sun=True).maps[0]
    before = tree_hashes(out / m.folder)
    assert any(k.startswith("split/") for k in before)
    again = run_batch([lib], out, workers=0).maps[0]
    assert again.status == "skipped" and tree_hashes(out / m.folder) == before
    assert again.figures["split_note"].startswith("split: sun")
