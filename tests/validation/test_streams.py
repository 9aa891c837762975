"""Tests of envsample.validation.streams: random streams and argument checks of the render.

Reference: numpy's SeedSequence (NEP 19) gives independent streams for different spawn keys and
the same stream for the same key; the memory estimate is the sum of the arrays' sizes in bytes.
"""

from __future__ import annotations

import numpy as np
import pytest

from envsample.errors import ResourceLimitError
from envsample.validation.streams import (
    check_normals,
    check_render_size,
    check_seed,
    check_spp,
    render_bytes,
    stream,
)


def _first(seq):
    return np.random.default_rng(seq).random(4)


def test_the_same_key_replays_and_other_names_or_purposes_differ():
    a = _first(stream(7, "render", "table"))
    assert np.array_equal(a, _first(stream(7, "render", "table")))
    assert not np.array_equal(a, _first(stream(7, "render", "cosine")))
    assert not np.array_equal(a, _first(stream(7, "convergence", "table")))
    assert not np.array_equal(a, _first(stream(8, "render", "table")))


def test_seed_none_draws_an_integer_that_replays():
    s = check_seed(None)
    assert isinstance(s, int) and s >= 0
    assert np.array_equal(_first(stream(s, "qa", "x")), _first(stream(s, "qa", "x")))
    with pytest.raises(ValueError, match="non-negative integer"):
        check_seed(-1)


def test_argument_checks_name_the_remedy():
    assert check_spp(2) == 2 and check_normals("16x8") == (16, 8)
    with pytest.raises(ValueError, match="variances need two samples"):
        check_spp(1)
    with pytest.raises(ValueError, match="at least 2x1"):
        check_normals((1, 1))
    with pytest.raises(ValueError, match="WxH"):
        check_normals("wide")


def test_oversized_renders_are_refused_with_the_estimate():
    """issue 12 item 4: 100000x50000 normals were attempted (37 GiB and more) before failing."""
    need = render_bytes((128, 64), 64, 13)
    assert need == 128 * 64 * (32 + 12 * 14) + 2 * 128 * 64 * 64 * 9
    assert check_render_size((128, 64), 64, 13) == need < 8 << 30  # the default limit, envsample.core.limits
    with pytest.raises(ResourceLimitError, match=r"normals 100000x50000 at 64 spp .* needs about [\d.]+ TiB .*limit of 8.0 GiB"):
        check_render_size((100000, 50000), 64, 13)
    with pytest.raises(ResourceLimitError, match=r"limit of 1.0 kiB"):
        check_render_size((128, 64), 64, 13, limit=1024)
