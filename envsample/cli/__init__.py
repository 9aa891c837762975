"""The ``envsample`` command line: one module per command, each a thin layer over the library."""

from envsample.cli.main import main

__all__ = ["main"]
