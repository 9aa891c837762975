"""One rule for the optional compiled kernels: which implementation runs the hot loops.

Each package with a compiled kernel (``envsample.sampling._kernels``,
``envsample.reference._kernels``) is built at install time when a C compiler is
available (setup.py marks the extensions optional) and has a numpy code path that
implements the same algorithm.  Setting the environment variable
``ENVSAMPLE_KERNELS=numpy`` forces the numpy paths everywhere (tests run both).
:class:`KernelSwitch` is the loader both packages use.
"""

from __future__ import annotations

import importlib
import os

__all__ = ["KernelSwitch", "BACKENDS", "ENV_VAR"]

#: Values of every ``backend=`` keyword.
BACKENDS = ("auto", "compiled", "numpy")

#: The environment variable that forces the numpy code paths (value ``numpy``).
ENV_VAR = "ENVSAMPLE_KERNELS"


class KernelSwitch:
    """The compiled module ``name`` if it is built and not disabled by ``ENVSAMPLE_KERNELS=numpy``."""

    def __init__(self, name: str):
        self.name = name
        self._module = None
        if os.environ.get(ENV_VAR, "auto").lower() != "numpy":
            try:
                self._module = importlib.import_module(name)
            except ImportError:
                self._module = None

    def kernels(self, backend: str = "auto"):
        """The compiled module for ``backend``.

        "auto" -> it if built, "compiled" -> it or an error, "numpy" -> None.
        """
        if backend == "numpy":
            return None
        if backend == "auto":
            return self._module
        if backend == "compiled":
            if self._module is None:
                raise RuntimeError(f"the compiled kernels ({self.name}) are not built here (or {ENV_VAR}=numpy is "
                                   "set); reinstall envsample with a C compiler")
            return self._module
        raise ValueError(f"unknown backend {backend!r}; valid: {', '.join(BACKENDS)}")

    def backend_name(self) -> str:
        """"compiled" or "numpy": what ``backend="auto"`` uses on this installation."""
        return "compiled" if self._module is not None else "numpy"
