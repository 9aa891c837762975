"""The package's layout keeps its promises: layers point one way, no import cycles, small modules and
functions, and a test file per module, tests/<package>/test_<module>.py (the contributor guide,
"Layout and layers" and "Tests").

The graph is read with ``ast`` (tests/support/layers.py); Tarjan, R. (1972). Depth-first search and
linear graph algorithms. SIAM J. Computing 1(2) finds the cycles.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest
from support.layers import (
    LAYERS,
    cycles,
    function_level_imports,
    graph,
    layer_violations,
    module_names,
    modules_without_tests,
)

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = "envsample"
MAX_MODULE_LINES = 800
MAX_FUNCTION_LINES = 100
#: Modules and functions still being split (each by the change that reworks its room); this set only shrinks.
STILL_LARGE: set[str] = set()


@pytest.fixture(scope="module")
def edges():
    return graph(ROOT, PACKAGE)


def test_every_topic_package_is_a_layer(edges):
    topics = {p.name for p in (ROOT / PACKAGE).iterdir() if (p / "__init__.py").is_file()}
    assert topics == set(LAYERS) - {""}


def test_no_package_imports_a_higher_layer(edges):
    assert layer_violations(edges, PACKAGE) == []


def test_no_modules_import_each_other_in_a_circle(edges):
    assert cycles(edges) == []


def test_our_modules_import_each_other_at_the_top():
    assert function_level_imports(ROOT, PACKAGE) == []


def _write(root: Path, files: dict[str, str]) -> None:
    for rel, text in files.items():
        p = root / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text)


def test_the_checks_catch_an_inverted_import_and_a_cycle(tmp_path):
    """The rules must be able to fail: a core module importing the CLI, and two modules importing each other."""
    _write(tmp_path, {
        "envsample/__init__.py": "",
        "envsample/core/__init__.py": "",
        "envsample/core/sphere.py": "from envsample.cli.app import main\n",
        "envsample/cli/__init__.py": "",
        "envsample/cli/app.py": "def main():\n    from envsample.core import sphere\n",
        "envsample/io/__init__.py": "",
        "envsample/io/a.py": "from envsample.io import b\n",
        "envsample/io/b.py": "from . import a\n",
        "envsample/io/c.py": "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from envsample.cli import app\n",
    })
    e = graph(tmp_path, PACKAGE)
    assert layer_violations(e, PACKAGE) == ["envsample.core.sphere -> envsample.cli.app"]
    assert cycles(e) == [["envsample.cli.app", "envsample.core.sphere"], ["envsample.io.a", "envsample.io.b"]]


def test_modules_and_functions_stay_small():
    long_modules, long_functions = [], []
    for name, path in module_names(ROOT, PACKAGE).items():
        text = path.read_text(encoding="utf-8")
        if text.count("\n") > MAX_MODULE_LINES:
            long_modules.append(name)
        for node in ast.walk(ast.parse(text)):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                n = node.end_lineno - node.lineno + 1
                if n > MAX_FUNCTION_LINES:
                    long_functions.append(f"{name}.{node.name}")
    assert set(long_modules + long_functions) <= STILL_LARGE


def test_every_module_has_its_own_test_file():
    """envsample/<pkg>/<mod>.py is tested in tests/<pkg>/test_<mod>.py (envsample/<mod>.py in tests/test_<mod>.py)."""
    missing = modules_without_tests(ROOT, PACKAGE)
    assert not missing, "modules without a test file tests/<package>/test_<module>.py: " + ", ".join(missing)


def test_the_test_file_rule_names_each_module_without_one(tmp_path):
    """The rule must be able to fail: two modules without a test file are listed, the tested one and the
    package markers are not."""
    _write(tmp_path, {
        "envsample/__init__.py": "",
        "envsample/_version.py": "",
        "envsample/errors.py": "",
        "envsample/core/__init__.py": "",
        "envsample/core/sphere.py": "",
        "envsample/qa/checks/__init__.py": "",
        "envsample/qa/checks/pixels.py": "",
        "tests/core/test_sphere.py": "",
        "tests/qa/test_pixels.py": "",  # the wrong folder: checks/ is mirrored too
    })
    assert modules_without_tests(tmp_path, PACKAGE) == ["envsample/errors.py", "envsample/qa/checks/pixels.py"]
