"""Self-contained HTML reports: check pages (one or many maps), the page of a verify folder, a batch index.

Public objects
--------------
- :func:`check_page`: one page for one map or a batch of maps.  Per map: a summary
  line, the findings that need attention, key figures, a tone-mapped thumbnail
  with the detected emitters ringed, the sampling pdf of a reduced table as a
  log-scale heat map with the same rings, a range overlay (clipped, over-range and
  invalid pixels in false colour, with a legend), the validation render of a verify
  folder (optional), and the table of every check.
- :func:`verify_page`: the page of one verify output folder (``report.html``): the
  estimator table, the recommendation, the glossy figures and every picture.
- :func:`index_page`: a batch index, one row per map, grouped by verdict worst first,
  with jump lists by verdict and by failing check id, links to each map's pages, and
  definitions of every column.  The row keys are listed in :data:`INDEX_ROW_KEYS`.
- :func:`report_row`: an :func:`index_page` row built from a QA report.
- :data:`THUMB_WIDTH`, :data:`PDF_TABLE_SIZE`, :data:`INDEX_ROW_KEYS`, :data:`CAUTION`.

Pages are rendered from the jinja2 templates in ``envsample/reports/templates/`` with
autoescaping (:mod:`envsample.reports.templating`): every text that comes from a file name,
a message or a profile is escaped.  Pictures are PNG ``data:`` URIs, the style sheet is
inline, there is no script and no external resource, so one file can be mailed, archived
or opened offline.  Pages are written atomically (temporary file, then :func:`os.replace`).

Design
------
Our own plain design: black text on white, one accent colour per severity, and
severity always shown by its **word and a shape** (pass: hollow circle, warn:
solid triangle, fail: solid square, error: hollow diamond), so a page printed
in greyscale or read by someone who does not tell red from green loses nothing
(WCAG 2.1, success criterion 1.4.1 "Use of Color").  Every page starts with a one-line
summary; table headers carry their units.  Photometric values are estimates for asset
preparation, not certified lighting calculations: every page says so.

References
----------
- WHATWG. HTML Living Standard (the document syntax; ``html.parser`` reads it in the tests).
- Masinter, L. (1998). RFC 2397: The "data" URL scheme. IETF.
- ISO/IEC 15948:2004. Portable Network Graphics (PNG) specification (signature and IHDR chunk).
- W3C (2018). Web Content Accessibility Guidelines (WCAG) 2.1, success criterion 1.4.1, Use of Color.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from urllib.parse import quote, urlsplit

import numpy as np

from envsample.core.text import caution
from envsample.errors import EnvsampleError
from envsample.qa.results import SEVERITIES, Report
from envsample.reports.map_parts import (
    PDF_TABLE_SIZE,
    THUMB_WIDTH,
    VERDICTS,
    as_report_dict,
    finite,
    map_context,
    map_name,
    num,
    report_row,
    verdict_of,
)
from envsample.reports.pictures import encode_png
from envsample.reports.templating import check_folder, picture, render, write_page
from envsample.reports.verify_parts import verify_context

__all__ = [
    "THUMB_WIDTH",
    "PDF_TABLE_SIZE",
    "INDEX_ROW_KEYS",
    "INDEX_COLUMNS",
    "CAUTION",
    "check_page",
    "verify_page",
    "index_page",
    "report_row",
]

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
    "links": "mapping label -> relative path: further pages (check page, verify page)",
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
    "verify_rmse_table": "float: verify's relative RMSE of the lone table estimator",
    "verify_rmse_mis": "float: verify's relative RMSE of mis-balance",
    "verify_rmse_tuned": "float: verify's relative RMSE of the table's tuned setting",
    "failed_checks": "list of str: ids of failed checks",
    "warned_checks": "list of str: ids of checks that warned",
    "error": "str: why the map could not be processed",
    "note": "str: any other remark (table, duplicates, kept or removed outputs)",
}

#: The index columns: (heading, unit, definition in the footer).  One definition per column.
INDEX_COLUMNS = (
    ("picture", None, "tone-mapped thumbnail of the map (auto exposure)."),
    ("map", None, "file name (a link to its check page), source path, and links to its pages."),
    ("verdict", None, "the worst result of the map's QA checks; ERROR: the file could not be read or processed."),
    ("checks", None, "ids of the checks that failed or warned (each is explained on the map's check page)."),
    ("size", "px", "width \u00d7 height of the map, with its format and pixel type."),
    ("dynamic range", "stops", "log2 of the ratio between the percentiles of the dynamic-range check."),
    ("sun elevation", "deg", "elevation (and azimuth) of the sun-like emitter found by the sun check."),
    ("sun share", "% of light", "share of the map's light inside the sun-like emitter."),
    ("peak sample share", "largest sample / mean E",
     "the largest single-sample term of the sampling check's estimator over the mean irradiance; above 1 one "
     "sample outshines a typical pixel (verify's firefly index is a different measure: largest over mean sample)."),
    ("irradiance up", "map units \u00d7 sr, estimate",
     "irradiance on an up-facing surface; lux when the map is calibrated in cd/m\u00b2."),
    ("verify relative RMSE", "table / MIS / tuned",
     "relative RMSE of irradiance in the batch's small validation render (32\u00d716 normals, 32 spp) for the "
     "lone table, mis-balance and the table's tuned setting; empty without verify."),
    ("notes", None, "the table built (or why none), the tuned setting, duplicates, outputs kept or removed."),
)


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


def _maps(n: int) -> str:
    return f"{n} map" if n == 1 else f"{n} maps"


def check_page(reports, path, *, verify_dirs=None, title: str | None = None, images=None) -> Path:
    """Write one self-contained HTML page for the QA reports of one map or a batch; returns the path.

    Parameters
    ----------
    reports : Report, dict, or a sequence of them
        :class:`envsample.qa.results.Report` objects (or their ``to_dict()`` form, e.g. a
        ``check.json`` read back), in page order.
    path : str or PathLike
        The page; its folder must exist.  Written atomically (temporary file + :func:`os.replace`).
    verify_dirs : path or sequence of (path or None), optional
        Output folders of :func:`envsample.pipeline.verify.verify_map`, one per report (a
        single path for a single report).  Their pictures are embedded, with the estimator
        table of ``metrics.json``.  A folder that does not exist raises :class:`EnvsampleError`.
    title : str, optional
        Page title; default "envsample check: NAME" or "envsample check: N maps".
    images : sequence of (MapImage, array (H, W, 3), path or None), optional
        The pixels of each map.  None (the default, and for any None entry): read the
        map again from the report's source path; a map checked in memory then shows
        its checks without pictures.

    Pictures: a tone-mapped thumbnail :data:`THUMB_WIDTH` px wide (maps narrower than
    that are enlarged by an integer pixel repetition) with the emitters of the ``sun``
    check ringed; the pdf (per steradian, log colour scale) of a table of at most
    :data:`PDF_TABLE_SIZE` cells with the same rings; the range overlay.
    """
    if isinstance(reports, (Report, Mapping)):
        reports = [reports]
    reps = [as_report_dict(r, k) for k, r in enumerate(reports)]
    if not reps:
        raise ValueError("check_page needs at least one report")
    dirs = _per_map(verify_dirs, len(reps), "verify_dirs")
    imgs = _per_map(images, len(reps), "images")
    # Refuse bad destinations before the (slow) pictures are drawn.
    check_folder(path)
    for d in dirs:
        if d is not None and not Path(d).is_dir():
            raise EnvsampleError(f"{d}: verify folder does not exist; run 'envsample verify' into it or leave it out")
    names = [map_name(r, k) for k, r in enumerate(reps)]
    if title is None:
        title = f"envsample check: {names[0]}" if len(reps) == 1 else f"envsample check: {_maps(len(reps))}"
    verdicts = [verdict_of(r) for r in reps]
    worst = max(verdicts, key=VERDICTS.index)
    totals = {s: sum(c.get("severity") == s for r in reps for c in r.get("checks", [])) for s in SEVERITIES}
    count_text = f"checks: {totals['fail']} failed, {totals['warn']} warned, {totals['pass']} passed"
    if len(reps) > 1:
        per = ", ".join(f"{sum(v == s for v in verdicts)} {s}" for s in SEVERITIES)
        count_text = f"{_maps(len(reps))}: {per} \u00b7 {count_text}"
    nav = [{"name": n, "verdict": v} for n, v in zip(names, verdicts)] if len(reps) > 1 else []
    maps = [map_context(r, k, imgs[k], None if dirs[k] is None else verify_context(dirs[k], k=k))
            for k, r in enumerate(reps)]
    return write_page(path, render("check.html", title=title, worst=worst, count_text=count_text, nav=nav,
                                   maps=maps, caution=CAUTION))


def verify_page(folder, path=None, *, metrics: Mapping | None = None, title: str | None = None,
                label=None) -> Path:
    """Write the page of a verify output folder (default ``FOLDER/report.html``); returns the path.

    ``metrics`` is the content of ``metrics.json`` (read from the folder when None);
    ``label`` is the folder name the page shows (default ``folder``; a report written
    in a staging folder shows where it will be).
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise EnvsampleError(f"{folder}: verify folder does not exist; run 'envsample verify' into it first")
    path = folder / "report.html" if path is None else Path(path)
    check_folder(path)
    v = verify_context(folder, metrics=metrics)
    src = (v["metrics"].get("source") or {}) if v["metrics"] else {}
    table_source = src.get("table_source") if isinstance(src.get("table_source"), Mapping) else {}
    origin = (table_source.get("path") or src.get("path")) if src.get("kind") == "table" else src.get("path")
    # The page names the map it checks (a batch writes the report in a staging folder first).
    v["folder"] = str(origin) if origin else str(label if label is not None else folder)
    name = Path(origin).name if origin else Path(label if label is not None else folder).name
    rec = ((v["metrics"] or {}).get("recommended") or {}).get("estimator")
    summary = (f"recommended estimator: {rec}" if rec else "no estimator recommended (see the notes)")
    return write_page(path, render("verify.html", title=title or f"envsample verify: {name}", v=v,
                                   state="pass" if rec else "warn", summary=summary, caution=CAUTION))


