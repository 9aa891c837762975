"""Self-contained HTML reports: one page for the checks of one or many maps, and a batch index page.

Public objects
--------------
- :func:`check_page`: one page for one map or a batch of maps.  Per map: a summary
  line, the findings that need attention, key figures, a tone-mapped thumbnail
  with the detected emitters ringed, the sampling pdf of a reduced table as a
  log-scale heat map with a labelled colour bar, the pictures and metrics of a
  verify output folder (optional), and the table of every check.
- :func:`index_page`: a batch index, one row per map (thumbnail, name, verdict,
  key figures, relative links to the map's own page and outputs).  The row keys
  are listed in :data:`INDEX_ROW_KEYS`.
- :func:`report_row`: an :func:`index_page` row built from a QA report.
- :data:`THUMB_WIDTH`, :data:`PDF_TABLE_SIZE`, :data:`INDEX_ROW_KEYS`, :data:`CAUTION`.

Pages are self-contained: pictures are PNG ``data:`` URIs (RFC 2397, base64 of
RFC 4648), the style sheet is inline, there is no script and no external resource,
so one file can be mailed, archived or opened offline.  Every text that comes
from a file name, a message or a profile is escaped with :func:`html.escape`.
Pages are written atomically (a temporary file in the same folder, then
:func:`os.replace`), so a reader never sees half a page.

Design
------
Our own plain design: black text on white, one accent colour per severity, and
severity always shown by its **word and a shape** (pass: hollow circle, warn:
solid triangle, fail: solid square, error: hollow diamond), so a page printed
in greyscale or read by someone who does not tell red from green loses nothing
(WCAG 2.1, success criterion 1.4.1 "Use of Color": colour is not the only
visual means of conveying information).  Every page starts with a one-line
summary (verdict and counts); table headers carry their units.  Photometric
values are estimates for asset preparation, not certified lighting
calculations: every page says so.

Conventions
-----------
Emitter directions come from the ``sun`` check of :mod:`envsample.qa`: azimuth
and elevation in degrees in the map's own image frame (:mod:`envsample.sphere`
with rotation 0: azimuth 0 at the image centre, positive to the right,
elevation 90 deg at row 0).  They are turned into image coordinates ``(u, v)``
through :func:`envsample.sphere.uv_to_direction` / :func:`~envsample.sphere.direction_to_uv`.
The pdf map is :attr:`envsample.table.EnvTable.cell_pdf` (per steradian) of a
table of at most :data:`PDF_TABLE_SIZE` cells (area-weighted reduction, power preserved).

References
----------
- WHATWG. HTML Living Standard (the document syntax; ``html.parser`` reads it in the tests).
- Masinter, L. (1998). RFC 2397: The "data" URL scheme. IETF.
- Josefsson, S. (2006). RFC 4648: The Base16, Base32, and Base64 Data Encodings. IETF.
- ISO/IEC 15948:2004. Portable Network Graphics (PNG) specification (signature and IHDR chunk).
- W3C (2018). Web Content Accessibility Guidelines (WCAG) 2.1, success criterion 1.4.1, Use of Color.
"""

from __future__ import annotations

import html
import json
import math
import os
import struct
import tempfile
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path
from urllib.parse import quote, urlsplit

import numpy as np

from envsample.core.files import atomic_write_bytes
from envsample.core.text import caution, number
from envsample.errors import EnvsampleError, MapValidationError
from envsample.qa.results import SEVERITIES, Report

__all__ = [
    "THUMB_WIDTH",
    "PDF_TABLE_SIZE",
    "INDEX_ROW_KEYS",
    "CAUTION",
    "check_page",
    "index_page",
    "report_row",
]

#: Width in pixels of the thumbnails of :func:`check_page` (small maps are enlarged by pixel repetition).
THUMB_WIDTH = 512
#: Largest (width, height) of the table whose pdf is drawn; smaller maps keep their own size.
PDF_TABLE_SIZE = (256, 128)
#: Said on every page, beside the key figures and in the footer.
CAUTION = caution("Photometric values (irradiance, lux)") + "."

#: Keys of one :func:`index_page` row; every key is optional except a name ("name" or "source").
INDEX_ROW_KEYS = {
    "name": "str: shown in the Map column (default: the file name of 'source')",
    "source": "str: the source path, shown small under the name",
    "verdict": "str: 'pass', 'warn', 'fail' or 'error' (default 'error')",
    "status": "str: 'done', 'skipped' (shown as 'up to date') or 'error'",
    "thumbnail": "PNG file (path relative to the page's folder, or absolute) or a uint8 (h, w, 3) array",
    "page": "str: relative link to the map's own page (the name links there)",
    "links": "mapping label -> relative path: further outputs (report JSON, table, verify folder)",
    "width": "int: map width, px",
    "height": "int: map height, px",
    "format": "str: file format (exr, hdr, ...)",
    "pixel_type": "str: half, float, rgbe, ...",
    "dynamic_range": "float: stops between the dynamic-range check's percentiles",
    "sun_azimuth_deg": "float: azimuth of the sun-like emitter, deg",
    "sun_elevation_deg": "float: elevation of the sun-like emitter, deg",
    "sun_share": "float: the sun's share of the light (fraction, shown in %)",
    "peak_sample_share": "float: sampling check, graded estimator: largest single-sample term / mean irradiance",
    "sampling_relative_rmse": "float: relative RMSE of the graded estimator in the sampling check",
    "irradiance_up": "float: irradiance on an up-facing surface, map units x sr (lx when calibrated)",
    "failed_checks": "list of str: ids of failed checks",
    "warned_checks": "list of str: ids of checks that warned",
    "error": "str: why the map could not be processed",
    "note": "str: any other remark, shown with the problems",
}

