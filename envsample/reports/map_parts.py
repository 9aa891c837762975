"""The parts of one map's section of a check page: figures, check rows, pictures and their captions.

Pictures: a tone-mapped thumbnail with the emitters of the ``sun`` check ringed; the
sampling pdf (per steradian, log colour scale) of a reduced table with the same rings;
and a range overlay that marks clipped, over-range and invalid pixels in false colour
(:func:`envsample.reports.pictures.range_overlay`).  Emitter directions are azimuth and
elevation in degrees in the map's own image frame (:mod:`envsample.core.sphere` with
rotation 0: azimuth 0 at the image centre, positive to the right, elevation 90 deg at row 0).
NaN, infinite and negative pixels are drawn as 0 in the thumbnail and the pdf (the overlay
shows where they are).
"""

from __future__ import annotations

import math
import os
import tempfile
import warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from envsample.core.constants import HALF_FLOAT_MAX
from envsample.core.sphere import angles_to_uv, pixel_center_angles
from envsample.core.text import number
from envsample.errors import EnvsampleError, EnvsampleWarning, MapValidationError
from envsample.io.maps import map_pixels, read_map
from envsample.qa.profile import load_profile
from envsample.qa.results import Report
from envsample.reports.pictures import RANGE_COLORS, encode_png, heatmap_figure, mark_points, range_overlay, thumbnail
from envsample.reports.templating import picture
from envsample.sampling.table import build_table

__all__ = ["THUMB_WIDTH", "PDF_TABLE_SIZE", "VERDICTS", "as_report_dict", "report_row", "map_context", "num",
           "map_name", "verdict_of"]

#: Width in pixels of the thumbnails of a check page (small maps are enlarged by pixel repetition).
THUMB_WIDTH = 512
#: Largest (width, height) of the table whose pdf is drawn; smaller maps keep their own size.
PDF_TABLE_SIZE = (256, 128)
#: Verdicts, best to worst.
VERDICTS = ("pass", "warn", "fail", "error")

# Unit of the measured value and threshold of each check, and the factor applied to both
# before display (fractions are shown in %).  A check not listed shows its values as they are.
_UNITS = {
    "aspect": ("width / height", 1.0),
    "resolution": ("px wide", 1.0),
    "nan": ("pixels", 1.0),
    "inf": ("pixels", 1.0),
    "negative": ("% of the sphere", 100.0),
    "dynamic-range": ("stops", 1.0),
    "clipping": ("pixels", 1.0),
    "seam": ("% of the light", 100.0),
    "poles": ("std / mean", 1.0),
    "orientation": ("% of the light above the horizon", 100.0),
    "sun": ("deg across", 1.0),
    "sampling": ("relative RMSE", 1.0),
    "light-level": ("map units \u00d7 sr", 1.0),
    "chromaticities": ("xy distance", 1.0),
}
# Emitter rings: sun-like emitters thick and magenta, other bright regions thin and cyan
# (thickness differs too, so the two kinds stay apart in greyscale).
SUN_RING = {"color": (255, 60, 170), "thickness": 3.0}
OTHER_RING = {"color": (0, 215, 255), "thickness": 1.5}
_MAX_DECADES = 6.0  # the pdf colour scale spans at most this many decades below its peak
# The pdf map uses another perceptually uniform map than verify's error maps (magma), so the
# two quantities are not mistaken for each other (Smith & van der Walt 2015, via pictures).
_PDF_CMAP = "viridis"


def num(x, digits: int = 4) -> str:
    """A number for people: ``digits`` significant digits, a dash for None or NaN."""
    if x is None:
        return "\u2014"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, (int, np.integer)):
        return f"{int(x):d}"
    if isinstance(x, (float, np.floating)):
        x = float(x)
        if not math.isfinite(x):
            return "\u2014" if math.isnan(x) else ("\u221e" if x > 0 else "\u2212\u221e")
        return number(x, digits)
    if isinstance(x, (list, tuple)):
        return ", ".join(num(v, digits) for v in x)
    return str(x)


def finite(x) -> float | None:
    if isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool):
        x = float(x)
        return x if math.isfinite(x) else None
    return None


def _scaled(x, factor: float):
    if factor == 1.0:
        return x
    if isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool):
        return float(x) * factor
    if isinstance(x, (list, tuple)):
        return [_scaled(v, factor) for v in x]
    return x