# --------------------------------------------------------------------------- batch index


def _relative_link(target, where: str) -> str:
    """A relative URL for ``target``; absolute paths and URLs with a scheme are refused."""
    t = os.fspath(target) if isinstance(target, os.PathLike) else str(target)
    parts = urlsplit(t.replace("\\", "/"))
    if parts.scheme or parts.netloc or t.startswith(("/", "\\")) or (len(t) > 1 and t[1] == ":"):
        raise ValueError(f"{where}: link {t!r} must be a path relative to the page's folder")
    return quote(t.replace("\\", "/"), safe="/#")


def _thumb(thumb, base: Path, label: str) -> tuple[dict | None, str]:
    if thumb is None:
        return None, "no picture"
    try:
        if isinstance(thumb, np.ndarray):

            data = encode_png(thumb)
        else:
            p = Path(thumb)
            data = (p if p.is_absolute() else base / p).read_bytes()
        return picture(data, f"thumbnail of {label}"), ""
    except (OSError, ValueError):
        return None, "picture missing"


def _index_row(row: Mapping, k: int, base: Path) -> dict:
    if not isinstance(row, Mapping):
        raise TypeError(f"rows[{k}] must be a mapping (see INDEX_ROW_KEYS), got {type(row).__name__}")
    src = row.get("source")
    name = row.get("name") or (Path(str(src)).name if src else None)
    if not name:
        raise ValueError(f"rows[{k}] has neither 'name' nor 'source'; give one of them")
    verdict = row.get("verdict") if row.get("verdict") in VERDICTS else "error"
    thumb, no_thumb = _thumb(row.get("thumbnail"), base, str(name))
    size = kind = ""
    if row.get("width") and row.get("height"):
        size = f"{row['width']}\u00d7{row['height']}"
        kind = " ".join(str(x) for x in (row.get("format"), row.get("pixel_type")) if x)
    share = finite(row.get("sun_share"))
    verify = [finite(row.get(k)) for k in ("verify_rmse_table", "verify_rmse_mis", "verify_rmse_tuned")]
    return {
        "anchor": f"map-{k + 1}", "name": str(name), "verdict": verdict, "thumb": thumb, "no_thumb": no_thumb,
        "page": _relative_link(row["page"], f"rows[{k}] page") if row.get("page") else None,
        "source": str(src) if src and str(src) != name else None,
        "status_note": "up to date, not redone" if row.get("status") == "skipped" else None,
        "links": [(str(label), _relative_link(t, f"rows[{k}] links[{label!r}]"))
                  for label, t in (row.get("links") or {}).items()],
        "error": row.get("error"),
        "failed": ", ".join(map(str, row.get("failed_checks") or [])),
        "warned": ", ".join(map(str, row.get("warned_checks") or [])),
        "size": size, "kind": kind,
        "dynamic_range": num(finite(row.get("dynamic_range")), 3),
        "sun_elevation": num(finite(row.get("sun_elevation_deg")), 3)
        if finite(row.get("sun_elevation_deg")) is not None else "",
        "sun_azimuth": num(finite(row.get("sun_azimuth_deg")), 4)
        if finite(row.get("sun_azimuth_deg")) is not None else "",
        "sun_share": num(100.0 * share, 3) if share is not None else num(None),
        "peak_sample_share": num(finite(row.get("peak_sample_share")), 3),
        "irradiance_up": num(finite(row.get("irradiance_up")), 4),
        "verify": " / ".join(num(v, 3) for v in verify) if any(v is not None for v in verify) else "",
        "note": row.get("note") or "",
        "_order": (-len(row.get("failed_checks") or []), -len(row.get("warned_checks") or []), str(name).casefold()),
        "_failed_ids": list(row.get("failed_checks") or []),
    }


