"""Seeded byte-mutation fuzzing of the map readers and the table loader.

Each case copies a small valid file (a table's .json, .npz or .bin; an .exr or .hdr
map), mutates its bytes (flips, truncation, insertion, zeroed or repeated ranges, and
for JSON numbers made huge, negative or fractional), and reads it the way envsample
does (``load_table`` for tables, ``read_map`` + ``validate_map`` for maps).  The only
acceptable outcomes are success or an :class:`envsample.errors.EnvsampleError` (a
one-line refusal); anything else is reported with the seed that reproduces it.

The test suite runs a few hundred cases (tests/io/test_fuzz.py, a few seconds);
run longer here::

    python benchmarks/fuzz_readers.py --cases 20000 --seed 1
"""

from __future__ import annotations

import argparse
import re
import shutil
import sys
import tempfile
import warnings
from pathlib import Path

import numpy as np

TARGETS = ("json", "npz", "bin", "exr", "hdr")


def make_inputs(folder: Path) -> dict[str, Path]:
    """Small valid files of every kind in ``folder``."""
    from envsample.io.maps import write_map
    from envsample.pipeline.workflow import build_from_file

    rng = np.random.default_rng(0)
    rgb = np.exp(rng.normal(0.0, 1.0, (8, 16, 3))).astype(np.float32)
    write_map(folder / "m.exr", rgb, pixel_type="half")
    write_map(folder / "m.hdr", rgb)
    build_from_file(folder / "m.exr", folder / "t", raw=True)
    return {"json": folder / "t.json", "npz": folder / "t.npz", "bin": folder / "t.bin", "exr": folder / "m.exr",
            "hdr": folder / "m.hdr"}


def mutate(data: bytes, rng: np.random.Generator, *, text: bool) -> bytes:
    """One random mutation of ``data``."""
    b = bytearray(data)
    kind = int(rng.integers(0, 7 if text else 6))
    n = len(b)
    if n == 0:
        return bytes(rng.integers(0, 256, 16, dtype=np.uint8))
    i = int(rng.integers(0, n))
    if kind == 0:  # flip a few bits
        for _ in range(int(rng.integers(1, 9))):
            j = int(rng.integers(0, n))
            b[j] ^= 1 << int(rng.integers(0, 8))
    elif kind == 1:  # truncate
        del b[i:]
    elif kind == 2:  # insert random bytes
        b[i:i] = bytes(rng.integers(0, 256, int(rng.integers(1, 64)), dtype=np.uint8))
    elif kind == 3:  # zero a range
        b[i:i + int(rng.integers(1, 256))] = bytes(min(n - i, int(rng.integers(1, 256))))
    elif kind == 4:  # repeat a range
        j = min(n, i + int(rng.integers(1, 128)))
        b[j:j] = b[i:j]
    elif kind == 5:  # overwrite with a random byte run
        k = min(n - i, int(rng.integers(1, 32)))
        b[i:i + k] = bytes(rng.integers(0, 256, k, dtype=np.uint8))
    else:  # JSON: a number becomes huge, negative, fractional or a string
        numbers = [m.span() for m in re.finditer(rb"-?\d+(\.\d+)?([eE][-+]?\d+)?", bytes(b))]
        if numbers:
            s, e = numbers[int(rng.integers(0, len(numbers)))]
            b[s:e] = [b"1e400", b"-64", b"0.5", b"99999999999999999999", b'"x"', b"null", b"[]"][int(rng.integers(0, 7))]
    return bytes(b)


def read(kind: str, path: Path) -> None:
    from envsample.io.maps import read_map, validate_map
    from envsample.sampling.table import load_table

    if kind in ("exr", "hdr"):
        validate_map(read_map(path), repair=True)
    else:
        load_table(path if kind != "json" else path.with_suffix(""))


def run_fuzz(cases: int, seed: int = 0, *, targets=TARGETS, folder: Path | None = None) -> list[str]:
    """Run ``cases`` mutations per target; returns a description of every case that escaped as a non-envsample error."""
    from envsample.errors import EnvsampleError

    own = folder is None
    folder = Path(tempfile.mkdtemp(prefix="envsample-fuzz-")) if own else folder
    failures = []
    try:
        inputs = make_inputs(folder)
        originals = {k: p.read_bytes() for k, p in inputs.items()}
        for t_index, kind in enumerate(targets):
            for case in range(cases):
                rng = np.random.default_rng([seed, t_index, case])
                data = mutate(originals[kind], rng, text=kind == "json")
                inputs[kind].write_bytes(data)
                try:
                    with warnings.catch_warnings():
                        warnings.simplefilter("ignore")
                        read(kind, inputs[kind])
                except EnvsampleError:
                    pass
                except Exception as e:  # noqa: BLE001 - any other exception is the finding
                    failures.append(f"{kind} case {case} (seed {seed}): {type(e).__name__}: {e}")
            inputs[kind].write_bytes(originals[kind])
    finally:
        if own:
            shutil.rmtree(folder, ignore_errors=True)
    return failures


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=2000, help="mutations per file kind")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    failures = run_fuzz(args.cases, args.seed)
    for f in failures:
        print(f)
    print(f"{args.cases * len(TARGETS)} cases, {len(failures)} escaped as non-envsample errors")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
