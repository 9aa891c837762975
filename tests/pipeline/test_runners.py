"""Tests of envsample.pipeline.runners: where a batch's tasks run (inline, worker processes).

The task function is ``operator.itemgetter`` from the standard library: a top-level, picklable
callable that spawned workers can import, so the runners are tested without a map.
"""

from __future__ import annotations

import operator

import pytest

from envsample.errors import EnvsampleError
from envsample.pipeline.runners import import_distributed, make_runner


def _tasks(n):
    return [(k, {"value": k * k, "display": f"m{k}.exr", "name": f"m{k}"}) for k in range(n)]


def test_inline_runner_yields_every_outcome_in_order():
    run = make_runner(None, 0)
    assert list(run(_tasks(4), operator.itemgetter("value"))) == [(0, 0), (1, 1), (2, 4), (3, 9)]


def test_pool_runner_gives_the_same_outcomes_in_some_order():
    run = make_runner(None, 2)
    got = dict(run(_tasks(5), operator.itemgetter("value")))
    assert got == {k: k * k for k in range(5)}


def test_a_task_that_raises_in_a_worker_becomes_an_error_row():
    run = make_runner(None, 1)
    (index, outcome), = list(run([(0, {"display": "m0.exr", "name": "m0"})], operator.itemgetter("value")))
    assert index == 0 and outcome["status"] == "error"
    assert outcome["row"]["source"] == "m0.exr" and "KeyError" in outcome["row"]["error"]


def test_no_tasks_run_nothing():
    assert list(make_runner(None, 4)([], operator.itemgetter("value"))) == []


def test_missing_dask_is_a_one_line_error(monkeypatch):
    import sys

    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(EnvsampleError, match=r"pip install envsample\[dask\]"):
        import_distributed()
