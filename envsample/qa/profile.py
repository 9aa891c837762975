"""QA profiles: the thresholds of every check, from TOML, merged over the defaults of ``profiles/default.toml``.

The loader derives the valid sections, keys and types from the default file; each default
there is commented with its meaning, unit and provenance.
"""

from __future__ import annotations

import copy
import functools
import math
import os
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from envsample.core.color import canonical_primaries
from envsample.errors import EnvsampleError
from envsample.estimation.estimators import estimators


class ProfileError(EnvsampleError, ValueError):
    """A QA profile is missing, not valid TOML, or has an unknown section/key or a bad value."""


#: Largest number of samples per estimator the ``sampling`` check may draw (spp x repeats x
#: normals): about 1 GiB of working memory at an estimated 256 bytes per sample.
MAX_SAMPLING_SAMPLES = 1 << 22
#: Largest table of the ``sampling`` check (cells): 4096 x 2048.
MAX_SAMPLING_CELLS = 4096 * 2048
#: Severities a check may be given in its profile section (``severity`` keys).
SETTABLE_SEVERITIES = ("warn", "fail")


def _default_profile_text() -> str:
    return resources.files("envsample.qa").joinpath("profiles/default.toml").read_text(encoding="utf-8")


@functools.lru_cache(maxsize=1)
def _defaults() -> dict:
    return tomllib.loads(_default_profile_text())


@dataclass(frozen=True)
class Profile:
    """Thresholds of every check: ``sections[check_id][key]``, merged over the defaults.

    ``name`` comes from ``[profile] name``; ``path`` is the TOML file (None for the
    defaults or a mapping).  Use :func:`load_profile` to build one.
    """

    name: str
    path: str | None
    sections: dict

    def section(self, check_id: str) -> dict:
        """The settings of one check (a copy is not made: do not modify)."""
        return self.sections[check_id]

    @property
    def primaries(self) -> str:
        """Canonical luminance primaries of the maps checked with this profile."""
        return canonical_primaries(self.sections["profile"]["primaries"])

    def enabled(self, check_id: str) -> bool:
        return bool(self.sections.get(check_id, {}).get("enabled", True))

    def to_dict(self) -> dict:
        """JSON-ready name, path and every setting."""
        return {"name": self.name, "path": self.path, "settings": copy.deepcopy(self.sections)}


def _type_name(value) -> str:
    if isinstance(value, bool):
        return "true/false"
    if isinstance(value, int):
        return "an integer"
    if isinstance(value, float):
        return "a number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, list):
        return "a list of strings"
    return type(value).__name__


def _coerce(where: str, key: str, value, default):
    """Check ``value`` against the type of the default; ints are accepted where floats are."""
    ok = False
    if isinstance(default, bool):
        ok = isinstance(value, bool)
    elif isinstance(default, int):
        ok = isinstance(value, int) and not isinstance(value, bool)
    elif isinstance(default, float):
        ok = isinstance(value, (int, float)) and not isinstance(value, bool)
        if ok:
            value = float(value)
            ok = math.isfinite(value)
    elif isinstance(default, str):
        ok = isinstance(value, str)
    elif isinstance(default, list):
        ok = isinstance(value, list) and all(isinstance(v, str) for v in value)
    if not ok:
        raise ProfileError(f"{where}: {key} must be {_type_name(default)}, got {value!r}")
    return value


def _check_range(where: str, section: str, key: str, value) -> None:
    """Value checks that the type alone does not give (one-line messages with the remedy)."""
    full = f"[{section}] {key}"
    if key == "primaries":
        try:
            canonical_primaries(value)
        except ValueError as e:
            raise ProfileError(f"{where}: {full}: {e}") from None
    elif section == "sampling" and key == "estimator":

        if value not in estimators("irradiance"):
            raise ProfileError(f"{where}: {full}: unknown estimator {value!r}; valid names: "
                               f"{', '.join(estimators('irradiance'))}")
    elif key == "severity":
        if value not in SETTABLE_SEVERITIES:
            raise ProfileError(f"{where}: {full} must be one of {', '.join(SETTABLE_SEVERITIES)}, got {value!r}")
    elif key.endswith("_stops") or key in ("fail_above", "fail_below_peak"):
        return  # stops may be negative (below a reference); value bounds are any finite number
    elif key.endswith("_percentile"):
        if not 0.0 < value <= 100.0:
            raise ProfileError(f"{where}: {full} must be in (0, 100], got {value}")
    elif key.endswith(("_fraction", "_share")) or key == "plateau_relative_tolerance":
        if not 0.0 <= value <= 1.0:
            raise ProfileError(f"{where}: {full} must be in [0, 1], got {value}")
    elif isinstance(value, (int, float)) and not isinstance(value, bool) and key != "seed":
        if value < 0:
            raise ProfileError(f"{where}: {full} must be >= 0, got {value}")
    if key in ("spp", "repeats", "normals", "table_width", "table_height", "rows", "max_listed") and value < 1:
        raise ProfileError(f"{where}: {full} must be >= 1, got {value}")


