"""Tests of envsample.sampling.kernels: the switch between the compiled kernels and the numpy code."""

from __future__ import annotations

import pytest

from envsample.sampling.kernels import backend_name, kernels


def test_numpy_is_always_available_and_auto_names_what_it_uses():
    assert kernels("numpy") is None
    assert backend_name() in ("compiled", "numpy")
    assert (kernels("auto") is None) == (backend_name() == "numpy")


def test_compiled_is_the_module_or_a_clear_error():
    if backend_name() == "compiled":
        assert hasattr(kernels("compiled"), "sample_table")
    else:
        with pytest.raises(RuntimeError, match="reinstall envsample with a C compiler"):
            kernels("compiled")


def test_unknown_backend_lists_the_valid_ones():
    with pytest.raises(ValueError, match="valid: auto, compiled, numpy"):
        kernels("gpu")
