"""Size limits: memory estimated before a large allocation, refused in one line above a limit.

Requests whose size a user (or a hostile file) chooses — a table grid, a sky's size,
a number of samples, a grid of normals — are checked here *before* anything is
allocated.  :func:`check_memory` compares an estimate in bytes with the memory
limit and raises :class:`~envsample.errors.ResourceLimitError`, whose one-line
message names the request, the estimate, the limit and how to raise it.

The limit
---------
``DEFAULT_MAX_MEMORY`` (8 GiB) per request, a third of the 24 GiB machines the
project is built on.  Raise it on purpose with the environment variable
``ENVSAMPLE_MAX_MEMORY`` (e.g. ``16G``, ``64GiB``, ``500M`` or a byte count), the
CLI option ``--max-memory`` of the commands that take sizes, or the Python keyword
``max_memory=`` of the functions that check.  ``0`` or ``none`` removes the limit.

Structural limits cannot be raised: a table has at most ``MAX_TABLE_CELLS`` cells
(32-bit indices) and rows of at most ``MAX_TABLE_WIDTH`` cells (16-bit column
indices of the per-row alias tables).

Estimates are deliberately simple (bytes per element of each array a step holds
at once, see each caller); they are upper bounds to within a small factor, not
measurements.
"""

from __future__ import annotations

import os
import re

from envsample.errors import ResourceLimitError

__all__ = [
    "DEFAULT_MAX_MEMORY",
    "MAX_TABLE_CELLS",
    "MAX_TABLE_WIDTH",
    "MEMORY_ENV",
    "parse_bytes",
    "max_memory",
    "check_memory",
    "bytes_text",
]

#: Default memory limit of one request, bytes (8 GiB).
DEFAULT_MAX_MEMORY = 8 << 30
#: Environment variable that raises (or lowers) the limit.
MEMORY_ENV = "ENVSAMPLE_MAX_MEMORY"
#: Largest number of cells of a table (flat cell indices are 32-bit signed).
MAX_TABLE_CELLS = 2**31 - 1
#: Largest table width (column indices of the per-row alias tables are uint16).
MAX_TABLE_WIDTH = 65536

_UNITS = {"": 1, "b": 1, "k": 1 << 10, "kb": 1 << 10, "kib": 1 << 10, "m": 1 << 20, "mb": 1 << 20,
          "mib": 1 << 20, "g": 1 << 30, "gb": 1 << 30, "gib": 1 << 30, "t": 1 << 40, "tb": 1 << 40, "tib": 1 << 40}
_BYTES = re.compile(r"^\s*([0-9]+(?:\.[0-9]*)?)\s*([a-zA-Z]*)\s*$")


def parse_bytes(text, *, name: str = "memory limit") -> int | None:
    """``"16G"``, ``"500MiB"``, ``"1e9"``-free integers or a number of bytes -> bytes; ``0``/``"none"`` -> None (no limit).

    Units are binary (k = 1024).  Raises ValueError naming ``name`` for anything else.
    """
    if text is None:
        return None
    if isinstance(text, bool):
        raise ValueError(f"{name} must be a size such as 16G, got {text!r}")
    if isinstance(text, (int, float)):
        value = float(text)
    else:
        s = str(text).strip().lower()
        if s in ("none", "off", "unlimited"):
            return None
        m = _BYTES.match(s)
        if not m or m.group(2).lower() not in _UNITS:
            raise ValueError(f"{name} {text!r} is not a size such as 16G, 500M or a number of bytes")
        value = float(m.group(1)) * _UNITS[m.group(2).lower()]
    if not value >= 0 or value == float("inf"):
        raise ValueError(f"{name} must be a non-negative size, got {text!r}")
    return None if value == 0 else int(value)


def max_memory(override=None) -> int | None:
    """The memory limit in bytes: ``override`` if given, else ``$ENVSAMPLE_MAX_MEMORY``, else the default; None = no limit."""
    if override is not None:
        return parse_bytes(override, name="max_memory")
    env = os.environ.get(MEMORY_ENV)
    if env is not None and env.strip():
        return parse_bytes(env, name=MEMORY_ENV)
    return DEFAULT_MAX_MEMORY


def bytes_text(n: float) -> str:
    """A byte count for people: ``12.5 GiB``, ``310 MiB``, ``4.0 kiB``."""
    n = float(n)
    for unit, scale in (("TiB", 1 << 40), ("GiB", 1 << 30), ("MiB", 1 << 20), ("kiB", 1 << 10)):
        if n >= scale:
            return f"{n / scale:.1f} {unit}"
    return f"{int(n)} B"


def check_memory(estimate: float, *, what: str, limit=None, remedy: str = "ask for less") -> None:
    """Refuse a request whose estimated memory exceeds the limit, before allocating it.

    ``estimate`` in bytes; ``what`` names the request in the message (e.g.
    ``"build --size 100000x50000"``); ``limit`` overrides the configured limit
    (see :func:`max_memory`); ``remedy`` says how to ask for less.
    """
    cap = max_memory(limit)
    if cap is None or estimate <= cap:
        return
    raise ResourceLimitError(
        f"{what}: needs about {bytes_text(estimate)} of memory, above the limit of {bytes_text(cap)}; "
        f"{remedy}, or raise the limit on purpose with --max-memory / max_memory= / {MEMORY_ENV}"
    )
