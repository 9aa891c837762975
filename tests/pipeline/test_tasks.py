"""Tests of envsample.pipeline.tasks: one map's folder, its outputs, and what a rerun keeps.

Outside references: SHA-256 of the bytes (FIPS 180-4) through Python's hashlib; file types from
``os.stat`` / ``stat.S_IS*`` (POSIX); opening a FIFO for reading without O_NONBLOCK waits for a
writer, and /dev/zero never ends (POSIX, Linux man pages: fifo(7), null(4)).  A regression that
blocks must fail, not hang: the calls that could block run in a daemon thread with a join timeout,
and the batch over special files in a subprocess with a timeout.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import subprocess
import sys
import textwrap
import threading
from pathlib import Path

import pytest

from envsample.errors import MapReadError
from envsample.io.maps import write_map
from envsample.pipeline.batch import run_batch
from envsample.pipeline.tasks import NOT_BUILT_NOTE, error_line, regular_file_sha256
from envsample.sampling.table import load_table
from envsample.synth.skies import make_sky

WIDTH = 64
HANG_SECONDS = 60  # a safety net for a regression that blocks, not a timing assertion


def tree(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def within(seconds, fn, *args):
    """Run fn in a daemon thread; (finished, result or exception)."""
    box = {}

    def run():
        try:
            box["value"] = fn(*args)
        except BaseException as e:  # noqa: BLE001 - handed back to the test
            box["value"] = e

    t = threading.Thread(target=run, daemon=True)
    t.start()
    t.join(seconds)
    return not t.is_alive(), box.get("value")


@pytest.fixture
def lib(tmp_path):
    folder = tmp_path / "lib"
    folder.mkdir()
    write_map(folder / "sun.exr", make_sky("sun", width=WIDTH), pixel_type="float")
    return folder


def test_regular_file_sha256_matches_hashlib_and_refuses_special_files_without_blocking(tmp_path):
    f = tmp_path / "a.bin"
    f.write_bytes(b"some bytes" * 1000)
    assert regular_file_sha256(f) == hashlib.sha256(f.read_bytes()).hexdigest()
    fifo = tmp_path / "pipe.exr"
    os.mkfifo(fifo)
    done, value = within(HANG_SECONDS, regular_file_sha256, fifo)
    assert done, "hashing a FIFO blocked"
    assert isinstance(value, MapReadError) and "FIFO" in str(value) and "pipe.exr" in str(value)
    done, value = within(HANG_SECONDS, regular_file_sha256, "/dev/zero")
    assert done, "hashing /dev/zero did not stop"
    assert isinstance(value, MapReadError) and "a device" in str(value)


_SPECIAL = textwrap.dedent("""
    import json, sys
    from envsample.pipeline.batch import run_batch
    rows = {}
    for follow in (False, True):
        r = run_batch([sys.argv[1]], sys.argv[2], workers=0, follow_links=follow)
        rows[str(follow)] = {m.source.rsplit("/", 1)[-1]: [m.verdict, m.error] for m in r.maps}
    print(json.dumps(rows))
