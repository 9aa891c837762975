"""QA reports for people and programs: a terminal table (:func:`format_report`) and JSON (:func:`report_to_json`).
"""

from __future__ import annotations

import json

from envsample.qa.messages import fmt
from envsample.qa.results import REPORTS_SCHEMA, SEVERITIES, Report

_COLOURS = {"pass": "32", "warn": "33", "fail": "1;31"}


def _paint(text: str, severity: str, color: bool) -> str:
    return f"\x1b[{_COLOURS[severity]}m{text}\x1b[0m" if color else text


def _cell(x, width: int) -> str:
    if isinstance(x, list):
        text = ",".join(fmt(v) if not isinstance(v, str) else v for v in x)
    elif isinstance(x, bool):
        text = "yes" if x else "no"
    elif isinstance(x, str):
        text = x
    else:
        text = fmt(x)
    return text if len(text) <= width else text[: width - 1] + "~"


def format_report(report, *, color: bool = False) -> str:
    """A compact plain-text table of one report (or several, one block each).

    One header line per file (verdict, counts, size, the start of the SHA-256),
    then one line per check: severity, id, value, limit, unit (``CheckResult.unit``,
    the values as stored in the JSON) and message; warnings and failures get a second
    line with the remedy, passing checks past their limit one with the criterion that
    cleared them.  ANSI colour only when ``color``.
    """
    if isinstance(report, Report):
        reports = [report]
    else:
        reports = list(report)
    blocks = []
    for r in reports:
        c = r.counts()
        name = r.source.path or "<in memory>"
        head = [name, _paint(r.verdict.upper(), r.verdict, color),
                f"{c['fail']} fail, {c['warn']} warn, {c['pass']} pass"]
        if r.image:
            head.append(f"{r.image['width']}x{r.image['height']} {r.image['format']}")
        if r.source.size is not None:
            head.append(f"{r.source.size} bytes")
        if r.source.sha256:
            head.append(f"sha256 {r.source.sha256[:12]}")
        lines = ["  ".join(head)]
        idw = max([len(x.id) for x in r.checks] + [5])
        vals = [_cell(x.value, 20) for x in r.checks]
        lims = [_cell(x.threshold, 20) for x in r.checks]
        vw = max([len(v) for v in vals] + [5])
        lw = max([len(v) for v in lims] + [5])
        uw = max([len(x.unit) for x in r.checks] + [4])
        lines.append(f"  {'':4}  {'check':<{idw}}  {'value':>{vw}}  {'limit':>{lw}}  {'unit':<{uw}}  message")
        pad = f"  {'':4}  {'':<{idw}}  {'':>{vw}}  {'':>{lw}}  {'':<{uw}}"
        for x, v, lim in zip(r.checks, vals, lims):
            sev = _paint(f"{x.severity:<4}", x.severity, color)
            lines.append(f"  {sev}  {x.id:<{idw}}  {v:>{vw}}  {lim:>{lw}}  {x.unit:<{uw}}  {x.message}")
            if x.severity != "pass" and x.remedy:
                lines.append(f"{pad}  -> {x.remedy}")
            elif x.severity == "pass" and x.cleared_by:
                lines.append(f"{pad}  passes: {x.cleared_by}")
        if r.skipped:
            ids = ", ".join(s["id"] for s in r.skipped)
            lines.append(f"  skipped: {ids}")
        blocks.append("\n".join(lines))
    return "\n\n".join(blocks)


def report_to_json(reports, *, indent: int | None = 2) -> str:
    """JSON text of one or many reports (schema :data:`REPORTS_SCHEMA`), with a summary."""
    if isinstance(reports, Report):
        reports = [reports]
    reports = list(reports)
    summary = {"files": len(reports), "unreadable": sum(not r.readable for r in reports)}
    for sev in SEVERITIES:
        summary[sev] = sum(r.verdict == sev and r.readable for r in reports)
    doc = {**REPORTS_SCHEMA.header(), "summary": summary, "reports": [r.to_dict() for r in reports]}
    return json.dumps(doc, indent=indent, allow_nan=False)
