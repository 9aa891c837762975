"""What a batch reports: one :class:`MapResult` per source, the :class:`BatchResult`, progress, and
:class:`BatchInterrupted` (a KeyboardInterrupt carrying the partial result).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

#: Verdicts of a map, best to worst: the QA verdict, or ``error`` when the file could
#: not be read or processing failed.
VERDICTS = ("pass", "warn", "fail", "error")


#: Statuses of a source in one run ("pending" only in the summary a running or interrupted batch leaves).
STATUSES = ("done", "skipped", "error", "pending")


@dataclass
class MapResult:
    """The outcome of one source in a batch.

    ``source`` is the path as found (string); ``status`` is ``"done"`` (processed in
    this run), ``"skipped"`` (up-to-date outputs) or ``"error"`` (processing failed,
    nothing written); ``verdict`` is one of :data:`VERDICTS`; ``folder`` the map
    folder relative to OUTDIR (None when nothing was written); ``error`` a one-line
    message or None; ``duplicate_of`` the first source (in sorted order) with the same
    bytes, or None; ``figures`` the key figures (the remaining :data:`ROW_FIELDS`).
    """

    source: str
    status: str
    verdict: str
    folder: str | None = None
    sha256: str | None = None
    duplicate_of: str | None = None
    error: str | None = None
    figures: dict = field(default_factory=dict)

    def to_row(self) -> dict:
        """The summary row: every key of :data:`ROW_FIELDS`, JSON-ready."""
        row = {k: self.figures.get(k) for k in ROW_FIELDS}
        row.update(source=self.source, status=self.status, verdict=self.verdict, folder=self.folder,
                   sha256=self.sha256, duplicate_of=self.duplicate_of, error=self.error)
        return row


@dataclass
class BatchProgress:
    """Passed to the ``progress`` callback: ``done`` of ``total`` sources resolved,
    ``counts`` per verdict (plus ``skipped``), and the latest ``item`` (None at the start)."""

    done: int
    total: int
    counts: dict
    item: MapResult | None = None


@dataclass
class BatchResult:
    """What :func:`run_batch` did.

    ``maps`` lists one :class:`MapResult` per source in sorted order; ``outdir`` the
    output folder; ``summary`` the paths of ``summary.json``, ``summary.csv`` and
    ``index.html`` (empty when interrupted); ``interrupted`` True after Ctrl-C;
    ``options`` the normalised table options; ``duplicates`` lists
    ``{"sha256", "sources"}`` for bytes found under several names (the first one's
    folder serves them all); ``stale`` lists ``{"folder", "source", "reason", "pruned"}``
    for map folders of OUTDIR that no source of this run claims; ``requested`` is the
    number of sources the run was asked to do (after Ctrl-C, more than ``len(maps)``).
    """

    outdir: Path
    maps: list
    options: dict
    interrupted: bool = False
    summary: dict = field(default_factory=dict)
    duplicates: list = field(default_factory=list)
    stale: list = field(default_factory=list)
    requested: int | None = None

    @property
    def counts(self) -> dict:
        """Sources per verdict, plus ``skipped``, ``done``, ``pending`` and ``maps`` (the total requested)."""
        return count_verdicts(self.maps, total=len(self.maps) if self.requested is None else self.requested)

    def exit_code(self, strict: bool = False) -> int:
        """CLI status: 130 interrupted; 1 any map failed QA or errored (or, with
        ``strict``, warned); else 0.  (Usage errors, 2, are raised before a batch starts.)"""
        if self.interrupted:
            return 130
        worst = {m.verdict for m in self.maps}
        if worst & {"fail", "error"} or (strict and "warn" in worst):
            return 1
        return 0

    def __len__(self) -> int:
        return len(self.maps)

    def __iter__(self):
        return iter(self.maps)


class BatchInterrupted(KeyboardInterrupt):
    """Ctrl-C stopped a batch; ``result`` holds the maps finished so far (``interrupted=True``).

    The map folders already published are complete and a rerun resumes from them;
    no partial folder and no staging files are left behind.
    """

    def __init__(self, result: BatchResult):
        super().__init__("batch interrupted")
        self.result = result


def count_verdicts(maps: Iterable[MapResult | None], *, total: int) -> dict:
    out = {v: 0 for v in VERDICTS}
    out.update(skipped=0, done=0)
    for m in maps:
        if m is None:
            continue
        out["done"] += 1
        out[m.verdict] += 1
        if m.status == "skipped":
            out["skipped"] += 1
    out["pending"] = total - out["done"]
    out["maps"] = total
    return out


#: Columns of ``summary.csv`` (and keys of each row of ``summary.json``).
ROW_FIELDS = (
    "source",
    "status",
    "verdict",
    "folder",
    "sha256",
    "duplicate_of",
    "error",
    "width",
    "height",
    "format",
    "pixel_type",
    "failed_checks",
    "warned_checks",
    "dynamic_range",
    "sun_azimuth_deg",
    "sun_elevation_deg",
    "sun_share",
    "irradiance_up",
    "sampling_relative_rmse",
    "peak_sample_share",
    "luminance_integral",
    "table_width",
    "table_height",
    "table_note",
    "tuned",
    "verify_rmse_table",
    "verify_rmse_mis",
    "verify_rmse_tuned",
    "verify_reference_bound",
    "split_note",
    "note",
)


def result_from_row(row: Mapping, *, status: str | None = None) -> MapResult:
    known = ("source", "status", "verdict", "folder", "sha256", "duplicate_of", "error")
    figures = {k: v for k, v in row.items() if k not in known}
    return MapResult(source=row["source"], status=status or row["status"], verdict=row["verdict"],
                     folder=row.get("folder"), sha256=row.get("sha256"), duplicate_of=row.get("duplicate_of"),
                     error=row.get("error"), figures=figures)
