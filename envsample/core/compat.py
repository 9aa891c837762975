"""Old spellings of public names, still accepted for one version with a DeprecationWarning."""

from __future__ import annotations

import functools
import warnings

__all__ = ["renamed_keywords", "warn_renamed"]


def warn_renamed(old: str, new: str, *, what: str = "keyword", stacklevel: int = 3) -> None:
    """Warn that ``old`` is the former name of ``new`` (it still works for now)."""
    warnings.warn(f"the {what} {old!r} is now called {new!r}; the old name will be removed in a later version",
                  DeprecationWarning, stacklevel=stacklevel)


def renamed_keywords(**old_to_new: str):
    """Decorator: accept keyword arguments under their former names, with a DeprecationWarning.

    ``@renamed_keywords(rotate_deg="rotation_deg")`` lets ``f(rotate_deg=30)`` mean
    ``f(rotation_deg=30)``.  Giving both names is a TypeError.
    """

    def decorate(fn):
        @functools.wraps(fn)
        def wrapper(*args, **kwargs):
            for old, new in old_to_new.items():
                if old in kwargs:
                    if new in kwargs:
                        raise TypeError(f"{fn.__name__}() got both {new!r} and its former name {old!r}")
                    warn_renamed(old, new)
                    kwargs[new] = kwargs.pop(old)
            return fn(*args, **kwargs)

        return wrapper

    return decorate
