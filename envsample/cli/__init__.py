"""The ``envsample`` command line: one module per command, each a thin layer over the library.

:mod:`~envsample.cli.app` holds the group and the error handling,
:mod:`~envsample.cli.options` and :mod:`~envsample.cli.output` what several commands
share; each ``*_cmd`` module adds one command to the group when it is imported.
"""

from envsample.cli import (  # noqa: F401 - importing a command module registers its command
    batch_cmd,
    build_cmd,
    check_cmd,
    demo_cmd,
    fix_cmd,
    inspect_cmd,
    sky_cmd,
    split_cmd,
    vectors_cmd,
    verify_cmd,
)
from envsample.cli.app import EXIT_INTERNAL_ERROR, EXIT_USER_ERROR, main

__all__ = ["main", "EXIT_USER_ERROR", "EXIT_INTERNAL_ERROR"]
