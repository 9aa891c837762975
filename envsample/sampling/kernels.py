"""Which implementation runs the sampling hot loops: the optional compiled kernels or numpy.

The compiled module ``envsample.sampling._kernels`` is built at install time when a C
compiler is available; ``ENVSAMPLE_KERNELS=numpy`` forces the numpy code paths (the
rule of :mod:`envsample.core.kernels`, shared with the reference irradiance).  Both
paths implement the same algorithms; their results agree to float32 rounding, and each
is bit-for-bit repeatable on its own.
"""

from __future__ import annotations

from envsample.core.kernels import BACKENDS, KernelSwitch

__all__ = ["kernels", "backend_name", "BACKENDS"]

_SWITCH = KernelSwitch("envsample.sampling._kernels")

kernels = _SWITCH.kernels
backend_name = _SWITCH.backend_name
