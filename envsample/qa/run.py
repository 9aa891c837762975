"""The entry point of QA: :func:`check_map` runs every enabled check on one map and returns a :class:`Report`.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from envsample.errors import EnvsampleError, MapReadError
from envsample.io.maps import MapImage, file_sha256, read_map
from envsample.qa.checks import CHECKS
from envsample.qa.context import CheckContext
from envsample.qa.profile import load_profile
from envsample.qa.results import CheckResult, NotApplicable, Report, Source


def _file_sha256(p: Path) -> str | None:
    """The file's SHA-256, or None when it cannot be read (the report says why elsewhere)."""
    try:
        return file_sha256(p)
    except MapReadError:
        return None


def _file_size(p: Path) -> int | None:
    try:
        return int(p.stat().st_size) if p.is_file() else None
    except OSError:
        return None


def check_map(path_or_image, *, profile=None, checks: Iterable[str] | None = None) -> Report:
    """Run the QA checks on one map.

    Parameters
    ----------
    path_or_image : str, PathLike, MapImage or array_like (H, W, 3)
        A file (read with :func:`envsample.io.read_map`), a map already read, or
        linear RGB radiance in memory (row 0 at the zenith).
    profile : Profile, str, PathLike, Mapping or None
        Thresholds (see :func:`load_profile`); None uses the defaults.
    checks : iterable of str, optional
        Only these check ids (``read`` always runs); default all enabled ones.

    Returns
    -------
    Report
        An unreadable file gives a report with a failing ``read`` check and
        ``readable=False`` (exit code 2); nothing is raised for it.

    Raises
    ------
    TypeError
        ``path_or_image`` is of an unsupported type.
    ProfileError
        The profile is invalid.  ValueError: an unknown id in ``checks``.
    """
    prof = load_profile(profile)
    wanted = None
    if checks is not None:
        wanted = set(checks)
        unknown = sorted(wanted - set(CHECKS))
        if unknown:
            raise ValueError(f"unknown check id(s) {', '.join(unknown)}; valid ids: {', '.join(CHECKS)}")
    base = {"profile": prof.name, "profile_path": prof.path}
    if isinstance(path_or_image, (str, os.PathLike)):
        p = Path(path_or_image)
        try:
            image = read_map(p)
        except MapReadError as e:
            result = CheckResult("read", "fail", value=None, threshold=None, message=str(e),
                                 remedy="check the path, or re-export the file (EXR, HDR)")
            skipped = [{"id": cid, "reason": "the file could not be read"} for cid in CHECKS if cid != "read"]
            return Report(source=Source(str(p), _file_sha256(p) if p.is_file() else None, _file_size(p)),
                          checks=[result], skipped=skipped, readable=False, **base)
        source = Source(str(p), image.sha256 or _file_sha256(p), _file_size(p))
    elif isinstance(path_or_image, MapImage):
        image = path_or_image
        path = None if image.path is None else str(image.path)
        source = Source(path, image.sha256, None if image.path is None else _file_size(Path(image.path)))
    elif isinstance(path_or_image, np.ndarray) or isinstance(path_or_image, (list, tuple)):
        image = MapImage.from_array(path_or_image)
        source = Source(None, None, None)
    else:
        raise TypeError(
            f"path_or_image must be a path, a MapImage or an (H, W, 3) array, got {type(path_or_image).__name__}"
        )
    ctx = CheckContext(image, prof)
    results, skipped = [], []
    for cid, fn in CHECKS.items():
        if cid != "read" and wanted is not None and cid not in wanted:
            skipped.append({"id": cid, "reason": "not requested"})
            continue
        if cid != "read" and not prof.enabled(cid):
            skipped.append({"id": cid, "reason": "disabled in the profile"})
            continue
        try:
            results.append(fn(ctx))
        except NotApplicable as e:
            skipped.append({"id": cid, "reason": str(e)})
        except EnvsampleError as e:
            # A lower layer refused this map on purpose (one-line message); report it, keep the others.
            results.append(CheckResult(cid, "fail", message=f"could not run: {e}",
                                       remedy="fix the problems reported by the other checks first"))
    return Report(source=source, checks=results, skipped=skipped, image=image.describe(), **base)
