"""How numbers and angles are written in check messages (one way for every check).
"""

from __future__ import annotations

import numpy as np

from envsample.core.text import number


def fmt(x, digits: int = 3) -> str:
    """A number for a message: ``digits`` significant digits, no exponent for ordinary sizes."""
    if x is None:
        return "-"
    if isinstance(x, np.integer):
        x = int(x)
    return number(x, digits)


def deg(x: float) -> str:
    """An angle in degrees for a message, to 0.1 deg (0.01 deg below 1 deg)."""
    x = float(x)
    text = f"{x:.2f}" if abs(x) < 1.0 else f"{x:.1f}"
    return "0" if float(text) == 0.0 else text


def pct(fraction: float) -> str:
    p = 100.0 * fraction
    if 0.0 < p < 1e-3:
        return "<0.001%"  # rounding residue of a black region; more digits would only mislead
    return f"{p:.2g}%" if p < 1 else f"{p:.3g}%"
