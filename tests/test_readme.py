"""README.md and .ci/run must agree: CI installs and tests exactly as the README tells people to."""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO_COMMAND = "pip install . && envsample demo"
TEST_COMMAND = 'pip install ".[test]" && pytest -q'


def _readme() -> str:
    path = ROOT / "README.md"
    if not path.exists():
        pytest.skip("README.md is not part of this checkout (installed package)")
    return path.read_text(encoding="utf-8")


def test_readme_shows_exactly_the_two_setup_commands():
    text = _readme()
    setup = text.split("## Set-up", 1)[1].split("\n## ", 1)[0]
    commands = [line.strip() for line in setup.splitlines() if line.strip().startswith("pip install")]
    assert commands == [DEMO_COMMAND, TEST_COMMAND]


def test_ci_runs_the_readme_test_command():
    ci = ROOT / ".ci" / "run"
    if not ci.exists():
        pytest.skip(".ci/run is not part of this checkout")
    lines = [line.strip() for line in ci.read_text(encoding="utf-8").splitlines()]
    assert TEST_COMMAND in lines


def test_readme_mentions_every_cli_command():
    from envsample.cli import main

    text = _readme()
    for name in main.commands:
        assert f"envsample {name}" in text, f"README does not show 'envsample {name}'"


def test_relative_links_of_the_guides_resolve():
    """Every relative Markdown link of README.md, DEVELOPERS.md and docs/ points at a file of the repository."""
    import re

    broken = []
    for doc in [ROOT / "README.md", ROOT / "DEVELOPERS.md", *sorted((ROOT / "docs").glob("*.md"))]:
        for target in re.findall(r"\]\(([^)#\s]+)(?:#[^)]*)?\)", doc.read_text(encoding="utf-8")):
            if "://" not in target and not (doc.parent / target).exists():
                broken.append(f"{doc.name}: {target}")
    assert broken == []
