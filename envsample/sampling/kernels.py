"""Which implementation runs the hot loops: the optional compiled kernels or numpy.

The compiled module ``envsample._kernels`` is built at install time when a C
compiler is available (setup.py marks it optional).  Set the environment variable
``ENVSAMPLE_KERNELS=numpy`` to force the numpy code paths (tests run both).
``ENVSAMPLE_THREADS=N`` sets how many threads the compiled table builder uses
(default: the machine's core count, at most 16).  Both paths implement the same algorithms; their results agree to float32
rounding, and each is bit-for-bit repeatable on its own.
"""

from __future__ import annotations

import os

__all__ = ["kernels", "backend_name", "threads", "BACKENDS"]

BACKENDS = ("auto", "compiled", "numpy")


def _load():
    if os.environ.get("ENVSAMPLE_KERNELS", "auto").lower() == "numpy":
        return None
    try:
        from envsample.sampling import _kernels
    except ImportError:
        return None
    return _kernels


_KERNELS = _load()


def kernels(backend: str = "auto"):
    """The compiled module for ``backend`` ("auto" -> it if built, "compiled" -> it or an error, "numpy" -> None)."""
    if backend == "numpy":
        return None
    if backend == "auto":
        return _KERNELS
    if backend == "compiled":
        if _KERNELS is None:
            raise RuntimeError("the compiled kernels are not built here; reinstall envsample with a C compiler")
        return _KERNELS
    raise ValueError(f"unknown backend {backend!r}; valid: {', '.join(BACKENDS)}")


def backend_name() -> str:
    """"compiled" or "numpy": what ``backend="auto"`` uses on this installation."""
    return "compiled" if _KERNELS is not None else "numpy"


def threads() -> int:
    """Threads the compiled kernels may use: ``ENVSAMPLE_THREADS`` if set (>= 1), else the core count (<= 16).

    The result does not change what is built: rows are independent, so any thread
    count gives bit-identical tables.
    """
    text = os.environ.get("ENVSAMPLE_THREADS", "").strip()
    if text:
        try:
            return max(1, min(16, int(text)))
        except ValueError:
            raise ValueError(f"ENVSAMPLE_THREADS must be a positive integer, got {text!r}") from None
    return max(1, min(16, os.cpu_count() or 1))
