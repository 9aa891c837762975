"""The validation-render section of a page: the estimator table, the recommendation, the glossy
figures and the pictures of a verify output folder (:mod:`envsample.reports.validation`)."""

from __future__ import annotations

import json
from collections.abc import Mapping
from pathlib import Path

from envsample.errors import EnvsampleError
from envsample.reports.map_parts import finite, num
from envsample.reports.templating import picture

__all__ = ["verify_context"]


def _read_metrics(folder: Path) -> dict | None:
    mpath = folder / "metrics.json"
    if not mpath.is_file():
        return None
    try:
        return json.loads(mpath.read_text(encoding="utf-8"))
    except (OSError, ValueError) as e:
        raise EnvsampleError(f"{mpath}: not readable JSON ({e}); rerun the verification") from None


def _figure(folder: Path, name: str, caption: str, alt: str) -> dict:
    p = folder / Path(str(name)).name  # never leave the folder, whatever metrics.json says
    try:
        pic = picture(p.read_bytes(), alt)
    except (OSError, ValueError):
        return {"pic": None, "missing": f"{p.name} is missing or not a PNG", "caption": None}
    return {"pic": pic, "caption": f"{p.name}: {caption}"}


def _convergence_caption(conv: Mapping) -> str:
    text = "relative RMSE against samples per normal (log-log), shaded \u00b1 one standard error"
    if conv.get("normals") and conv.get("grid"):
        if list(conv["normals"]) != list(conv["grid"]):
            text += (f"; the ladder runs on {conv['normals'][0]}\u00d7{conv['normals'][1]} of the render's "
                     f"{conv['grid'][0]}\u00d7{conv['grid'][1]} normals")
        else:
            text += "; the ladder runs on the render's own normals with fresh samples"
        text += ", stars mark the table's figures (all normals, the render's samples)"
    if conv.get("left_out"):
        text += "; not drawn (see the table): " + ", ".join(conv["left_out"])
    return text + "."


def _pictures(folder: Path, metrics: Mapping | None, k: int) -> tuple[list, list]:
    files = (metrics or {}).get("files") or {}
    alt = f"of map {k + 1}"
    errors = files.get("errors")
    if not (isinstance(errors, list) and errors):
        errors = [p.name for p in sorted(folder.glob("errors_*.png"))]
    wide = []
    if files.get("map") or (folder / "map.png").is_file():
        wide.append(_figure(folder, files.get("map") or "map.png",
                            "the map as the table sees it, with azimuth and elevation axes", f"map.png {alt}"))
    wide += [_figure(folder, n, "relative irradiance error per normal for each estimator; all pictures share one "
                     "colour scale", f"{n} {alt}") for n in errors]
    other = []
    conv = files.get("convergence") or ("convergence.png" if (folder / "convergence.png").is_file() else None)
    if conv:
        other.append(_figure(folder, conv, _convergence_caption((metrics or {}).get("convergence") or {}),
                             f"{conv} {alt}"))
    for key, caption in (("sphere", None), ("glossy", "relative RMSE of the glossy estimates per view angle")):
        name = files.get(key) or (f"{key}.png" if (folder / f"{key}.png").is_file() else None)
        if name:
            if caption is None:
                view = ((metrics or {}).get("sphere_view") or "an orthographic camera")
                caption = f"reference and recommended estimate shaded on a white sphere; {view}"
            other.append(_figure(folder, name, caption, f"{name} {alt}"))
    return wide, other


def _rows(metrics: Mapping) -> list[dict]:
    best = (metrics.get("recommended") or {}).get("estimator")
    rows = []
    for name, e in (metrics.get("estimators") or {}).items():
        e = e if isinstance(e, Mapping) else {}
        detail = None
        if e.get("tuned_from"):
            t = e["tuned_from"]
            detail = (f"{t.get('estimator')}, table fraction {num(finite(t.get('table_fraction')), 3)} "
                      "(the table's tuned setting)")
        rows.append({"name": name, "recommended": name == best, "detail": detail,
                     "rmse": num(finite(e.get("relative_rmse"))), "bias": num(finite(e.get("mean_bias"))),
                     "firefly": num(finite(e.get("firefly_index"))), "efficiency": num(finite(e.get("efficiency")))})
    return rows


