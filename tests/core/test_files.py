"""Tests of envsample.core.files: atomic writes, files written as one unit, outputs that would overwrite inputs."""

from __future__ import annotations

import errno
import os

import pytest

from envsample.core.files import atomic_write_group, refuse_overwriting_inputs, same_file
from envsample.errors import EnvsampleError


def _listing(folder):
    return sorted(p.name for p in folder.iterdir())


def test_group_write_replaces_every_file(tmp_path):
    paths = atomic_write_group([(tmp_path / "a.npz", lambda f: f.write(b"A")), (tmp_path / "a.json", lambda f: f.write(b"J"))])
    assert [p.name for p in paths] == ["a.npz", "a.json"]
    assert (tmp_path / "a.npz").read_bytes() == b"A" and (tmp_path / "a.json").read_bytes() == b"J"


def test_group_write_that_fails_late_leaves_every_old_file(tmp_path):
    """Issue 12, item 5: a full disk while writing the last file leaves all the old files untouched."""
    (tmp_path / "a.npz").write_bytes(b"old arrays")
    (tmp_path / "a.json").write_bytes(b"old json")

    def full(f):
        f.write(b"half")
        raise OSError(errno.ENOSPC, "No space left on device")

    with pytest.raises(OSError):
        atomic_write_group([(tmp_path / "a.npz", lambda f: f.write(b"new arrays")), (tmp_path / "a.json", full)])
    assert (tmp_path / "a.npz").read_bytes() == b"old arrays" and (tmp_path / "a.json").read_bytes() == b"old json"
    assert _listing(tmp_path) == ["a.json", "a.npz"]  # no temporary left


def test_group_write_handles_very_long_names(tmp_path):
    """A 250-character file name leaves room for the temporary name (255 bytes is the usual limit)."""
    name = "m" * 245 + ".json"
    atomic_write_group([(tmp_path / name, lambda f: f.write(b"x"))])
    assert (tmp_path / name).read_bytes() == b"x"


def test_refuse_overwriting_inputs_sees_the_same_file_under_other_names(tmp_path):
    """Issue 12, item 6: the same path, a relative spelling, a symlink and a hard link all count as the input."""
    src = tmp_path / "t.json"
    src.write_text("{}")
    os.symlink(src, tmp_path / "link.json")
    os.link(src, tmp_path / "hard.json")
    for out in (src, tmp_path / "." / "t.json", tmp_path / "link.json", tmp_path / "hard.json"):
        assert same_file(out, src)
        with pytest.raises(EnvsampleError, match="would overwrite the input"):
            refuse_overwriting_inputs(out, [src], option="-o")
    refuse_overwriting_inputs(tmp_path / "other.json", [src, None], option="-o")  # a new file is fine
