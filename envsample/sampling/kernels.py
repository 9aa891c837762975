"""Which implementation runs the sampling hot loops: the optional compiled kernels or numpy.

The compiled module ``envsample.sampling._kernels`` is built at install time when a C
compiler is available; ``ENVSAMPLE_KERNELS=numpy`` forces the numpy code paths (the
rule of :mod:`envsample.core.kernels`, shared with the reference irradiance).
``ENVSAMPLE_THREADS=N`` sets how many threads the compiled table builder and checks use
(default: the machine's core count, at most 16).  Both paths implement the same
algorithms; their results agree to float32 rounding, and each is bit-for-bit repeatable
on its own (whatever the thread count).
"""

from __future__ import annotations

import os

from envsample.core.kernels import BACKENDS, KernelSwitch

__all__ = ["kernels", "backend_name", "threads", "BACKENDS"]

_SWITCH = KernelSwitch("envsample.sampling._kernels")

kernels = _SWITCH.kernels
backend_name = _SWITCH.backend_name


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