_VERDICTS = SEVERITIES + ("error",)
_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948, section 5.2
_WORDS = {"pass": "PASS", "warn": "WARN", "fail": "FAIL", "error": "ERROR"}
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
_SUN_RING = {"color": (255, 60, 170), "thickness": 3.0}
_OTHER_RING = {"color": (0, 215, 255), "thickness": 1.5}
_MAX_DECADES = 6.0  # the pdf colour scale spans at most this many decades below its peak
_DOT = " \u00b7 "
# The pdf map uses another perceptually uniform map than verify's error maps (magma), so the
# two quantities are not mistaken for each other (Smith & van der Walt 2015, via envsample.pictures).
_PDF_CMAP = "viridis"

# ---------------------------------------------------------------------------
# style (our own; no external fonts or images)
# ---------------------------------------------------------------------------

_STYLE = """
:root { --ink: #1d2126; --muted: #5c6670; --rule: #d9dde2; --panel: #f6f7f9;
  --pass: #1d7a4e; --pass-bg: #e4f3ea; --warn: #9c5a00; --warn-bg: #fcf0d8;
  --fail: #b3202c; --fail-bg: #fbe3e4; --error: #5a4a8c; --error-bg: #ece7f6; }
* { box-sizing: border-box; }
body { margin: 0; padding: 24px 32px 40px; color: var(--ink); background: #fff;
  font: 15px/1.45 "DejaVu Sans", "Liberation Sans", Arial, Helvetica, sans-serif; }
h1 { font-size: 22px; margin: 0 0 10px; font-weight: 700; }
h2 { font-size: 19px; margin: 0 0 4px; display: flex; align-items: center; gap: 10px; flex-wrap: wrap; }
h3 { font-size: 15px; margin: 18px 0 6px; text-transform: uppercase; letter-spacing: 0.04em; color: var(--muted); }
p { margin: 4px 0; }
.muted, .meta { color: var(--muted); font-size: 13px; }
code, .id { font-family: "DejaVu Sans Mono", "Liberation Mono", Consolas, monospace; font-size: 13px; }
.summary { display: flex; align-items: center; gap: 14px; flex-wrap: wrap; padding: 12px 16px; margin: 6px 0 10px;
  border: 1px solid var(--rule); border-left: 8px solid var(--muted); background: var(--panel); font-size: 16px; }
.summary .big { font-size: 22px; font-weight: 700; letter-spacing: 0.03em; }
.summary.v-pass { border-left-color: var(--pass); } .summary.v-warn { border-left-color: var(--warn); }
.summary.v-fail { border-left-color: var(--fail); } .summary.v-error { border-left-color: var(--error); }
.caution { font-size: 13px; padding: 6px 10px; border: 1px dashed #9aa3ad; background: #fff; display: inline-block; }
.sev { display: inline-flex; align-items: center; gap: 6px; font-weight: 700; white-space: nowrap; letter-spacing: 0.03em; }
.shape { display: inline-block; width: 0.9em; height: 0.9em; flex: none; }
.s-pass .shape { border: 0.17em solid var(--pass); border-radius: 50%; }
.s-warn .shape { background: var(--warn); clip-path: polygon(50% 0, 100% 100%, 0 100%); width: 1.05em; }
.s-fail .shape { background: var(--fail); }
.s-error .shape { border: 0.16em solid var(--error); transform: rotate(45deg) scale(0.8); }
.s-pass { color: var(--pass); } .s-warn { color: var(--warn); } .s-fail { color: var(--fail); } .s-error { color: var(--error); }
.key { font-size: 13px; color: var(--muted); display: flex; gap: 18px; flex-wrap: wrap; align-items: center; margin: 6px 0; }
nav.maps { margin: 10px 0 4px; } nav.maps ol { margin: 4px 0; padding-left: 22px; } nav.maps ol.cols { columns: 2; }
nav.maps a { color: var(--ink); }
section.map { border-top: 3px solid var(--ink); margin-top: 28px; padding-top: 14px; }
ul.attention { list-style: none; margin: 8px 0; padding: 0; }
ul.attention li { padding: 6px 10px; margin: 4px 0; border-left: 5px solid var(--rule); }
ul.attention li.r-fail { border-left-color: var(--fail); background: var(--fail-bg); }
ul.attention li.r-warn { border-left-color: var(--warn); background: var(--warn-bg); }
ul.attention .remedy { display: block; font-size: 13px; }
dl.figures { display: grid; grid-template-columns: repeat(auto-fill, minmax(160px, 1fr)); gap: 8px; margin: 10px 0; }
dl.figures div { border: 1px solid var(--rule); padding: 6px 10px; background: var(--panel); }
dl.figures dt { font-size: 12px; color: var(--muted); } dl.figures dd { margin: 0; font-size: 16px; font-weight: 600; }
.pictures { display: grid; grid-template-columns: repeat(auto-fit, minmax(420px, 1fr)); gap: 16px; align-items: start; }
figure { margin: 0; } figure img { max-width: 100%; height: auto; display: block; border: 1px solid var(--rule); }
figure.wide { margin: 8px 0 14px; } figure.wide img { width: 100%; }
figcaption { font-size: 13px; color: var(--muted); margin-top: 4px; }
figcaption ol { margin: 2px 0 0; padding-left: 20px; color: var(--ink); }
.ring { display: inline-block; width: 0.95em; height: 0.95em; border-radius: 50%; vertical-align: -0.12em; }
.ring.sun { border: 0.2em solid rgb(255, 60, 170); box-shadow: 0 0 0 1px #000; }
.ring.other { border: 0.09em solid rgb(0, 170, 215); box-shadow: 0 0 0 1px #000; }
.nopic { padding: 28px; text-align: center; background: var(--panel); border: 1px dashed var(--rule); color: var(--muted); }
table { border-collapse: collapse; width: 100%; font-size: 14px; }
th, td { text-align: left; vertical-align: top; padding: 5px 8px; border-bottom: 1px solid var(--rule); }
th { background: var(--panel); font-size: 12px; font-weight: 700; color: #39414a; border-bottom: 2px solid #aab2ba; }
th small { font-weight: 400; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.r-fail td { background: var(--fail-bg); } tr.r-warn td { background: var(--warn-bg); }
tr.r-fail td:first-child { box-shadow: inset 5px 0 0 var(--fail); }
tr.r-warn td:first-child { box-shadow: inset 5px 0 0 var(--warn); }
tr.r-error td:first-child { box-shadow: inset 5px 0 0 var(--error); }
td.msg { min-width: 16em; } td.remedy { min-width: 12em; font-size: 13px; }
table.index img { display: block; width: 160px; height: auto; border: 1px solid var(--rule); }
table.index .nothumb { width: 160px; padding: 22px 0; }
footer { margin-top: 32px; padding-top: 10px; border-top: 1px solid var(--rule); font-size: 12px; color: var(--muted); }
@media print { body { padding: 0; } section.map { break-before: page; } }
"""


