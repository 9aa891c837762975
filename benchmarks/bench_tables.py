"""Table benchmarks (issue 8): bytes per cell, build / save / load / inspect at 8192x4096, the 16k build.

Every figure is a ratio to a baseline measured in the same run on the same data, so
that the numbers mean the same on a busy or a quiet machine:

* ``build_table`` / one luminance pass (``rgb @ weights``) over the same array;
* ``envsample build`` end to end / ``read_map`` of the same file, each in a fresh process;
* ``save`` / a plain write + fsync of the same number of bytes (replacing a file, as save does);
* ``load_table`` (checksums + consistency checks) / a plain read of the same bytes;
* ``envsample inspect`` of a table (a fresh process) / ``envsample --version``;
* alias sampling rate / a plain numpy alias sampler (one-level table over all cells) in the same run;
* the 16384x8192 build's peak memory / the decoded float32 map, and its table's bytes per cell.

The inputs are generated here (a textured map with a sun, written as a half EXR), never
in the tests.  Usage::

    python benchmarks/bench_tables.py            # 8k figures
    python benchmarks/bench_tables.py --16k      # also the 16k build (needs ~8 GB and a few minutes)
    python benchmarks/bench_tables.py --json out.json
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from common import best

CLI = [sys.executable, "-c", "from envsample.cli import main; main()"]



def textured_map(h: int, w: int, seed: int = 1) -> np.ndarray:
    """A map with structure at every scale (bands, noise, a bright sun), float32 (h, w, 3)."""
    rng = np.random.default_rng(seed)
    y = np.linspace(0.0, 1.0, h, dtype=np.float32)[:, None, None]
    x = np.linspace(0.0, 1.0, w, dtype=np.float32)[None, :, None]
    rgb = 0.2 + np.abs(np.sin(40 * x + 3 * y)) * (1 + y) * np.array([1.0, 0.8, 0.6], np.float32)
    rgb = rgb.astype(np.float32)
    rgb += rng.random((h, w, 3), dtype=np.float32) * 0.3
    rgb[h // 14: h // 14 + h // 400 + 1, (5 * w) // 8: (5 * w) // 8 + w // 800 + 1] = 5e4
    return rgb


GNU_TIME = "/usr/bin/time"


def child_seconds(args, cwd) -> tuple[float, int]:
    """Wall time and peak resident memory (bytes) of one fresh process.

    The peak comes from GNU time's ``%M`` when it is installed: ``ru_maxrss`` of a forked child
    also counts pages it shares with a large parent until it starts the new program.
    """
    use_time = os.path.exists(GNU_TIME)
    cmd = [GNU_TIME, "-f", "%M", *args] if use_time else list(args)
    t = time.perf_counter()
    proc = subprocess.Popen(cmd, cwd=cwd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - t
    err = proc.stderr.read().decode()
    if os.waitstatus_to_exitcode(status) != 0:
        raise RuntimeError(f"{args} failed: {err[-500:]}")
    peak = int(err.strip().splitlines()[-1]) * 1024 if use_time else usage.ru_maxrss * 1024
    return seconds, peak


def plain_write(path: Path, nbytes: int) -> float:
    buf = np.ones(nbytes, np.uint8)

    def write():
        tmp = path.with_suffix(".plain.tmp")
        with open(tmp, "wb") as f:
            f.write(memoryview(buf))
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)

    write()
    return best(write)


def plain_read(path: Path) -> float:
    def read():
        with open(path, "rb") as f:
            out = np.empty(os.fstat(f.fileno()).st_size, np.uint8)
            f.readinto(memoryview(out))

    read()
    return best(read)


def numpy_alias_rate(prob, alias, n=2_000_000) -> float:
    """Directions' cells per second of a plain numpy one-level alias sampler (idx = floor(u n), compare, alias)."""
    rng = np.random.default_rng(0)
    u = rng.random(n)

    def draw():
        x = u * prob.size
        k = x.astype(np.int64)
        np.minimum(k, prob.size - 1, out=k)
        keep = (x - k) < prob[k]
        return np.where(keep, k, alias[k])

    return n / best(draw)


