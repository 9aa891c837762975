"""The public surface declared in envsample/__init__.py resolves, and importing it stays cheap."""

import subprocess
import sys

import envsample


def test_every_exported_name_resolves():
    for name in envsample.__all__:
        assert getattr(envsample, name) is not None, name


def test_unknown_attribute_is_an_attribute_error():
    try:
        envsample.no_such_name  # noqa: B018
    except AttributeError as e:
        assert "no_such_name" in str(e)
    else:  # pragma: no cover - the assertion below documents the failure
        raise AssertionError("envsample.no_such_name should not exist")


def test_import_does_not_load_heavy_modules():
    # The CLI starts fast because names load lazily: plain import pulls in neither scipy nor matplotlib.
    code = "import sys, envsample; print(sorted(m for m in ('scipy', 'matplotlib') if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"