def index_page(rows: Sequence[Mapping], path, *, title: str | None = None, state: str = "complete",
               pending: int = 0, stale: Sequence[Mapping] = ()) -> Path:
    """Write a batch index page; returns the path.

    ``rows`` are mappings with the keys of :data:`INDEX_ROW_KEYS` (all optional but a
    name: ``name`` or ``source``); :func:`report_row` builds one from a QA report, and
    rows of :data:`envsample.pipeline.outcomes.ROW_FIELDS` fit as they are.  Rows are
    grouped by verdict, worst first (error, fail, warn, pass), and within a group by the
    number of failed, then warned checks, then name.  A jump list leads to each group and,
    per failing check id, to the rows that fail it.  Thumbnails are embedded as PNG data
    URIs (files are read relative to the page's folder); ``page`` and ``links`` must be
    paths relative to the page's folder (ValueError otherwise), so the index keeps working
    when the output folder is moved.  ``state`` ("running", "complete", "interrupted"),
    ``pending`` (maps not done yet) and ``stale`` (folders no source claims, as
    :attr:`envsample.pipeline.outcomes.BatchResult.stale`) are shown above and below the table.
    Written atomically.
    """
    rows = list(rows)
    path = Path(path)
    title = title or f"envsample batch: {_maps(len(rows))}"
    items = [_index_row(r, k, path.parent) for k, r in enumerate(rows)]
    groups = []
    for verdict in reversed(VERDICTS):
        members = sorted((r for r in items if r["verdict"] == verdict), key=lambda r: r["_order"])
        if members:
            groups.append({"verdict": verdict, "rows": members})
    failing: dict[str, list] = {}
    for g in groups:
        for r in g["rows"]:
            for cid in r["_failed_ids"]:
                failing.setdefault(str(cid), []).append(r)
    verdicts = [r["verdict"] for r in items]
    worst = max(verdicts, key=VERDICTS.index) if verdicts else "pass"
    counts = ", ".join(f"{sum(v == s for v in verdicts)} {s}" for s in VERDICTS)
    skipped = sum(r.get("status") == "skipped" for r in rows)
    summary = f"{_maps(len(rows))}: {counts}" + (f" \u00b7 {skipped} up to date, not redone" if skipped else "")
    state_note = None
    if state != "complete" or pending:
        what = {"running": "This batch is still running (or was killed)", "interrupted": "This batch was interrupted"}
        state_note = f"{what.get(state, 'This batch did not finish')}: {_maps(pending)} not done yet; rerun it to finish."
    return write_page(path, render(
        "index.html", title=title, worst=worst, summary=summary, state_note=state_note,
        has_error="error" in verdicts, groups=groups,
        failing=[{"id": cid, "rows": rs} for cid, rs in sorted(failing.items())],
        heads=[(h, unit) for h, unit, _ in INDEX_COLUMNS],
        definitions=[(h, text) for h, _, text in INDEX_COLUMNS],
        stale=list(stale), caution=CAUTION))
