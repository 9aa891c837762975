"""envsample: check HDR environment maps, build their importance-sampling tables, prove them with MIS.

The public surface is declared here; names are imported lazily from the module
that holds them, so ``import envsample`` is cheap and the CLI starts fast.

Conventions (see :mod:`envsample.core.sphere`): radians inside, degrees only at the
boundary; solid angles in steradians; pdfs per steradian; images float32
``(H, W, 3)`` linear RGB with row 0 at the zenith; directions float64 ``(N, 3)``.
"""

from __future__ import annotations

import importlib

from envsample._version import __version__

_EXPORTS = {
    # errors
    "EnvsampleError": "errors",
    "MapReadError": "errors",
    "MapValidationError": "errors",
    "TableFormatError": "errors",
    "ResourceLimitError": "errors",
    "EnvsampleWarning": "errors",
    # constants
    "luminance_weights": "core.constants",
    # io
    "MapImage": "io.maps",
    "read_map": "io.maps",
    "write_map": "io.maps",
    "validate_map": "io.maps",
    "supported_extensions": "io.maps",
    "MapWriteError": "errors",
    "SunSplitError": "errors",
    # sphere
    "uv_to_direction": "core.sphere",
    "direction_to_uv": "core.sphere",
    "pixel_solid_angles": "core.sphere",
    "row_solid_angles": "core.sphere",
    "pixel_center_directions": "core.sphere",
    # distribution
    "build_alias": "sampling.distribution",
    # table
    "EnvTable": "sampling.table",
    "Samples": "sampling.table",
    "build_table": "sampling.table",
    "load_table": "sampling.table",
    "parse_size": "core.latlong",
    "SCHEMA_VERSION": "io.tables",
    "read_table_json": "io.tables",
    # color
    "luminance": "core.color",
    # skies
    "make_sky": "synth.skies",
    "sky_kinds": "synth.skies",
    "sun_sky": "synth.skies",
    "cie_overcast_sky": "synth.skies",
    "uniform_sky": "synth.skies",
    "studio_sky": "synth.skies",
    "rooftop_scene": "synth.skies",
    "studio_scene": "synth.skies",
    "sun_direction": "synth.skies",
    # the sun as its own light
    "SunLight": "sampling.sun",
    "find_sun": "lights.finder",
    "SunEstimate": "lights.finder",
    "split_sun": "lights.split",
    "SunSplit": "lights.split",
    "reference_split_irradiance": "reference.sun",
    "clear_sky": "core.clearsky",
    "split_map_file": "pipeline.split",
    "load_sun": "pipeline.split",
    # pictures
    "tonemap": "reports.pictures",
    "thumbnail": "reports.pictures",
    "write_png": "reports.pictures",
    # strategies and MIS
    "make_strategy": "sampling.strategies",
    "make_frame": "sampling.frames",
    "TableStrategy": "sampling.strategies",
    "estimate_irradiance": "estimation.estimators",
    "estimate_glossy": "estimation.estimators",
    "estimators": "estimation.estimators",
    "mis_weights": "estimation.heuristics",
    "firefly_index": "estimation.estimators",
    "EstimatorSamples": "estimation.estimators",
    # QA
    "check_map": "qa.run",
    "load_profile": "qa.profile",
    "Report": "qa.results",
    "CheckResult": "qa.results",
    "Profile": "qa.profile",
    "ProfileError": "qa.profile",
    "format_report": "qa.report",
    "report_to_json": "qa.report",
    "apply_remedy": "qa.remedies",
    "REMEDIES": "qa.remedies",
    "fix_map": "pipeline.fix",
    "FixResult": "pipeline.fix",
    "FixRefusedError": "pipeline.fix",
    # reference and verify
    "reference_irradiance": "reference.irradiance",
    "reference_accuracy": "reference.irradiance",
    "reference_glossy": "reference.glossy",
    "sh9_project": "reference.sh9",
    "sh9_irradiance": "reference.sh9",
    "verify_map": "pipeline.verify",
    "tune_one_sample": "validation.tuning",
    "recommend": "validation.tuning",
    "advice_text": "validation.tuning",
    "render_validation": "validation.render",
    "ValidationResult": "validation.render",
    # reports and batch
    "check_page": "reports.pages",
    "index_page": "reports.pages",
    "verify_page": "reports.pages",
    "range_overlay": "reports.pictures",
    "run_batch": "pipeline.batch",
    "BatchResult": "pipeline.batch",
    "BatchInterrupted": "pipeline.batch",
    # workflow and demo
    "build_from_file": "pipeline.workflow",
    "golden_vectors": "pipeline.workflow",
    "write_vectors": "pipeline.workflow",
    "map_facts": "pipeline.workflow",
    "table_facts": "pipeline.workflow",
    "run_demo": "synth.demo",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'envsample' has no attribute {name!r}")
    value = getattr(importlib.import_module(f"envsample.{module}"), name)
    globals()[name] = value
    return value


def __dir__():
    return __all__
