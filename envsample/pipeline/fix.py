"""``envsample fix``: repair a map file with the remedies its checks propose, and check the result.

:func:`fix_map` reads the map (never changing the file), runs the QA checks, refuses what cannot be
fixed (8-bit or display-referred content, clipped highlights), applies the remedies of
:mod:`envsample.qa.remedies` in order, writes the result atomically with every step recorded in the
EXR header (attribute ``envsampleFix``, JSON text), re-runs the checks on the written file and writes
a JSON log beside it (schema ``envsample.fix-log``) with the before and after verdicts.
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from envsample.core.constants import HALF_FLOAT_MAX, luminance_weights
from envsample.core.files import atomic_write_text, refuse_overwriting_inputs
from envsample.core.schema import Schema
from envsample.core.text import caution
from envsample.errors import EnvsampleError
from envsample.io.maps import read_map, write_map
from envsample.pipeline.workflow import check_output_folder
from envsample.qa.profile import load_profile
from envsample.qa.remedies import UNFIXABLE, apply_remedy, plan_remedies
from envsample.qa.run import check_map

#: Name and version of the JSON log ``fix`` writes beside its output.
FIX_LOG_SCHEMA = Schema("envsample.fix-log", 1)
#: The EXR header attribute that records the steps.
HEADER_ATTRIBUTE = "envsampleFix"


class FixRefusedError(EnvsampleError):
    """The map has a defect no remedy can undo (the message names it and what to do)."""


@dataclass
class FixResult:
    """What :func:`fix_map` did: the paths, the steps (records of the remedies), the reports before and after."""

    source: Path
    output: Path
    log: Path
    steps: list
    proposed: list
    before: object
    after: object
    skipped: list = field(default_factory=list)

    def not_applied_lines(self) -> list[str]:
        """One line per remedy that was proposed or planned but not applied, saying why."""
        out = [f"{p['remedy']} (proposed by {p['check']} {p['severity']}; ask for it)" for p in self.proposed]
        out += [f"{p['remedy']} ({p['check']}): {p['reason']}" for p in self.skipped]
        return out

    def to_dict(self) -> dict:
        def summary(report):
            return {"verdict": report.verdict, "counts": report.counts(),
                    "checks": {c.id: c.severity for c in report.checks}}

        return {
            **FIX_LOG_SCHEMA.header(),
            "source": {"path": str(self.source), "sha256": self.before.source.sha256},
            "output": {"path": str(self.output), "sha256": self.after.source.sha256},
            "steps": self.steps,
            "not_applied": self.proposed + self.skipped,
            "before": summary(self.before),
            "after": summary(self.after),
            "caution": caution("photometric values"),
        }


def output_pixel_type(image, rgb) -> str:
    """EXR pixel type of a repaired map: half when the source was half and the result fits, else float."""
    with np.errstate(invalid="ignore"):
        fits = image.pixel_type == "half" and bool(np.nanmax(np.where(np.isfinite(rgb), rgb, 0.0)) < HALF_FLOAT_MAX)
    return "half" if fits else "float"


def header_record(image, records: list) -> str:
    """The JSON text stored in the output's EXR header: the source and every step."""
    doc = {**FIX_LOG_SCHEMA.header(), "source": None if image.path is None else str(image.path),
           "source_sha256": image.sha256, "steps": records}
    return json.dumps(doc, allow_nan=False)


def log_path(output) -> Path:
    """The JSON log beside an output map: ``sky.exr`` -> ``sky.fix.json``."""
    p = Path(output)
    return p.with_name(p.stem + ".fix.json")


def _refuse_unfixable(report, source: Path) -> None:
    for c in report.checks:
        if c.severity == "fail" and c.id in UNFIXABLE:
            raise FixRefusedError(f"{source}: cannot be fixed: {c.id} fails ({c.message}); {UNFIXABLE[c.id]}; "
                                  f"{c.remedy}")


def _sun_azimuth(report, source: Path) -> float:
    """Azimuth (deg) of the dominant sun-like emitter of a report's ``sun`` check."""
    sun = report.get("sun")
    found = [e for e in (sun.details.get("emitters", []) if sun else []) if e.get("sun_like")]
    if not found:
        raise ValueError(f"{source}: --sun-azimuth needs a sun-like emitter and the sun check found none; "
                         "rotate by an angle instead (--rotation)")
    return float(found[0]["azimuth_deg"])


def _options(name: str, options: Mapping, profile, report, source: Path) -> dict:
    """Defaults a remedy takes from the profile (luminance weights, pole rows) and the report (the sun)."""
    out = dict(options)
    if name == "rotate" and "sun_azimuth" in out:
        target = float(out.pop("sun_azimuth"))
        out["degrees"] = target - _sun_azimuth(report, source)
    if name == "exposure" and profile.primaries not in ("max", "mean"):
        out.setdefault("weights", tuple(float(w) for w in luminance_weights(profile.primaries)))
    if name == "poles":
        out.setdefault("rows", profile.section("poles")["rows"])
    return out


