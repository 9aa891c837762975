"""The radiance of a loaded table that stores no copy of its map: the source map, re-read and verified.

A v2 table records its source map's path (absolute, and relative to the table's
JSON), its sha256, the EXR layer read and whether NaN/Inf pixels were repaired.
:func:`source_radiance` returns a loader that finds the file (the relative path
first, so a folder of maps and tables can move as a whole), checks that its sha256
is the recorded one, reads it and applies the same validation the build did, so
``EnvTable.image`` is exactly the radiance the table was built from.  A missing or
changed file is refused in one line that says what to do.
"""

from __future__ import annotations

import warnings
from pathlib import Path

from envsample.errors import TableFormatError
from envsample.io.maps import file_sha256, read_map, validate_map

__all__ = ["source_radiance"]


def _candidates(src: dict, json_path: Path) -> list[Path]:
    out = []
    if src.get("relative_path"):
        out.append(json_path.parent / src["relative_path"])
    if src.get("path"):
        out.append(Path(src["path"]))
    return out


def source_radiance(doc: dict, json_path: Path, *, override=None):
    """A function returning the table's radiance, float32 (H, W, 3), read from its verified source map.

    ``override`` is a map path to use instead of the recorded one (it must have the
    recorded sha256 all the same).
    """
    src = doc.get("source") or {}
    json_path = Path(json_path)

    def load():

        paths = [Path(override)] if override is not None else _candidates(src, json_path)
        found = next((p for p in paths if p.is_file()), None)
        if found is None:
            where = ", ".join(str(p) for p in paths) or "no path recorded"
            raise TableFormatError(
                f"{json_path}: the source map is not found ({where}); put it back, pass the map "
                "(load_table(..., source=MAP) or --map), or rebuild the table with --embed-radiance"
            )
        want = src.get("sha256")
        if want and file_sha256(found) != want:
            raise TableFormatError(
                f"{json_path}: the source map {found} has changed since the table was built (sha256 differs); "
                "rebuild the table from it"
            )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the build already said what validation did
            image, _ = validate_map(read_map(found, layer=src.get("layer")), repair=bool(src.get("repair")),
                                    allow_aspect=True)
        shape = (doc["image"]["height"], doc["image"]["width"], 3)
        if image.rgb.shape != shape:
            raise TableFormatError(f"{json_path}: the source map {found} is {image.width}x{image.height}, "
                                   f"the table was built from {shape[1]}x{shape[0]}; rebuild the table")
        return image.rgb

    return load
