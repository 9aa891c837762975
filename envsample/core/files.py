"""Atomic file writes shared by every module that writes (tables, pictures, reports).

A file is written to a temporary name in its target folder and renamed into place
with :func:`os.replace`, so readers see either the old file or the complete new
one, never a half-written one.  ``mkstemp`` creates 0600 files; the result gets
the permissions of the file it replaces, else those a plain ``open()`` would give.
The temporary name holds at most the first :data:`TEMP_NAME_CHARS` characters of the
target's name, so a target whose own name is near the file system's limit (255 bytes on
most) can still be written; an OS error names the target, never the temporary file.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

from envsample.errors import EnvsampleError

__all__ = ["TEMP_NAME_CHARS", "OutputIsInputError", "atomic_write", "atomic_write_bytes", "atomic_write_text",
           "file_mode", "refuse_inputs_as_outputs", "same_file", "temporary_path"]

#: Characters of the target's name kept in a temporary name (".NAME." + 8 random + ".tmp").
TEMP_NAME_CHARS = 100


def _prefix(name: str) -> str:
    return f".{name[:TEMP_NAME_CHARS]}."


class OutputIsInputError(EnvsampleError, ValueError):
    """An output path names one of the command's inputs (it would be replaced)."""


def same_file(a, b) -> bool:
    """True when paths ``a`` and ``b`` name the same file (links and relative paths resolved)."""
    pa, pb = Path(a), Path(b)
    with contextlib.suppress(OSError):
        if pa.exists() and pb.exists():
            return os.path.samefile(pa, pb)
    return os.path.realpath(pa) == os.path.realpath(pb)


def refuse_inputs_as_outputs(outputs, inputs, *, what: str = "output") -> None:
    """Raise :class:`OutputIsInputError` when an output path (None and "-" skipped) names an input file.

    Called before anything is read or written, so that ``check m.exr --json m.exr`` refuses
    with one line instead of replacing the map.
    """
    ins = [Path(i) for i in inputs]
    for out in outputs:
        if out is None or str(out) == "-":
            continue
        for i in ins:
            if same_file(out, i):
                raise OutputIsInputError(
                    f"{out}: this {what} would replace the input {i}; choose another file name")


def file_mode(path) -> int:
    """Permissions for a new file at ``path``: those of the file it replaces, else what the umask gives."""
    p = Path(path)
    with contextlib.suppress(OSError):
        if p.is_file():
            return p.stat().st_mode & 0o777
    with contextlib.suppress(OSError, ValueError):
        with open("/proc/self/status") as fh:  # Linux: read the umask without changing it
            for line in fh:
                if line.startswith("Umask:"):
                    return 0o666 & ~int(line.split()[1], 8)
    mask = os.umask(0o022)
    os.umask(mask)
    return 0o666 & ~mask


def temporary_path(path, *, suffix: str = ".tmp") -> str:
    """Create and return an empty temporary file beside ``path`` (the caller renames or removes it)."""
    p = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=_prefix(p.name), suffix=suffix, dir=p.parent)
    os.close(fd)
    return tmp


def atomic_write(path, write, *, fsync: bool = True) -> Path:
    """Call ``write(fileobj)`` on a temporary file beside ``path``, then rename it into place.

    The folder must exist (FileNotFoundError names it otherwise).  On any failure the
    temporary file is removed and an existing file at ``path`` is left untouched.
    """
    path = Path(path)
    if not path.parent.exists():
        raise FileNotFoundError(f"{path.parent}: output folder does not exist; create it first")
    mode = file_mode(path)
    try:
        fd, tmp = tempfile.mkstemp(prefix=_prefix(path.name), suffix=".tmp", dir=path.parent)
    except OSError as e:
        raise _naming(e, path) from e
    try:
        with os.fdopen(fd, "wb") as f:
            write(f)
            f.flush()
            if fsync:
                os.fsync(f.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except OSError as e:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise _naming(e, path) from e
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
    return path


def _naming(error: OSError, path: Path) -> OSError:
    """The same OS error with the target as its file name (a full disk names the file being written)."""
    if error.errno is None:
        return error
    return type(error)(error.errno, error.strerror, os.fspath(path))


def atomic_write_bytes(path, data: bytes, *, fsync: bool = True) -> Path:
    """Write ``data`` to ``path`` atomically (see :func:`atomic_write`)."""
    return atomic_write(path, lambda f: f.write(data), fsync=fsync)


def atomic_write_text(path, text: str) -> Path:
    """Write UTF-8 ``text`` to ``path`` atomically (see :func:`atomic_write`)."""
    return atomic_write_bytes(path, text.encode("utf-8"))
