"""Bright connected regions of a map (suns, lamps, windows) for the checks: the context's adapters
to :mod:`envsample.lights.emitters`, where the labelling, the level and the measures live (one
implementation shared with the sun finder).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from envsample.lights import emitters as _emitters
from envsample.lights.emitters import Emitter
from envsample.lights.regions import label_wrapped, ring

if TYPE_CHECKING:  # annotations only: the context holds the emitters
    from envsample.qa.context import CheckContext

__all__ = ["Emitter", "emitter_level", "emitter_mask", "find_emitters", "label_wrapped", "ring"]


def emitter_level(ctx: CheckContext) -> float:
    """Luminance above which a pixel belongs to an emitter (``[sun]`` thresholds)."""
    s = ctx.settings("sun")
    # The level reads only the peak of what it is given: the scan's row maxima hold it without a pass over the map.
    return _emitters.emitter_level(ctx.scan.row_luminance_max, ctx.median_luminance,
                                   median_multiple=s["threshold_median_multiple"],
                                   max_fraction=s["threshold_max_fraction"])


def find_emitters(ctx: CheckContext) -> list[Emitter]:
    labels, n = ctx.emitter_labels
    return _emitters.find_emitters(ctx.luminance, labels, n, ctx.row_solid_angles, total_power=ctx.total_power)


def emitter_mask(ctx: CheckContext, e: Emitter) -> tuple[np.ndarray, np.ndarray] | None:
    """``(rows, mask)``: the rows (int, ascending) that hold the emitter and its mask there (bool (n, W))."""
    labels = ctx.emitter_labels[0]
    rows = ctx.emitter_rows
    if rows.size == 0:
        return None
    band = labels[rows] == e.label
    keep = band.any(axis=1)
    return (rows[keep], band[keep]) if keep.any() else None
