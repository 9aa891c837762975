"""Remedies for the defects the checks find: pure functions on (H, W, 3) float32 maps.

Each remedy takes a map (row 0 at the zenith, see :mod:`envsample.core.sphere`) and keyword
options, never modifies its input, and returns a :class:`Repair`: the new map and a record of what
it changed (which rows, columns or pixels; every pixel outside that region is left bit for bit
identical).  :data:`REMEDIES` maps each name to its function, :func:`apply_remedy` dispatches, and
:data:`FIXES` says which remedy answers which check and whether ``--auto`` may apply it.

Methods: nearest-pixel filling by the Euclidean distance transform (``scipy.ndimage
.distance_transform_edt``; Maurer, Qi & Raghavan 2003, see ``docs/references.md``); the pole rows set to
their mean (each pole row images one direction); a linear cross-fade of the seam (common practice);
a Lambertian ground under a padded sky, radiance albedo x E / pi (textbook); exposure scaled so that
a white diffuse surface facing up reflects the target radiance E / pi.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from envsample.core.constants import luminance_weights


@dataclass
class Repair:
    """What a remedy returns: ``rgb`` the new map (float32 (H', W', 3)) and ``record`` (JSON-ready).

    ``record`` holds ``remedy`` (the name), ``options``, ``changed`` (the region: ``"rows"``,
    ``"columns"``, ``"pixels"`` or ``"all"`` with its extent) and ``message`` (one line).
    """

    rgb: np.ndarray
    record: dict = field(default_factory=dict)


def _record(name: str, options: dict, changed: dict, message: str) -> dict:
    return {"remedy": name, "options": options, "changed": changed, "message": message}


def _s(n: int) -> str:
    return "" if n == 1 else "s"


def _as_map(rgb) -> np.ndarray:
    a = np.asarray(rgb)
    if a.ndim != 3 or a.shape[2] != 3 or a.shape[0] < 1 or a.shape[1] < 1:
        raise ValueError(f"a map must have shape (H, W, 3), got {a.shape}")
    return a.astype(np.float32, copy=False)


def flip(rgb) -> Repair:
    """Upside down: rows reversed, so that row 0 becomes the zenith (every pixel moves)."""
    a = _as_map(rgb)
    return Repair(np.ascontiguousarray(a[::-1]), _record("flip", {}, {"all": True},
                                                         "flipped vertically (row 0 is now the zenith)"))


def rotate(rgb, *, degrees: float) -> Repair:
    """Rotate about the up axis by ``degrees`` of azimuth (a feature at azimuth a moves to a + degrees).

    The shift is rounded to whole columns (W / 360 per degree) so that no pixel is resampled:
    the result is a permutation of the columns.
    """
    a = _as_map(rgb)
    if not math.isfinite(degrees):
        raise ValueError(f"degrees must be a finite number, got {degrees!r}")
    shift = round(degrees / 360.0 * a.shape[1]) % a.shape[1]
    done = shift * 360.0 / a.shape[1]
    return Repair(np.roll(a, shift, axis=1), _record("rotate", {"degrees": degrees},
                                                     {"all": True, "columns_shifted": shift},
                                                     f"rotated by {done:.3f} deg of azimuth ({shift} columns)"))


def fill_nonfinite(rgb) -> Repair:
    """Replace every pixel with a NaN or Inf channel by the nearest pixel whose channels are all finite.

    Nearest in the image plane with the seam joined (the map is padded with wrapped columns);
    not by 0, which would punch black holes in the light.  Only those pixels change.
    """
    from scipy import ndimage

    a = _as_map(rgb)
    bad = ~np.isfinite(a).all(axis=2)
    n = int(bad.sum())
    if n == 0:
        return Repair(a.copy(), _record("fill-nonfinite", {}, {"pixels": 0}, "no NaN or Inf pixels"))
    if n == bad.size:
        raise ValueError("every pixel is NaN or Inf: there is nothing to fill from; re-export the map")
    rows = np.nonzero(bad.any(axis=1))[0]
    H, W = bad.shape
    out = a.copy()
    # Work on the rows that hold bad pixels plus a margin, columns padded by wrapping.
    margin = 8
    lo, hi = int(rows[0]), int(rows[-1]) + 1
    while True:
        r0, r1 = max(0, lo - margin), min(H, hi + margin)
        pad = min(W, 2 * margin)
        band = np.concatenate([bad[r0:r1, -pad:], bad[r0:r1], bad[r0:r1, :pad]], axis=1)
        if (~band).any() or (r0 == 0 and r1 == H):
            break
        margin *= 4
    _, (iy, ix) = ndimage.distance_transform_edt(band, return_indices=True)
    src_rows = iy + r0
    src_cols = (ix - pad) % W
    sel = band[:, pad:pad + W]
    yy, xx = np.nonzero(sel)
    out[yy + r0, xx] = a[src_rows[yy, xx + pad], src_cols[yy, xx + pad]]
    return Repair(out, _record("fill-nonfinite", {}, {"pixels": n, "rows": [lo, hi - 1]},
                               f"filled {n} NaN/Inf pixel{_s(n)} from the nearest finite pixels"))


def clamp_negative(rgb) -> Repair:
    """Set negative channels to 0 (only the pixels that have one change)."""
    a = _as_map(rgb)
    with np.errstate(invalid="ignore"):
        neg = a < 0
    n = int(neg.any(axis=2).sum())
    out = np.where(neg, np.float32(0.0), a).astype(np.float32)
    return Repair(out, _record("clamp-negative", {}, {"pixels": n}, f"clamped {n} pixel{_s(n)} with negative channels to 0"))


def constant_poles(rgb, *, rows: int = 1) -> Repair:
    """Set the first and last ``rows`` rows to their own mean colour (each pole row images one direction)."""
    a = _as_map(rgb)
    k = max(1, min(int(rows), a.shape[0] // 2))
    out = a.copy()
    for sl in (slice(0, k), slice(a.shape[0] - k, a.shape[0])):
        block = a[sl].astype(np.float64)
        out[sl] = block.mean(axis=1, keepdims=True).astype(np.float32)
    return Repair(out, _record("poles", {"rows": k}, {"rows": [[0, k - 1], [a.shape[0] - k, a.shape[0] - 1]]},
                               f"made the first and last {k} row(s) constant"))


def blend_seam(rgb, *, columns: int = 4) -> Repair:
    """Cross-fade the left and right edges over ``columns`` columns each, so that they meet.

    The step d = left - right of each row and channel is split: column j from the edge
    (j = 0..columns-1) moves by d/2 (1 - j / columns) towards the other side, so the two edge
    columns meet at their mean; values stay non-negative.  Only those 2 x ``columns`` columns change.
    """
    a = _as_map(rgb)
    W = a.shape[1]
    n = int(columns)
    if not 1 <= n <= W // 2:
        raise ValueError(f"columns must be between 1 and {W // 2} (half the width), got {columns!r}")
    d = (a[:, 0].astype(np.float64) - a[:, -1].astype(np.float64)) / 2.0
    w = 1.0 - np.arange(n) / n
    out = a.copy()
    out[:, :n] = np.maximum(a[:, :n] - d[:, None, :] * w[None, :, None], 0.0).astype(np.float32)
    out[:, W - n:] = np.maximum(a[:, W - n:] + d[:, None, :] * w[::-1][None, :, None], 0.0).astype(np.float32)
    return Repair(out, _record("seam", {"columns": n}, {"columns": [[0, n - 1], [W - n, W - 1]]},
                               f"blended the seam over {n} columns on each side"))


def _irradiance_up(rgb: np.ndarray, weights: np.ndarray) -> float:
    """Irradiance of luminance on an up-facing surface, map units x sr (exact per row)."""
    H, W = rgb.shape[:2]
    edges = np.minimum(np.pi * np.arange(H + 1) / H, math.pi / 2.0)
    cw = (math.pi / W) * np.diff(np.sin(edges) ** 2)
    rows = np.nonzero(cw > 0)[0]
    sums = rgb[rows].sum(axis=1, dtype=np.float64)
    return float((sums @ weights) @ cw[rows])


def scale_exposure(rgb, *, target: float | None = None, irradiance: float | None = None, weights=None) -> Repair:
    """Scale the map so that a white diffuse surface facing up reflects ``target`` (E / pi = target, default 1),
    or so that the irradiance on it is ``irradiance`` (E, map units x sr; lux for a map in cd/m2).

    ``weights`` are the luminance weights (default: BT.709, :func:`envsample.core.constants.luminance_weights`).
    The scale is computed in float64 and applied in float64 bands, so maps near the float32
    limits (1e-45, 3e38) are rescaled without overflow.  Every pixel changes.
    """
    a = _as_map(rgb)
    if target is not None and irradiance is not None:
        raise ValueError("give target (E/pi) or irradiance (E), not both")
    goal_e = math.pi * (1.0 if target is None else target) if irradiance is None else irradiance
    if not (math.isfinite(goal_e) and goal_e > 0):
        raise ValueError(f"the target must be a positive number, got {target if irradiance is None else irradiance!r}")
    with np.errstate(invalid="ignore", over="ignore"):
        clean = np.where(np.isfinite(a) & (a > 0), a, 0.0)
        w = luminance_weights("bt709") if weights is None else weights
        e = _irradiance_up(clean, np.asarray(w, dtype=np.float64))
    if not e > 0:
        raise ValueError("no light reaches an up-facing surface (the upper hemisphere is black): "
                         "the exposure cannot be set; flip or re-export the map")
    factor = goal_e / e
    out = np.empty_like(a)
    step = max(1, (1 << 20) // max(1, a.shape[1] * 3))
    with np.errstate(over="ignore", invalid="ignore"):
        for r0 in range(0, a.shape[0], step):
            out[r0:r0 + step] = (a[r0:r0 + step].astype(np.float64) * factor).astype(np.float32)
    stops = math.log2(factor)
    goal = f"E = {goal_e:g}" if irradiance is not None else f"E/pi = {goal_e / math.pi:g}"
    options = {"irradiance": irradiance} if irradiance is not None else {"target": goal_e / math.pi}
    return Repair(out, _record("exposure", options, {"all": True, "scale": factor},
                               f"scaled by {factor:.6g} ({stops:+.2f} stops) so that {goal} on an up-facing surface"))


def pad_hemisphere(rgb, *, ground_albedo: float = 0.2) -> Repair:
    """Make a full-sphere 2:1 map from an upper hemisphere: the input rows span elevation 90..0 deg.

    The output is W x W/2: its upper half holds the input resampled to W/4 rows (row overlaps in
    elevation; copied exactly when the input already has W/4 rows), its lower half a uniform
    Lambertian ground of radiance ``ground_albedo`` x E / pi per channel (E the irradiance the
    sky gives an up-facing surface: textbook).
    """
    a = _as_map(rgb)
    H, W = a.shape[:2]
    if W % 4:
        raise ValueError(f"width {W} must be a multiple of 4 to pad a hemisphere to 2:1")
    if not 0.0 <= ground_albedo <= 1.0:
        raise ValueError(f"ground_albedo must be in [0, 1], got {ground_albedo!r}")
    half = W // 4
    if H == half:
        sky = a.copy()
    else:
        edges_in = np.linspace(0.0, 1.0, H + 1)
        edges_out = np.linspace(0.0, 1.0, half + 1)
        lo = np.maximum(edges_out[:-1, None], edges_in[None, :-1])
        hi = np.minimum(edges_out[1:, None], edges_in[None, 1:])
        m = np.clip(hi - lo, 0.0, None)
        m /= m.sum(axis=1, keepdims=True)
        sky = np.einsum("ij,jwc->iwc", m, a.astype(np.float64)).astype(np.float32)
    out = np.empty((2 * half, W, 3), dtype=np.float32)
    out[:half] = sky
    # Irradiance per channel on an up-facing surface from the sky rows (exact cos-weighted row bands).
    theta = np.linspace(0.0, math.pi / 2.0, half + 1)
    cw = (math.pi / W) * np.diff(np.sin(theta) ** 2)
    e = (sky.sum(axis=1, dtype=np.float64) * cw[:, None]).sum(axis=0)
    out[half:] = (ground_albedo * e / math.pi).astype(np.float32)
    return Repair(out, _record("pad-hemisphere", {"ground_albedo": ground_albedo},
                               {"all": True, "size": [W, 2 * half], "source_size": [W, H]},
                               f"padded the lower hemisphere: {W}x{H} -> {W}x{2 * half}, ground albedo {ground_albedo:g}"))


#: Every remedy by name.
REMEDIES: dict[str, Callable[..., Repair]] = {
    "fill-nonfinite": fill_nonfinite,
    "clamp-negative": clamp_negative,
    "poles": constant_poles,
    "seam": blend_seam,
    "flip": flip,
    "rotate": rotate,
    "pad-hemisphere": pad_hemisphere,
    "exposure": scale_exposure,
}

#: Which remedy answers which check, and whether ``--auto`` applies it.  Geometry changes (flip,
#: rotate, pad) need a person's judgement (snow can be brighter than the sky) and are applied only
#: on request; ``hdr`` and ``clipping`` failures cannot be fixed (lost levels and lost highlights).
FIXES = {
    "nan": ("fill-nonfinite", True),
    "inf": ("fill-nonfinite", True),
    "negative": ("clamp-negative", True),
    "poles": ("poles", True),
    "seam": ("seam", True),
    "exposure": ("exposure", True),
    "value-range": ("exposure", True),
    "orientation": ("flip", False),
    "hemisphere": ("pad-hemisphere", False),
}

#: Checks whose failure no remedy can undo, with the reason.
UNFIXABLE = {
    "hdr": "the levels lost in a display-referred or 8-bit pipeline cannot be restored",
    "clipping": "clipped highlights hold no record of the light above the clip",
}

#: The order remedies run in: repair values first, then geometry, exposure last (it measures the result).
ORDER = ("fill-nonfinite", "clamp-negative", "pad-hemisphere", "flip", "rotate", "poles", "seam", "exposure")


def apply_remedy(name: str, rgb, **options) -> Repair:
    """Run the remedy ``name`` (a key of :data:`REMEDIES`) on ``rgb``; ValueError lists the valid names."""
    fn = REMEDIES.get(name)
    if fn is None:
        raise ValueError(f"unknown remedy {name!r}; valid names: {', '.join(REMEDIES)}")
    return fn(rgb, **options)


__all__ = ["FIXES", "ORDER", "REMEDIES", "UNFIXABLE", "Repair", "apply_remedy", "blend_seam", "clamp_negative",
           "constant_poles", "fill_nonfinite", "flip", "pad_hemisphere", "rotate", "scale_exposure"]


def plan_remedies(report, *, auto: bool = False, requested=None) -> tuple[list[dict], list[dict]]:
    """What to apply to a map, from its QA report: ``(steps, proposed)``.

    ``requested`` maps remedy names to their options (applied whatever the report says);
    with ``auto``, the safe remedy of every check that warned or failed is added (see
    :data:`FIXES`).  ``steps`` are ``{"remedy", "options", "why", "check"}`` in :data:`ORDER`
    (``check`` is the id of the check that asked for the step, None for a requested one);
    ``proposed`` lists the remedies the checks propose that are not applied (geometry
    changes without a request) with the check that proposes them.
    """
    requested = dict(requested or {})
    unknown = sorted(set(requested) - set(REMEDIES))
    if unknown:
        raise ValueError(f"unknown remedy {', '.join(map(repr, unknown))}; valid names: {', '.join(REMEDIES)}")
    why = {name: "requested" for name in requested}
    asked_by = {}
    proposed = []
    for c in report.checks:
        if c.severity == "pass" or c.id not in FIXES:
            continue
        name, safe = FIXES[c.id]
        if name in why:
            continue
        if auto and safe:
            requested[name] = {}
            why[name] = f"{c.id} {c.severity}"
            asked_by[name] = c.id
        else:
            proposed.append({"remedy": name, "check": c.id, "severity": c.severity})
    steps = [{"remedy": n, "options": requested[n], "why": why[n], "check": asked_by.get(n)}
             for n in ORDER if n in requested]
    return steps, proposed
