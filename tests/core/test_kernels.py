"""Tests of envsample.core.kernels, the one switch between compiled kernels and numpy code."""

from __future__ import annotations

import pytest

from envsample.core.kernels import BACKENDS, ENV_VAR, KernelSwitch


def test_a_module_that_is_not_built_falls_back_to_numpy():
    switch = KernelSwitch("envsample.core._no_such_kernels")
    assert switch.backend_name() == "numpy"
    assert switch.kernels("auto") is None and switch.kernels("numpy") is None
    with pytest.raises(RuntimeError, match="not built here"):
        switch.kernels("compiled")


def test_environment_variable_forces_numpy(monkeypatch):
    """ENVSAMPLE_KERNELS=numpy disables even a module that imports (math stands in for one)."""
    monkeypatch.delenv(ENV_VAR, raising=False)
    assert KernelSwitch("math").backend_name() == "compiled"
    monkeypatch.setenv(ENV_VAR, "numpy")
    switch = KernelSwitch("math")
    assert switch.backend_name() == "numpy" and switch.kernels() is None


def test_unknown_backend_lists_the_valid_names():
    assert BACKENDS == ("auto", "compiled", "numpy")
    with pytest.raises(ValueError, match="unknown backend 'gpu'; valid: auto, compiled, numpy"):
        KernelSwitch("math").kernels("gpu")
