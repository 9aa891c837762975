"""envsample: check HDR environment maps, build their importance-sampling tables, prove them with MIS.

The public surface is declared here; names are imported lazily from the module
that holds them, so ``import envsample`` is cheap and the CLI starts fast.

Conventions (see :mod:`envsample.sphere`): radians inside, degrees only at the
boundary; solid angles in steradians; pdfs per steradian; images float32
``(H, W, 3)`` linear RGB with row 0 at the zenith; directions float64 ``(N, 3)``.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

_EXPORTS = {
    # errors
    "EnvsampleError": "errors",
    "MapReadError": "errors",
    "MapValidationError": "errors",
    "TableFormatError": "errors",
    "EnvsampleWarning": "errors",
    # constants
    "luminance_weights": "constants",
    # io
    "MapImage": "io",
    "read_map": "io",
    "write_map": "io",
    "validate_map": "io",
    "supported_extensions": "io",
    "MapWriteError": "errors",
    # sphere
    "uv_to_direction": "sphere",
    "direction_to_uv": "sphere",
    "pixel_solid_angles": "sphere",
    "row_solid_angles": "sphere",
    "pixel_center_directions": "sphere",
    # distribution
    "build_alias": "distribution",
    # table
    "EnvTable": "table",
    "Samples": "table",
    "build_table": "table",
    "load_table": "table",
    "parse_size": "table",
    "SCHEMA_VERSION": "tableio",
    "read_table_json": "tableio",
    # color
    "luminance": "color",
    # skies
    "make_sky": "skies",
    "sky_kinds": "skies",
    "sun_sky": "skies",
    "cie_overcast_sky": "skies",
    "uniform_sky": "skies",
    "studio_sky": "skies",
    "rooftop_scene": "skies",
    "studio_scene": "skies",
    "sun_direction": "skies",
    # pictures
    "tonemap": "pictures",
    "thumbnail": "pictures",
    "write_png": "pictures",
    # strategies and MIS
    "make_strategy": "strategies",
    "make_frame": "strategies",
    "TableStrategy": "strategies",
    "estimate_irradiance": "mis",
    "estimate_glossy": "mis",
    "estimators": "mis",
    "mis_weights": "mis",
    "firefly_index": "mis",
    "EstimatorSamples": "mis",
    # QA
    "check_map": "qa",
    "load_profile": "qa",
    "Report": "qa",
    "CheckResult": "qa",
    "Profile": "qa",
    "ProfileError": "qa",
    "format_report": "qa",
    "report_to_json": "qa",
    # reference and verify
    "reference_irradiance": "reference",
    "reference_accuracy": "reference",
    "reference_glossy": "reference",
    "sh9_project": "reference",
    "sh9_irradiance": "reference",
    "verify_map": "verify",
    "tune_one_sample": "verify",
    "recommend": "verify",
    # reports and batch
    "check_page": "html",
    "index_page": "html",
    "run_batch": "batch",
    "BatchResult": "batch",
    "BatchInterrupted": "batch",
    # workflow and demo
    "build_from_file": "workflow",
    "golden_vectors": "workflow",
    "write_vectors": "workflow",
    "map_facts": "workflow",
    "table_facts": "workflow",
    "run_demo": "demo",
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
