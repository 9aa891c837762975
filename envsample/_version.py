"""The envsample version, in one place (the package root and every writer of files read it here)."""

__version__ = "0.1.0"