# ---------------------------------------------------------------------------
# small helpers
# ---------------------------------------------------------------------------

def _esc(x) -> str:
    return html.escape(str(x), quote=True)


def _mark(severity: str) -> str:
    """The severity as word and shape (never by colour alone)."""
    sev = severity if severity in _VERDICTS else "error"
    return (f'<span class="sev s-{sev}"><span class="shape" aria-hidden="true"></span>'
            f"{_WORDS[sev]}</span>")


def _num(x, digits: int = 4) -> str:
    """A number for people: ``digits`` significant digits, scientific notation only far from 1."""
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
        return ", ".join(_num(v, digits) for v in x)
    return str(x)


def _scaled(x, factor: float):
    if factor == 1.0:
        return x
    if isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool):
        return float(x) * factor
    if isinstance(x, (list, tuple)):
        return [_scaled(v, factor) for v in x]
    return x


def _maps(n: int) -> str:
    return f"{n} map" if n == 1 else f"{n} maps"


def _png_size(data: bytes) -> tuple[int, int]:
    """(width, height) from the IHDR chunk (ISO/IEC 15948, 11.2.2), the first chunk of every PNG."""
    if not data.startswith(_PNG_SIGNATURE) or data[12:16] != b"IHDR":
        raise ValueError("not a PNG stream (bad signature or no IHDR chunk)")
    return struct.unpack(">II", data[16:24])


def _img(data: bytes, alt: str, cls: str | None = None) -> str:
    """An <img> holding ``data`` (PNG bytes) as a data URI, with its pixel size as attributes."""
    import base64

    w, h = _png_size(data)
    uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
    c = f' class="{cls}"' if cls else ""
    return f'<img{c} src="{uri}" width="{w}" height="{h}" alt="{_esc(alt)}">'


def _write_atomic(path, text: str) -> Path:
    """Write UTF-8 text atomically (temporary file in the same folder, then :func:`os.replace`)."""
    path = Path(path)
    _check_folder(path)
    return atomic_write_bytes(path, text.encode("utf-8"))


def _check_folder(path) -> None:
    path = Path(path)
    if not path.parent.is_dir():
        raise EnvsampleError(f"{path}: output folder {path.parent} does not exist; create it first")


def _document(title: str, body: str) -> str:
    from envsample._version import __version__

    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<title>{_esc(title)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n{body}\n"
        f"<footer>Made by envsample {_esc(__version__)}. {_esc(CAUTION)} "
        "Self-contained page: pictures are embedded, nothing is loaded from elsewhere.</footer>\n"
        "</body>\n</html>\n"
    )


def _severity_key(*, with_error: bool = False) -> str:
    meaning = [("pass", "nothing to do"), ("warn", "look at it"), ("fail", "fix before use")]
    if with_error:
        meaning.append(("error", "could not be processed"))
    items = "".join(f"<span>{_mark(s)} {w}</span>" for s, w in meaning)
    return f'<p class="key">{items}</p>'


# ---------------------------------------------------------------------------
# reports, pixels and figures of one map
# ---------------------------------------------------------------------------

def _as_report_dict(report, k: int) -> dict:
    if isinstance(report, Report):
        return report.to_dict()
    if isinstance(report, Mapping) and isinstance(report.get("checks"), list):
        return dict(report)
    raise TypeError(f"reports[{k}] must be an envsample.qa.Report or its to_dict() form, "
                    f"got {type(report).__name__}")


def _check(rep: dict, check_id: str) -> dict | None:
    for c in rep.get("checks", []):
        if c.get("id") == check_id:
            return c
    return None


def _map_name(rep: dict, k: int) -> str:
    path = (rep.get("source") or {}).get("path")
    return Path(path).name if path else f"map {k + 1} (in memory)"


def _emitters(rep: dict) -> list[dict]:
    sun = _check(rep, "sun")
    return list(((sun or {}).get("details") or {}).get("emitters") or [])


def _number(x) -> float | None:
    if isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool):
        x = float(x)
        return x if math.isfinite(x) else None
    return None


def _pixels(rep: dict, image):
    """Linear RGB float32 of the map (bad pixels zeroed) and a note; (None, why) when there are none."""
    from envsample.io.maps import map_pixels, read_map

    if image is None:
        if not rep.get("readable", True):
            return None, "the file could not be read"
        path = (rep.get("source") or {}).get("path")
        if not path:
            return None, "no pixels: the map was checked in memory (pass it in images=)"
        try:
            image = read_map(path)
        except EnvsampleError as e:
            return None, f"the file could not be read again: {e}"
    if isinstance(image, (str, os.PathLike)):
        try:
            image = read_map(image)
        except EnvsampleError as e:
            return None, f"the file could not be read: {e}"
    try:
        rgb = map_pixels(image)
    except MapValidationError:
        return None, f"no picture: pixels of shape {np.shape(getattr(image, 'rgb', image))} are not (H, W, 3)"
    bad = ~np.isfinite(rgb)
    note = ""
    if bad.any() or (rgb < 0).any():
        # Pictures never fail on bad pixels: NaN/Inf and negatives are drawn as 0 (the checks report them).
        rgb = np.where(bad | (rgb < 0), np.float32(0.0), rgb)
        note = "NaN, infinite and negative pixels are drawn as 0."
    return rgb, note


def _primaries(profile: dict) -> str:
    """Luminance primaries of the report's profile (the defaults when it cannot be loaded again)."""
    from envsample.qa.profile import load_profile

    try:
        return load_profile(profile.get("path")).primaries
    except (EnvsampleError, ValueError, OSError):
        return load_profile(None).primaries


