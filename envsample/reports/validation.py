"""The files of a validation report: EXR images, PNG pictures and ``metrics.json``.

:func:`write_validation` writes what :func:`envsample.validation.render.render_validation`
computed into a folder: ``map.png`` (the map with azimuth/elevation axes); ``reference.exr``
and ``estimate_<name>.exr`` (float32 ``(H, W, 3)`` irradiance per normal, map units x sr,
times ``metrics["scale"]["factor"]`` when the map had to be scaled); ``errors_<k>.png``
(heat maps, one colour scale); ``convergence.png`` (with standard-error bands and the
table's own figures as stars); ``sphere.png`` (its title says where the camera looks and
which axis is up); ``glossy.png`` with a glossy check; ``report.html`` (the page,
:func:`envsample.reports.pages.verify_page`); ``metrics.json`` last.  Every
file is written atomically; images of an earlier run that this one did not write are
removed once the new ``metrics.json`` is in place, so the folder always matches it.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

from envsample.core.files import atomic_write_text
from envsample.core.sphere import _frame, direction_to_pixel
from envsample.errors import EnvsampleError
from envsample.io.maps import write_map
from envsample.reports.pages import verify_page
from envsample.reports.pictures import (
    convergence_plot,
    heatmap_figure,
    image_panels,
    latlong_figure,
    log_average_luminance,
    thumbnail,
    tonemap,
)
from envsample.validation.grid import sphere_normals

__all__ = ["PANELS_PER_PICTURE", "write_validation"]

#: Error heat maps per PNG (they share one colour scale across files).
PANELS_PER_PICTURE = 4


_AXIS_NAMES = {(1, 0, 0): "+X", (-1, 0, 0): "\u2212X", (0, 1, 0): "+Y", (0, -1, 0): "\u2212Y",
               (0, 0, 1): "+Z", (0, 0, -1): "\u2212Z"}


def _view_axes(up: str) -> tuple[str, str]:
    """Names of the world axes the sphere camera looks along and holds up (``"\u2212Z"``, ``"+Y"``)."""
    f, _, a = _frame(up)

    def name(v):
        return _AXIS_NAMES.get(tuple(int(round(x)) for x in np.asarray(v, dtype=float)), str(v))

    return name(f), name(a)


def sphere_view(up: str) -> str:
    """Where the camera of ``sphere.png`` looks, in words (:func:`envsample.validation.grid.sphere_normals`)."""
    forward, upward = _view_axes(up)
    return (f"orthographic camera looking along {forward} (the map's forward direction, the centre of the image "
            f"at rotation 0) with {upward} up; the half of the sphere it sees is lit by the half of the map behind it")


def _sphere_picture(ref_grid, est_grid, grid_wh, table, size: int = 256) -> list[np.ndarray]:
    """Reference and estimate on a white Lambertian sphere (radiance E/pi): two uint8 pictures, one exposure."""
    n, mask = sphere_normals(size, up=table.up)
    w, h = grid_wh
    row, col = direction_to_pixel(n[mask], h, w, up=table.up, rotation_deg=table.rotation_deg)
    panels = []
    for grid in (ref_grid, est_grid):
        img = np.zeros((size, size, 3), dtype=np.float32)
        img[mask] = grid.reshape(h, w, 3)[row, col] / np.float32(math.pi)
        panels.append(img)
    avg = log_average_luminance(panels[0])
    exposure = math.log2(0.18 / avg) if avg > 0 else 0.0
    return [tonemap(panels[0], exposure=exposure), tonemap(panels[1], exposure=exposure)]


def _error_pictures(outdir: Path, panels: list, rotation_deg: float) -> list[str]:
    values = np.concatenate([p[1].ravel() for p in panels])
    values = values[np.isfinite(values)]
    vmax = float(np.percentile(values, 99.0)) if values.size else 1.0
    if not vmax > 0.0:
        vmax = float(values.max()) if values.size and values.max() > 0 else 1.0
    label = "relative error |E - E_ref| / mean(E_ref)"
    files = []
    count = -(-len(panels) // PANELS_PER_PICTURE)
    per = -(-len(panels) // max(count, 1))  # spread evenly: 5 panels as 3 + 2, not 4 + 1
    for k in range(count):
        chunk = panels[k * per:(k + 1) * per]
        name = f"errors_{k + 1}.png"
        title = (f"irradiance error per normal (luminance); colour scale clipped at the 99th percentile, {vmax:.3g}"
                 + (f"; picture {k + 1} of {count}, one scale" if count > 1 else ""))
        heatmap_figure(chunk, path=outdir / name, label=label, vmin=0.0, vmax=vmax, latlong=True,
                       rotation_deg=rotation_deg, title=title)
        files.append(name)
    return files


def _remove_stale_outputs(outdir: Path, files: dict) -> None:
    """Remove our own images from an earlier run in the same folder that this run did not write.

    Only names this module writes (``estimate_*.exr``, ``errors_*.png``, and the
    optional ``convergence.png``/``sphere.png``/``glossy.png``) are touched, after the new
    ``metrics.json`` is in place, so the folder always matches its metrics.
    """
    keep = set()
    for v in files.values():
        if isinstance(v, str):
            keep.add(v)
        elif isinstance(v, dict):
            keep.update(x for x in v.values() if isinstance(x, str))
        elif isinstance(v, (list, tuple)):
            keep.update(x for x in v if isinstance(x, str))
    for pattern in ("estimate_*.exr", "errors_*.png", "convergence.png", "sphere.png", "glossy.png"):
        for p in outdir.glob(pattern):
            if p.name not in keep:
                p.unlink(missing_ok=True)


def _convergence_picture(result, outdir: Path, notes: list) -> str | None:
    conv = result.convergence
    shown = {k: conv["relative_rmse"][k] for k in conv["plotted"]}
    if not any(v is not None and v > 0 for vals in shown.values() for v in vals):
        # A black map (or exact estimates everywhere) leaves nothing to draw on log axes.
        notes.append("no positive relative error to plot: convergence.png not written")
        return None
    bands = {k: conv["relative_rmse_se"][k] for k in conv["plotted"]}
    marks = {k: (result.spp, result.entries[k]["relative_rmse"]) for k in conv["plotted"]}
    sub, grid = conv["normals"], conv["grid"]
    where = (f"ladder on {sub[0]}x{sub[1]} of the {grid[0]}x{grid[1]} normals" if sub != grid
             else f"on the {grid[0]}x{grid[1]} normals")
    note = (f"Lines: {where}, fresh samples per count, band = +- 1 standard error over normals. "
            f"Stars: the table's figures ({result.spp} spp, all {grid[0]}x{grid[1]} normals).")
    if conv.get("left_out"):
        note += " Not drawn: " + ", ".join(conv["left_out"]) + "."
    convergence_plot(conv["spp"], shown, path=outdir / "convergence.png", bands=bands, marks=marks,
                     xlabel="samples per normal", ylabel="relative RMSE of irradiance (luminance)",
                     title=f"convergence ({where})", note=note)
    return "convergence.png"


def _glossy_picture(result, outdir: Path) -> str | None:
    g = result.glossy
    if not g:
        return None
    series = {n: e["relative_rmse"] for n, e in g["estimators"].items()}
    if not any(v is not None and v > 0 for vals in series.values() for v in vals):
        return None
    convergence_plot(g["view_angles_deg"], series, path=outdir / "glossy.png", reference=False, xscale="linear",
                     xlabel="view angle from the normal (deg)", ylabel="relative RMSE of outgoing radiance",
                     title=f"glossy GGX, roughness {g['roughness']:g}, {g['spp']} spp, "
                           f"{g['normals'][0]}x{g['normals'][1]} normals",
                     note=f"map reduced to {g['map'][0]}x{g['map'][1]} for the quadrature reference")
    return "glossy.png"


def write_validation(result, outdir, *, source: dict, sphere: bool = True, split: dict | None = None) -> dict:
    """Write a :class:`~envsample.validation.render.ValidationResult` into ``outdir``; return ``metrics.json``'s content.

    ``source`` describes where the table came from (``metrics.json["source"]``).
    ``sphere=False`` skips ``sphere.png``.  ``split``, the comparison of a sun split with its
    original map (:func:`envsample.pipeline.split.split_comparison`), is written as ``split.json``,
    kept in the returned document under ``"split"`` and shown on the page.  Every file is first written into a staging
    folder beside ``outdir``; only when all are written does the folder appear (one
    rename) or, for a folder that exists, its files replace the old ones one by one with
    ``metrics.json`` last.  A failure on the way leaves no new folder and the old files as
    they were.
    """
    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise EnvsampleError(f"{outdir}: exists and is not a folder; choose another -o")
    try:
        outdir.parent.mkdir(parents=True, exist_ok=True)
        stage = Path(tempfile.mkdtemp(prefix=f".{outdir.name[:60]}.", suffix=".tmp", dir=outdir.parent))
    except OSError as exc:
        raise EnvsampleError(f"{outdir}: cannot create the output folder ({exc.strerror or exc}); "
                             "choose another -o") from None
    try:
        doc = _write_files(result, stage, source=source, sphere=sphere, shown=outdir, split=split)
        if outdir.exists():
            for p in sorted(stage.iterdir(), key=lambda q: q.name == "metrics.json"):
                os.replace(p, outdir / p.name)
            _remove_stale_outputs(outdir, doc["files"])
        else:
            os.replace(stage, outdir)
    finally:
        shutil.rmtree(stage, ignore_errors=True)
    return doc


def _write_files(result, outdir: Path, *, source: dict, sphere: bool, shown: Path, split: dict | None = None) -> dict:
    """Every file of the report into ``outdir`` (a staging folder), metrics.json last."""
    table = result.table
    w, h = result.grid
    notes = list(result.notes)
    if (source or {}).get("scale"):
        notes.append(source["scale"]["why"])
    files = {"map": "map.png", "reference": "reference.exr", "estimates": {}}
    latlong_figure(thumbnail(table.image, width=min(1024, table.width)), path=outdir / "map.png",
                   rotation_deg=table.rotation_deg,
                   title=f"the map as the table sees it ({table.width}x{table.height}, up axis {table.up})")
    write_map(outdir / "reference.exr", result.reference.reshape(h, w, 3), pixel_type="float")
    panels = []
    for name, est in result.estimates.items():
        fname = f"estimate_{name}.exr"
        write_map(outdir / fname, est.reshape(h, w, 3), pixel_type="float")
        result.entries[name]["file"] = fname
        files["estimates"][name] = fname
        panels.append((name, result.relative_error_image(name)))
    files["errors"] = _error_pictures(outdir, panels, table.rotation_deg)
    picture = _convergence_picture(result, outdir, notes)
    if picture:
        files["convergence"] = picture
    best = result.recommended["estimator"]
    if sphere and best is not None:
        ref_pic, est_pic = _sphere_picture(result.reference, result.estimates[best], result.grid, table)
        forward, up = _view_axes(table.up)
        image_panels([("exact reference", ref_pic), (f"{best}, {result.spp} spp", est_pic)],
                     path=outdir / "sphere.png",
                     title=f"white diffuse sphere lit by the map (one exposure)\ncamera looks along {forward}, {up} up")
        files["sphere"] = "sphere.png"
    glossy = _glossy_picture(result, outdir)
    if glossy:
        files["glossy"] = glossy
    files["page"] = "report.html"
    if split is not None:
        atomic_write_text(outdir / "split.json", json.dumps(split, indent=2, allow_nan=False) + "\n")
        files["split"] = "split.json"
    doc = result.metrics(source=source, files=files)
    if split is not None:
        doc["split"] = split
    doc["notes"] = notes
    doc["sphere_view"] = sphere_view(table.up)
    verify_page(outdir, metrics=doc, label=shown)
    atomic_write_text(outdir / "metrics.json", json.dumps(doc, indent=2, allow_nan=False) + "\n")
    return doc