def as_report_dict(report, k: int) -> dict:
    if isinstance(report, Report):
        return report.to_dict()
    if isinstance(report, Mapping) and isinstance(report.get("checks"), list):
        return dict(report)
    raise TypeError(f"reports[{k}] must be an envsample.qa.Report or its to_dict() form, "
                    f"got {type(report).__name__}")


def verdict_of(rep: dict) -> str:
    """The verdict a page shows: the report's, or ``fail`` for a file that could not be read."""
    v = rep.get("verdict", "error") if rep.get("readable", True) else "fail"
    return v if v in VERDICTS else "error"


def _check(rep: dict, check_id: str) -> dict | None:
    for c in rep.get("checks", []):
        if c.get("id") == check_id:
            return c
    return None


def map_name(rep: dict, k: int) -> str:
    path = (rep.get("source") or {}).get("path")
    return Path(path).name if path else f"map {k + 1} (in memory)"


def _emitters(rep: dict) -> list[dict]:
    sun = _check(rep, "sun")
    return list(((sun or {}).get("details") or {}).get("emitters") or [])


def report_row(report, *, name: str | None = None, thumbnail=None, page: str | None = None,
               links: Mapping | None = None) -> dict:
    """An index-page row (keys of :data:`envsample.reports.pages.INDEX_ROW_KEYS`) from a QA report or its dict form.

    The key figures come from the checks: ``dynamic_range`` (stops) from
    ``dynamic-range``; the first sun-like emitter of ``sun`` (azimuth and elevation in
    degrees, share as a fraction); ``peak_sample_share`` and ``sampling_relative_rmse`` of
    the graded estimator of ``sampling``; ``irradiance_up`` from ``light-level``.
    Missing checks give None.
    """
    rep = as_report_dict(report, 0)
    img = rep.get("image") or {}
    src = (rep.get("source") or {}).get("path")
    row = {
        "name": name if name is not None else (Path(src).name if src else None),
        "source": src,
        "verdict": rep.get("verdict", "error") if rep.get("readable", True) else "error",
        "thumbnail": thumbnail,
        "page": page,
        "links": dict(links) if links else {},
        "width": img.get("width"),
        "height": img.get("height"),
        "format": img.get("format"),
        "pixel_type": img.get("pixel_type"),
        "failed_checks": [c["id"] for c in rep.get("checks", []) if c.get("severity") == "fail"],
        "warned_checks": [c["id"] for c in rep.get("checks", []) if c.get("severity") == "warn"],
        "error": None if rep.get("readable", True) else (_check(rep, "read") or {}).get("message"),
    }
    dr = _check(rep, "dynamic-range")
    row["dynamic_range"] = finite((dr or {}).get("value"))
    sun = [e for e in _emitters(rep) if e.get("sun_like")]
    row["sun_azimuth_deg"] = finite(sun[0].get("azimuth_deg")) if sun else None
    row["sun_elevation_deg"] = finite(sun[0].get("elevation_deg")) if sun else None
    row["sun_share"] = finite(sun[0].get("share")) if sun else None
    sampling = _check(rep, "sampling") or {}
    det = sampling.get("details") or {}
    graded = (det.get("estimators") or {}).get(det.get("estimator")) or {}
    row["peak_sample_share"] = finite(graded.get("peak_sample_share"))
    row["sampling_relative_rmse"] = finite(sampling.get("value"))
    ll = _check(rep, "light-level")
    row["irradiance_up"] = finite((ll or {}).get("value"))
    return row


# --------------------------------------------------------------------------- pixels


def _pixels(rep: dict, image):
    """(raw pixels or None, linear RGB float32 with bad pixels zeroed or None, note)."""

    if image is None:
        if not rep.get("readable", True):
            return None, None, "the file could not be read"
        path = (rep.get("source") or {}).get("path")
        if not path:
            return None, None, "no pixels: the map was checked in memory (pass it in images=)"
        image = path
    if isinstance(image, (str, os.PathLike)):
        try:
            image = read_map(image)
        except EnvsampleError as e:
            return None, None, f"the file could not be read again: {e}"
    try:
        raw = map_pixels(image)
    except MapValidationError:
        return None, None, f"no picture: pixels of shape {np.shape(getattr(image, 'rgb', image))} are not (H, W, 3)"
    bad = ~np.isfinite(raw)
    note = ""
    rgb = raw
    if bad.any() or (raw < 0).any():
        # Pictures never fail on bad pixels: NaN/Inf and negatives are drawn as 0 (the checks report them).
        rgb = np.where(bad | (raw < 0), np.float32(0.0), raw)
        note = "NaN, infinite and negative pixels are drawn as 0."
    return raw, rgb, note


