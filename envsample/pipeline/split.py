"""``envsample split``: a map in, a sky map, a sun file and the sky's sampling table out.

Public objects
--------------
:class:`SplitResult`  the :class:`envsample.lights.split.SunSplit`, the sky's table, the files written.
:func:`split_map_file` read, check, split (:func:`envsample.lights.split.split_sun`), build, write.
:func:`load_sun`       a sun file back as a :class:`envsample.sampling.sun.SunLight`.

Files, in the output folder, for a map ``NAME.exr``:

* ``NAME.sky.exr``  the sky with the sun and its glare removed and the hole filled (float EXR);
* ``NAME.sun.json`` the sun (schema ``envsample.sun`` v1; keys in :meth:`SunSplit.document`);
* ``NAME.sky.npz`` + ``NAME.sky.json`` the sky's sampling table in the usual format, whose
  JSON names the sun file under ``"lights"``, so a renderer loads both.

Every file is written atomically; nothing is written before the map was read, checked,
split and its table built.  The sun file is written last but the table's JSON, which names it.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

from envsample.core.files import atomic_write_text
from envsample.errors import EnvsampleError, TableFormatError
from envsample.io.maps import MapImage, file_sha256, read_map, validate_map, write_map
from envsample.lights.split import SUN_SCHEMA, SunSplit, split_sun
from envsample.pipeline.workflow import check_output_folder
from envsample.sampling.sun import SunLight
from envsample.sampling.table import EnvTable, build_table
from envsample.validation.split import compare_split

__all__ = ["SplitResult", "split_map_file", "write_split", "load_sun", "SplitSource", "find_split", "split_comparison"]


@dataclass
class SplitResult:
    """What ``envsample split`` did: the split, the sky's table, the files and the energy balance."""

    split: SunSplit
    table: EnvTable
    paths: dict = field(default_factory=dict)
    balance: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)


def split_map_file(map_path, outdir, *, restore: str | None = None, sun_illuminance: float | None = None,
                   linke_turbidity: float = 3.0, altitude_m: float = 0.0, primaries: str = "bt709", up: str = "y",
                   rotation_deg: float = 0.0, size=None, layer: str | None = None, repair: bool = False,
                   allow_aspect: bool = False, make_dirs: bool = True) -> SplitResult:
    """Split the map at ``map_path`` into ``outdir`` (see the module docstring); returns :class:`SplitResult`.

    ``restore``, ``sun_illuminance``, ``linke_turbidity``, ``altitude_m`` go to
    :func:`envsample.lights.split.split_sun`; ``size`` to the sky's :func:`build_table`;
    ``layer``, ``repair``, ``allow_aspect`` to reading and checking the map.
    """
    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise EnvsampleError(f"{out}: is a file, not a folder; give an output folder (-o DIR)")
    check_output_folder(out / "x")
    image = read_map(map_path, layer=layer)
    image, notes = validate_map(image, repair=repair, allow_aspect=allow_aspect)
    sp = split_sun(image.rgb, primaries=primaries, up=up, rotation_deg=rotation_deg, restore=restore,
                   sun_illuminance=sun_illuminance, linke_turbidity=linke_turbidity, altitude_m=altitude_m)
    if make_dirs and not out.exists():
        out.mkdir(parents=True)
    table, paths = write_split(sp, out, Path(map_path).stem, source={"map": str(map_path), "sha256": image.sha256},
                               size=size)
    return SplitResult(split=sp, table=table, paths=paths, balance=sp.energy_balance(image.rgb), notes=list(notes))


def write_split(sp: SunSplit, out: Path, stem: str, *, source: dict, size=None) -> tuple[EnvTable, dict]:
    """Build the sky's table and write ``STEM.sky.exr``, ``STEM.sun.json``, ``STEM.sky.npz/.json`` into ``out``.

    ``out`` must exist.  Returns the table and ``{"sky_map", "sun", "table": [...]}`` paths.
    """
    names = {"sky_map": f"{stem}.sky.exr", "sun": f"{stem}.sun.json", "table": f"{stem}.sky.json"}
    paths = {"sky_map": write_map(out / names["sky_map"], sp.sky, pixel_type="float")}
    # The table records the sky map it samples (path and sha256: table format v2 keeps no copy of it).
    sky = MapImage(rgb=sp.sky, path=paths["sky_map"], format="exr", pixel_type="float",
                   sha256=file_sha256(paths["sky_map"]))
    table = build_table(sky, size=size, primaries=sp.primaries, up=sp.up, rotation_deg=sp.rotation_deg)
    table.metadata["lights"] = [{"kind": "sun", "file": names["sun"], "schema": SUN_SCHEMA.name,
                                 "schema_version": SUN_SCHEMA.version}]
    doc = sp.document(files=names, source=source)
    paths["sun"] = atomic_write_text(out / names["sun"], json.dumps(doc, indent=2) + "\n")
    paths["table"] = [Path(p) for p in table.save(out / f"{stem}.sky")]
    return table, paths


