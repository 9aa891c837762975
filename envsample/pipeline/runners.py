"""Where the tasks of a batch run: in this process, in spawned worker processes, or on a Dask cluster.

Each runner is a generator of ``(index, outcome)`` as tasks finish; closing it cancels what is
pending and stops the workers.

References
----------
- Rocklin, M. (2015). Dask: parallel computation with blocked algorithms and task
  scheduling. Proc. 14th Python in Science Conference, 130-136.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import signal
import uuid
from collections import deque
from concurrent.futures import FIRST_COMPLETED, wait
from concurrent.futures.process import BrokenProcessPool, ProcessPoolExecutor

from envsample.errors import EnvsampleError
from envsample.pipeline.tasks import error_line, error_row


def _worker_init() -> None:
    # Ctrl-C reaches the whole process group; only the parent decides what to stop.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # A worker whose parent was killed (SIGKILL, OOM) would otherwise wait forever on the
    # task queue, whose pipe it holds open itself: leave as soon as the parent is gone.
    parent = multiprocessing.parent_process()
    if parent is not None:
        import threading
        from multiprocessing.connection import wait as wait_for

        def watch():
            wait_for([parent.sentinel])
            os._exit(1)

        threading.Thread(target=watch, name="envsample-parent-watch", daemon=True).start()


def _run_inline(tasks, task_fn):
    for index, task in tasks:
        yield index, task_fn(task)


def _terminate(executor) -> None:
    """Stop a pool's workers now.  ProcessPoolExecutor has no public way to do this before
    Python 3.14 (``terminate_workers``); ``_processes`` is its map of worker processes."""
    procs = list((getattr(executor, "_processes", None) or {}).values())
    for p in procs:
        with contextlib.suppress(Exception):
            p.terminate()
    for p in procs:
        with contextlib.suppress(Exception):
            p.join(10)


def _run_pool(tasks, task_fn, workers: int):
    """Yield (index, outcome) as tasks finish in spawned worker processes.

    At most ``workers`` tasks are in flight, so a worker that dies (a crash in a
    decoder, the out-of-memory killer) takes down few others.  Tasks caught in a
    broken pool are retried one at a time; a task that breaks the pool on its own
    is recorded as an error.
    """
    ctx = multiprocessing.get_context("spawn")
    queue = deque(tasks)
    suspects: deque = deque()
    in_flight: dict = {}
    executor = None
    finished = False
    try:
        while queue or suspects or in_flight:
            if executor is None:
                executor = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_worker_init)
                broken = False
            if not broken:
                if suspects:
                    if not in_flight:
                        item = suspects.popleft()
                        in_flight[executor.submit(task_fn, item[1])] = (item, True)
                else:
                    while queue and len(in_flight) < workers:
                        item = queue.popleft()
                        in_flight[executor.submit(task_fn, item[1])] = (item, False)
            done, _ = wait(list(in_flight), return_when=FIRST_COMPLETED)
            for fut in done:
                item, alone = in_flight.pop(fut)
                try:
                    outcome = fut.result()
                except BrokenProcessPool:
                    broken = True
                    if alone:
                        msg = "the worker process died on this map (a crash or out of memory); check the file"
                        yield item[0], {"status": "error", "row": error_row(item[1], msg)}
                    else:
                        suspects.append(item)
                    continue
                except KeyboardInterrupt:
                    raise
                except Exception as e:
                    outcome = {"status": "error", "row": error_row(item[1], f"processing failed: {error_line(e)}")}
                yield item[0], outcome
            if broken and not in_flight:
                executor.shutdown(wait=True)
                executor = None
        finished = True
    finally:
        if executor is not None:
            if not finished:
                for fut in in_flight:
                    fut.cancel()
                _terminate(executor)
            executor.shutdown(wait=True, cancel_futures=True)


def import_distributed():
    """dask.distributed, imported only when a scheduler is given (an optional extra)."""
    try:
        import distributed
    except ImportError as e:
        raise EnvsampleError(
            "scheduler: dask.distributed is not installed; install it with 'pip install envsample[dask]'"
        ) from e
    return distributed


def _dask_client(scheduler):
    distributed = import_distributed()
    if isinstance(scheduler, str):
        try:
            return distributed, distributed.Client(scheduler, timeout="30s"), True
        except (OSError, TimeoutError) as e:
            raise EnvsampleError(
                f"scheduler {scheduler}: cannot connect ({error_line(e)}); check the address (e.g. tcp://host:8786)"
            ) from e
    if hasattr(scheduler, "submit") and hasattr(scheduler, "cancel"):
        return distributed, scheduler, False
    raise TypeError(f"scheduler must be an address string or a dask.distributed Client, got {type(scheduler).__name__}")


def _run_dask(tasks, task_fn, scheduler):
    """Yield (index, outcome) as tasks finish on a Dask cluster (the same task function).

    The workers must see OUTDIR and the sources at the same paths (a shared file
    system) and have envsample installed.
    """
    distributed, client, owned = _dask_client(scheduler)
    futures = {}
    finished = False
    try:
        run = uuid.uuid4().hex[:8]
        for index, task in tasks:
            fut = client.submit(task_fn, task, key=f"envsample-batch-{task['name']}-{run}", pure=False)
            futures[fut] = (index, task)
        for fut in distributed.as_completed(list(futures)):
            index, task = futures[fut]
            try:
                outcome = fut.result()
            except Exception as e:
                outcome = {"status": "error", "row": error_row(task, f"processing failed on the cluster: {error_line(e)}")}
            yield index, outcome
        finished = True
    finally:
        if not finished and futures:
            with contextlib.suppress(Exception):
                client.cancel(list(futures))
        if owned:
            with contextlib.suppress(Exception):
                client.close()


def make_runner(scheduler, workers: int):
    """A function (tasks, task_fn) -> generator of (index, outcome): Dask, a process pool, or inline."""
    if scheduler is not None:
        return lambda tasks, fn: _run_dask(tasks, fn, scheduler)
    if workers == 0:
        return _run_inline
    return lambda tasks, fn: _run_pool(tasks, fn, min(workers, len(tasks))) if tasks else _run_inline(tasks, fn)