def _merge(where: str, user: Mapping) -> dict:
    defaults = _defaults()
    merged = copy.deepcopy(defaults)
    for section, values in user.items():
        if section not in defaults:
            valid = ", ".join(sorted(defaults))
            raise ProfileError(f"{where}: unknown section [{section}]; valid sections: {valid}")
        if not isinstance(values, Mapping):
            raise ProfileError(f"{where}: [{section}] must be a table of settings, got {values!r}")
        for key, value in values.items():
            if key not in defaults[section]:
                valid = ", ".join(sorted(defaults[section]))
                raise ProfileError(f"{where}: unknown key {section}.{key}; valid keys in [{section}]: {valid}")
            value = _coerce(where, f"[{section}] {key}", value, defaults[section][key])
            _check_range(where, section, key, value)
            merged[section][key] = value
    _check_sampling_size(where, merged["sampling"])
    dr = merged["dynamic-range"]
    if dr["low_percentile"] >= dr["high_percentile"]:
        raise ProfileError(f"{where}: [dynamic-range] low_percentile must be below high_percentile")
    for section, lo, hi in (("negative", "warn_above_fraction", "fail_above_fraction"),
                            ("seam", "warn_share", "fail_share"), ("poles", "warn_cv", "fail_cv"),
                            ("sampling", "warn_rmse", "fail_rmse"),
                            ("resolution", "fail_below_width", "warn_below_width")):
        if merged[section][lo] > merged[section][hi]:
            raise ProfileError(f"{where}: [{section}] {lo} must not exceed {hi}")
    return merged


def _check_sampling_size(where: str, s: dict) -> None:
    """Refuse, before anything is allocated, a sampling check that would need more than about 1 GiB."""
    samples = s["spp"] * s["repeats"] * s["normals"]
    if samples > MAX_SAMPLING_SAMPLES:
        raise ProfileError(
            f"{where}: [sampling] spp x repeats x normals = {samples:.3g} samples, above the limit of "
            f"{MAX_SAMPLING_SAMPLES} (about 1 GiB of working memory); lower spp, repeats or normals")
    cells = s["table_width"] * s["table_height"]
    if cells > MAX_SAMPLING_CELLS:
        raise ProfileError(
            f"{where}: [sampling] table_width x table_height = {cells:.3g} cells, above the limit of "
            f"{MAX_SAMPLING_CELLS} (4096 x 2048); lower them (the check's cost does not need more)")


def load_profile(path_or_none=None) -> Profile:
    """Read a QA profile (TOML) and merge it over the defaults.

    Parameters
    ----------
    path_or_none : str, PathLike, Mapping or None
        ``None`` (or ``"default"``) gives the defaults of ``profiles/default.toml``;
        a path reads that TOML file; a mapping ``{section: {key: value}}`` is
        validated like a file.  A profile lists only what it changes.

    Raises
    ------
    ProfileError
        Missing or unreadable file, invalid TOML, unknown section or key (the
        message names it and lists the valid ones), or a value of the wrong type
        or out of range.
    """
    if isinstance(path_or_none, Profile):
        return path_or_none
    if path_or_none is None or (isinstance(path_or_none, str) and path_or_none == "default"):
        sections = _merge("default profile", {})
        return Profile(name=sections["profile"]["name"], path=None, sections=sections)
    if isinstance(path_or_none, Mapping):
        sections = _merge("profile", path_or_none)
        return Profile(name=sections["profile"]["name"], path=None, sections=sections)
    if not isinstance(path_or_none, (str, os.PathLike)):
        raise TypeError(f"profile must be a path, a mapping, a Profile or None, got {type(path_or_none).__name__}")
    p = Path(path_or_none)
    where = f"profile {p}"
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ProfileError(f"{where}: file not found; pass an existing TOML file or omit it for the defaults") from None
    except (OSError, UnicodeDecodeError) as e:
        raise ProfileError(f"{where}: cannot be read ({e.__class__.__name__}: {e}); check the file") from None
    try:
        user = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise ProfileError(f"{where}: not valid TOML ({e}); fix the syntax") from None
    sections = _merge(where, user)
    return Profile(name=sections["profile"]["name"], path=str(p), sections=sections)
