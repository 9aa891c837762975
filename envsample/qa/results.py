"""What the checks return: :class:`CheckResult` per check, :class:`Report` per map, :class:`Source`.

``Report.to_dict()`` is the JSON report (schema :data:`REPORT_SCHEMA`); ``Report.exit_code()``
the CLI status.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from envsample.core.schema import Schema
from envsample.core.text import caution

#: Severities from best to worst; a report's verdict is the worst of its checks.
SEVERITIES = ("pass", "warn", "fail")


RANK = {s: i for i, s in enumerate(SEVERITIES)}


#: Units of check values and thresholds (``CheckResult.unit``), with their meaning.  Values are
#: stored in their unit (a share of 0.25 is stored as 25 with unit "%"), so the terminal table,
#: the HTML page, the CSV and the JSON all show the same number.
UNITS = {
    "": "no unit (a name, yes/no, or a count of levels)",
    "px": "pixels",
    "%": "percent (of the sphere's solid angle or of the light, as the message says)",
    "stops": "log2 ratio",
    "ratio": "a ratio of two like quantities",
    "deg": "degrees",
    "xy": "CIE 1931 xy chromaticity distance",
    "lx": "lux (calibrated maps)",
    "map*sr": "map units x steradians (irradiance of an uncalibrated map)",
}


#: Name and version of the JSON report of one map (``Report.to_dict``).
REPORT_SCHEMA = Schema("envsample.qa-report", 3)


#: Name and version of the JSON document holding many reports (:func:`report_to_json`).
REPORTS_SCHEMA = Schema("envsample.qa-reports", 3)


def jsonable(x):
    """Plain JSON values: numpy scalars to Python, non-finite floats to None, tuples to lists."""
    if isinstance(x, dict):
        return {str(k): jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [jsonable(v) for v in x]
    if isinstance(x, np.ndarray):
        return [jsonable(v) for v in x.tolist()]
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        x = float(x)
        return x if math.isfinite(x) else None
    if x is None or isinstance(x, str):
        return x
    return str(x)


class NotApplicable(Exception):
    """Raised by a check that does not apply to this map; :func:`~envsample.qa.run.check_map` lists it as skipped
    with the exception's text as the reason."""


@dataclass
class CheckResult:
    """The outcome of one check.

    ``id`` is the stable check name; ``severity`` one of :data:`SEVERITIES`;
    ``value`` the measured quantity and ``threshold`` the limit it was compared with
    (numbers, strings or None), both in ``unit`` (one of :data:`UNITS`; "" for a
    value without a unit, such as a name or yes/no); ``message`` one line;
    ``remedy`` one line ("" when nothing is to be done); ``cleared_by`` says, for a
    passing check whose value is past its threshold, which criterion let it pass
    ("" otherwise); ``details`` JSON-ready extras.
    """

    id: str
    severity: str
    value: object = None
    threshold: object = None
    message: str = ""
    remedy: str = ""
    details: dict = field(default_factory=dict)
    unit: str = ""
    cleared_by: str = ""

    def __post_init__(self):
        if self.severity not in RANK:
            raise ValueError(f"severity must be one of {', '.join(SEVERITIES)}, got {self.severity!r}")
        if self.unit not in UNITS:
            raise ValueError(f"unit must be one of {', '.join(map(repr, UNITS))}, got {self.unit!r}")

    def to_dict(self) -> dict:
        return {
            "id": self.id,
            "severity": self.severity,
            "value": jsonable(self.value),
            "threshold": jsonable(self.threshold),
            "unit": self.unit,
            "message": self.message,
            "cleared_by": self.cleared_by,
            "remedy": self.remedy,
            "details": jsonable(self.details),
        }


@dataclass(frozen=True)
class Source:
    """Where a map came from: ``path`` (str or None), ``sha256`` of the file bytes, ``size`` in bytes."""

    path: str | None = None
    sha256: str | None = None
    size: int | None = None

    def to_dict(self) -> dict:
        return {"path": self.path, "sha256": self.sha256, "size": self.size}


@dataclass
class Report:
    """All check results for one map.

    Attributes
    ----------
    source : Source
    checks : list of CheckResult, in registry order
    skipped : list of {"id", "reason"} for checks that were disabled or could not run
    profile : str, the profile's name; profile_path : str or None
    image : dict or None, the map's metadata (``MapImage.describe()``), None if unreadable
    readable : bool, False when the file could not be read (then only ``read`` is present)
    """

    source: Source
    checks: list
    skipped: list = field(default_factory=list)
    profile: str = "default"
    profile_path: str | None = None
    image: dict | None = None
    readable: bool = True

    @property
    def verdict(self) -> str:
        """The worst severity of the checks ("pass" when there are none)."""
        worst = max((RANK[c.severity] for c in self.checks), default=0)
        return SEVERITIES[worst]

    def counts(self) -> dict:
        """Number of checks per severity."""
        out = {s: 0 for s in SEVERITIES}
        for c in self.checks:
            out[c.severity] += 1
        return out

    def get(self, check_id: str) -> CheckResult | None:
        """The result of one check, or None if it did not run."""
        for c in self.checks:
            if c.id == check_id:
                return c
        return None

    def __getitem__(self, check_id: str) -> CheckResult:
        found = self.get(check_id)
        if found is None:
            raise KeyError(check_id)
        return found

    def ids(self, severity: str) -> list[str]:
        """Ids of the checks with the given severity."""
        return [c.id for c in self.checks if c.severity == severity]

    def exit_code(self, strict: bool = False) -> int:
        """CLI status: 2 unreadable input, 1 any failure (or any warning when ``strict``), else 0."""
        if not self.readable:
            return 2
        v = self.verdict
        if v == "fail" or (strict and v == "warn"):
            return 1
        return 0

    def to_dict(self) -> dict:
        """The JSON report (schema :data:`REPORT_SCHEMA`); keys are stable within a schema version."""
        return {
            **REPORT_SCHEMA.header(),
            "source": self.source.to_dict(),
            "readable": self.readable,
            "verdict": self.verdict,
            "counts": self.counts(),
            "profile": {"name": self.profile, "path": self.profile_path},
            "image": jsonable(self.image),
            "checks": [c.to_dict() for c in self.checks],
            "skipped": jsonable(self.skipped),
            "caution": caution("photometric values"),
        }