def repair_image(image, before, *, remedies: Mapping | None = None, auto: bool = False, profile=None,
                 source=None) -> tuple:
    """Apply the planned remedies to a map in memory: ``(rgb, records, proposed, skipped)``.

    ``before`` is the map's QA report.  ``records`` are the remedies' records (with ``why``);
    ``proposed`` the remedies proposed but not asked for; ``skipped`` those ``auto`` planned
    but that could not apply (with the reason).  Raises :class:`FixRefusedError` for an
    unfixable map, ValueError when a requested remedy fails.
    """
    src = Path(source) if source is not None else Path(str(image.path or "map"))
    prof = load_profile(profile)
    _refuse_unfixable(before, src)
    steps, proposed = plan_remedies(before, auto=auto, requested=remedies)
    rgb, records, skipped = image.rgb, [], []
    for step in steps:
        check_id = step["check"]
        if check_id is not None and any(r["why"] == "requested" for r in records):
            # A requested step ran first (a flip, a rotation, padding): the check that planned this one
            # may pass by now (a flipped map's exposure, say).  Ask it again before changing more pixels.
            again = check_map(dataclasses.replace(image, rgb=rgb), profile=prof, checks=[check_id])
            if again.get(check_id) is not None and again[check_id].severity == "pass":
                skipped.append({"remedy": step["remedy"], "check": check_id,
                                "reason": f"{check_id} passes after the earlier steps"})
                continue
        try:
            repair = apply_remedy(step["remedy"], rgb, **_options(step["remedy"], step["options"], prof, before, src))
        except ValueError as e:
            if step["why"] == "requested":
                raise ValueError(f"{src}: {step['remedy']}: {e}") from None
            skipped.append({"remedy": step["remedy"], "check": step["why"].split()[0], "reason": str(e)})
            continue
        rgb = repair.rgb
        records.append({**repair.record, "why": step["why"]})
    return rgb, records, proposed, skipped


def fix_map(source, output, *, remedies: Mapping | None = None, auto: bool = False, profile=None,
            pixel_type: str | None = None) -> FixResult:
    """Repair ``source`` into ``output`` (``.exr`` or ``.hdr``); return a :class:`FixResult`.

    Parameters
    ----------
    remedies : mapping of remedy name -> options, optional
        Remedies to apply on request (names of :data:`envsample.qa.remedies.REMEDIES`), e.g.
        ``{"rotate": {"degrees": 90}, "exposure": {"target": 1.0}}``.
    auto : bool
        Also apply the safe remedy of every check that warns or fails.
    profile : the QA profile (see :func:`envsample.qa.profile.load_profile`).
    pixel_type : "half" or "float" for EXR output; default: float, or half when the source is
        half and the result fits in half floats.

    Raises
    ------
    FixRefusedError
        ``hdr`` or ``clipping`` fails: nothing is written.
    OutputIsInputError
        ``output`` (or its log) names the source.
    ValueError
        Unknown remedy, bad options, or nothing to do.
    """
    src, out = Path(source), Path(output)
    refuse_overwriting_inputs([out, log_path(out)], [src], option="-o")
    check_output_folder(out)
    prof = load_profile(profile)
    image = read_map(src)
    before = check_map(image, profile=prof)
    rgb, records, proposed, skipped = repair_image(image, before, remedies=remedies, auto=auto, profile=prof,
                                                   source=src)
    if not records:
        hint = f"; the checks propose {', '.join(p['remedy'] for p in proposed)} (ask for them)" if proposed else ""
        why = f" ({'; '.join(k['reason'] for k in skipped)})" if skipped else ""
        raise ValueError(f"{src}: no remedy to apply{why}: the checks propose none that --auto may apply{hint}")
    if pixel_type is None:
        pixel_type = output_pixel_type(image, rgb)
    # A missing output folder is created only now, once the map was read, checked and repaired.
    out.parent.mkdir(parents=True, exist_ok=True)
    write_map(out, rgb, pixel_type=pixel_type, chromaticities=image.chromaticities,
              attributes={HEADER_ATTRIBUTE: header_record(image, records)})
    after = check_map(out, profile=prof)
    result = FixResult(source=src, output=out, log=log_path(out), steps=records, proposed=proposed,
                       before=before, after=after, skipped=skipped)
    atomic_write_text(result.log, json.dumps(result.to_dict(), indent=2, allow_nan=False) + "\n")
    return result
