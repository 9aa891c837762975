"""Tests of envsample.core.limits: sizes, the configured memory limit and the one-line refusal."""

from __future__ import annotations

import pytest

from envsample.core.limits import DEFAULT_MAX_MEMORY, MEMORY_ENV, bytes_text, check_memory, max_memory, parse_bytes
from envsample.errors import ResourceLimitError


def test_parse_bytes_reads_binary_units():
    # Binary prefixes (IEC 80000-13: Ki = 2**10, Mi = 2**20, Gi = 2**30).
    assert parse_bytes("16G") == 16 << 30
    assert parse_bytes("500MiB") == 500 << 20
    assert parse_bytes("1.5k") == 1536
    assert parse_bytes(4096) == 4096
    assert parse_bytes("none") is None and parse_bytes(0) is None


@pytest.mark.parametrize("bad", ["lots", "-1G", "16Q", "inf", True])
def test_parse_bytes_refuses_what_is_not_a_size(bad):
    with pytest.raises(ValueError, match="memory limit|size"):
        parse_bytes(bad)


def test_the_limit_comes_from_the_override_then_the_environment_then_the_default(monkeypatch):
    monkeypatch.delenv(MEMORY_ENV, raising=False)
    assert max_memory() == DEFAULT_MAX_MEMORY
    monkeypatch.setenv(MEMORY_ENV, "2G")
    assert max_memory() == 2 << 30
    assert max_memory("1M") == 1 << 20


def test_check_memory_refuses_in_one_line_naming_the_estimate_and_the_remedy(monkeypatch):
    monkeypatch.delenv(MEMORY_ENV, raising=False)
    check_memory(DEFAULT_MAX_MEMORY, what="a request")  # at the limit: accepted
    with pytest.raises(ResourceLimitError) as e:
        check_memory(37.3 * (1 << 30), what="build --size 100000x50000", remedy="choose a smaller size")
    text = str(e.value)
    assert "\n" not in text and "build --size 100000x50000" in text and "37.3 GiB" in text and "8.0 GiB" in text
    assert "--max-memory" in text and MEMORY_ENV in text and "choose a smaller size" in text
    check_memory(1 << 40, what="x", limit="none")  # the limit removed on purpose
    assert isinstance(e.value, ValueError)  # callers that catch ValueError keep working


def test_bytes_text():
    assert bytes_text(512) == "512 B" and bytes_text(3 << 20) == "3.0 MiB" and bytes_text(1.5 * (1 << 40)) == "1.5 TiB"
