"""The summaries of a batch: ``summary.json``, ``summary.csv`` and the ``index.html`` page, each written
atomically.  They are written when the plan is made (``"state": "running"``, the maps still to do
listed with status ``pending``), again at the end (``"complete"``) or on Ctrl-C (``"interrupted"``),
so a batch killed outright leaves a summary that says it did not finish.

CSV cells that a spreadsheet would read as a formula (text starting with ``=``, ``+``, ``-``,
``@``, a tab or a carriage return) are prefixed with an apostrophe (OWASP, "CSV Injection";
common practice); numbers are written as numbers.

References
----------
- Shafranovich, Y. (2005). RFC 4180: Common Format and MIME Type for Comma-Separated Values
  (CSV) Files. IETF.
- OWASP Foundation. CSV Injection (community page; the prefixing rule, from memory).
"""

from __future__ import annotations

import csv
import io as _io
import json
from collections.abc import Sequence

from envsample._version import __version__
from envsample.core.files import atomic_write_text
from envsample.core.schema import Schema
from envsample.core.text import caution
from envsample.pipeline.outcomes import ROW_FIELDS, BatchResult
from envsample.reports.pages import index_page

__all__ = ["SUMMARY_SCHEMA", "STATES", "csv_cell", "write_summaries", "index_rows"]

#: Name and version of ``summary.json`` (3: state, pending rows, stale folders).
SUMMARY_SCHEMA = Schema("envsample.batch-summary", 3)

#: The states a summary can record.
STATES = ("running", "complete", "interrupted")

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def csv_cell(v) -> str:
    """One CSV cell: numbers as numbers, lists joined by ``;``, text that could start a formula quoted."""
    if v is None:
        return ""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return f"{v:.6g}"
    if isinstance(v, int):
        return str(v)
    text = ";".join(str(x) for x in v) if isinstance(v, (list, tuple)) else str(v)
    return "'" + text if text.startswith(_FORMULA_START) else text


def _pending_row(source: str) -> dict:
    row = {k: None for k in ROW_FIELDS}
    row.update(source=source, status="pending")
    return row


def write_summaries(result: BatchResult, key_docs: dict, profile, *, state: str = "complete",
                    pending: Sequence[str] = ()) -> dict:
    """summary.json, summary.csv and index.html in OUTDIR, each by temporary file and rename; returns the paths."""

    if state not in STATES:
        raise ValueError(f"unknown summary state {state!r}; valid: {', '.join(STATES)}")
    done = [m.to_row() for m in result.maps if m is not None]
    rows = done + [_pending_row(s) for s in pending]
    doc = {
        **SUMMARY_SCHEMA.header(),
        "tool": {"name": "envsample", "version": __version__},
        "state": state,
        "options": {k: {kk: vv for kk, vv in v.items() if kk != "profile"} for k, v in key_docs.items()},
        "profile": {"name": profile.name, "path": profile.path},
        "counts": result.counts,
        "duplicates": result.duplicates,
        "stale": result.stale,
        "maps": rows,
        "caution": caution("photometric figures"),
    }
    paths = {"json": result.outdir / "summary.json", "csv": result.outdir / "summary.csv",
             "html": result.outdir / "index.html"}
    atomic_write_text(paths["json"], json.dumps(doc, indent=2, allow_nan=False) + "\n")
    buf = _io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(ROW_FIELDS)
    for row in rows:
        writer.writerow([csv_cell(row.get(k)) for k in ROW_FIELDS])
    atomic_write_text(paths["csv"], buf.getvalue())
    index_page(index_rows(result, done), paths["html"], state=state, pending=len(pending), stale=result.stale)
    return paths


def index_rows(result: BatchResult, rows: list[dict]) -> list[dict]:
    """Rows for :func:`envsample.reports.pages.index_page`: the summary row plus thumbnail and page links.

    Links go to pages (``check.html``, ``verify/report.html``), never to JSON; a duplicate's
    row links to the first copy's pages.
    """
    out = []
    for row in rows:
        r = dict(row)
        folder = row.get("folder")
        links = {}
        if folder:
            base = result.outdir / folder
            if (base / "check.html").is_file():
                r["page"] = f"{folder}/check.html"
                links["check page"] = f"{folder}/check.html"
            if (base / "verify" / "report.html").is_file():
                links["verify page"] = f"{folder}/verify/report.html"
            if (base / "thumb.png").is_file():
                r["thumbnail"] = f"{folder}/thumb.png"
        r["links"] = links
        notes = []
        if row.get("table_width"):
            notes.append(f"table {row['table_width']}\u00d7{row['table_height']}")
        if row.get("table_note"):
            notes.append(row["table_note"])
        if row.get("tuned"):
            notes.append(f"tuned: {row['tuned']}")
        if row.get("verify_reference_bound") is not None:
            notes.append(f"verify: exact reference within {row['verify_reference_bound']:.1e}")
        if row.get("split_note"):
            notes.append(row["split_note"])
        if row.get("duplicate_of"):
            notes.append(f"same bytes as {row['duplicate_of']} (its folder serves both)")
        if row.get("note"):
            notes.append(row["note"])
        r["note"] = "; ".join(notes) or None
        out.append(r)
    return out
