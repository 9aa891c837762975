"""Tests of envsample.core.files: atomic writes keep the old file or give the complete new one.

POSIX rename(2) replaces the target atomically within one file system (IEEE Std 1003.1-2017); a file
created with open() gets 0666 masked by the umask (common practice of every POSIX tool).
"""

from __future__ import annotations

import os

import pytest

from envsample.core.files import atomic_write, atomic_write_bytes, atomic_write_text, file_mode


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