def _emitter_uv(emitters: list[dict]) -> np.ndarray:
    """Image (u, v) of emitters given by azimuth/elevation (deg) in the map's own frame (rotation 0)."""
    from envsample.core.sphere import direction_to_uv, uv_to_direction

    if not emitters:
        return np.zeros((0, 2))
    az = np.array([float(e["azimuth_deg"]) for e in emitters])
    el = np.array([float(e["elevation_deg"]) for e in emitters])
    # phi = 2 pi (u - 1/2) and theta = pi v = 90 deg - elevation (envsample.sphere); the round
    # trip through a direction wraps the azimuth into u in [0, 1) and keeps v in [0, 1].
    d = uv_to_direction(az / 360.0 + 0.5, (90.0 - el) / 180.0)
    u, v = direction_to_uv(d)
    return np.stack([u, v], axis=1)


def _thumbnail_png(rgb: np.ndarray, emitters: list[dict]) -> bytes:
    from envsample.reports.pictures import encode_png, mark_points, thumbnail

    pic = thumbnail(rgb, width=THUMB_WIDTH)
    # Small maps are enlarged by pixel repetition so rings keep their size and pixels stay honest.
    rep = max(1, THUMB_WIDTH // pic.shape[1])
    if rep > 1:
        pic = np.repeat(np.repeat(pic, rep, axis=0), rep, axis=1)
    uv = _emitter_uv(emitters)
    radius = max(7.0, pic.shape[1] / 60.0)
    sun = np.array([bool(e.get("sun_like")) for e in emitters], dtype=bool)
    if (~sun).any():
        pic = mark_points(pic, uv[~sun], radius=radius * 1.3, **_OTHER_RING)
    if sun.any():
        pic = mark_points(pic, uv[sun], radius=radius, **_SUN_RING)
    return encode_png(pic)


def _pdf_png(rgb: np.ndarray, primaries: str) -> tuple[bytes, str]:
    """The table pdf (per sr) as a log-scale heat map PNG, and a caption."""
    from envsample.errors import EnvsampleWarning
    from envsample.reports.pictures import heatmap_figure
    from envsample.sampling.table import build_table

    H, W = rgb.shape[:2]
    size = (min(PDF_TABLE_SIZE[0], W), min(PDF_TABLE_SIZE[1], H))
    with warnings.catch_warnings():
        # A black map gives a uniform table with a warning; the caption says it instead.
        warnings.simplefilter("ignore", EnvsampleWarning)
        table = build_table(rgb, size=size, primaries=primaries, allow_aspect=True)
    pdf = np.asarray(table.cell_pdf, dtype=np.float64)
    positive = pdf[pdf > 0]
    hi = float(positive.max()) if positive.size else 1.0 / (4.0 * math.pi)
    lo = float(positive.min()) if positive.size else hi
    lo = max(lo, hi * 10.0 ** -_MAX_DECADES)
    with tempfile.TemporaryDirectory(prefix="envsample-html-") as tmp:
        out = heatmap_figure([(f"sampling pdf of a {size[0]}\u00d7{size[1]} table", pdf)],
                             path=Path(tmp) / "pdf.png", label="pdf p(\u03c9) (1/sr), log scale",
                             vmin=lo, vmax=hi if hi > lo else None, log=True, latlong=True,
                             cmap=_PDF_CMAP)
        data = out.read_bytes()
    uniform = 1.0 / (4.0 * math.pi)
    caption = ("Where the table sends samples: density per steradian (proportional to luminance). "
               f"Uniform sampling of the sphere would be 1/4\u03c0 = {uniform:.4f} /sr everywhere")
    if not np.any(rgb > 0):
        caption += "; the map is black, so the table samples the sphere uniformly. "
    elif hi <= 1.01 * float(np.median(positive)):
        caption += f"; this map is nearly flat (peak {_num(hi, 3)} /sr). "
    else:
        # Cell centres in the image frame of envsample.sphere (rotation 0), as the checks report them.
        from envsample.core.sphere import pixel_center_angles

        i, j = np.unravel_index(int(np.argmax(pdf)), pdf.shape)
        az, el = pixel_center_angles(i, j, pdf.shape[0], pdf.shape[1])
        caption += (f"; this map peaks at {_num(hi, 3)} /sr ({_num(hi / uniform, 3)}\u00d7 uniform) in the cell at "
                    f"azimuth {_num(az, 4)}\u00b0, elevation {_num(el, 3)}\u00b0. ")
    if positive.size < pdf.size:
        caption += "Grey cells have zero pdf (never sampled). "
    if positive.size and float(positive.min()) < lo:
        caption += f"The colour scale is cut {_MAX_DECADES:g} decades below the peak. "
    return data, caption


def _emitter_caption(emitters: list[dict]) -> str:
    if not emitters:
        return "No compact emitter stands out (diffuse light): nothing is ringed."
    items = []
    for e in emitters:
        kind = ('<span class="ring sun"></span> sun-like' if e.get("sun_like")
                else '<span class="ring other"></span> bright region')
        size = f"{_num(_number(e.get('diameter_deg')), 3)}\u00b0 across"
        if e.get("resolved") is False:
            size += " (unresolved: smaller than the pixels)"
        items.append(f"<li>{kind}: azimuth {_num(_number(e.get('azimuth_deg')), 4)}\u00b0, elevation "
                     f"{_num(_number(e.get('elevation_deg')), 3)}\u00b0, "
                     f"{_num(100.0 * (_number(e.get('share')) or 0.0), 3)}% of the light, {_esc(size)}</li>")
    return "Detected emitters (thick ring: sun-like, thin ring: other bright region):<ol>" + "".join(items) + "</ol>"


# ---------------------------------------------------------------------------
# verify folders
# ---------------------------------------------------------------------------

def _verify_pictures(folder: Path, metrics: dict | None) -> tuple[list, list]:
    """(file name, caption) of the PNGs of a verify folder: the wide error maps, then the other pictures."""
    files = (metrics or {}).get("files") or {}
    errors = files.get("errors")
    if not (isinstance(errors, list) and errors):
        errors = [p.name for p in sorted(folder.glob("errors_*.png"))]
    wide = [(str(n), "relative irradiance error per normal for each estimator; all pictures share one colour scale")
            for n in errors]
    other = []
    conv = files.get("convergence") or ("convergence.png" if (folder / "convergence.png").is_file() else None)
    if conv:
        other.append((str(conv), "relative RMSE against samples per normal (log-log)"))
    sphere = files.get("sphere") or ("sphere.png" if (folder / "sphere.png").is_file() else None)
    if sphere:
        other.append((str(sphere), "reference and recommended estimate shaded on a white sphere"))
    return wide, other


def _verify_figure(folder: Path, name: str, caption: str, k: int, cls: str | None) -> str:
    p = folder / Path(name).name  # never leave the folder, whatever metrics.json says
    c = f' class="{cls}"' if cls else ""
    try:
        data = p.read_bytes()
        _png_size(data)
    except (OSError, ValueError):
        return f'<figure{c}><div class="nopic">{_esc(p.name)} is missing or not a PNG</div></figure>'
    return (f"<figure{c}>{_img(data, f'{p.name} of map {k + 1}')}"
            f"<figcaption>{_esc(p.name)}: {_esc(caption)}.</figcaption></figure>")


def _verify_section(folder, k: int) -> str:
    folder = Path(folder)
    if not folder.is_dir():
        raise EnvsampleError(f"{folder}: verify folder does not exist; run 'envsample verify' into it or leave it out")
    metrics = None
    mpath = folder / "metrics.json"
    if mpath.is_file():
        try:
            metrics = json.loads(mpath.read_text(encoding="utf-8"))
        except (OSError, ValueError) as e:
            raise EnvsampleError(f"{mpath}: not readable JSON ({e}); rerun the verification") from None
    parts = [f"<h3>Validation render</h3><p class=\"meta\">from {_esc(folder)}</p>"]
    if metrics:
        parts.append(_verify_table(metrics))
    wide, other = _verify_pictures(folder, metrics)
    parts += [_verify_figure(folder, n, cap, k, "wide") for n, cap in wide]
    if other:
        parts.append('<div class="pictures">' + "".join(_verify_figure(folder, n, cap, k, None) for n, cap in other)
                     + "</div>")
    if not wide and not other:
        parts.append('<div class="nopic">this verify folder holds no pictures</div>')
    return "\n".join(parts)


def _verify_table(metrics: dict) -> str:
    entries = metrics.get("estimators") or {}
    if not isinstance(entries, Mapping) or not entries:
        return ""
    best = (metrics.get("recommended") or {}).get("estimator")
    spp = metrics.get("spp")
    n = (metrics.get("normals") or {}).get("count")
    rows = []
    for name, e in entries.items():
        e = e if isinstance(e, Mapping) else {}
        tag = " <b>(recommended)</b>" if name == best else ""
        rows.append(
            f"<tr><td class=\"id\">{_esc(name)}{tag}</td>"
            f"<td class=\"num\">{_num(_number(e.get('relative_rmse')))}</td>"
            f"<td class=\"num\">{_num(_number(e.get('mean_bias')))}</td>"
            f"<td class=\"num\">{_num(_number(e.get('firefly_index')))}</td>"
            f"<td class=\"num\">{_num(_number(e.get('efficiency')))}</td></tr>")
    head = ("<tr><th>estimator</th><th>relative RMSE <small>(of mean E)</small></th>"
            "<th>mean bias <small>(of mean E)</small></th><th>firefly index <small>(max / mean sample)</small></th>"
            "<th>efficiency <small>(1/s)</small></th></tr>")
    meta = f"{_esc(_num(spp))} samples per normal, {_esc(_num(n))} normals; errors on luminance."
    return f"<p class=\"meta\">{meta}</p><table>{head}{''.join(rows)}</table>"


# ---------------------------------------------------------------------------
# one map
# ---------------------------------------------------------------------------

def _value_cells(c: dict) -> tuple[str, str, str]:
    unit, factor = _UNITS.get(c.get("id"), (c.get("unit", ""), 1.0))
    if "unit" in c:  # qa-report v3: values are stored in their unit (percent already), not scaled again
        factor = 1.0
    if c.get("id") == "light-level" and ((c.get("details") or {}).get("unit") == "lx"):
        unit = "lx"
    return (_esc(_num(_scaled(c.get("value"), factor))), _esc(_num(_scaled(c.get("threshold"), factor))),
            _esc(unit))


def _check_table(rep: dict) -> str:
    head = ("<tr><th>result</th><th>check id</th><th>measured</th><th>threshold</th><th>unit</th>"
            "<th>finding</th><th>remedy</th></tr>")
    rows = []
    for c in rep.get("checks", []):
        sev = c.get("severity", "error")
        value, limit, unit = _value_cells(c)
        rows.append(f'<tr class="r-{_esc(sev)}"><td>{_mark(sev)}</td><td class="id">{_esc(c.get("id", ""))}</td>'
                    f'<td class="num">{value}</td><td class="num">{limit}</td><td>{unit}</td>'
                    f'<td class="msg">{_esc(c.get("message", ""))}</td>'
                    f'<td class="remedy">{_esc(c.get("remedy", "") or "")}</td></tr>')
    table = f"<table class=\"checks\"><thead>{head}</thead><tbody>{''.join(rows)}</tbody></table>"
    skipped = rep.get("skipped") or []
    if skipped:
        listed = "; ".join(f"{s.get('id')} ({s.get('reason')})" for s in skipped)
        table += f"<p class=\"meta\">Not run: {_esc(listed)}</p>"
    return table


def _counts_text(rep: dict) -> str:
    parts = []
    for sev, word in (("fail", "failed"), ("warn", "warned"), ("pass", "passed")):
        ids = [c["id"] for c in rep.get("checks", []) if c.get("severity") == sev]
        if not ids:
            continue
        text = f"{len(ids)} {word}"
        if sev != "pass":
            text += ": " + ", ".join(ids)
        parts.append(text)
    return "; ".join(parts) or "no checks ran"


def _attention(rep: dict) -> str:
    items = []
    for sev in ("fail", "warn"):
        for c in rep.get("checks", []):
            if c.get("severity") != sev:
                continue
            remedy = c.get("remedy") or ""
            fix = f'<span class="remedy">Remedy: {_esc(remedy)}</span>' if remedy else ""
            items.append(f'<li class="r-{sev}">{_mark(sev)} <span class="id">{_esc(c.get("id"))}</span> '
                         f"\u2014 {_esc(c.get('message', ''))}{fix}</li>")
    if not items:
        return "<p>Every check passed.</p>"
    return "<h3>Needs attention</h3><ul class=\"attention\">" + "".join(items) + "</ul>"


def _figure_items(rep: dict) -> list[tuple[str, str]]:
    row = report_row(rep)
    items = []
    if row.get("width"):
        fmt = " ".join(str(x) for x in (row.get("format"), row.get("pixel_type")) if x)
        items.append(("size (px)", f"{row['width']}\u00d7{row['height']} {fmt}"))
    items.append(("dynamic range (stops)", _num(row.get("dynamic_range"), 3)))
    if row.get("sun_elevation_deg") is not None:
        items.append(("sun azimuth / elevation (deg)",
                      f"{_num(row.get('sun_azimuth_deg'), 4)} / {_num(row.get('sun_elevation_deg'), 3)}"))
        items.append(("sun share of the light (%)", _num(100.0 * row["sun_share"], 3)
                      if row.get("sun_share") is not None else "\u2014"))
    else:
        items.append(("sun", "none detected"))
    items.append(("peak sample share (largest sample / mean E)", _num(row.get("peak_sample_share"), 3)))
    items.append(("sampling relative RMSE", _num(row.get("sampling_relative_rmse"), 3)))
    ll = _check(rep, "light-level")
    unit = "lx" if ll and (ll.get("details") or {}).get("unit") == "lx" else "map units \u00d7 sr"
    items.append((f"irradiance, up-facing ({unit}; estimate)", _num(row.get("irradiance_up"), 4)))
    return items


def _map_section(rep: dict, k: int, image, verify_dir) -> str:
    name = _map_name(rep, k)
    verdict = rep.get("verdict", "error") if rep.get("readable", True) else "fail"
    src = rep.get("source") or {}
    img = rep.get("image") or {}
    meta = [src.get("path") or "checked in memory"]
    if src.get("size") is not None:
        meta.append(f"{src['size']} bytes")
    if src.get("sha256"):
        meta.append(f"sha256 {src['sha256'][:16]}\u2026")
    prof = rep.get("profile") or {}
    meta.append(f"profile {prof.get('name', 'default')}")
    figures = "".join(f"<div><dt>{_esc(t)}</dt><dd>{_esc(v)}</dd></div>" for t, v in _figure_items(rep)) if img else ""
    parts = [
        f'<section class="map" id="map-{k + 1}">',
        f"<h2>{_mark(verdict)} <span>{_esc(name)}</span></h2>",
        f"<p class=\"meta\">{_DOT.join(_esc(m) for m in meta)}</p>",
        f"<p><b>Checks:</b> {_esc(_counts_text(rep))}</p>",
        _attention(rep),
    ]
    if figures:
        parts.append(f"<h3>Key figures</h3><dl class=\"figures\">{figures}</dl>")
    rgb, note = _pixels(rep, image)
    parts.append("<h3>Pictures</h3>")
    if rgb is None:
        parts.append(f'<div class="nopic">{_esc(note)}</div>')
    else:
        emitters = _emitters(rep)
        primaries = _primaries(prof)
        thumb = _img(_thumbnail_png(rgb, emitters), f"tone-mapped thumbnail of {name}")
        cap = ("Tone-mapped (auto exposure, compressed highlights); azimuth \u2212180\u00b0 at the left edge, "
               "+180\u00b0 at the right, zenith at the top. ") + (note + " " if note else "")
        pics = [f"<figure>{thumb}<figcaption>{_esc(cap)}{_emitter_caption(emitters)}</figcaption></figure>"]
        try:
            data, pcap = _pdf_png(rgb, primaries)
            pics.append(f"<figure>{_img(data, f'sampling pdf heat map of {name}')}"
                        f"<figcaption>{_esc(pcap)}</figcaption></figure>")
        except (EnvsampleError, ValueError) as e:
            pics.append(f'<figure><div class="nopic">no pdf map: {_esc(e)}</div></figure>')
        parts.append(f"<div class=\"pictures\">{''.join(pics)}</div>")
    if verify_dir is not None:
        parts.append(_verify_section(verify_dir, k))
    parts.append("<h3>All checks</h3>")
    parts.append(_check_table(rep))
    parts.append("</section>")
    return "\n".join(parts)


def _per_map(option, n: int, what: str) -> list:
    if option is None:
        return [None] * n
    if isinstance(option, (str, os.PathLike)) or isinstance(option, np.ndarray):
        if n != 1:
            raise ValueError(f"{what}: give a list with one entry per report ({n}), not a single value")
        return [option]
    items = list(option)
    if len(items) != n:
        raise ValueError(f"{what} has {len(items)} entries for {n} reports; give one per report (None to skip)")
    return items


def check_page(reports, path, *, verify_dirs=None, title: str | None = None, images=None) -> Path:
    """Write one self-contained HTML page for the QA reports of one map or a batch; returns the path.

    Parameters
    ----------
    reports : Report, dict, or a sequence of them
        :class:`envsample.qa.Report` objects (or their ``to_dict()`` form, e.g. a
        ``check.json`` read back), in page order.
    path : str or PathLike
        The page; its folder must exist.  Written atomically (temporary file + :func:`os.replace`).
    verify_dirs : path or sequence of (path or None), optional
        Output folders of :func:`envsample.verify.verify_map`, one per report (a single
        path for a single report).  Their error heat maps, convergence plot and sphere
        picture are embedded, with the estimator table of ``metrics.json``.  A folder
        that does not exist raises :class:`~envsample.errors.EnvsampleError`.
    title : str, optional
        Page title; default "envsample check: NAME" or "envsample check: N maps".
    images : sequence of (MapImage, array (H, W, 3), path or None), optional
        The pixels of each map.  None (the default, and for any None entry): read the
        map again from the report's source path; a map checked in memory then shows
        its checks without pictures.

    Pictures: a tone-mapped thumbnail :data:`THUMB_WIDTH` px wide (maps narrower than
    that are enlarged by an integer pixel repetition) with the emitters of the ``sun``
    check ringed; the pdf (per steradian, log colour scale) of a table of at most
    :data:`PDF_TABLE_SIZE` cells.  NaN, infinite and negative pixels are drawn as 0.
    """
    if isinstance(reports, (Report, Mapping)):
        reports = [reports]
    reps = [_as_report_dict(r, k) for k, r in enumerate(reports)]
    if not reps:
        raise ValueError("check_page needs at least one report")
    dirs = _per_map(verify_dirs, len(reps), "verify_dirs")
    imgs = _per_map(images, len(reps), "images")
    # Refuse bad destinations before the (slow) pictures are drawn.
    _check_folder(path)
    for d in dirs:
        if d is not None and not Path(d).is_dir():
            raise EnvsampleError(f"{d}: verify folder does not exist; run 'envsample verify' into it or leave it out")
    names = [_map_name(r, k) for k, r in enumerate(reps)]
    if title is None:
        title = f"envsample check: {names[0]}" if len(reps) == 1 else f"envsample check: {_maps(len(reps))}"

    verdicts = [r.get("verdict", "error") if r.get("readable", True) else "fail" for r in reps]
    worst = max(verdicts, key=lambda v: _VERDICTS.index(v) if v in _VERDICTS else len(_VERDICTS))
    totals = {s: sum(c.get("severity") == s for r in reps for c in r.get("checks", [])) for s in SEVERITIES}
    checks_text = f"checks: {totals['fail']} failed, {totals['warn']} warned, {totals['pass']} passed"
    if len(reps) == 1:
        count_text = checks_text
    else:
        per = ", ".join(f"{sum(v == s for v in verdicts)} {s}" for s in SEVERITIES)
        count_text = f"{_maps(len(reps))}: {per} \u00b7 {checks_text}"
    head = [
        f"<h1>{_esc(title)}</h1>",
        f'<div class="summary v-{worst}"><span class="big">{_mark(worst)}</span>'
        f"<span>{_esc(count_text)}</span></div>",
        _severity_key(),
        f'<p class="caution">{_esc(CAUTION)}</p>',
    ]
    if len(reps) > 1:
        links = "".join(f'<li><a href="#map-{k + 1}">{_esc(n)}</a> {_mark(v)}</li>'
                        for k, (n, v) in enumerate(zip(names, verdicts)))
        cols = ' class="cols"' if len(reps) > 8 else ""  # a long list reads better in two columns
        head.append(f'<nav class="maps"><b>Maps</b><ol{cols}>{links}</ol></nav>')
    sections = [_map_section(r, k, imgs[k], dirs[k]) for k, r in enumerate(reps)]
    return _write_atomic(path, _document(title, "\n".join(head + sections)))


# ---------------------------------------------------------------------------
# batch index
# ---------------------------------------------------------------------------

def report_row(report, *, name: str | None = None, thumbnail=None, page: str | None = None,
               links: Mapping | None = None) -> dict:
    """An :func:`index_page` row (keys of :data:`INDEX_ROW_KEYS`) from a QA report or its dict form.

    The key figures come from the checks: ``dynamic_range`` (stops) from
    ``dynamic-range``; the first sun-like emitter of ``sun`` (azimuth and elevation in
    degrees, share as a fraction); ``peak_sample_share`` and ``sampling_relative_rmse`` of
    the graded estimator of ``sampling``; ``irradiance_up`` from ``light-level``.
    Missing checks give None.
    """
    rep = _as_report_dict(report, 0)
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
    row["dynamic_range"] = _number((dr or {}).get("value"))
    sun = [e for e in _emitters(rep) if e.get("sun_like")]
    row["sun_azimuth_deg"] = _number(sun[0].get("azimuth_deg")) if sun else None
    row["sun_elevation_deg"] = _number(sun[0].get("elevation_deg")) if sun else None
    row["sun_share"] = _number(sun[0].get("share")) if sun else None
    sampling = _check(rep, "sampling") or {}
    det = sampling.get("details") or {}
    graded = (det.get("estimators") or {}).get(det.get("estimator")) or {}
    row["peak_sample_share"] = _number(graded.get("peak_sample_share"))
    row["sampling_relative_rmse"] = _number(sampling.get("value"))
    ll = _check(rep, "light-level")
    row["irradiance_up"] = _number((ll or {}).get("value"))
    return row


def _relative_link(target, where: str) -> str:
    """A relative URL for ``target``; absolute paths and URLs with a scheme are refused."""
    t = os.fspath(target) if isinstance(target, os.PathLike) else str(target)
    parts = urlsplit(t.replace("\\", "/"))
    if parts.scheme or parts.netloc or t.startswith(("/", "\\")) or (len(t) > 1 and t[1] == ":"):
        raise ValueError(f"{where}: link {t!r} must be a path relative to the page's folder")
    return quote(t.replace("\\", "/"), safe="/#")


def _thumb_cell(thumb, base: Path, label: str) -> str:
    if thumb is None:
        return '<div class="nopic nothumb">no picture</div>'
    try:
        if isinstance(thumb, np.ndarray):
            from envsample.reports.pictures import encode_png

            data = encode_png(thumb)
        else:
            p = Path(thumb)
            data = (p if p.is_absolute() else base / p).read_bytes()
        _png_size(data)
    except (OSError, ValueError):
        return '<div class="nopic nothumb">picture missing</div>'
    return _img(data, f"thumbnail of {label}")


def _index_row(row: Mapping, k: int, base: Path) -> str:
    if not isinstance(row, Mapping):
        raise TypeError(f"rows[{k}] must be a mapping (see INDEX_ROW_KEYS), got {type(row).__name__}")
    src = row.get("source")
    name = row.get("name") or (Path(str(src)).name if src else None)
    if not name:
        raise ValueError(f"rows[{k}] has neither 'name' nor 'source'; give one of them")
    verdict = row.get("verdict") if row.get("verdict") in _VERDICTS else "error"
    label = _esc(name)
    if row.get("page"):
        label = f'<a href="{_esc(_relative_link(row["page"], f"rows[{k}] page"))}">{label}</a>'
    cell = [f"<b>{label}</b>"]
    if src and str(src) != name:
        cell.append(f'<br><span class="meta">{_esc(src)}</span>')
    if row.get("status") == "skipped":
        cell.append('<br><span class="meta">up to date, not redone</span>')
    links = row.get("links") or {}
    if links:
        ls = " \u00b7 ".join(f'<a href="{_esc(_relative_link(t, f"rows[{k}] links[{lab!r}]"))}">{_esc(lab)}</a>'
                             for lab, t in links.items())
        cell.append(f'<br><span class="meta">{ls}</span>')
    problems = []
    if row.get("error"):
        problems.append(f"{_esc(row['error'])}")
    if row.get("failed_checks"):
        problems.append(f"{_mark('fail')} {_esc(', '.join(map(str, row['failed_checks'])))}")
    if row.get("warned_checks"):
        problems.append(f"{_mark('warn')} {_esc(', '.join(map(str, row['warned_checks'])))}")
    if row.get("note"):
        problems.append(_esc(row["note"]))
    size = ""
    if row.get("width") and row.get("height"):
        size = f"{_esc(row['width'])}\u00d7{_esc(row['height'])}"
        extra = " ".join(_esc(x) for x in (row.get("format"), row.get("pixel_type")) if x)
        if extra:
            size += f'<br><span class="meta">{extra}</span>'
    share = _number(row.get("sun_share"))
    sun = ""
    if _number(row.get("sun_elevation_deg")) is not None:
        sun = _esc(_num(_number(row.get("sun_elevation_deg")), 3))
        if _number(row.get("sun_azimuth_deg")) is not None:
            sun += f'<br><span class="meta">az {_esc(_num(_number(row["sun_azimuth_deg"]), 4))}</span>'
    cells = [
        f"<td>{_thumb_cell(row.get('thumbnail'), base, str(name))}</td>",
        f"<td>{''.join(cell)}</td>",
        f"<td>{_mark(verdict)}</td>",
        f"<td>{'<br>'.join(problems)}</td>",
        f'<td class="num">{size}</td>',
        f'<td class="num">{_esc(_num(_number(row.get("dynamic_range")), 3))}</td>',
        f'<td class="num">{sun}</td>',
        f'<td class="num">{_esc(_num(100.0 * share, 3)) if share is not None else _num(None)}</td>',
        f'<td class="num">{_esc(_num(_number(row.get("peak_sample_share")), 3))}</td>',
        f'<td class="num">{_esc(_num(_number(row.get("irradiance_up")), 4))}</td>',
    ]
    return f'<tr class="r-{verdict}">' + "".join(cells) + "</tr>"


def index_page(rows: Sequence[Mapping], path, *, title: str | None = None) -> Path:
    """Write a batch index page, one row per map; returns the path.

    ``rows`` are mappings with the keys of :data:`INDEX_ROW_KEYS` (all optional but a
    name: ``name`` or ``source``); :func:`report_row` builds one from a QA report, and
    rows of :data:`envsample.batch.ROW_FIELDS` fit as they are.  Thumbnails are embedded
    as PNG data URIs (files are read relative to the page's folder); ``page`` and
    ``links`` must be paths relative to the page's folder (ValueError otherwise), so the
    index keeps working when the output folder is moved.  Written atomically.
    """
    rows = list(rows)
    path = Path(path)
    base = path.parent
    title = title or f"envsample batch: {_maps(len(rows))}"
    body_rows = [_index_row(r, k, base) for k, r in enumerate(rows)]
    verdicts = [r.get("verdict") if r.get("verdict") in _VERDICTS else "error" for r in rows]
    worst = max(verdicts, key=_VERDICTS.index) if verdicts else "pass"
    counts = ", ".join(f"{sum(v == s for v in verdicts)} {s}" for s in _VERDICTS)
    skipped = sum(r.get("status") == "skipped" for r in rows)
    summary = f"{_maps(len(rows))}: {counts}" + (f" \u00b7 {skipped} up to date, not redone" if skipped else "")
    heads = ["picture", "map", "verdict", "problems", "size <small>(px)</small>",
             "dynamic range <small>(stops)</small>", "sun elevation <small>(deg)</small>",
             "sun share <small>(% of light)</small>", "peak sample share <small>(largest sample / mean E)</small>",
             "irradiance up <small>(map units \u00d7 sr, estimate)</small>"]
    table = ("<table class=\"index\"><thead><tr>" + "".join(f"<th>{h}</th>" for h in heads) + "</tr></thead>"
             f"<tbody>{''.join(body_rows)}</tbody></table>")
    if not rows:
        table = '<div class="nopic">no maps</div>'
    body = "\n".join([
        f"<h1>{_esc(title)}</h1>",
        f'<div class="summary v-{worst}"><span class="big">{_mark(worst)}</span><span>{_esc(summary)}</span></div>',
        _severity_key(with_error="error" in verdicts),
        f'<p class="caution">{_esc(CAUTION)}</p>',
        table,
        "<p class=\"meta\">Dynamic range: stops between the percentiles of the dynamic-range check. Peak sample "
        "share: the largest single-sample term of the sampling check's estimator over the mean irradiance (above 1, "
        "one sample outshines a typical pixel; verify's firefly index is a different measure, largest over mean "
        "sample). Irradiance up: "
        "on an up-facing surface; lux when the map is calibrated in cd/m\u00b2.</p>",
    ])
    return _write_atomic(path, _document(title, body))
