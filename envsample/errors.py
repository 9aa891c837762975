"""Exceptions and warnings raised by envsample.

Every message is one line that names the file (or parameter), the problem and,
where there is one, the remedy.  The CLI prints ``str(error)`` and exits with
status 2; tracebacks appear only with ``--debug``.
"""

from __future__ import annotations

__all__ = [
    "EnvsampleError",
    "MapReadError",
    "MapValidationError",
    "TableFormatError",
    "MapWriteError",
    "SunSplitError",
    "EnvsampleWarning",
]


class EnvsampleError(Exception):
    """Base class of every error envsample raises on purpose."""


class MapReadError(EnvsampleError):
    """A map file could not be read: missing, empty, truncated, corrupt or of an unknown type."""


class MapValidationError(EnvsampleError, ValueError):
    """A map's pixels or shape are not acceptable (NaN/Inf, aspect, size, LDR, not (H, W, 3)).

    Also a ValueError: it is raised for bad values passed to functions too.
    """


class MapWriteError(EnvsampleError):
    """A map could not be written (missing folder, library failure, failed rename)."""


class TableFormatError(EnvsampleError):
    """A sampling table on disk is corrupt, truncated, of another schema version or inconsistent."""


class EnvsampleWarning(UserWarning):
    """Suspicious but legal input (an all-black map, clamped negative pixels, a map that looks upside down)."""


class SunSplitError(EnvsampleError, ValueError):
    """A map's sun cannot be split off: none was found, or restoring it lacks what it needs."""
