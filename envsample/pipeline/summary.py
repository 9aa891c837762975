"""The summaries of a batch: ``summary.json``, ``summary.csv`` and the ``index.html`` page, each written
atomically, last.
"""

from __future__ import annotations

import csv
import io as _io
import json

from envsample.core.files import atomic_write_text
from envsample.core.schema import Schema
from envsample.core.text import caution
from envsample.pipeline.outcomes import ROW_FIELDS, BatchResult

#: Name and version of ``summary.json``.
SUMMARY_SCHEMA = Schema("envsample.batch-summary", 2)


def _csv_value(v) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return f"{v:.6g}"
    if isinstance(v, (list, tuple)):
        return ";".join(str(x) for x in v)
    return str(v)


def write_summaries(result: BatchResult, key_doc: dict, profile) -> dict:
    """summary.json, summary.csv and index.html in OUTDIR, each by temporary file and rename."""
    from envsample._version import __version__

    rows = [m.to_row() for m in result.maps]
    doc = {
        **SUMMARY_SCHEMA.header(),
        "tool": {"name": "envsample", "version": __version__},
        "options": {k: v for k, v in key_doc.items() if k != "profile"},
        "profile": {"name": profile.name, "path": profile.path},
        "counts": result.counts,
        "duplicates": result.duplicates,
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
        writer.writerow([_csv_value(row[k]) for k in ROW_FIELDS])
    atomic_write_text(paths["csv"], buf.getvalue())
    from envsample.reports.pages import index_page

    index_page(_index_rows(result, rows), paths["html"])
    return paths


def _index_rows(result: BatchResult, rows: list[dict]) -> list[dict]:
    """Rows for :func:`envsample.html.index_page`: the summary row plus picture, links and a note."""
    out = []
    for row in rows:
        r = dict(row)
        notes = []
        folder = row.get("folder")
        if folder:
            r["links"] = {"report": f"{folder}/check.json"}
            if (result.outdir / folder / "table.json").is_file():
                r["links"]["table"] = f"{folder}/table.json"
            if (result.outdir / folder / "verify" / "metrics.json").is_file():
                r["links"]["verify"] = f"{folder}/verify/metrics.json"
            if (result.outdir / folder / "thumb.png").is_file():
                r["thumbnail"] = f"{folder}/thumb.png"
        if row.get("table_width"):
            notes.append(f"table {row['table_width']}\u00d7{row['table_height']}")
        if row.get("table_note"):
            notes.append(row["table_note"])
        if row.get("verify_rmse_table") is not None or row.get("verify_rmse_mis") is not None:
            figures = ", ".join(f"{label} {row[key]:.3g}" for label, key in (("table", "verify_rmse_table"),
                                                                            ("MIS", "verify_rmse_mis"))
                                if row.get(key) is not None)
            notes.append(f"verify relative RMSE: {figures}")
        if row.get("verify_reference_bound") is not None:
            notes.append(f"exact reference within {row['verify_reference_bound']:.1e}")
        if row.get("duplicate_of"):
            notes.append(f"same bytes as {row['duplicate_of']}")
        r["note"] = "; ".join(notes) or None
        out.append(r)
    return out