def load_sun(path) -> SunLight:
    """The :class:`SunLight` of a sun file written by :func:`split_map_file` (schema ``envsample.sun`` v1)."""
    p = Path(path)
    try:
        doc = json.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise TableFormatError(f"{p}: sun file not found; run 'envsample split' again") from None
    except (OSError, ValueError) as exc:
        raise TableFormatError(f"{p}: unreadable sun file ({type(exc).__name__}); run 'envsample split' again") from None
    if not SUN_SCHEMA.matches(doc):
        raise TableFormatError(f"{p}: not an {SUN_SCHEMA} file; run 'envsample split' again")
    try:
        import math

        half = 0.5 * math.radians(float(doc["angular_diameter_deg"]))
        conv = doc.get("convention", {})
        up = conv.get("up", conv.get("up_axis", "y"))  # "up" is the axis letter since table format v2
        return SunLight(doc["direction"], half, doc["radiance_rgb"], up=up,
                        rotation_deg=float(conv.get("rotation_deg", 0.0)))
    except (KeyError, TypeError, ValueError) as exc:
        raise TableFormatError(f"{p}: malformed sun file ({type(exc).__name__}: {exc}); "
                               "run 'envsample split' again") from None


@dataclass
class SplitSource:
    """The files of a split found from what the user gave ``verify``: the sky's table, the sun, the original map."""

    table: Path
    sun: Path
    original: Path | None


def find_split(source) -> SplitSource | None:
    """The split behind ``source`` (a folder written by ``envsample split`` or the sky's table), or None.

    A folder must hold exactly one ``*.sky.json`` table; a table is a split's when its JSON names
    a sun file under ``"lights"``.  The original map is the one the sun file names, if it still exists.
    """
    if not isinstance(source, (str, Path)):
        return None
    p = Path(source)
    if p.is_dir():
        tables = sorted(p.glob("*.sky.json"))
        if len(tables) != 1:
            return None
        p = tables[0]
    json_path = p if p.suffix == ".json" else p.with_suffix(".json") if p.suffix in (".npz", ".bin") else \
        p.parent / (p.name + ".json")
    try:
        doc = json.loads(json_path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    lights = doc.get("lights") if isinstance(doc, dict) else None
    if not lights:
        return None
    sun_path = json_path.parent / str(lights[0].get("file"))
    original = None
    try:
        src = json.loads(sun_path.read_text(encoding="utf-8")).get("source", {}).get("map")
        if src and Path(src).exists():
            original = Path(src)
    except (OSError, ValueError, AttributeError):
        pass
    return SplitSource(table=json_path, sun=sun_path, original=original)


def split_comparison(split: SplitSource, sky_table: EnvTable, *, spp: int, normals, seed: int) -> dict:
    """Compare the split with its original map (:func:`envsample.validation.split.compare_split`): the JSON document.

    The comparison uses at most 64 x 32 normals of the verify grid's size.  Without the
    original map (moved or deleted) the document says so and compares nothing.
    """
    if split.original is None:
        return {"compared": False, "reason": f"{split.sun}: the original map it names is not there; "
                                             "verify the original beside the split to compare them"}
    image, _ = validate_map(read_map(split.original))
    original = build_table(image, primaries=sky_table.primaries, up=sky_table.up, rotation_deg=sky_table.rotation_deg)
    grid = (min(64, int(normals[0])), min(32, int(normals[1])))
    doc = {"compared": True, "original": str(split.original), "sun_file": str(split.sun)}
    return doc | compare_split(original, sky_table, load_sun(split.sun), spp=spp, normals=grid, seed=seed).to_dict()
