"""Tests of envsample.core.files: atomic writes keep the old file or give the complete new one; files
written as one unit; outputs that would overwrite inputs.

POSIX rename(2) replaces the target atomically within one file system (IEEE Std 1003.1-2017); a file
created with open() gets 0666 masked by the umask (common practice of every POSIX tool).
"""

from __future__ import annotations

import errno
import os

import pytest

from envsample.core.files import (
    atomic_write,
    atomic_write_bytes,
    atomic_write_group,
    atomic_write_text,
    file_mode,
    refuse_overwriting_inputs,
    same_file,
)
from envsample.errors import EnvsampleError


def test_a_failed_write_leaves_the_old_file_and_no_temporary(tmp_path):
    target = tmp_path / "t.json"
    target.write_text("old")

    def half_then_fail(f):
        f.write(b"new and incomp")
        raise OSError("disk full")

    with pytest.raises(OSError, match="disk full"):
        atomic_write(target, half_then_fail)
    assert target.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.json"]


def test_the_new_file_keeps_the_permissions_of_the_one_it_replaces(tmp_path):
    target = tmp_path / "t.txt"
    target.write_text("old")
    os.chmod(target, 0o640)
    atomic_write_text(target, "new")
    assert target.read_text() == "new" and (target.stat().st_mode & 0o777) == 0o640


def test_a_new_file_gets_what_the_umask_gives(tmp_path):
    old = os.umask(0o027)
    try:
        assert file_mode(tmp_path / "fresh") == 0o640
        path = atomic_write_bytes(tmp_path / "fresh", b"x")
    finally:
        os.umask(old)
    assert (path.stat().st_mode & 0o777) == 0o640


def test_a_missing_folder_is_named(tmp_path):
    with pytest.raises(FileNotFoundError, match="output folder does not exist"):
        atomic_write_text(tmp_path / "no" / "t.txt", "x")


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


def test_a_target_name_near_the_length_limit_can_be_written(tmp_path):
    # issue 12 item 11: NAME_MAX is 255 bytes on common file systems (POSIX pathconf; ext4, tmpfs); the
    # temporary name ".NAME.XXXXXXXX.tmp" must not exceed it when NAME itself is 250 characters.
    target = tmp_path / ("m" * 246 + ".exr")
    atomic_write_bytes(target, b"data")
    assert target.read_bytes() == b"data"
    assert sorted(p.name for p in tmp_path.iterdir()) == [target.name]


def test_an_os_error_names_the_target_not_the_temporary_file(tmp_path):
    import errno

    target = tmp_path / "table.npz"

    def disk_full(f):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    with pytest.raises(OSError) as info:
        atomic_write(target, disk_full)
    assert info.value.errno == errno.ENOSPC and info.value.filename == os.fspath(target)
    assert ".tmp" not in str(info.value)