def _glossy(metrics: Mapping) -> dict:
    g = metrics.get("glossy")
    if not isinstance(g, Mapping) or not g.get("estimators"):
        return {"glossy_rows": [], "glossy_angles": [], "glossy_meta": ""}
    rows = [{"name": n, "cells": [num(finite(x), 3) for x in (e.get("relative_rmse") or [])]}
            for n, e in g["estimators"].items()]
    meta = (f"Glossy GGX reflection, roughness {num(finite(g.get('roughness')), 3)}: relative RMSE of outgoing "
            f"radiance on {g['normals'][0]}\u00d7{g['normals'][1]} normals with {g.get('spp')} spp, on the map "
            f"reduced to {g['map'][0]}\u00d7{g['map'][1]} (the quadrature reference's cost grows with the map).")
    return {"glossy_rows": rows, "glossy_angles": [num(finite(a), 3) for a in g.get("view_angles_deg", [])],
            "glossy_meta": meta}


def _split(metrics: Mapping) -> dict:
    """The comparison of a sun split with its original map, side by side at equal samples (or why there is none)."""
    sp = metrics.get("split")
    if not isinstance(sp, Mapping):
        return {"split_rows": [], "split_meta": ""}
    if not sp.get("compared"):
        return {"split_rows": [], "split_meta": f"Sun split: not compared ({sp.get('reason', 'no original map')})."}
    rows = [{"scene": e.get("scene"), "name": e.get("estimator"), "rmse": num(finite(e.get("relative_rmse")), 4),
             "firefly": num(finite(e.get("firefly_index")), 3),
             "bias": f"{num(finite(e.get('mean_bias')), 3)} \u00b1 {num(finite(e.get('mean_bias_se')), 2)}"}
            for e in (sp.get("estimators") or {}).values()]
    agrees = "agrees with" if sp.get("consistent") else "does NOT agree with"
    g = sp.get("normals") or ["?", "?"]
    meta = (f"Sun split: sky + sun {agrees} the original map {sp.get('original')} within the Monte Carlo error "
            f"(exact references differ by {num(finite(sp.get('reference_difference')), 2)} of the mean); "
            f"{g[0]}\u00d7{g[1]} normals, {sp.get('spp')} spp each, all judged against the original's exact irradiance.")
    return {"split_rows": rows, "split_meta": meta}


def verify_context(folder, *, metrics: Mapping | None = None, k: int = 0) -> dict:
    """Everything ``verify_section.html`` shows for one verify output folder."""
    folder = Path(folder)
    if not folder.is_dir():
        raise EnvsampleError(f"{folder}: verify folder does not exist; run 'envsample verify' into it or leave it out")
    if metrics is None:
        metrics = _read_metrics(folder)
    ctx = {"folder": str(folder), "metrics": metrics, "rows": [], "meta": "", "recommendation": None, "notes": []}
    if metrics:
        n = (metrics.get("normals") or {})
        ctx["rows"] = _rows(metrics)
        ctx["meta"] = (f"{num(metrics.get('spp'))} samples per normal, {num(n.get('count'))} normals "
                       f"({num(n.get('width'))}\u00d7{num(n.get('height'))}); errors on luminance.")
        rec = metrics.get("recommended") or {}
        if rec.get("estimator"):
            ctx["recommendation"] = (f"Recommended: {rec['estimator']} ({rec.get('rule', '')}); least variance "
                                     f"per sample: {rec.get('lowest_variance')}.")
        ctx["notes"] = [str(x) for x in metrics.get("notes") or []]
        ctx.update(_glossy(metrics))
        ctx.update(_split(metrics))
    else:
        ctx.update(glossy_rows=[], glossy_angles=[], glossy_meta="", split_rows=[], split_meta="")
    ctx["wide"], ctx["other"] = _pictures(folder, metrics, k)
    return ctx
