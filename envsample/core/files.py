"""Atomic file writes shared by every module that writes (tables, pictures, reports).

A file is written to a temporary name in its target folder and renamed into place
with :func:`os.replace`, so readers see either the old file or the complete new
one, never a half-written one.  :func:`atomic_write_group` does the same for files
that change as one unit (a table's ``.npz``, ``.bin`` and ``.json``): every new file
is written and flushed to disk before the first rename, so a full disk or any other
write error leaves all the old files as they were.  :func:`refuse_overwriting_inputs`
is the one check that an output path does not name one of a command's inputs.

``mkstemp`` creates 0600 files; the result gets
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
           "atomic_write_group", "file_mode", "temporary_path", "refuse_overwriting_inputs", "same_file"]

#: Characters of the target's name kept in a temporary name (".NAME." + 8 random + ".tmp").
TEMP_NAME_CHARS = 100


def _prefix(name: str) -> str:
    return f".{name[:TEMP_NAME_CHARS]}."


class OutputIsInputError(EnvsampleError, ValueError):
    """An output path names one of the command's inputs (it would be replaced)."""


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
    return atomic_write_group([(path, write)], fsync=fsync)[0]


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


def _fsync_folder(folder: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def atomic_write_group(items, *, fsync: bool = True) -> list[Path]:
    """Write several files as one unit: all to temporaries first, then rename them in the given order.

    ``items`` is a list of ``(path, write)`` pairs (``write(fileobj)`` as in
    :func:`atomic_write`); put the file that readers open first (a table's JSON) last.
    Every temporary is complete and flushed before the first rename, so a failure
    while writing (a full disk, an exception in ``write``) removes the temporaries
    and leaves every existing file untouched.  Returns the paths in order.
    """
    items = [(Path(p), w) for p, w in items]
    for p, _ in items:
        if not p.parent.exists():
            raise FileNotFoundError(f"{p.parent}: output folder does not exist; create it first")
    temps: list[str] = []
    try:
        for p, write in items:
            mode = file_mode(p)
            try:
                fd, tmp = tempfile.mkstemp(prefix=_prefix(p.name), suffix=".tmp", dir=p.parent)
            except OSError as e:
                raise _naming(e, p) from e
            temps.append(tmp)
            try:
                with os.fdopen(fd, "wb") as f:
                    write(f)
                    f.flush()
                    if fsync:
                        os.fsync(f.fileno())
                os.chmod(tmp, mode)
            except OSError as e:
                raise _naming(e, p) from e
        for (p, _), tmp in zip(items, temps):
            try:
                os.replace(tmp, p)
            except OSError as e:
                raise _naming(e, p) from e
    except BaseException:
        for tmp in temps:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(tmp)
        raise
    if fsync:
        for folder in {p.parent for p, _ in items}:
            _fsync_folder(folder)
    return [p for p, _ in items]


def same_file(a, b) -> bool:
    """True when paths ``a`` and ``b`` name the same file (same resolved path, or the same inode: hard links)."""
    pa, pb = Path(a), Path(b)
    with contextlib.suppress(OSError):
        if pa.exists() and pb.exists():
            return os.path.samefile(pa, pb)
    return pa.absolute().resolve() == pb.absolute().resolve()


def refuse_overwriting_inputs(outputs, inputs, *, option: str = "the output") -> None:
    """Raise :class:`OutputIsInputError` when an output path names one of the inputs.

    ``outputs`` and ``inputs`` are paths (or iterables of paths; None and ``"-"``,
    standard output, are skipped); ``option`` names the output in the message (e.g.
    ``"-o"`` or ``"--json"``).  Call it before any work is done: a command must never
    replace the file it reads (``check m.exr --json m.exr`` refuses with one line).
    """

    def listed(x):
        items = [x] if isinstance(x, (str, os.PathLike)) else list(x)
        return [p for p in items if p is not None and str(p) != "-"]

    for out in listed(outputs):
        for inp in listed(inputs):
            if same_file(out, inp):
                raise OutputIsInputError(f"{out}: {option} would overwrite the input {inp}; choose another output path")
