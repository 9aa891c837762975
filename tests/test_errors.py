"""Tests of envsample.errors: every error envsample raises on purpose is an EnvsampleError; bad values are ValueErrors too."""

from __future__ import annotations

import numpy as np
import pytest

import envsample
from envsample.errors import EnvsampleError, MapValidationError


def test_error_classes_share_the_base():
    for cls in (envsample.MapReadError, envsample.MapValidationError, envsample.MapWriteError,
                envsample.TableFormatError):
        assert issubclass(cls, EnvsampleError)
    assert issubclass(MapValidationError, ValueError)


def test_a_refused_map_raises_a_map_validation_error_that_is_a_value_error():
    with pytest.raises(ValueError) as info:
        envsample.build_table(np.full((8, 16, 3), np.nan, np.float32))
    assert isinstance(info.value, MapValidationError) and "\n" not in str(info.value)
