"""Task wrappers for batch tests that run in spawned worker processes.

They live here, not in a test module, because a spawned worker imports them by module name:
``support`` is on the workers' ``sys.path`` (pytest's ``pythonpath``), the test modules are not.
"""

from __future__ import annotations

import os

from envsample.pipeline.tasks import process_map


def crash_on_studio(task):
    """Task stand-in that kills its worker process on one map (a crash in a decoder)."""
    if task["name"].startswith("studio-"):
        os._exit(3)
    return process_map(task)