def _profile(rep: dict):
    """The report's profile (the defaults when it cannot be loaded again)."""

    try:
        return load_profile((rep.get("profile") or {}).get("path"))
    except (EnvsampleError, ValueError, OSError):
        return load_profile(None)


def _emitter_uv(emitters: list[dict]) -> np.ndarray:
    """Image (u, v) of emitters given by azimuth/elevation (deg) in the map's own frame (rotation 0)."""

    if not emitters:
        return np.zeros((0, 2))
    az = np.array([float(e["azimuth_deg"]) for e in emitters])
    el = np.array([float(e["elevation_deg"]) for e in emitters])
    u, v = angles_to_uv(az, el)
    return np.stack([np.mod(u, 1.0), np.clip(v, 0.0, 1.0)], axis=1)


def _rings(emitters: list[dict], width: int) -> list[dict]:
    """Ring specifications (uv, colour, radius, thickness) for a picture ``width`` pixels wide."""
    uv = _emitter_uv(emitters)
    radius = max(7.0, width / 60.0)
    sun = np.array([bool(e.get("sun_like")) for e in emitters], dtype=bool)
    rings = []
    if (~sun).any():
        rings.append({"uv": uv[~sun], "radius": radius * 1.3, **OTHER_RING})
    if sun.any():
        rings.append({"uv": uv[sun], "radius": radius, **SUN_RING})
    return rings