def bench_8k(work: Path) -> dict:
    from envsample.core.color import luminance
    from envsample.io.maps import read_map, write_map
    from envsample.sampling import distribution as dist
    from envsample.sampling.table import build_table, load_table

    H, W = 4096, 8192
    src = work / "big.exr"
    if not src.exists():
        write_map(src, textured_map(H, W), pixel_type="half")
    out = {"map": f"{W}x{H} half EXR, textured, {src.stat().st_size / 1e6:.0f} MB"}
    # Fresh processes first, while this one is small (a child's peak memory counts what it
    # shares with its parent until it starts the new program).
    read_code = f"from envsample.io.maps import read_map; read_map({str(src)!r})"
    t_read_map = min(child_seconds([sys.executable, "-c", read_code], work)[0] for _ in range(2))
    t_cli_build, rss = min(child_seconds([*CLI, "build", str(src), "-o", "e2e"], work) for _ in range(2))
    out["cli_build_over_read_map"] = t_cli_build / t_read_map
    out["cli_build_peak_over_decoded_map"] = rss / (H * W * 12)
    t_version = min(child_seconds([*CLI, "--version"], work)[0] for _ in range(2))
    t_inspect = min(child_seconds([*CLI, "inspect", "e2e"], work)[0] for _ in range(2))
    out["inspect_over_cli_start"] = t_inspect / t_version
    out["inspect_seconds"] = t_inspect
    image = read_map(src)
    t_lum = best(lambda: luminance(image.rgb, "bt709"))
    t_build = best(lambda: build_table(image), repeats=2)
    out["build_over_luminance"] = t_build / t_lum
    table = build_table(image)
    nbytes = sum(a.nbytes for a in table.arrays().values())
    out["bytes_per_cell"] = nbytes / (H * W)
    prefix = work / "t"
    table.save(prefix)
    t_save = best(lambda: table.save(prefix), repeats=2)
    out["save_over_plain_write"] = t_save / plain_write(work / "plain.bin", (work / "t.npz").stat().st_size)
    out["npz_bytes_per_cell"] = (work / "t.npz").stat().st_size / (H * W)
    t_read = plain_read(work / "t.npz")
    out["load_over_plain_read"] = best(lambda: load_table(prefix), repeats=2) / t_read
    table.save(prefix, raw=True)
    out["load_bin_over_plain_read"] = best(lambda: load_table(work / "t.bin"), repeats=2) / plain_read(work / "t.bin")
    # Sampling: the compiled two-level alias sampler vs a plain numpy one-level sampler, same run.
    small = build_table(read_map(src).rgb[::4, ::4].copy())
    u = np.random.default_rng(0).random((2_000_000, 2))
    rate = u.shape[0] / best(lambda: small.sample(u, method="alias"))
    flat_p, flat_a = dist.build_alias(small.cell_probability.reshape(-1))
    out["alias_samples_per_second_2048x1024"] = rate
    out["alias_over_plain_numpy_alias"] = rate / numpy_alias_rate(flat_p, flat_a)
    return out


def bench_16k(work: Path) -> dict:
    from envsample.io.maps import write_map

    H, W = 8192, 16384
    src = work / "huge.exr"
    if not src.exists():
        write_map(src, textured_map(H, W), pixel_type="half")
    seconds, rss = child_seconds([*CLI, "build", str(src), "-o", "huge"], work)
    size = (work / "huge.npz").stat().st_size
    return {"16k_build_seconds": seconds, "16k_peak_over_decoded_map": rss / (H * W * 12),
            "16k_peak_gb": rss / 1e9, "16k_npz_bytes_per_cell": size / (H * W), "16k_npz_gb": size / 1e9}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--16k", dest="big", action="store_true", help="also build a 16384x8192 map")
    ap.add_argument("--work", type=Path, default=None, help="folder for the generated inputs (kept between runs)")
    ap.add_argument("--json", type=Path, default=None, help="write the figures here")
    args = ap.parse_args(argv)
    work = args.work or Path(tempfile.mkdtemp(prefix="envsample-bench-tables-"))
    work.mkdir(parents=True, exist_ok=True)
    figures = bench_8k(work)
    if args.big:
        figures.update(bench_16k(work))
    for key, value in figures.items():
        print(f"{key:40s} {value:.3g}" if isinstance(value, float) else f"{key:40s} {value}")
    if args.json:
        args.json.write_text(json.dumps(figures, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
