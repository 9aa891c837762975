"""How numbers are written for people, the same in terminal output, report messages and pages."""

from __future__ import annotations

import math

__all__ = ["CAUTION", "caution", "number", "one_line"]

#: The caution printed, written and shown wherever envsample gives a photometric value.
CAUTION = "estimates for asset preparation, not certified lighting calculations"


def caution(subject: str) -> str:
    """``"<subject> are estimates for asset preparation, not certified lighting calculations"``."""
    return f"{subject} are {CAUTION}"


def number(x, digits: int = 4) -> str:
    """``x`` with ``digits`` significant digits; scientific notation only below 1e-3 or from 1e6 on.

    Integers print as they are; values from ``10**digits`` to 1e6 keep their integer
    digits ("61024", not "6.102e+04"); non-finite values print as ``inf``/``nan``.
    """
    if isinstance(x, int) and not isinstance(x, bool):
        return str(x)
    x = float(x)
    if not math.isfinite(x):
        return str(x)
    if x == 0.0:
        return "0"
    if abs(x) >= 1e6 or abs(x) < 1e-3:
        return f"{x:.{max(1, digits - 1)}e}"
    if abs(x) >= 10**digits:
        return f"{x:.0f}"
    return f"{x:.{digits}g}"


def one_line(text, *, limit: int | None = None) -> str:
    """``text`` with every run of whitespace (newlines included) collapsed to one space, cut to ``limit`` characters."""
    out = " ".join(str(text).split())
    if limit is not None and len(out) > limit:
        out = out[: limit - 3] + "..."
    return out