def _enlarged(pic: np.ndarray, width: int) -> np.ndarray:
    rep = max(1, width // pic.shape[1])
    return np.repeat(np.repeat(pic, rep, axis=0), rep, axis=1) if rep > 1 else pic


def thumbnail_png(rgb: np.ndarray, emitters: list[dict]) -> bytes:
    """The tone-mapped thumbnail with the emitters ringed, as PNG bytes."""

    # Small maps are enlarged by pixel repetition so rings keep their size and pixels stay honest.
    pic = _enlarged(thumbnail(rgb, width=THUMB_WIDTH), THUMB_WIDTH)
    for ring in _rings(emitters, pic.shape[1]):
        pic = mark_points(pic, ring.pop("uv"), **ring)
    return encode_png(pic)


def pdf_values(rgb: np.ndarray, primaries: str) -> np.ndarray:
    """The pdf per steradian of a table of at most :data:`PDF_TABLE_SIZE` cells (float64 (h, w))."""

    H, W = rgb.shape[:2]
    size = (min(PDF_TABLE_SIZE[0], W), min(PDF_TABLE_SIZE[1], H))
    with warnings.catch_warnings():
        # A black map gives a uniform table with a warning; the caption says it instead.
        warnings.simplefilter("ignore", EnvsampleWarning)
        table = build_table(rgb, size=size, primaries=primaries, allow_aspect=True)  # the aspect check reports the shape
    return np.asarray(table.cell_pdf, dtype=np.float64)


def pdf_png(rgb: np.ndarray, primaries: str, emitters: list[dict]) -> tuple[bytes, str]:
    """The table pdf (per sr) as a log-scale heat map PNG with the emitters ringed, and a caption."""

    pdf = pdf_values(rgb, primaries)
    positive = pdf[pdf > 0]
    hi = float(positive.max()) if positive.size else 1.0 / (4.0 * math.pi)
    lo = float(positive.min()) if positive.size else hi
    lo = max(lo, hi * 10.0 ** -_MAX_DECADES)
    rings = _rings(emitters, 512)
    with tempfile.TemporaryDirectory(prefix="envsample-html-") as tmp:
        out = heatmap_figure([(f"sampling pdf of a {pdf.shape[1]}\u00d7{pdf.shape[0]} table", pdf)],
                             path=Path(tmp) / "pdf.png", label="pdf p(\u03c9) (1/sr), log scale",
                             vmin=lo, vmax=hi if hi > lo else None, log=True, latlong=True,
                             cmap=_PDF_CMAP, rings=[rings])
        data = out.read_bytes()
    uniform = 1.0 / (4.0 * math.pi)
    caption = ("Where the table sends samples: density per steradian (proportional to luminance). "
               f"Uniform sampling of the sphere would be 1/4\u03c0 = {uniform:.4f} /sr everywhere")
    if not np.any(rgb > 0):
        caption += "; the map is black, so the table samples the sphere uniformly. "
    elif hi <= 1.01 * float(np.median(positive)):
        caption += f"; this map is nearly flat (peak {num(hi, 3)} /sr). "
    else:

        i, j = np.unravel_index(int(np.argmax(pdf)), pdf.shape)
        az, el = pixel_center_angles(i, j, pdf.shape[0], pdf.shape[1])
        caption += (f"; this map peaks at {num(hi, 3)} /sr ({num(hi / uniform, 3)}\u00d7 uniform) in the cell at "
                    f"azimuth {num(az, 4)}\u00b0, elevation {num(el, 3)}\u00b0. ")
    if rings:
        caption += "The emitters are ringed as on the thumbnail. "
    if positive.size < pdf.size:
        caption += "Grey cells have zero pdf (never sampled). "
    if positive.size and float(positive.min()) < lo:
        caption += f"The colour scale is cut {_MAX_DECADES:g} decades below the peak. "
    return data, caption


def clip_settings(rep: dict) -> tuple:
    """(clip level(s), relative tolerance) when the clipping check failed on clipped values, else (None, 0).

    A report of this version lists one level per clipped channel (``details["channels"]``, with
    the tolerance as ``band_width``): the levels come back as [R, G, B] with None where a channel
    is not clipped.  An older report's single plateau level applies to the largest channel.
    """
    c = _check(rep, "clipping") or {}
    details = c.get("details") or {}
    if c.get("severity") != "fail":
        return None, 0.0
    channels = details.get("channels")
    if isinstance(channels, list) and channels:
        levels = [None, None, None]
        for ch in channels:
            k = "RGB".find(str((ch or {}).get("channel", "")))
            level = finite((ch or {}).get("level"))
            if k >= 0 and level is not None:
                levels[k] = level
        tol = finite(details.get("band_width")) or 0.0
        return (levels if any(v is not None for v in levels) else None), tol
    level = finite((details.get("plateau") or {}).get("level"))
    if level is None:
        return None, 0.0
    try:
        tol = float(_profile(rep).section("clipping")["plateau_relative_tolerance"])
    except (KeyError, TypeError, ValueError, EnvsampleError):
        tol = 0.0
    return level, tol


def _levels_text(level) -> str:
    if np.ndim(level) == 0:
        return num(level, 4)
    return ", ".join(f"{ch} {num(v, 4)}" for ch, v in zip("RGB", level) if v is not None)


def overlay_png(raw: np.ndarray, rep: dict) -> tuple[bytes, str, list]:
    """The range overlay as PNG bytes, its caption and its legend (name, colour, pixel count)."""

    level, tol = clip_settings(rep)
    pic, counts = range_overlay(raw, clip_level=level, clip_tolerance=tol, over_level=HALF_FLOAT_MAX,
                                width=THUMB_WIDTH)
    caption = ("Range overlay: the map in grey, with pixels that hide or lose light in false colour "
               "(a thumbnail pixel takes the worst class of the map pixels it covers). Clipped: at the plateau "
               "the clipping check failed on" + (f" (value {_levels_text(level)})" if level is not None else
                                                 "; none here") + "; over range: above the half-float maximum "
               f"{HALF_FLOAT_MAX:g} or infinite; invalid: NaN or negative.")
    legend = [(name, RANGE_COLORS[name], counts[name]) for name in ("clipped", "over range", "invalid")]
    return encode_png(pic), caption, legend


# --------------------------------------------------------------------------- one map


def _check_rows(rep: dict) -> list[dict]:
    rows = []
    for c in rep.get("checks", []):
        unit, factor = _UNITS.get(c.get("id"), (c.get("unit", ""), 1.0))
        if "unit" in c:  # qa-report v3: values are stored in their unit (percent already), not scaled again
            factor = 1.0
        if c.get("id") == "light-level" and ((c.get("details") or {}).get("unit") == "lx"):
            unit = "lx"
        sev = c.get("severity", "error")
        rows.append({"severity": sev if sev in VERDICTS else "error", "id": c.get("id", ""),
                     "value": num(_scaled(c.get("value"), factor)), "threshold": num(_scaled(c.get("threshold"), factor)),
                     "unit": unit, "message": c.get("message", ""), "remedy": c.get("remedy", "") or ""})
    return rows


def _counts_text(rep: dict) -> str:
    parts = []
    for sev, word in (("fail", "failed"), ("warn", "warned"), ("pass", "passed")):
        ids = [c["id"] for c in rep.get("checks", []) if c.get("severity") == sev]
        if ids:
            parts.append(f"{len(ids)} {word}" + (": " + ", ".join(ids) if sev != "pass" else ""))
    return "; ".join(parts) or "no checks ran"


def _figure_items(rep: dict) -> list[tuple[str, str]]:
    row = report_row(rep)
    items = []
    if row.get("width"):
        fmt = " ".join(str(x) for x in (row.get("format"), row.get("pixel_type")) if x)
        items.append(("size (px)", f"{row['width']}\u00d7{row['height']} {fmt}"))
    items.append(("dynamic range (stops)", num(row.get("dynamic_range"), 3)))
    if row.get("sun_elevation_deg") is not None:
        items.append(("sun azimuth / elevation (deg)",
                      f"{num(row.get('sun_azimuth_deg'), 4)} / {num(row.get('sun_elevation_deg'), 3)}"))
        items.append(("sun share of the light (%)", num(100.0 * row["sun_share"], 3)
                      if row.get("sun_share") is not None else "\u2014"))
    else:
        items.append(("sun", "none detected"))
    items.append(("peak sample share (largest sample / mean E)", num(row.get("peak_sample_share"), 3)))
    items.append(("sampling relative RMSE", num(row.get("sampling_relative_rmse"), 3)))
    ll = _check(rep, "light-level")
    unit = "lx" if ll and (ll.get("details") or {}).get("unit") == "lx" else "map units \u00d7 sr"
    items.append((f"irradiance, up-facing ({unit}; estimate)", num(row.get("irradiance_up"), 4)))
    return items


def _emitter_items(emitters: list[dict]) -> list[dict]:
    items = []
    for e in emitters:
        size = f"{num(finite(e.get('diameter_deg')), 3)}\u00b0 across"
        if e.get("resolved") is False:
            size += " (unresolved: smaller than the pixels)"
        items.append({"sun_like": bool(e.get("sun_like")), "azimuth": num(finite(e.get("azimuth_deg")), 4),
                      "elevation": num(finite(e.get("elevation_deg")), 3),
                      "share": num(100.0 * (finite(e.get("share")) or 0.0), 3), "size": size})
    return items


def _pictures(rep: dict, image, name: str) -> dict:
    raw, rgb, note = _pixels(rep, image)
    if rgb is None:
        return {"no_pictures": note}
    emitters = _emitters(rep)
    out = {"no_pictures": None, "emitters": _emitter_items(emitters),
           "thumb": picture(thumbnail_png(rgb, emitters), f"tone-mapped thumbnail of {name}"),
           "thumb_caption": ("Tone-mapped (auto exposure, compressed highlights); azimuth \u2212180\u00b0 at the "
                             "left edge, +180\u00b0 at the right, zenith at the top. ") + (note + " " if note else "")}
    try:
        data, caption = pdf_png(rgb, _profile(rep).primaries, emitters)
        out["pdf"] = {"pic": picture(data, f"sampling pdf heat map of {name}"), "caption": caption}
    except (EnvsampleError, ValueError) as e:
        out["pdf"] = {"pic": None, "missing": f"no pdf map: {e}", "caption": None}
    data, caption, legend = overlay_png(raw, rep)
    out.update(overlay=picture(data, f"range overlay of {name}"), overlay_caption=caption, overlay_legend=legend)
    return out


def map_context(rep: dict, k: int, image, verify: dict | None) -> dict:
    """Everything ``map_section.html`` shows for one report (``verify``: a verify-section context or None)."""
    name = map_name(rep, k)
    src = rep.get("source") or {}
    meta = [src.get("path") or "checked in memory"]
    if src.get("size") is not None:
        meta.append(f"{src['size']} bytes")
    if src.get("sha256"):
        meta.append(f"sha256 {src['sha256'][:16]}\u2026")
    meta.append(f"profile {(rep.get('profile') or {}).get('name', 'default')}")
    attention = [r for sev in ("fail", "warn") for r in _check_rows(rep) if r["severity"] == sev]
    skipped = rep.get("skipped") or []
    ctx = {"number": k + 1, "name": name, "verdict": verdict_of(rep), "meta": meta,
           "counts_text": _counts_text(rep), "attention": attention,
           "figures": _figure_items(rep) if rep.get("image") else [], "checks": _check_rows(rep),
           "skipped": "; ".join(f"{s.get('id')} ({s.get('reason')})" for s in skipped), "verify": verify}
    ctx.update(_pictures(rep, image, name))
    return ctx