""")


def test_a_batch_over_a_fifo_and_a_link_to_dev_zero_finishes(lib, tmp_path):
    """issue 12 item 2: the FIFO blocked forever and /dev/zero spun; both are refused before hashing,
    with links leaving the folder refused first and, when followed, the device refused by its type."""
    os.mkfifo(lib / "pipe.exr")
    (lib / "zero.exr").symlink_to("/dev/zero")
    proc = subprocess.run([sys.executable, "-c", _SPECIAL, str(lib), str(tmp_path / "out")],
                          capture_output=True, text=True, timeout=HANG_SECONDS * 2)
    assert proc.returncode == 0, proc.stderr[-2000:]
    runs = json.loads(proc.stdout.strip().splitlines()[-1])
    for follow, rows in runs.items():
        assert rows["sun.exr"][0] in ("pass", "warn")
        assert rows["pipe.exr"][0] == "error" and "FIFO" in rows["pipe.exr"][1]
        verdict, error = rows["zero.exr"]
        assert verdict == "error"
        if follow == "False":
            assert "outside the source folder" in error and "/dev/zero" not in error
        else:
            assert "a device" in error


def test_error_line_names_the_file_of_an_os_error():
    e = OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), "/out/maps/x/table.npz")
    assert error_line(e) == f"/out/maps/x/table.npz: {os.strerror(errno.ENOSPC)}"
    assert error_line(ValueError("bad\nvalue")) == "ValueError: bad value"


def test_resume_checks_checksums_not_sizes(lib, tmp_path):
    """issue 12 item 7: one flipped byte of a published table (same size) must not pass as up to date."""
    out = tmp_path / "out"
    m = run_batch([lib], out, workers=0).maps[0]
    npz = out / m.folder / "table.npz"
    data = bytearray(npz.read_bytes())
    data[len(data) // 2] ^= 0xFF
    npz.write_bytes(bytes(data))
    again = run_batch([lib], out, workers=0).maps[0]
    assert again.status == "done"
    load_table(out / m.folder / "table")  # whole again
    assert run_batch([lib], out, workers=0).maps[0].status == "skipped"


def test_a_rerun_with_fewer_options_deletes_nothing(lib, tmp_path):
    """issue 10: raw, tune and verify add to a folder; a rerun without them keeps what they made."""
    out = tmp_path / "out"
    full = run_batch([lib], out, workers=0, verify=True, options={"raw": True, "tune": True}).maps[0]
    folder = out / full.folder
    before = tree(folder)
    assert {"table.bin", "verify/metrics.json", "verify/report.html", "check.html"} <= set(before)
    assert full.figures["tuned"] and full.figures["verify_rmse_tuned"] is not None
    # verify evaluated the tuned setting the table carries (issue 10 item 5).
    metrics = json.loads((folder / "verify" / "metrics.json").read_text())
    rec = load_table(folder / "table").metadata["recommendation"]
    assert metrics["estimators"]["tuned"]["tuned_from"]["table_fraction"] == rec["table_fraction"]
    plain = run_batch([lib], out, workers=0).maps[0]
    assert plain.status == "skipped" and tree(folder) == before
    # A table option that changes the table rebuilds it, keeps raw and tune, and drops the verify of
    # the old table (it no longer describes the table), saying so.
    coarse = run_batch([lib], out, workers=0, options={"size": "32x16"}).maps[0]
    after = tree(folder)
    assert coarse.status == "done" and "table.bin" in after and load_table(folder / "table").table_width == 32
    assert load_table(folder / "table").metadata.get("recommendation") is not None
    assert not any(k.startswith("verify/") for k in after)
    assert "earlier verify results removed" in coarse.figures["note"]


def test_a_map_that_fails_qa_gets_a_table_only_when_asked(tmp_path):
    lib = tmp_path / "lib"
    lib.mkdir()
    write_map(lib / "square.exr", make_sky("sun", width=WIDTH, height=WIDTH))  # aspect fails QA
    out = tmp_path / "out"
    m = run_batch([lib], out, workers=0).maps[0]
    assert m.verdict == "fail" and m.figures["table_note"] == NOT_BUILT_NOTE
    assert not (out / m.folder / "table.json").exists()
    assert run_batch([lib], out, workers=0).maps[0].status == "skipped"
    m = run_batch([lib], out, workers=0, build_failed=True, options={"allow_aspect": True}).maps[0]
    assert m.status == "done" and load_table(out / m.folder / "table").width == WIDTH
    # Without build_failed again, the table that was asked for before is kept, and says why.
    kept = run_batch([lib], out, workers=0, options={"allow_aspect": True}).maps[0]
    assert (out / kept.folder / "table.json").exists()


def test_a_250_character_file_name_is_processed(tmp_path):
    lib = tmp_path / "lib"
    lib.mkdir()
    name = "n" * 246 + ".exr"  # 250 characters, within NAME_MAX (255 bytes)
    write_map(lib / name, make_sky("overcast", width=WIDTH))
    m = run_batch([lib], tmp_path / "out", workers=0).maps[0]
    assert m.status == "done" and m.verdict in ("pass", "warn")
    assert len(Path(m.folder).name) < 100


def test_batch_fix_builds_from_the_repaired_map_and_resumes(tmp_path):
    """batch --fix: fixed.exr joins the check output, the table is built from it, and a rerun is up to date."""
    import numpy as np

    lib = tmp_path / "lib"
    lib.mkdir()
    rgb = make_sky("overcast", width=WIDTH)
    rgb[5, 7] = np.nan
    write_map(lib / "hole.exr", rgb, pixel_type="float")
    out = tmp_path / "out"
    m = run_batch([lib], out, workers=0, fix=True).maps[0]
    folder = out / m.folder
    assert (folder / "fixed.exr").is_file() and (folder / "table.json").is_file(), m.figures
    assert m.verdict in ("pass", "warn") and m.figures["table_note"].startswith("fixed (")
    assert np.isfinite(load_table(folder / "table").image).all()
    assert run_batch([lib], out, workers=0, fix=True).maps[0].status == "skipped"
